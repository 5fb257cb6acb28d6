"""The command line's grammar: the commands, their options, and readers of the values argparse cannot type.

Kept apart from ``cli.py`` so that it reads as what each command does; ``--band``, ``--reject``,
``--bridge`` and ``--jobs`` are read here into Hz, dB, mm and a process count.
"""
from __future__ import annotations

import argparse
import math
from pathlib import Path

from . import CAUTION, __version__
from .errors import EbgError
from .units import LENGTH_UNITS_MM

EXAMPLES = {
    "demo": "ebglayout demo --out ./ebglayout-demo",
    "build": "ebglayout build samples/hx2_l0_tx_straight.toml --out out/",
    "check": "ebglayout check samples/hx2_l0_tx_straight.toml --json",
    "estimate": "ebglayout estimate samples/hx2_l2_tx_bridged.toml",
    "size": "ebglayout size --band 16GHz+-0.5% --reject 10dB --er 4.1 --pair 0.12,0.15",
    "refine": "ebglayout refine samples/hx2_l0_tx_straight.toml --observed 15.2GHz",
    "fullwave": "ebglayout fullwave samples/hx2_l0_tx_straight.toml --out out/ --preset fast",
    "params": "ebglayout params --markdown",
    "pairs": "ebglayout pairs samples/hx2_hub.kicad_pcb",
    "place": "ebglayout place samples/hx2_hub.kicad_pcb --pair HX2_L0_TX_P HX2_L0_TX_N "
             "--spec samples/hx2_l0_tx_straight.toml --out hub_filtered.kicad_pcb",
    "kicad-package": "ebglayout kicad-package --out dist/",
}


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="ebglayout",
        description="Plane-cut EBG common-mode filters under routed differential pairs: build, check, estimate, export.",
        epilog=f"{CAUTION}.")
    parser.add_argument("--version", action="version", version=f"ebglayout {__version__}")
    parser.add_argument("--debug", action="store_true", help="show a traceback on errors")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")

    def command(name: str, help_text: str) -> argparse.ArgumentParser:
        p = sub.add_parser(name, help=help_text, description=help_text, epilog=f"example: {EXAMPLES[name]}"
                           if name in EXAMPLES else None)
        p.add_argument("--debug", action="store_true", default=argparse.SUPPRESS, help="show a traceback on errors")
        return p

    p = command("demo", "build every bundled sample into a folder and print a summary per filter")
    p.add_argument("--out", type=Path, default=Path("ebglayout-demo"), help="output folder (default ./ebglayout-demo)")
    p.add_argument("--force", action="store_true", help="replace existing outputs")

    p = command("build", "build one spec: <name>.dxf, .gds, .svg, .png, .kicad_mod, .kicad_dru and .report.json")
    p.add_argument("spec", type=Path)
    p.add_argument("--out", type=Path, required=True, help="output folder")
    p.add_argument("--force", action="store_true", help="replace existing outputs")
    p.add_argument("--jobs", type=int, default=0, metavar="N",
                   help="processes for a large filter's files (default: one per usable CPU; 1: no second process)")

    p = command("check", "run the design-rule checks on a spec, or on every filter placed on a board")
    p.add_argument("spec", type=Path, nargs="?")
    p.add_argument("--board", type=Path, help="re-check the filters already placed on this .kicad_pcb")
    p.add_argument("--json", action="store_true", help="print the JSON report instead of the table")
    p.add_argument("--junit", type=Path, help="also write a JUnit XML file (one test case per rule)")
    p.add_argument("--strict", action="store_true", help="warnings fail too (exit 1)")
    p.add_argument("--jobs", type=int, default=0, metavar="N",
                   help="with --board: processes sharing the filters (default: one per usable CPU; 1: no workers)")

    p = command("estimate", "estimate the drawn cut's notch: cavity modes, bridged-cell LC, and the model's Scc21/Sdd21 over the tolerance corners")
    p.add_argument("spec", type=Path)
    p.add_argument("--json", action="store_true", help="print JSON")

    p = command("fullwave", "simulate the drawn cut and pair full-wave on openEMS: <name>.s4p, .fullwave.json, plot")
    p.add_argument("spec", type=Path)
    p.add_argument("--out", type=Path, required=True, help="output folder")
    p.add_argument("--preset", choices=("fast", "default", "fine"), default="default",
                   help="mesh density and record length (default: default)")
    p.add_argument("--threads", type=int, default=2, metavar="N", help="engine threads (default 2)")
    p.add_argument("--time-limit", type=float, metavar="MIN", help="stop (and write nothing) after this many minutes")
    p.add_argument("--keep-run", action="store_true", help="keep the engine's run folder as <name>.fullwave-run")
    p.add_argument("--threshold", type=float, default=-10.0, metavar="DB",
                   help="stopband threshold for |Scc21| (default -10 dB)")
    p.add_argument("--force", action="store_true", help="replace existing outputs")

    p = command("size", "first-pass patch size for a target notch")
    p.add_argument("--target", help='frequency ("8GHz") or NRZ data rate ("16Gbps"); not with --band')
    p.add_argument("--er", type=float, required=True, help="dielectric constant between cut plane and next plane")
    p.add_argument("--h", default="0.1mm", help="that dielectric's thickness (default 0.1 mm)")
    p.add_argument("--style", choices=("straight", "folded", "bridged"), default="straight")
    p.add_argument("--bridge", help="bridged: WIDTH,LENGTH[,PER_SIDE]")
    p.add_argument("--slot", default="0.15mm", help="slot width (default 0.15 mm)")
    p.add_argument("--pair", help="WIDTH,SPACING of the traces: size so the circuit model's notch lands on the "
                   "target, with room for the pair, and check the cell (without it: the formula's size)")
    p.add_argument("--pair-h", help="with --pair: dielectric between the pair and the cut plane (default --h)")
    p.add_argument("--count", type=int, default=3, help="with --pair: cells in the modelled row (default 3)")
    p.add_argument("--passes", type=int, help="with --pair, folded: an odd number of passes of the pair over the row (default 3)")
    p.add_argument("--tan-d", type=float, default=0.02, help="with --pair: loss tangent (default 0.02)")
    p.add_argument("--band", help="with --pair and --reject: the band to reject, LOW..HIGH (15.9GHz..16.1GHz) or "
                   "CENTRE+-SPREAD (16GHz+-1%%, 16GHz+-0.2GHz); proposes the cell count and staggered sizes")
    p.add_argument("--reject", help="with --band: the rejection every tolerance corner must reach over it, in dB "
                   "(10 or 10dB: Scc21 at or below -10 dB)")
    p.add_argument("--max-cells", type=int, default=16, help="with --band: most cells to try (default 16)")
    p.add_argument("--max-sizes", type=int, default=4, help="with --band: most staggered sizes to try (default 4)")
    p.add_argument("--units", default="mm", choices=sorted(LENGTH_UNITS_MM),
                   help="unit of bare lengths given here and of every length printed (default mm)")
    p.add_argument("--json", action="store_true", help="print JSON")

    p = command("refine", "correct a spec's dimensions from the notch a simulation observed")
    p.add_argument("spec", type=Path)
    given = p.add_mutually_exclusive_group(required=True)
    given.add_argument("--observed", help='notch frequency the simulation found, e.g. "7.4GHz"')
    given.add_argument("--result", type=Path, metavar="FILE.json",
                       help="result file of the full-wave command or the fast model (its scc21.notch_hz)")
    p.add_argument("--json", action="store_true", help="print JSON")

    p = command("pairs", "list the differential pairs on a KiCad board and the straight runs a filter fits on")
    p.add_argument("board", type=Path)
    p.add_argument("--min-run", default="2mm", help="shortest straight run worth listing (default 2 mm)")
    p.add_argument("--json", action="store_true", help="print JSON")

    p = command("place", "place filters under pairs of a KiCad board and write a new board beside its .kicad_dru")
    p.add_argument("board", type=Path)
    p.add_argument("--pair", nargs=2, metavar=("NET_P", "NET_N"), help="the pair's two nets")
    p.add_argument("--spec", type=Path, help="the filter spec (cut, rules; pair geometry comes from the board)")
    p.add_argument("--plan", type=Path, help="TOML plan with [[filter]] tables (spec + pair or match) for many pairs")
    p.add_argument("--out", type=Path, required=True, help="the new .kicad_pcb (never the input)")
    p.add_argument("--artifacts", type=Path,
                   help="also write each filter's GDSII, DXF, SVG, PNG and <name>.report.json here")
    p.add_argument("--stackup-from-spec", action="store_true",
                   help="keep the spec's [stackup] values where they disagree with the board's stack-up "
                   "(else that is an error)")
    p.add_argument("--force", action="store_true", help="replace existing outputs")

    p = command("kicad-package", "build the KiCad Plugin and Content Manager zip of the action plugin")
    p.add_argument("--out", type=Path, required=True, help="output folder")
    p.add_argument("--force", action="store_true", help="replace existing outputs")

    command("params", "list every spec key with its default and meaning").add_argument(
        "--markdown", action="store_true", help="as a Markdown table (for the README)")
    return parser


