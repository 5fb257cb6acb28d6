"""Command line: a thin shell over ebglayout.pipeline.  Exit 0 clean, 1 rule failures, 2 bad input.

The commands and their options are declared in ``cli_options.py``; here is what each command does.
"""
from __future__ import annotations

import json
import sys

from . import CAUTION
from .cli_options import build_parser, parse_band, parse_bridge, parse_decibels, parse_jobs
from .errors import EbgError, one_line


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if not args.command:
        parser.print_help()
        return 2
    try:
        return COMMANDS[args.command](args)
    except EbgError as err:
        if getattr(args, "debug", False):
            raise
        print(f"ebglayout: error: {one_line(str(err))}", file=sys.stderr)
        return 2
    except BrokenPipeError:
        sys.stderr.close()
        return 0
    except KeyboardInterrupt:
        print("ebglayout: interrupted", file=sys.stderr)
        return 130
    except OSError as err:
        if getattr(args, "debug", False):
            raise
        print(f"ebglayout: error: {err.filename}: {err.strerror or err}" if err.filename else
              f"ebglayout: error: {err.strerror or err}", file=sys.stderr)
        return 2
    except Exception as err:  # a bug, not bad input: one line, the traceback only with --debug
        if getattr(args, "debug", False):
            raise
        print(f"ebglayout: internal error: {err.__class__.__name__}: {one_line(str(err))} (rerun with --debug for a "
              "traceback and report it)", file=sys.stderr)
        return 3


def _demo(args) -> int:
    from .bundled import sample_specs
    from .outputs import StagedOutputs
    from .pipeline import make_filter, output_names, write_filter
    from .spec import load_spec
    from .units import format_length

    paths = sample_specs()
    specs = [load_spec(p) for p in paths]
    worst = 0
    with StagedOutputs(args.out, force=args.force, inputs=paths) as staged:
        staged.require_free([n for s in specs for n in output_names(s.name, s.name)])
        results = [make_filter(spec) for spec in specs]
        for result in results:
            write_filter(result, staged, folder=result.name)
    for result in results:
        c = result.checks
        est = result.estimate.to_json() if result.estimate is not None else None
        band = f"{est['notch_spread']['low_hz'] / 1e9:.2f}-{est['notch_spread']['high_hz'] / 1e9:.2f} GHz" if est else "-"
        print(f"{result.name:<22} {result.layout.spec.style:<8} cells {len(result.layout.cells):>2}  crossings P/N "
              f"{c.crossings['P']:>2}/{c.crossings['N']:<2}  min slot {format_length(c.min_slot_width, c.units)}  "
              f"cell notch spread (cavity model) {band}  "
              f"errors {len(c.errors)} warnings {len(c.warnings)}  -> {args.out / result.name}")
        worst = max(worst, 1 if c.errors else 0)
    print("Notch figures come from the cavity and circuit models, not a full-wave run (the README's table compares "
          "the model with stored openEMS runs: straight-cell notches 1.5-1.9 % high, bridged cells far off); confirm "
          f"with `ebglayout fullwave` and a measurement. {CAUTION}.")
    return worst


def _build(args) -> int:
    from .pipeline import build_to_folder, output_names
    from .spec import load_spec

    spec = load_spec(args.spec)
    result = build_to_folder(spec, args.out, force=args.force, jobs=parse_jobs(args.jobs), inputs=(args.spec,))
    print(result.checks.format_table())
    print(f"wrote {', '.join(output_names(spec.name))} to {args.out}")
    return 1 if result.checks.errors else 0


def _check(args) -> int:
    from contextlib import nullcontext

    from .outputs import StagedOutputs

    if (args.spec is None) == (args.board is None):
        raise EbgError("check: give either a SPEC file or --board BOARD")
    if args.board is not None:
        from .kicad.plan import board_files

        sources = board_files(args.board)
    else:
        sources = (args.spec,)
    junit = StagedOutputs(args.junit.parent, force=True, inputs=sources, option="--junit") if args.junit else None
    with junit if junit else nullcontext():
        if junit:
            junit.require_free([args.junit.name])
        if args.board is not None:
            from .kicad.recheck import check_board

            reports = check_board(args.board, jobs=parse_jobs(args.jobs))
            if not reports:  # a note, not a result: --json keeps stdout to the JSON alone
                print(f"{args.board}: no ebglayout filters on this board",
                      file=sys.stderr if args.json else sys.stdout)
        else:
            from .pipeline import make_filter
            from .spec import load_spec

            reports = [make_filter(load_spec(args.spec)).checks]
        if junit:
            from .checks.junit import junit_xml

            junit.write_text(args.junit.name, junit_xml(reports, strict=args.strict))
    if args.json:
        data = [r.to_json() for r in reports]
        print(json.dumps(data[0] if args.spec is not None else data, indent=2))
    else:
        print("\n\n".join(r.format_table() for r in reports))
    failed = any(r.errors or (args.strict and r.warnings) for r in reports)
    return 1 if failed else 0


