"""Full-wave benchmark: the 3-cell straight filter (lossless reference case) on openEMS, 2 threads.

Measures in one run:
- ``default`` preset with the symmetric plan (half domain, common and differential mode directly),
- ``fine`` preset with the same plan (the accuracy reference for the notch),
- the naive plan on the default mesh: full domain, one port driven at a time (ports 1 and 2; the far-end
  columns from the end-to-end mirror), 50 ohm ports (skipped with --quick).
Reports wall time, cells, time steps, notch, depth and -10 dB stopband of |Scc21| for each, the default's notch
error against fine, and the naive / default wall-time ratio.  Not a test: nothing here asserts a time.

    python benchmarks/fullwave_bench.py [--quick] [--threads 2]
"""
from __future__ import annotations

import argparse
import time
from pathlib import Path

import numpy as np

from ebglayout.fullwave.model import build_model, with_port_ohm
from ebglayout.fullwave.run import port_impedance, simulate
from ebglayout.layout import build_layout
from ebglayout.response import summarize
from ebglayout.sparams import mixed_mode
from ebglayout.spec import load_spec

SPEC = Path(__file__).resolve().parent.parent / "tests" / "reference" / "fullwave" / "hx2_l0_straight3_lossless.toml"


def summary(result) -> dict:
    ref = result.meta["mode_reference_ohm"]
    mm = mixed_mode(result.network, ref["differential"], ref["common"])
    s = summarize(mm.freq_hz, 20 * np.log10(np.abs(mm.scc21)))
    band = s.stopband_hz
    return {"notch_ghz": s.notch_hz / 1e9, "depth_db": s.depth_db,
            "stopband_ghz": None if band is None else (band[1] - band[0]) / 1e9,
            "wall_s": result.meta["wall_s"], "cells": result.meta["cells"], "steps": result.meta["time_steps"],
            "end_db": result.meta["end_energy_db"]}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="skip the naive full-domain run")
    parser.add_argument("--threads", type=int, default=2)
    args = parser.parse_args()
    layout = build_layout(load_spec(SPEC))
    rows = {}
    for preset in ("default", "fine"):
        started = time.monotonic()
        rows[preset] = summary(simulate(layout, preset, threads=args.threads))
        print(f"{preset:<8} {rows[preset]}  ({time.monotonic() - started:.0f} s)", flush=True)
    if not args.quick:
        naive_model = with_port_ohm(build_model(layout, "default", port_ohm=port_impedance(layout)), 50.0)
        rows["naive"] = summary(simulate(layout, "default", threads=args.threads, symmetry="single",
                                         model=naive_model))
        print(f"naive    {rows['naive']}", flush=True)
    error = abs(rows["default"]["notch_ghz"] / rows["fine"]["notch_ghz"] - 1) * 100
    print(f"default notch vs fine: {error:.2f} % (target < 1 %); default wall {rows['default']['wall_s']:.0f} s "
          "(target < 180 s)")
    if "naive" in rows:
        ratio = rows["naive"]["wall_s"] / rows["default"]["wall_s"]
        print(f"naive full-domain one-port-at-a-time / default: {ratio:.2f}x")


if __name__ == "__main__":
    main()
