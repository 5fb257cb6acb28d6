"""The circuit model against a stored full-wave result of the same drawn filter, figure by figure.

A full-wave result (``ebglayout fullwave``: ``<name>.s4p`` and ``<name>.fullwave.json``) is read back through
scikit-rf's Touchstone reader and the model is solved on the result's own frequency grid, referred to the
result's port impedance and with perfect conductors (the full-wave runs model copper as lossless, see the
README's full-wave limits), so both curves describe the same idealised board.  Both are summarised by
``response.summarize``, the model around its dip nearest the full-wave notch (``_dip_around``); the figures compared are the ones issue 13 sets goals for (``GOALS``).
"""
from __future__ import annotations

import json
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..response import db20, summarize
from ..sparams import mixed_mode

GOALS = {"notch_straight": 0.015, "notch_other": 0.04, "edge": 0.02, "depth_db": 8.0, "sdd21_db": 0.5,
         "sdd21_below": 0.8}
"""Agreement goals: notch within 1.5 % (straight microstrip rows) or 4 % (bridged, folded, stripline), each
-10 dB stopband edge within 2 % of the notch frequency, depth within 8 dB, |Sdd21| within 0.5 dB below 0.8 x the
notch."""

METRICS = ("notch", "stopband", "depth", "sdd21")

KNOWN_MISSES = {
    ("hx2_l0_straight3_h020", "notch"):
        "+1.80 % at h 0.2 mm; the model's notch sits high on every straight reference (+1.4 to +1.9 %), the "
        "sign of the edge term it leaves out: the slot's capacitance to the plane around the cut, 0.15 mm across "
        "it, on top of the open-end fringing to the plane beyond (Hammerstad's extension assumes an open edge); "
        "over a thicker cavity that term is larger",
    ("hx2_l0_straight3_h020", "stopband"):
        "low edge +2.63 % of the notch (high edge +0.99 %): the band sits where the notch does, see the notch",
    ("hx2_l0_straight3_lossy", "stopband"):
        "the model's dip is -6.3 dB against the full-wave -10.2 dB, so it has no -10 dB band where the full-wave "
        "one is 0.4 % wide: with tan d 0.02 the cavity's Q is near its loss limit, and the model's loss is the "
        "handbook's constant tan d, higher at the notch than the full-wave run's (see |Sdd21|)",
    ("hx2_l0_straight3_lossy", "sdd21"):
        "0.55 dB: the full-wave line loss is nearly flat with frequency (|Sdd21| -0.67 dB at 1.3 GHz, -0.75 dB "
        "at 14.4 GHz), as a dielectric conductivity fitted to tan d at one frequency gives, and smaller than the "
        "handbook attenuation with a constant tan d the model uses (D. M. Pozar, Microwave Engineering, 4th ed., "
        "eq. 3.198; from memory; model -1.66 dB at 14.4 GHz)",
    ("hx2_l0_straight3_patch40", "notch"):
        "+1.89 % with the 4.0 mm patch: the same missing slot capacitance as at h 0.2 mm, a larger share of a "
        "shorter cavity",
    ("hx2_l0_straight3_patch40", "stopband"):
        "low edge +2.36 % of the notch (high edge +1.46 %): the band sits where the notch does, see the notch",
    ("hx2_l0_straight3_stagger4", "notch"):
        "+1.74 % on the smallest cell's dip (the full-wave notch); the three cells' dips sit +1.4, +1.5 and "
        "+1.7 % high, as on the single-size rows (missing slot capacitance)",
    ("hx2_l0_straight3_stagger4", "stopband"):
        "the full-wave dip only just passes -10 dB (-10.9 dB, 0.3 % wide); the model's same dip is -7.9 dB, so "
        "it has no band",
    ("hx2_l2_tx_bridged", "depth"):
        "full-wave dip 4.3 dB, model 23 dB: the bridges tie each patch to the plane around the cut, which the "
        "model takes as the plane beyond (ideal stitching), while the full-wave run ties the two planes only by "
        "electric walls at the ends of its domain (2.5 mm beyond the cut along the pair, default preset); the "
        "bridges' current returns through that plane pair, which loads and damps the patch's LC resonance and "
        "lets power leave through the absorbing sides",
    ("hx2_l2_tx_bridged", "stopband"):
        "the full-wave result never reaches -10 dB (its dip is 4.3 dB), the model's -10 dB band is 6.72-7.45 GHz: "
        "see its depth",
}
"""Figures where the model misses its goal after the physics above, with the reason; the tests mark these
expected failures (strict, so a fix shows) and the README's table says so."""


@dataclass(frozen=True)
class Comparison:
    """One stored case: both summaries and the figures the goals apply to."""

    name: str
    kind: str
    model: object
    fullwave: object
    notch_error: float
    edge_errors: tuple[float, float] | None
    depth_error_db: float
    sdd21_error_db: float

    @property
    def notch_goal(self) -> float:
        return GOALS["notch_straight"] if self.kind == "straight" else GOALS["notch_other"]

    def meets(self, metric: str) -> bool:
        """Whether one figure (``METRICS``) is within its goal; a stopband on one side only is a miss."""
        if metric == "notch":
            return abs(self.notch_error) <= self.notch_goal
        if metric == "stopband":
            if self.model.stopband_hz is None and self.fullwave.stopband_hz is None:
                return True
            return self.edge_errors is not None and max(map(abs, self.edge_errors)) <= GOALS["edge"]
        if metric == "depth":
            return abs(self.depth_error_db) <= GOALS["depth_db"]
        if metric == "sdd21":
            return self.sdd21_error_db <= GOALS["sdd21_db"]
        raise ValueError(metric)