def _fullwave(args) -> int:
    from .fullwave.run import fullwave_to_folder
    from .layout import build_layout
    from .response import format_response
    from .spec import load_spec

    if args.threads < 1:
        raise EbgError(f"--threads: {args.threads} is not allowed; give 1 or more")
    if args.time_limit is not None and not args.time_limit > 0:
        raise EbgError(f"--time-limit: {args.time_limit} is not allowed; give minutes > 0")
    layout = build_layout(load_spec(args.spec))
    bars = _EngineBars()
    try:
        data = fullwave_to_folder(layout, args.out, preset=args.preset, threads=args.threads,
                                  time_limit=args.time_limit * 60 if args.time_limit else None,
                                  keep_run=args.keep_run, threshold_db=args.threshold, force=args.force,
                                  progress=bars.update if sys.stderr.isatty() else None, inputs=(args.spec,))
    finally:
        bars.close()
    print(format_response(data))
    print(f"wrote {layout.spec.name}.s4p, .fullwave.json, .fullwave.svg and .fullwave.png to {args.out}")
    return 0


class _EngineBars:
    """One tqdm bar per engine run: time steps done, and the field energy left (dB below its peak)."""

    def __init__(self):
        self.bar = None
        self.name = None

    def update(self, name: str, state) -> None:
        from tqdm import tqdm

        if name != self.name:
            self.close()
            self.bar = tqdm(total=state.total, desc=f"openEMS {name}", unit="step", leave=False)
            self.name = name
        self.bar.n = min(state.step, state.total)
        self.bar.set_postfix_str(f"energy {state.energy_db:.1f} dB", refresh=True)

    def close(self) -> None:
        if self.bar is not None:
            self.bar.close()
            self.bar = None


def _pairs(args) -> int:
    from .kicad.board import read_board
    from .kicad.pairs import pair_table
    from .units import parse_length

    rows = pair_table(read_board(args.board), parse_length(args.min_run, "--min-run"))
    if args.json:
        print(json.dumps(rows, indent=2))
        return 0
    if not rows:
        print(f"{args.board}: no differential pairs found (net names ending _P/_N, P/N, +/-, _DP/_DN)")
    for r in rows:
        runs = ", ".join(f"{x['length']:.2f} mm from ({x['start'][0]:.2f}, {x['start'][1]:.2f})"
                         for x in r["straight_runs"]) or "none long enough"
        print(f"{r['pair']:<16} {r['nets'][0]}/{r['nets'][1]} on {r['layer']}: width {r['width']:g} mm, "
              f"spacing {r['spacing']:g} mm, length {r['length']:.3f} mm (P {r['length_p']:.3f}, N {r['length_n']:.3f}), "
              f"planes {'+'.join(r['planes']) or 'none'}; straight runs: {runs}")
        if r["stackup"]:
            print(f"    reference planes {'+'.join(r['references'])}; board stack-up for a cut there: " + ", ".join(
                f"{key} {'/'.join(f'{v:g}' for v in value) if isinstance(value, list) else f'{value:g}'}"
                f"{' mm' if key in ('h', 'pair_h') else ''}" for key, value in r["stackup"].items()))
        for warning in r["warnings"]:
            print(f"    note: {warning}")
    return 0


def _place(args) -> int:
    from .kicad.place import place
    from .kicad.plan import Request, load_plan, load_spec_dict

    if args.plan is not None:
        if args.pair or args.spec or args.stackup_from_spec:
            raise EbgError("place: give either --plan, or --pair with --spec (and --stackup-from-spec), not both; "
                           "in a plan, stackup_from_spec = true goes into the [[filter]] table")
        requests = load_plan(args.plan)
    elif args.pair and args.spec:
        requests = [Request(load_spec_dict(args.spec), str(args.spec), pair=tuple(args.pair),
                            stackup_from_spec=args.stackup_from_spec)]
    else:
        raise EbgError("place: needs --pair NET_P NET_N with --spec SPEC, or --plan PLAN")
    placement = place(args.board, requests, args.out, args.artifacts, args.force, progress=_progress("placing"),
                      inputs=[args.plan] if args.plan is not None else [])
    for p in placement.filters:
        print(p.result.checks.format_table())
    for risk in placement.risks:
        print(f"  KiCad fill: {risk}")
    for note in placement.notes:
        print(f"  note: {note}")
    print(f"wrote {args.out} and {args.out.with_suffix('.kicad_dru').name} with {len(placement.filters)} filter(s); "
          f"{args.board} is unchanged. Refill zones in KiCad after opening it.")
    return 1 if any(p.result.checks.errors for p in placement.filters) else 0


def _progress(label: str):
    """A progress bar on a terminal only (never in CI logs)."""
    if not sys.stderr.isatty():
        return None
    from tqdm import tqdm

    return lambda items: tqdm(items, desc=label, unit="filter", leave=False)


def _kicad_package(args) -> int:
    from .kicad.package import build_package

    path, digest = build_package(args.out, args.force)
    print(f"wrote {path} (sha256 {digest}) and repository-entry.json")
    return 0


