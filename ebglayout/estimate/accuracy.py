"""The circuit model against a stored full-wave result of the same drawn filter, figure by figure.

A full-wave result (``ebglayout fullwave``: ``<name>.s4p`` and ``<name>.fullwave.json``) is read back through
scikit-rf's Touchstone reader and the model is solved on the result's own frequency grid, both referred to the
mode impedances the result names (``fullwave.mode_reference_ohm``) and the model with perfect conductors (the full-wave runs model copper as lossless, see the
README's full-wave limits), so both curves describe the same idealised board.  Both are summarised by
``response.summarize``, the model around its dip nearest the full-wave notch (``_dip_around``); the figures compared are the ones issue 13 sets goals for (``GOALS``).
"""
from __future__ import annotations

import json
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..response import db20, dip_indices, summarize
from ..sparams import mixed_mode

GOALS = {"notch_straight": 0.015, "notch_other": 0.04, "edge": 0.02, "depth_db": 8.0, "sdd21_db": 0.5,
         "sdd21_below": 0.8}
"""Agreement goals: notch within 1.5 % (straight microstrip rows) or 4 % (bridged, folded, stripline), each
-10 dB stopband edge within 2 % of the notch frequency, depth within 8 dB, |Sdd21| within 0.5 dB below 0.8 x the
notch."""

METRICS = ("notch", "stopband", "depth", "sdd21")

SLOT_CAPACITANCE = ("the model's notch sits high on every straight reference (+1.5 to +1.9 %), the sign of the edge "
                    "term it leaves out: the slot's capacitance to the plane around the cut, 0.15 mm across it, on top "
                    "of the open-end fringing to the plane beyond (Hammerstad's extension assumes an open edge)")
FITTED_LOSS = ("the full-wave line loss is nearly flat with frequency ({}), as a dielectric conductivity fitted to "
               "tan d at one frequency gives, while the model takes the handbook attenuation with a constant tan d, "
               "growing with frequency ({}; D. M. Pozar, Microwave Engineering, 4th ed., eq. 3.198, from memory): "
               "here the reference is the one that is off, see the README's full-wave limits")

