"""Board-scale benchmark: `check --board` and `place --plan` on synthetic KiCad 6 boards, and filter export.

Run from the repository:  python benchmarks/board_bench.py [--quick]

Every figure is a median of several runs and is reported as a ratio against a
reference measured in the same run on the same machine: KiCad's own
``pcbnew.LoadBoard`` of the same file (or, without KiCad, a plain-Python parse
of the whole file into a tree).  Boards are generated under a temporary folder
and deleted afterwards.  Nothing here is a test: no number is asserted.

Synthetic board (seeded, so the same arguments give the same bytes): six copper
layers (In1.Cu and In4.Cu carry GND plane zones), a stack-up with thickness and
epsilon_r, an Edge.Cuts rectangle, a through-hole GND pad, N differential pairs
HX2_L<k>_TX_P/N on F.Cu (straight 40 mm runs, every other one with a 45-degree
chamfered bend) and M other track segments on random-walk routes of other nets,
with vias and two-pad footprints spread over the board, kept out of the pairs'
corridors as a router would keep them out of a filter's area.
"""
from __future__ import annotations

import argparse
import itertools
import json
import os
import platform
import re
import resource
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
SPEC = ROOT / "samples" / "hx2_l0_tx_straight.toml"
DEBIAN_DIST_PACKAGES = "/usr/lib/python3/dist-packages"

PAIR_WIDTH = 0.12
PAIR_SPACING = 0.15
COLUMNS = 5
COLUMN_PITCH = 60.0
ROW_PITCH = 30.0
MARGIN = 10.0
SIGNAL_LAYERS = ("F.Cu", "In2.Cu", "In3.Cu", "B.Cu")
WIDTHS = (0.1, 0.127, 0.15, 0.2)
CORRIDOR = 3.0
"""Other copper stays this far (mm) from a pair's bounding box, as a router keeps it off the filter's area."""

HEADER = """(kicad_pcb (version 20211014) (generator pcbnew)

  (general
    (thickness 1.6)
  )

  (paper "A3")
  (layers
    (0 "F.Cu" signal)
    (1 "In1.Cu" power)
    (2 "In2.Cu" signal)
    (3 "In3.Cu" signal)
    (4 "In4.Cu" power)
    (31 "B.Cu" signal)
    (32 "B.Adhes" user "B.Adhesive")
    (33 "F.Adhes" user "F.Adhesive")
    (34 "B.Paste" user)
    (35 "F.Paste" user)
    (36 "B.SilkS" user "B.Silkscreen")
    (37 "F.SilkS" user "F.Silkscreen")
    (38 "B.Mask" user)
    (39 "F.Mask" user)
    (40 "Dwgs.User" user "User.Drawings")
    (41 "Cmts.User" user "User.Comments")
    (44 "Edge.Cuts" user)
    (45 "Margin" user)
    (46 "B.CrtYd" user "B.Courtyard")
    (47 "F.CrtYd" user "F.Courtyard")
    (48 "B.Fab" user)
    (49 "F.Fab" user)
  )

  (setup
    (stackup
      (layer "F.SilkS" (type "Top Silk Screen"))
      (layer "F.Paste" (type "Top Solder Paste"))
      (layer "F.Mask" (type "Top Solder Mask") (thickness 0.01))
      (layer "F.Cu" (type "copper") (thickness 0.035))
      (layer "dielectric 1" (type "prepreg") (thickness 0.1) (material "FR4") (epsilon_r 4.1) (loss_tangent 0.02))
      (layer "In1.Cu" (type "copper") (thickness 0.035))
      (layer "dielectric 2" (type "core") (thickness 0.2) (material "FR4") (epsilon_r 4.3) (loss_tangent 0.02))
      (layer "In2.Cu" (type "copper") (thickness 0.018))
      (layer "dielectric 3" (type "prepreg") (thickness 0.7) (material "FR4") (epsilon_r 4.2) (loss_tangent 0.02))
      (layer "In3.Cu" (type "copper") (thickness 0.018))
      (layer "dielectric 4" (type "core") (thickness 0.2) (material "FR4") (epsilon_r 4.3) (loss_tangent 0.02))
      (layer "In4.Cu" (type "copper") (thickness 0.035))
      (layer "dielectric 5" (type "prepreg") (thickness 0.1) (material "FR4") (epsilon_r 4.1) (loss_tangent 0.02))
      (layer "B.Cu" (type "copper") (thickness 0.035))
      (layer "B.Mask" (type "Bottom Solder Mask") (thickness 0.01))
      (layer "B.Paste" (type "Bottom Solder Paste"))
      (layer "B.SilkS" (type "Bottom Silk Screen"))
      (copper_finish "None")
      (dielectric_constraints no)
    )
    (pad_to_mask_clearance 0)
  )

"""