def _estimate(args) -> int:
    from .estimate.band import estimate_layout, format_table
    from .layout import build_layout
    from .spec import load_spec

    spec = load_spec(args.spec)
    estimate = estimate_layout(build_layout(spec), model=True)
    print(json.dumps(estimate.to_json(), indent=2) if args.json else format_table(estimate, spec.units))
    return 0


def _size(args) -> int:
    from .estimate.sizing import format_sizing, size_for_target
    from .units import parse_frequency, parse_length

    bridge = parse_bridge(args.bridge, args.units) if args.bridge else None
    if not 1.0 <= args.er <= 30.0:
        raise EbgError(f"--er = {args.er:g}: must be between 1 and 30")
    if args.style == "bridged" and bridge is None:
        raise EbgError("--bridge = (missing): the bridged style needs --bridge WIDTH,LENGTH[,PER_SIDE]")
    sizes = {k: parse_length(v, f"--{k}", args.units) for k, v in (("h", args.h), ("slot", args.slot))}
    if min(sizes.values()) <= 0:
        raise EbgError(f"--h = {args.h}, --slot = {args.slot}: both must be > 0")
    if (args.band is None) == (args.target is None):
        raise EbgError(f"--target = {args.target}, --band = {args.band}: give exactly one of them")
    if (args.band is None) != (args.reject is None):
        raise EbgError(f"--reject = {args.reject}: goes with --band (a band to reject by that many dB), not alone")
    if not 0 <= args.tan_d < 1:
        raise EbgError(f"--tan-d = {args.tan_d:g}: must be from 0 to below 1")
    if not args.pair:
        if args.band:
            raise EbgError("--pair = (missing): --band sizes with the circuit model, which needs --pair WIDTH,SPACING")
        result = size_for_target(parse_frequency(args.target, "--target"), args.er, style=args.style, h=sizes["h"],
                                 bridge=bridge, slot=sizes["slot"])
        print(json.dumps(result, indent=2) if args.json else format_sizing(result, args.units))
        return 0
    parts = args.pair.split(",")
    if len(parts) != 2:
        raise EbgError(f"--pair = {args.pair}: must be WIDTH,SPACING, lengths in {args.units} unless they say")
    pair = (parse_length(parts[0], "--pair width", args.units), parse_length(parts[1], "--pair spacing", args.units))
    row = dict(style=args.style, h=sizes["h"], bridge=bridge, slot=sizes["slot"], tan_d=args.tan_d, passes=args.passes,
               pair_h=parse_length(args.pair_h, "--pair-h", args.units) if args.pair_h else None)
    if args.band:
        from .estimate.sizing_band import format_band_sizing, size_for_band

        low, high = parse_band(args.band)
        result = size_for_band(low, high, parse_decibels(args.reject), args.er, pair, max_cells=args.max_cells,
                               max_sizes=args.max_sizes, **row)
        print(json.dumps(result, indent=2) if args.json else format_band_sizing(result, args.units))
        return 0 if result["met"] else 1
    from .estimate.sizing import size_with_model

    if not 1 <= args.count <= 50:
        raise EbgError(f"--count = {args.count}: must be between 1 and 50")
    result = size_with_model(parse_frequency(args.target, "--target"), args.er, pair, count=args.count, **row)
    print(json.dumps(result, indent=2) if args.json else format_sizing(result, args.units))
    return 0



def _refine(args) -> int:
    from .estimate.refinement import format_refine, refine
    from .spec import load_spec
    from .units import parse_frequency

    spec = load_spec(args.spec)
    if args.result is None:
        result = refine(spec, parse_frequency(args.observed, "--observed"))
    else:
        from .response import read_observed_notch

        seen = read_observed_notch(args.result)
        origin = {"file": seen.path, "source": seen.source}
        if not seen.reached_threshold:
            depth = "depth not stated" if seen.depth_db is None else f"{seen.depth_db:g} dB"
            origin["note"] = (f"the notch is shallow ({depth}, never at the file's threshold): "
                              "check the run before trusting its frequency")
        result = refine(spec, seen.notch_hz, observed_from=origin)
    print(json.dumps(result, indent=2) if args.json else format_refine(result, spec.units))
    return 0


def _params(args) -> int:
    from .spec import PARAMETERS, REQUIRED

    if args.markdown:
        print("| key | default | meaning |\n|---|---|---|")
    for p in PARAMETERS:
        default = "required" if p.default is REQUIRED else ("-" if p.default in (None, ()) else str(p.default))
        if args.markdown:
            print(f"| `{p.key}` | {default} | {p.help} |")
        else:
            print(f"{p.key:<24} {default:<12} {p.help}")
    return 0


COMMANDS = {"demo": _demo, "build": _build, "check": _check, "estimate": _estimate, "size": _size,
            "refine": _refine, "pairs": _pairs, "place": _place, "kicad-package": _kicad_package, "params": _params,
            "fullwave": _fullwave}

if __name__ == "__main__":
    sys.exit(main())