def parse_jobs(asked: int) -> int:
    """Worker processes for --jobs: as asked, or one per CPU this process may run on."""
    if asked < 0:
        raise EbgError(f"--jobs: {asked} is not allowed; give 0 (one per usable CPU) or a positive count")
    if asked:
        return asked
    from .pipeline import usable_cpus

    return usable_cpus()


def parse_band(text: str) -> tuple[float, float]:
    """--band LOW..HIGH or CENTRE+-SPREAD (SPREAD a frequency or a percentage of CENTRE), in Hz."""
    from .units import parse_frequency

    if ".." in text:
        low, high = (parse_frequency(v.strip(), "--band") for v in text.split("..", 1))
    elif "+-" in text:
        centre_text, spread_text = (v.strip() for v in text.split("+-", 1))
        centre = parse_frequency(centre_text, "--band")
        if spread_text.endswith("%"):
            try:
                spread = centre * float(spread_text[:-1]) / 100
            except ValueError:
                raise EbgError(f"--band = {text}: the spread {spread_text!r} must be a number with % or a "
                               "frequency") from None
        else:
            spread = parse_frequency(spread_text, "--band")
        low, high = centre - spread, centre + spread
    else:
        raise EbgError(f"--band = {text}: must be LOW..HIGH (15.9GHz..16.1GHz) or CENTRE+-SPREAD (16GHz+-1%)")
    if not 0 < low < high:
        raise EbgError(f"--band = {text}: needs 0 < low < high")
    return low, high


def parse_decibels(text: str) -> float:
    """--reject 10 or 10dB: a rejection depth in dB, > 0 and at most 100."""
    number = text.strip().lower().removesuffix("db").strip()
    try:
        value = float(number)
    except ValueError:
        value = math.nan
    if not 0 < value <= 100:
        raise EbgError(f"--reject = {text}: must be a depth in dB above 0 and at most 100, e.g. 10 or 10dB")
    return value


def parse_bridge(text: str, units: str) -> tuple[float, float, int]:
    """--bridge WIDTH,LENGTH[,PER_SIDE]: lengths (bare in ``units``), PER_SIDE a whole number >= 1 (default 1)."""
    from .units import parse_length

    parts = text.split(",")
    if len(parts) not in (2, 3):
        raise EbgError(f"--bridge = {text}: must be WIDTH,LENGTH[,PER_SIDE], lengths in {units} unless they say")
    per_side = parts[2].strip() if len(parts) == 3 else "1"
    if not per_side.isdigit() or int(per_side) < 1:
        raise EbgError(f"--bridge = {text}: PER_SIDE = {per_side or '(empty)'} must be a whole number >= 1")
    return (parse_length(parts[0], "--bridge width", units), parse_length(parts[1], "--bridge length", units),
            int(per_side))