# ---- synthetic board ----

def _fmt(v: float) -> str:
    """A coordinate as KiCad writes it: up to 6 decimals, no trailing zeros."""
    return f"{v:.6f}".rstrip("0").removesuffix(".")


def _uuids(rng: np.random.Generator, n: int) -> list[str]:
    words = rng.integers(0, 2**32, size=(n, 4), dtype=np.uint64).tolist()
    return [f"{a:08x}-{b >> 16:04x}-4{b & 0xfff:03x}-8{c >> 20:03x}-{c & 0xfffff:05x}{d & 0xfffffff:07x}"
            for a, b, c, d in words]


def _offset(points: np.ndarray, d: float) -> np.ndarray:
    """A polyline offset by ``d`` to the left of travel (y up), mitred at the corners: an exact pair trace."""
    seg = np.diff(points, axis=0)
    seg /= np.linalg.norm(seg, axis=1)[:, None]
    normal = np.column_stack([-seg[:, 1], seg[:, 0]])
    out = [points[0] + d * normal[0]]
    for k in range(1, len(points) - 1):
        n1, n2 = normal[k - 1], normal[k]
        out.append(points[k] + d * (n1 + n2) / (1 + n1 @ n2))
    out.append(points[-1] + d * normal[-1])
    return np.array(out)


