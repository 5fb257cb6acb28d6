"""Speed of the rejection model: one filter's 4-port at 2,000 frequencies, and all tolerance corners.

Targets (issue 13): one response at 2,000 points under 20 ms, all corners under 0.5 s.  Times are medians of
repeated runs in this process (the cavity modes of each drawn shape are solved on first use and cached, as in
a real run; the first, cold run is reported on its own).  The reference measured in the same run: scikit-rf's
own single-ended to mixed-mode conversion (``Network.se2gmm``) of the same 2,000-point 4-port, a fixed piece of
well-known library work on the same data, so the ratios carry over between machines and loads.

    python benchmarks/model_bench.py [--runs 5]
"""
from __future__ import annotations

import argparse
import platform
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "benchmarks"))

from ebglayout.estimate.band import estimate_layout  # noqa: E402
from ebglayout.estimate.network import filter_network  # noqa: E402
from ebglayout.estimate import rejection  # noqa: E402
from ebglayout.layout import build_layout  # noqa: E402
from ebglayout.spec import load_spec  # noqa: E402
from board_bench import time_median  # noqa: E402  (one median timer for the benchmarks)

SAMPLES = ("hx2_l0_tx_straight", "hx2_l2_tx_bridged", "hx2_l1_rx_folded", "hx2_l3_rx_stripline")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=5)
    args = parser.parse_args()
    import skrf

    print(f"{platform.platform()}, {platform.processor() or platform.machine()}, Python {platform.python_version()}, "
          f"numpy {np.__version__}, scikit-rf {skrf.__version__}")
    print(f"{'sample':<22} {'cold 4-port':>11} {'4-port':>8} {'ref':>7} {'ratio':>6} {'corners':>8} {'ratio':>6}")
    for name in SAMPLES:
        layout = build_layout(load_spec(ROOT / "samples" / f"{name}.toml"))
        est = estimate_layout(layout)
        freq = rejection.sweep(layout, [layout.spec.target_hz] + [c.notch_hz for c in est.cells], points=2000)
        start = time.perf_counter()
        network = filter_network(layout, freq)
        cold = time.perf_counter() - start
        warm = time_median(args.runs, lambda: filter_network(layout, freq))

        def reference():
            copy = network.copy()
            copy.se2gmm(p=2)

        ref = time_median(args.runs, reference)
        corners_freq = rejection.sweep(layout, [layout.spec.target_hz] + [c.notch_hz for c in est.cells])

        def corners():
            rejection._SOLVED.clear()
            rejection.model_rejection(layout, corners_freq)

        corners()  # the etched layouts' cavity modes are solved and cached on the first run, as in a real run
        all_corners = time_median(max(1, args.runs // 2), corners)
        print(f"{name:<22} {cold * 1e3:9.1f}ms {warm * 1e3:6.1f}ms {ref * 1e3:5.1f}ms {warm / ref:6.2f} "
              f"{all_corners:7.2f}s {all_corners / ref:6.0f}")
    print("4-port: 2,000 frequencies (target < 20 ms); corners: the nominal and 16 corners at the estimate's "
          f"{rejection.POINTS} points, the nominal's mixed-mode terms and each corner's Scc21 included (target < 0.5 s); ref: scikit-rf se2gmm of the "
          "2,000-point 4-port; ratio = time / ref")


if __name__ == "__main__":
    main()
