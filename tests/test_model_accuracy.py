"""The circuit model against every stored full-wave reference (openEMS runs, tests/reference/fullwave/), with the
agreement goals of issue 13 (``accuracy.GOALS``), and the model's edge extension against a handbook example.

The reference curves are read from the stored Touchstone files through scikit-rf; the model is solved on their
grid with the same port impedance and perfect conductors (the full-wave runs model lossless copper).  Figures
the model still misses are expected failures (strict: a fix shows up) with their measured numbers and reason in
``accuracy.KNOWN_MISSES`` and in the README's table.
"""
from __future__ import annotations

from pathlib import Path

import pytest
from shapely.geometry import box

from ebglayout.estimate import accuracy
from ebglayout.estimate.network import edge_extension

ROOT = Path(__file__).resolve().parent.parent
FOLDER = ROOT / "tests" / "reference" / "fullwave"
CASES = accuracy.stored_cases(FOLDER)
_SOLVED: dict[str, accuracy.Comparison] = {}


def _comparison(name: str) -> accuracy.Comparison:
    if name not in _SOLVED:
        _SOLVED[name] = accuracy.compare(FOLDER, name, accuracy.spec_for(FOLDER, name, ROOT / "samples"))
    return _SOLVED[name]


def _params():
    for name in CASES:
        for metric in accuracy.METRICS:
            reason = accuracy.KNOWN_MISSES.get((name, metric))
            marks = [pytest.mark.xfail(strict=True, reason=reason)] if reason else []
            yield pytest.param(name, metric, marks=marks, id=f"{name}-{metric}")


def test_there_are_stored_references():
    """At least the two references issue 12 stored (straight lossless and bridged lossy) are present."""
    assert {"hx2_l0_straight3_lossless", "hx2_l2_tx_bridged"} <= set(CASES)


@pytest.mark.parametrize("name, metric", list(_params()))
def test_model_meets_the_goal_against_full_wave(name, metric):
    c = _comparison(name)
    assert c.meets(metric), (
        f"{name} {metric}: notch {c.model.notch_hz:.4g} vs {c.fullwave.notch_hz:.4g} Hz ({c.notch_error:+.2%}), "
        f"depth {c.model.depth_db:.1f} vs {c.fullwave.depth_db:.1f} dB, stopband {c.model.stopband_hz} vs "
        f"{c.fullwave.stopband_hz}, |Sdd21| difference {c.sdd21_error_db:.2f} dB")


def test_every_known_miss_names_a_figure_the_goals_cover():
    """A miss names one of the compared figures (references still arriving from their branch may be listed
    before they are stored; a stored one is held by the strict expected failure above)."""
    assert {metric for _, metric in accuracy.KNOWN_MISSES} <= set(accuracy.METRICS)


def test_edge_extension_matches_the_handbook_patch_example():
    """C. A. Balanis, Antenna Theory, 3rd ed., example 14.1 (from memory): er 2.2, h 0.1588 cm, W 1.186 cm give
    dL = 0.081 cm by Hammerstad's open-end extension (eq. 14-2, with the simpler eeff of eq. 14-1; ours takes
    Hammerstad and Jensen's eeff, which moves dL by well under 2 %)."""
    assert edge_extension(box(0, 0, 20.0, 11.86), 1.588, 2.2) == pytest.approx(0.81, rel=0.02)


def test_edge_extension_is_a_fraction_of_the_height_for_wide_patches():
    """For W >> h the extension tends to 0.412 h (eeff + 0.3) / (eeff - 0.258), about 0.45 h near er 4
    (Hammerstad 1975, from memory): it scales with the height and hardly with the width."""
    thin = edge_extension(box(0, 0, 4.6, 2.4), 0.1, 4.1)
    assert 0.42 * 0.1 < thin < 0.5 * 0.1
    assert edge_extension(box(0, 0, 9.2, 4.8), 0.1, 4.1) == pytest.approx(thin, rel=0.01)