def board_size(pairs: int) -> tuple[float, float]:
    rows = -(-pairs // COLUMNS)
    return 2 * MARGIN + COLUMNS * COLUMN_PITCH, 2 * MARGIN + max(rows, 10) * ROW_PITCH


def pair_paths(pairs: int) -> list[np.ndarray]:
    """Centre-lines: 40 mm straight, or 30 mm, a 45-degree chamfer and 8 mm down (every other lane)."""
    out = []
    for k in range(pairs):
        x0 = MARGIN + 5 + (k % COLUMNS) * COLUMN_PITCH
        y0 = MARGIN + 4 + (k // COLUMNS) * ROW_PITCH
        if k % 2:
            out.append(np.array([[x0, y0], [x0 + 30, y0], [x0 + 32, y0 + 2], [x0 + 32, y0 + 10]]))
        else:
            out.append(np.array([[x0, y0], [x0 + 40, y0]]))
    return out


def write_board(path: Path, pairs: int = 50, others: int = 100_000, seed: int = 6) -> dict:
    """Write a synthetic KiCad 6 board; returns what it holds.  Same arguments, same bytes."""
    rng = np.random.default_rng(seed)
    width, height = board_size(pairs)
    n_nets = max(20, others // 50)
    nets = ["GND", "+3V3"] + [f"HX2_L{k}_TX_{s}" for k in range(pairs) for s in "PN"]
    nets += [f"HX2_AUX{k}_{s}" for k in range(10) for s in "PN"]
    nets += [f"HX2_SIG{k}" for k in range(n_nets)]
    code = {name: i + 1 for i, name in enumerate(nets)}
    other_codes = np.array([code[n] for n in nets[2 + 2 * pairs:]])

    paths = pair_paths(pairs)
    boxes = np.array([[*p.min(axis=0) - CORRIDOR, *p.max(axis=0) + CORRIDOR] for p in paths])

    def clear(lo: np.ndarray, hi: np.ndarray) -> np.ndarray:
        """True where the box lo..hi stays off every pair corridor."""
        ok = np.ones(len(lo), dtype=bool)
        for x0, y0, x1, y1 in boxes:
            ok &= ~((lo[:, 0] <= x1) & (hi[:, 0] >= x0) & (lo[:, 1] <= y1) & (hi[:, 1] >= y0))
        return ok

    # Random-walk routes: 12 steps of 0.5 to 4 mm in one of 8 directions, turning by at most 45 degrees.
    steps = 12
    routes = int(others / steps * 2.5) + 16
    start = rng.uniform([MARGIN, MARGIN], [width - MARGIN, height - MARGIN], size=(routes, 2))
    heading = np.cumsum(rng.integers(-1, 2, size=(routes, steps)), axis=1) + rng.integers(0, 8, size=(routes, 1))
    length = rng.uniform(0.5, 4.0, size=(routes, steps))
    step = np.stack([np.cos(heading * np.pi / 4), np.sin(heading * np.pi / 4)], axis=-1) * length[..., None]
    pts = np.round(start[:, None, :] + np.concatenate([np.zeros((routes, 1, 2)), np.cumsum(step, axis=1)], axis=1), 4)
    a, b = pts[:, :-1].reshape(-1, 2), pts[:, 1:].reshape(-1, 2)
    route_net = np.repeat(rng.choice(other_codes, size=routes), steps)
    route_layer = np.repeat(rng.integers(0, len(SIGNAL_LAYERS), size=routes), steps)
    route_width = np.repeat(rng.integers(0, len(WIDTHS), size=routes), steps)
    inside = (np.minimum(a, b) >= 1).all(axis=1) & (np.maximum(a, b) <= [width - 1, height - 1]).all(axis=1)
    wanted = others - sum(len(p) - 1 for p in paths)
    keep = np.flatnonzero(inside & clear(np.minimum(a, b) - 0.2, np.maximum(a, b) + 0.2))[:wanted]
    if len(keep) < wanted:
        raise SystemExit(f"generator: only {len(keep)} of {wanted} segments fit; enlarge the board")

    vias_at = pts[rng.integers(0, routes, size=others // 10), rng.integers(1, steps, size=others // 10)]
    via_net = rng.choice(other_codes, size=len(vias_at))
    gnd_at = np.round(rng.uniform([MARGIN, MARGIN], [width - MARGIN, height - MARGIN], size=(others // 50, 2)), 4)
    v_ok, g_ok = clear(vias_at - 0.4, vias_at + 0.4), clear(gnd_at - 0.4, gnd_at + 0.4)
    fp_at = np.round(rng.uniform([MARGIN, MARGIN], [width - MARGIN, height - MARGIN], size=(others // 200, 2)), 3)
    fp_at = fp_at[clear(fp_at - 1.5, fp_at + 1.5)]
    fp_net = rng.choice(other_codes, size=len(fp_at))

    # Beside each pair, as routers and designers place them: GND stitching vias every 2 mm at 2.5 mm from the
    # centre-line and an In2.Cu track of another net 2.3 mm to one side, both outside the cut but near it.
    stitch, guards = [], []
    for k, centre in enumerate(paths):
        line = _offset(centre, 2.3)
        guards += [(tuple(p), tuple(q), int(other_codes[k % len(other_codes)])) for p, q in itertools.pairwise(line)]
        for side in (2.5, -2.5):
            edge = _offset(centre, side)
            for p, q in itertools.pairwise(edge):
                n = int(np.linalg.norm(q - p) // 2)
                stitch += [tuple(p + (q - p) * (i + 0.5) / n) for i in range(n)]
    ids = iter(_uuids(rng, len(keep) + len(vias_at) + len(gnd_at) + 3 * len(fp_at) + 8 * pairs + len(stitch)
                      + len(guards) + 64))
    out = [HEADER, '  (net 0 "")\n']
    out += [f'  (net {code[n]} "{n}")\n' for n in nets]
    out.append("\n")
    out.append(f'  (footprint "HX2:TP_GND" (layer "F.Cu")\n    (tedit 0) (tstamp {next(ids)})\n    (at {MARGIN / 2} '
               f'{MARGIN / 2})\n    (fp_text reference "TP1" (at 0 0) (layer "F.SilkS")\n      (effects (font (size 1 1) '
               f'(thickness 0.15)))\n      (tstamp {next(ids)})\n    )\n    (pad "1" thru_hole circle (at 0 0) (size 1.6 1.6)'
               f' (drill 0.8) (layers *.Cu *.Mask)\n      (net {code["GND"]} "GND") (tstamp {next(ids)}))\n  )\n')
    for i, ((x, y), net) in enumerate(zip(fp_at.tolist(), fp_net.tolist())):
        name = nets[net - 1]
        out.append(f'  (footprint "HX2:C_0402" (layer "F.Cu")\n    (tedit 0) (tstamp {next(ids)})\n    (at {_fmt(x)} '
                   f'{_fmt(y)})\n    (fp_text reference "C{i + 1}" (at 0 -1) (layer "F.SilkS")\n      (effects (font '
                   f'(size 1 1) (thickness 0.15)))\n      (tstamp {next(ids)})\n    )\n'
                   f'    (pad "1" smd rect (at -0.5 0) (size 0.6 0.6) (layers "F.Cu" "F.Paste" "F.Mask")\n'
                   f'      (net {net} "{name}") (tstamp {next(ids)}))\n'
                   f'    (pad "2" smd rect (at 0.5 0) (size 0.6 0.6) (layers "F.Cu" "F.Paste" "F.Mask")\n'
                   f'      (net {code["GND"]} "GND") (tstamp {next(ids)}))\n  )\n')
    corners = [(0, 0, width, 0), (width, 0, width, height), (width, height, 0, height), (0, height, 0, 0)]
    out += [f'  (gr_line (start {x0:g} {y0:g}) (end {x1:g} {y1:g}) (layer "Edge.Cuts") (width 0.05) '
            f'(tstamp {next(ids)}))\n' for x0, y0, x1, y1 in corners]
    out.append("\n")
    half = (PAIR_WIDTH + PAIR_SPACING) / 2
    for k, centre in enumerate(paths):
        for polarity, sign in (("P", 1.0), ("N", -1.0)):
            trace = _offset(centre, sign * half)
            for (x0, y0), (x1, y1) in zip(trace[:-1].tolist(), trace[1:].tolist()):
                out.append(f"  (segment (start {_fmt(x0)} {_fmt(y0)}) (end {_fmt(x1)} {_fmt(y1)}) (width "
                           f"{PAIR_WIDTH}) (layer \"F.Cu\") (net {code[f'HX2_L{k}_TX_{polarity}']}) "
                           f"(tstamp {next(ids)}))\n")
    layer_names = [f'"{n}"' for n in SIGNAL_LAYERS]
    for (x0, y0), (x1, y1), w, li, net in zip(a[keep].tolist(), b[keep].tolist(), route_width[keep].tolist(),
                                              route_layer[keep].tolist(), route_net[keep].tolist()):
        out.append(f"  (segment (start {x0:.4f} {y0:.4f}) (end {x1:.4f} {y1:.4f}) (width {WIDTHS[w]}) "
                   f"(layer {layer_names[li]}) (net {net}) (tstamp {next(ids)}))\n")
    for (x, y), net in zip(vias_at[v_ok].tolist(), via_net[v_ok].tolist()):
        out.append(f'  (via (at {x:.4f} {y:.4f}) (size 0.45) (drill 0.2) (layers "F.Cu" "B.Cu") (net {net}) '
                   f'(tstamp {next(ids)}))\n')
    for (x0, y0), (x1, y1), net in guards:
        out.append(f'  (segment (start {_fmt(x0)} {_fmt(y0)}) (end {_fmt(x1)} {_fmt(y1)}) (width 0.15) (layer "In2.Cu") '
                   f'(net {net}) (tstamp {next(ids)}))\n')
    for x, y in stitch:
        out.append(f'  (via (at {_fmt(x)} {_fmt(y)}) (size 0.6) (drill 0.3) (layers "F.Cu" "B.Cu") (net {code["GND"]}) '
                   f'(tstamp {next(ids)}))\n')
    for x, y in gnd_at[g_ok].tolist():
        out.append(f'  (via (at {x:.4f} {y:.4f}) (size 0.6) (drill 0.3) (layers "F.Cu" "B.Cu") (net {code["GND"]}) '
                   f'(tstamp {next(ids)}))\n')
    out.append("\n")
    for layer in ("In1.Cu", "In4.Cu"):
        out.append(f'  (zone (net {code["GND"]}) (net_name "GND") (layer "{layer}") (tstamp {next(ids)}) '
                   f'(name "GND_{layer[:3].upper()}") (hatch edge 0.508)\n    (connect_pads (clearance 0.3))\n'
                   f'    (min_thickness 0.2) (filled_areas_thickness no)\n'
                   f'    (fill yes (thermal_gap 0.508) (thermal_bridge_width 0.508))\n    (polygon\n      (pts\n'
                   f'        (xy 0.5 0.5) (xy {width - 0.5:g} 0.5) (xy {width - 0.5:g} {height - 0.5:g}) '
                   f'(xy 0.5 {height - 0.5:g})\n      )\n    )\n  )\n')
    out.append(")\n")
    data = "".join(out).encode("utf-8")
    path.write_bytes(data)
    return {"path": path, "bytes": len(data), "other_segments": len(keep) + len(guards),
            "segments": len(keep) + len(guards) + sum(2 * (len(p) - 1) for p in paths),
            "vias": int(v_ok.sum() + g_ok.sum()) + len(stitch), "footprints": len(fp_at) + 1, "pairs": pairs}


# ---- measuring ----

def child(argv: list[str]) -> None:
    """Run one job in this (fresh) process and print its own time and peak memory as JSON on the last line."""
    job, *args = argv
    result: dict = {}
    if job == "loadboard":
        try:
            import pcbnew
        except ImportError:
            sys.path.append(DEBIAN_DIST_PACKAGES)
        try:
            import pcbnew
        except ImportError as err:
            print(json.dumps({"error": f"KiCad's pcbnew does not load in Python {platform.python_version()} ({err})"}))
            return
        start = time.perf_counter()
        board = pcbnew.LoadBoard(args[0])
        result = {"seconds": time.perf_counter() - start, "tracks": len(board.GetTracks()),
                  "kicad": pcbnew.Version() if hasattr(pcbnew, "Version") else pcbnew.GetBuildVersion()}
    elif job == "tokenize":
        from ebglayout.kicad.sexpr import parse_text

        data = Path(args[0]).read_bytes()
        start = time.perf_counter()
        parse_text(data, args[0])
        result = {"seconds": time.perf_counter() - start}
    elif job == "read":
        from ebglayout.kicad.board import read_board

        start = time.perf_counter()
        read_board(args[0])
        result = {"seconds": time.perf_counter() - start}
    elif job == "imports":
        import ebglayout.estimate.band
        import ebglayout.kicad.place
        import ebglayout.kicad.recheck

        result = {"modules": [ebglayout.estimate.band.__name__, ebglayout.kicad.place.__name__,
                              ebglayout.kicad.recheck.__name__]}
    else:
        from contextlib import redirect_stdout

        from ebglayout.cli import main

        with open(os.devnull, "w") as quiet, redirect_stdout(quiet):
            start = time.perf_counter()
            code = main([job, *args])
            result = {"seconds": time.perf_counter() - start, "exit": code}
    result["maxrss_mb"] = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(json.dumps(result))


def run_child(*argv: str) -> dict:
    """One fresh interpreter running ``child``; adds the wall time of the whole process (start-up and imports)."""
    env = dict(os.environ, PYTHONPATH=str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    start = time.perf_counter()
    done = subprocess.run([sys.executable, str(Path(__file__).resolve()), "--child", *map(str, argv)],
                          capture_output=True, text=True, env=env, cwd=ROOT, check=False)
    wall = time.perf_counter() - start
    lines = done.stdout.strip().splitlines()
    if done.returncode != 0 or not lines:
        raise SystemExit(f"child {argv[0]} failed ({done.returncode}):\n{done.stderr[-2000:]}")
    result = json.loads(lines[-1])
    result["wall"] = wall
    return result


def median_of(runs: int, *argv: str) -> dict:
    """Median wall time, in-process time and peak memory of ``runs`` fresh runs of one child job."""
    results = [run_child(*argv) for _ in range(runs)]
    if "error" in results[0]:
        return results[0]
    out = {key: statistics.median(r[key] for r in results) for key in ("wall", "seconds", "maxrss_mb") if key in results[0]}
    out.update({k: v for k, v in results[0].items() if k not in out})
    out["runs"] = runs
    return out


def time_median(runs: int, job) -> float:
    times = []
    for _ in range(runs):
        start = time.perf_counter()
        job()
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def compile_bytecode() -> None:
    """Byte-compile ebglayout as pip does when it installs a package.

    Where PYTHONDONTWRITEBYTECODE is set (as on this kind of CI machine) every fresh
    interpreter would otherwise compile the sources again, a cost no installed copy has.
    """
    import compileall

    compileall.compile_dir(str(ROOT / "ebglayout"), quiet=1)


def machine() -> str:
    import numpy
    import shapely

    cpu = platform.processor() or platform.machine()
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                cpu = line.split(":", 1)[1].strip()
                break
    except OSError:
        pass
    return (f"{platform.platform()}; {cpu}; {os.cpu_count()} CPUs; Python {platform.python_version()}; "
            f"numpy {numpy.__version__}, shapely {shapely.__version__}")


def write_plan(folder: Path) -> Path:
    """A plan placing the sample's cut under every pair, with the stack-up left to the board's.

    The sample's [stackup] describes the sample board; here the cavity under In1.Cu runs to the GND plane on
    In4.Cu, and `place` refuses a spec whose stack-up contradicts the board's.
    """
    spec = folder / "lane.toml"
    spec.write_text(re.sub(r"\[stackup\]\n(?:[^\[\n][^\n]*\n|\n)*", "", SPEC.read_text(encoding="utf-8")),
                    encoding="utf-8")
    plan = folder / "plan.toml"
    plan.write_text(f'[[filter]]\nspec = "{spec.as_posix()}"\nmatch = "HX2_L*"\n', encoding="utf-8")
    return plan


def placed_board(folder: Path, others: int, pairs: int, plan: Path, runs: int = 1) -> tuple[dict, dict, Path]:
    """Generate a board, place the filters of the plan with `place --plan`; (board info, place timing, placed path)."""
    info = write_board(folder / f"bench_{others}.kicad_pcb", pairs=pairs, others=others)
    out = folder / f"bench_{others}_placed.kicad_pcb"
    timing = median_of(runs, "place", info["path"], "--plan", plan, "--out", out, "--force")
    return info, timing, out


def verdict(ok: bool) -> str:
    return "met" if ok else "MISSED"


# ---- the report ----

def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--quick", action="store_true", help="fewer runs; scaling series without the 1M board")
    parser.add_argument("--no-kicad", action="store_true",
                        help="compare with the plain-Python full parse even when KiCad's pcbnew is installed")
    parser.add_argument("--child", nargs=argparse.REMAINDER, help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.child:
        child(args.child)
        return 0
    repeats = 3 if args.quick else 5
    if str(ROOT) not in sys.path:
        sys.path.insert(0, str(ROOT))
    compile_bytecode()
    print(f"machine: {machine()}")
    kicad = {"error": "--no-kicad given"} if args.no_kicad else run_child("loadboard", ROOT / "samples" / "hx2_hub.kicad_pcb")
    reference = "pcbnew.LoadBoard" if "error" not in kicad else "plain-Python full parse (sexpr.parse_text)"
    print(f"reference: {reference}" + (f" (KiCad {kicad['kicad']})" if "error" not in kicad else f" -- {kicad['error']}"))
    ref_job = "loadboard" if "error" not in kicad else "tokenize"
    imports = median_of(repeats, "imports")
    print(f"interpreter start + imports of the check path: {imports['wall']:.2f} s, {imports['maxrss_mb']:.0f} MB\n")

    with tempfile.TemporaryDirectory(prefix="ebg-bench-") as tmp:
        folder = Path(tmp)
        plan = write_plan(folder)
        series = [10_000, 100_000] + ([] if args.quick else [1_000_000])
        rows = {}
        for others in series:
            big = others >= 1_000_000
            runs = 1 if big and args.quick else 2 if big else repeats
            info, place, placed = placed_board(folder, others, 50, plan, runs=1 if big else max(1, repeats // 2 + 1))
            check = median_of(runs, "check", "--board", placed)
            serial = median_of(runs, "check", "--board", placed, "--jobs", "1")
            read = median_of(runs, "read", placed)
            pairs = median_of(runs, "pairs", placed, "--json")
            ref = median_of(1 if big else runs, ref_job, placed)
            size = placed.stat().st_size
            rows[others] = (info, place, check, ref, size, serial)
            print(f"board {others:>9,} other segments: {size / 1e6:6.1f} MB, {info['segments']:,} segments, "
                  f"{info['vias']:,} vias, {info['footprints']:,} footprints, 50 pairs")
            print(f"  place --plan (50 filters) {place['wall']:7.2f} s    check --board {check['wall']:6.2f} s end to end "
                  f"({check['seconds']:.2f} s in main)")
            print(f"  with --jobs 1 (one process): {serial['wall']:.2f} s end to end, of which read_board "
                  f"{read['seconds']:.2f} s and the 50 re-checks {(serial['seconds'] - read['seconds']) / 50 * 1000:.1f} ms "
                  f"each; peak {serial['maxrss_mb']:.0f} MB = {serial['maxrss_mb'] * 2**20 / size:.1f} x file "
                  f"({(serial['maxrss_mb'] - imports['maxrss_mb']) * 2**20 / size:.1f} x above the imports)")
            print(f"  pairs (every pair on the board) {pairs['wall']:.2f} s end to end")
            print(f"  {reference}: {ref['seconds']:.2f} s, peak {ref['maxrss_mb']:.0f} MB;   {reference} / read_board = "
                  f"{ref['seconds'] / read['seconds']:.1f}x")
            (folder / f"bench_{others}.kicad_pcb").unlink()
            placed.unlink()

        print("\nresults (medians; ratios against references measured above, same run, same machine)")
        info, place, check, ref, size, serial = rows[100_000]
        ratio = ref["seconds"] / check["wall"]
        print(f"  check --board, 100k board, 50 filters: {reference} / check end to end = {ratio:.2f}x "
              f"(in main: {ref['seconds'] / check['seconds']:.2f}x)   target >= 5x: {verdict(ratio >= 5)}")
        ratio = place["wall"] / check["wall"]
        print(f"  place --plan of 50 filters / one check --board = {ratio:.2f}x   target < 3x: {verdict(ratio < 3)}")
        if 1_000_000 in rows:
            grow = rows[1_000_000][2]["wall"] / rows[100_000][2]["wall"]
            in_main = rows[1_000_000][2]["seconds"] / rows[100_000][2]["seconds"]
            sizes = rows[1_000_000][4] / rows[100_000][4]
            print(f"  check --board time 1M / 100k = {grow:.2f}x end to end, {in_main:.2f}x in main "
                  f"(file {sizes:.1f}x)   target <= ~12x: {verdict(grow <= 12)}")
        else:
            print("  check --board time 1M / 100k: not measured with --quick")
        memory = {n: (r[5]["maxrss_mb"] * 2**20 / r[4], (r[5]["maxrss_mb"] - imports["maxrss_mb"]) * 2**20 / r[4])
                  for n, r in rows.items()}
        largest = max(memory)
        print("  peak memory of check --board --jobs 1 / file size: " + ", ".join(
            f"{n:,}: {total:.1f}x ({above:.1f}x above the imports)" for n, (total, above) in memory.items())
            + f"   target < 10x at the largest board: {verdict(memory[largest][0] < 10)}")

        print()
        export_report(folder, repeats * 2)
    return 0


def export_report(folder: Path, runs: int) -> None:
    """One filter and a 1,000-cell row through pipeline.build_to_folder (all formats), with where the time goes."""
    import tomllib

    from ebglayout.pipeline import build_to_folder, usable_cpus
    from ebglayout.spec import load_spec, spec_from_dict

    spec = load_spec(SPEC)
    raw = tomllib.loads(SPEC.read_text(encoding="utf-8"))
    pitch = raw["cut"]["patch"][0] + 2 * raw["cut"]["slot"] + raw["cut"]["web"]
    length = 1000 * pitch + 20
    raw["name"] = "hx2_row1000"
    raw["cut"]["count"] = 1000
    raw["pair"]["path"] = [[0, 0], [length, 0]]
    raw["plane"]["outline"] = [[-10, -10], [length + 10, -10], [length + 10, 10], [-10, 10]]
    big = spec_from_dict(raw)
    big_runs = max(1, runs // 4)
    jobs = usable_cpus()
    build_to_folder(spec, folder / "warm", force=True, jobs=jobs)
    one = time_median(runs, lambda: build_to_folder(spec, folder / "one", force=True, jobs=jobs))
    many = time_median(big_runs, lambda: build_to_folder(big, folder / "many", force=True, jobs=jobs))
    many_serial = time_median(big_runs, lambda: build_to_folder(big, folder / "many", force=True, jobs=1))
    print("export, all formats (dxf, gds, svg, png, report.json) via pipeline.build_to_folder, medians:")
    one_parts = stages(spec, folder, runs)
    rest = sum(v for k, v in one_parts.items() if k != "svg + png")
    print(f"  one filter ({spec.count} cells): {one * 1000:.1f} ms   target < 50 ms: {verdict(one < 0.05)}"
          f"  (without the svg + png preview: {rest * 1000:.1f} ms, {verdict(rest < 0.05)})")
    print(f"  1,000 cells: {many:.2f} s with the CLI's default --jobs {jobs} (DXF in a second process), "
          f"{many_serial:.2f} s with --jobs 1   target < 1 s: {verdict(many < 1.0)}")
    for label, parts in (("one filter", one_parts), ("1,000 cells", stages(big, folder, big_runs))):
        print(f"  where {label} spends it: " + ", ".join(f"{k} {v * 1000:.0f} ms" for k, v in parts.items()))


def stages(spec, folder: Path, runs: int) -> dict[str, float]:
    """Median seconds of each step of pipeline.build_to_folder for one spec."""
    from ebglayout.export.dxf import write_dxf
    from ebglayout.export.gds import write_gds
    from ebglayout.export.preview import write_preview
    from ebglayout.pipeline import make_filter
    from ebglayout.report import report_data, to_json_text

    result = make_filter(spec)
    findings = result.checks.findings
    notch = result.estimate.to_json() if result.estimate is not None else None
    jobs = {
        "build + checks + estimate": lambda: make_filter(spec),
        "dxf": lambda: write_dxf(result.layout, folder / "t.dxf", findings=findings),
        "gds": lambda: write_gds(result.layout, folder / "t.gds"),
        "svg + png": lambda: write_preview(result.layout, folder / "t.svg", folder / "t.png", findings=findings,
                                           notch=notch),
        "report.json": lambda: to_json_text(report_data(result.layout, result.checks, result.estimate)),
    }
    return {name: time_median(runs, job) for name, job in jobs.items()}


if __name__ == "__main__":
    sys.exit(main())