KNOWN_MISSES = {
    ("hx2_l0_straight3_h020", "notch"): f"+1.81 % at h 0.2 mm: {SLOT_CAPACITANCE}; over a thicker cavity that "
                                        "term is larger",
    ("hx2_l0_straight3_h020", "stopband"):
        "low edge +2.47 % of the notch (high edge +1.51 %): the band sits where the notch does, see the notch",
    ("hx2_l0_straight3_lossy", "notch"): f"+1.56 % with tan d 0.02: {SLOT_CAPACITANCE}",
    ("hx2_l0_straight3_lossy", "sdd21"):
        "0.51 dB: " + FITTED_LOSS.format("|Sdd21| -0.63 dB at 2 GHz, -0.67 dB at 14 GHz", "-0.17 and -1.28 dB"),
    ("hx2_l0_straight3_patch40", "notch"): f"+1.89 % with the 4.0 mm patch: {SLOT_CAPACITANCE}; a larger share "
                                           "of a shorter cavity",
    ("hx2_l0_straight3_patch40", "stopband"):
        "low edge +2.25 % of the notch (high edge +1.59 %): the band sits where the notch does, see the notch",
    ("hx2_l0_straight3_stagger4", "notch"):
        f"+1.75 % on the smallest cell's dip (the full-wave notch); the three cells' dips sit +1.4, +1.6 and "
        f"+1.8 % high: {SLOT_CAPACITANCE}",
    ("hx2_l2_tx_bridged", "notch"):
        "model 7.20 GHz against a full-wave dip at 6.56 GHz (+9.8 %) that is only 3.7 dB deep and flat from 6.4 to "
        "6.8 GHz, so its centre is loosely defined; the model has two dips (7.02 and 7.20 GHz, one per size), "
        "the full-wave run one: see the depth",
    ("hx2_l2_tx_bridged", "depth"):
        "full-wave dip 3.7 dB, model 23 dB: the bridges tie each patch to the plane around the cut, which the "
        "model takes as the plane beyond (ideal stitching), while the full-wave run ties the two planes only by "
        "electric walls at the ends of its domain (2.5 mm beyond the cut along the pair, default preset); the "
        "bridges' current returns through that plane pair, which loads and damps the patch's LC resonance and "
        "lets power leave through the absorbing sides",
    ("hx2_l2_tx_bridged", "stopband"):
        "the full-wave result never reaches -10 dB (its dip is 3.7 dB), the model's -10 dB band is 6.71-7.43 GHz: "
        "see its depth",
    ("hx2_l3_rx_stripline", "sdd21"):
        "0.88 dB: " + FITTED_LOSS.format("|Sdd21| -0.80 dB at 2 GHz, -0.87 dB at 14 GHz", "-0.23 and -1.67 dB"),
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
            if self.fullwave.notch_at_grid_edge:
                return self.model.depth_db > self.fullwave.threshold_db
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


SETTLED_DB = -30.0
"""A reference counts only if every run's record ended with the field energy at least this far below its peak:
a record stopped earlier is a truncated ring, and its notch, depth and stopband are smeared by the window."""


def stored_cases(folder: Path, settled: bool = True) -> list[str]:
    """Names of the complete stored results (Touchstone and JSON) in ``folder``, sorted; with ``settled`` only
    those whose runs all ended at or below ``SETTLED_DB``, else only those that did not."""
    names = sorted(p.name[:-len(".fullwave.json")] for p in folder.glob("*.fullwave.json")
                   if (folder / (p.name[:-len(".fullwave.json")] + ".s4p")).exists())
    return [n for n in names if _settled(folder, n) == settled]


def _settled(folder: Path, name: str) -> bool:
    data = json.loads((folder / f"{name}.fullwave.json").read_text(encoding="utf-8"))
    return max(data["fullwave"]["end_energy_db"]) <= SETTLED_DB


def compare(folder: Path, name: str, spec_path: Path) -> Comparison:
    """The model of ``spec_path`` against the stored result ``name`` in ``folder``."""
    import skrf

    from ..layout import build_layout
    from ..spec import load_spec
    from .network import filter_network

    data = json.loads((folder / f"{name}.fullwave.json").read_text(encoding="utf-8"))
    reference = skrf.Network(str(folder / f"{name}.s4p"))
    modes = data["fullwave"]["mode_reference_ohm"]
    ref_mm = mixed_mode(reference, modes["differential"], modes["common"])
    freq = ref_mm.freq_hz
    layout = build_layout(load_spec(spec_path))
    model_mm = mixed_mode(filter_network(layout, freq, copper=False), modes["differential"], modes["common"])
    threshold = data["threshold_db"]
    ref_sum = summarize(freq, db20(ref_mm.scc21), threshold)
    notch = ref_sum.notch_hz
    model_db = db20(model_mm.scc21)
    k = int(np.argmin(np.abs(freq - notch)))
    window = _dip_around(model_db, _same_dip(db20(ref_mm.scc21), model_db, k), threshold)
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


def _same_dip(reference: np.ndarray, model: np.ndarray, k: int) -> int:
    """Where to look for the model's dip that answers the reference's dip at ``k``: the model's dip of the same
    rank when both curves have the same number of prominent dips (a staggered row: one per cell size, each
    model dip a little off its own), else ``k`` itself."""
    ours, theirs = dip_indices(reference), dip_indices(model)
    if k in ours and len(ours) == len(theirs):
        return theirs[ours.index(k)]
    return k


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
            f"| `{c.name}` | {c.kind} | {_notch(c)} | {_depth(c.model.depth_db)} / "
            f"{_depth(c.fullwave.depth_db)} dB | {_band(c.model.stopband_hz)} / {_band(c.fullwave.stopband_hz)} | "
            f"{edges} | {c.sdd21_error_db:.2f} dB | {', '.join(missed) or 'none'} |")
    return "\n".join(rows)


def _notch(c: Comparison) -> str:
    if c.fullwave.notch_at_grid_edge:
        return (f"full-wave: no dip (lowest at the grid's edge, {c.fullwave.notch_hz / 1e9:.3f} GHz); goal: the model "
                "rejects less than the threshold too")
    return (f"{c.model.notch_hz / 1e9:.3f} / {c.fullwave.notch_hz / 1e9:.3f} GHz ({c.notch_error * 100:+.2f} %, "
            f"goal {c.notch_goal * 100:.1f} %)")


def _depth(db: float) -> str:
    return "below -60" if db < -60 else f"{db:.1f}"


def _band(band) -> str:
    return "none" if band is None else f"{band[0] / 1e9:.3f}-{band[1] / 1e9:.3f} GHz"