def stored_cases(folder: Path) -> list[str]:
    """Names of the complete stored results (Touchstone and JSON) in ``folder``, sorted."""
    return sorted(p.name[:-len(".fullwave.json")] for p in folder.glob("*.fullwave.json")
                  if (folder / (p.name[:-len(".fullwave.json")] + ".s4p")).exists())


def compare(folder: Path, name: str, spec_path: Path) -> Comparison:
    """The model of ``spec_path`` against the stored result ``name`` in ``folder``."""
    import skrf

    from ..layout import build_layout
    from ..spec import load_spec
    from .network import filter_network

    data = json.loads((folder / f"{name}.fullwave.json").read_text(encoding="utf-8"))
    reference = skrf.Network(str(folder / f"{name}.s4p"))
    ref_mm = mixed_mode(reference)
    freq = ref_mm.freq_hz
    layout = build_layout(load_spec(spec_path))
    z0 = float(np.real(reference.z0[0, 0]))
    model_mm = mixed_mode(filter_network(layout, freq, z0_ohm=z0, copper=False))
    threshold = data["threshold_db"]
    ref_sum = summarize(freq, db20(ref_mm.scc21), threshold)
    notch = ref_sum.notch_hz
    model_db = db20(model_mm.scc21)
    window = _dip_around(model_db, int(np.argmin(np.abs(freq - notch))), threshold)
    mod_sum = summarize(freq[window], model_db[window], threshold)
    edges = None
    if ref_sum.stopband_hz is not None and mod_sum.stopband_hz is not None:
        edges = tuple((m - r) / notch for m, r in zip(mod_sum.stopband_hz, ref_sum.stopband_hz))
    below = freq < GOALS["sdd21_below"] * notch
    sdd = float(np.max(np.abs(db20(model_mm.sdd21[below]) - db20(ref_mm.sdd21[below])))) if below.any() else math.nan
    spec = layout.spec
    kind = "straight" if spec.style == "straight" and not layout.stackup.stripline else spec.style
    if layout.stackup.stripline:
        kind = f"{kind}, stripline"
    return Comparison(name, kind, mod_sum, ref_sum, mod_sum.notch_hz / notch - 1, edges,
                      mod_sum.depth_db - ref_sum.depth_db, sdd)


def _dip_around(curve: np.ndarray, k: int, threshold_db: float) -> slice:
    """The model's dip that answers the full-wave notch: from grid point ``k`` (the full-wave notch) downhill to
    the nearest local minimum, widened to the local maxima on either side and to the whole run below
    ``threshold_db`` it lies in (its stopband).  A row of staggered sizes has one dip per size and the deepest
    may be another cell's in each curve; this compares the same cell's dip."""
    while 0 < k < len(curve) - 1 and min(curve[k - 1], curve[k + 1]) < curve[k]:
        k = k - 1 if curve[k - 1] < curve[k + 1] else k + 1
    lo, hi = k, k
    while lo > 0 and curve[lo - 1] >= curve[lo]:
        lo -= 1
    while hi < len(curve) - 1 and curve[hi + 1] >= curve[hi]:
        hi += 1
    while lo > 0 and curve[lo - 1] <= threshold_db:
        lo -= 1
    while hi < len(curve) - 1 and curve[hi + 1] <= threshold_db:
        hi += 1
    return slice(lo, hi + 1)


def spec_for(folder: Path, name: str, samples: Path) -> Path:
    """The spec a stored case was made from: beside it in ``folder``, else the bundled sample of that name."""
    here = folder / f"{name}.toml"
    return here if here.exists() else samples / f"{name}.toml"


def table(comparisons: list[Comparison]) -> str:
    """The README's table of model versus full-wave (Markdown)."""
    rows = ["| case | kind | notch, model / full-wave | depth, model / full-wave | -10 dB stopband, model / "
            "full-wave | edge errors (of the notch) | worst \\|Sdd21\\| difference below 0.8 x notch | goals missed |",
            "|---|---|---|---|---|---|---|---|"]
    for c in comparisons:
        missed = [m for m in METRICS if not c.meets(m)]
        edges = "-" if c.edge_errors is None else " / ".join(f"{e * 100:+.2f} %" for e in c.edge_errors)
        rows.append(
            f"| `{c.name}` | {c.kind} | {c.model.notch_hz / 1e9:.3f} / {c.fullwave.notch_hz / 1e9:.3f} GHz "
            f"({c.notch_error * 100:+.2f} %, goal {c.notch_goal * 100:.1f} %) | {_depth(c.model.depth_db)} / "
            f"{_depth(c.fullwave.depth_db)} dB | {_band(c.model.stopband_hz)} / {_band(c.fullwave.stopband_hz)} | "
            f"{edges} | {c.sdd21_error_db:.2f} dB | {', '.join(missed) or 'none'} |")
    return "\n".join(rows)


def _depth(db: float) -> str:
    return "below -60" if db < -60 else f"{db:.1f}"


def _band(band) -> str:
    return "none" if band is None else f"{band[0] / 1e9:.3f}-{band[1] / 1e9:.3f} GHz"
