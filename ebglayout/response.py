"""Reading a transmission curve: notch, depth and stopband, and the result file of a simulated or modelled filter.

One home for both the full-wave result and the fast model, so their summaries compare key for key.  Curves are
|S| in dB on a frequency grid in Hz; a stopband is where the curve is at or below a threshold (-10 dB unless
told), its edges interpolated linearly in dB between the grid points either side.
"""
from __future__ import annotations

import json
import math
from dataclasses import dataclass
from functools import partial
from pathlib import Path
from typing import Sequence

import numpy as np

from . import CAUTION
from .errors import EbgError
from .units import round_hz

DEFAULT_THRESHOLD_DB = -10.0
"""Stopband threshold: about 10 dB of common-mode rejection is what typical practice asks for (common practice)."""
DB_FLOOR = -300.0
"""dB value given to |S| = 0 (an ideal notch exactly on a grid point), so every number stays finite."""
HZ_DECIMALS = 0
"""Frequencies in result files are rounded to 1 Hz."""
_hz = partial(round_hz, decimals=HZ_DECIMALS)
DB_DECIMALS = 4
"""dB values in result files are rounded to 0.0001 dB."""
RESPONSE_CAUTION = ("S-parameters from a simulation or a model are estimates of one drawn geometry; " + CAUTION)
PORT_ORDER_NOTE = "single-ended ports: 1 P near end, 2 N near end, 3 P far end, 4 N far end"


def db20(s: np.ndarray) -> np.ndarray:
    """20 log10 |s|, with |s| = 0 given DB_FLOOR."""
    mag = np.abs(np.asarray(s))
    with np.errstate(divide="ignore"):
        return np.maximum(20.0 * np.log10(mag), DB_FLOOR)


@dataclass(frozen=True)
class CurveSummary:
    """What one curve says: the notch, its depth and the stopband around it (see ``summarize``).

    ``depth_db`` is the deepest sampled value (dB; -25 means 25 dB of rejection).  ``notch_at_grid_edge``
    is True when the deepest point is the first or last frequency, so the true notch may lie outside the
    sweep; ``stopband_clipped`` says per edge (low, high) whether the stopband runs into the end of the sweep, so
    that edge is the sweep's limit, not the curve's.
    """

    notch_hz: float
    depth_db: float
    stopband_hz: tuple[float, float] | None
    threshold_db: float
    notch_at_grid_edge: bool = False
    stopband_clipped: tuple[bool, bool] = (False, False)

    @property
    def stopband_width_hz(self) -> float:
        return 0.0 if self.stopband_hz is None else self.stopband_hz[1] - self.stopband_hz[0]

    def as_json(self) -> dict:
        band = None if self.stopband_hz is None else [_hz(self.stopband_hz[0]), _hz(self.stopband_hz[1])]
        return {"notch_hz": _hz(self.notch_hz), "depth_db": _db(self.depth_db), "stopband_hz": band,
                "threshold_db": _db(self.threshold_db), "notch_at_grid_edge": self.notch_at_grid_edge,
                "stopband_clipped": list(self.stopband_clipped)}


DIP_PROMINENCE_DB = 3.0
"""A local minimum of a transmission curve counts as a dip when it lies at least this far below the lower of the
highest points between it and its neighbouring minima (or the grid's ends)."""


def dip_indices(s_db) -> list[int]:
    """Grid indices of the prominent dips (``DIP_PROMINENCE_DB``) of one curve in dB, low to high frequency."""
    curve = np.asarray(s_db, dtype=float)
    minima = [i for i in range(1, len(curve) - 1) if curve[i] < curve[i - 1] and curve[i] <= curve[i + 1]]
    bounds = [0] + minima + [len(curve) - 1]
    return [i for j, i in enumerate(minima)
            if min(curve[bounds[j]:i + 1].max(), curve[i:bounds[j + 2] + 1].max()) - curve[i] >= DIP_PROMINENCE_DB]


def summarize(freq_hz, s_db, threshold_db: float = DEFAULT_THRESHOLD_DB) -> CurveSummary:
    """Notch, depth and stopband of one curve (|S| in dB on an increasing grid in Hz).

    The notch frequency is the vertex of the parabola through |S|^2 at the deepest grid point and its two
    neighbours: near a resonance notch |S|^2 grows as the square of the detuning, so the vertex finds the
    centre between grid points (kept within the neighbours; the grid point itself at the sweep's ends).
    ``depth_db`` is the deepest sampled value, so it never claims more rejection than was computed.  The
    stopband is the one run of the curve at or below ``threshold_db`` that holds the deepest grid point, its
    edges interpolated linearly in dB; when a curve has two separate dips, the stopband is the one around the
    deeper notch, and the other dip is not reported (``guaranteed_stopband`` lists every band).  None when the
    curve never reaches the threshold.
    """
    freq, curve = _curve(freq_hz, s_db, "s_db")
    _check_threshold(threshold_db)
    k = int(np.argmin(curve))
    band, clipped = None, (False, False)
    for low, high, low_clipped, high_clipped in _runs(freq, curve, threshold_db):
        if low <= freq[k] <= high:
            band, clipped = (low, high), (low_clipped, high_clipped)
            break
    return CurveSummary(notch_hz=_vertex(freq, curve, k), depth_db=float(curve[k]), stopband_hz=band,
                        threshold_db=float(threshold_db), notch_at_grid_edge=k in (0, len(freq) - 1),
                        stopband_clipped=clipped)


def guaranteed_stopband(freq_hz, curves_db: Sequence, threshold_db: float = DEFAULT_THRESHOLD_DB
                        ) -> list[tuple[float, float]]:
    """Bands (low, high) in Hz where every curve is at or below ``threshold_db``: the frequencies rejected at
    every tolerance corner.  Each curve's runs below the threshold (edges interpolated linearly in dB) are
    intersected; empty when no frequency is rejected by all of them."""
    if len(curves_db) == 0:
        raise EbgError("curves: none given; the guaranteed stopband needs at least one curve")
    _check_threshold(threshold_db)
    bands: list[tuple[float, float]] | None = None
    for i, s_db in enumerate(curves_db):
        freq, curve = _curve(freq_hz, s_db, f"curves_db[{i}]")
        runs = [(low, high) for low, high, _, _ in _runs(freq, curve, threshold_db)]
        bands = runs if bands is None else _intersect(bands, runs)
    return bands or []


def corners_json(freq_hz, scc21_db_by_corner: dict, threshold_db: float = DEFAULT_THRESHOLD_DB) -> dict:
    """Scc21 over tolerance corners (label -> curve in dB, one grid): each corner's summary in the given order,
    the bands every corner rejects (``guaranteed_stopband``) and the shallowest corner's depth."""
    if not scc21_db_by_corner:
        raise EbgError("corners: none given; need at least one labelled Scc21 curve")
    summaries = {label: summarize(freq_hz, curve, threshold_db) for label, curve in scc21_db_by_corner.items()}
    bands = guaranteed_stopband(freq_hz, list(scc21_db_by_corner.values()), threshold_db)
    return {"threshold_db": _db(threshold_db),
            "corners": [{"label": str(label), **s.as_json()} for label, s in summaries.items()],
            "guaranteed_stopband_hz": [[_hz(low), _hz(high)] for low, high in bands],
            "worst_depth_db": _db(max(s.depth_db for s in summaries.values()))}


def response_json(mm, *, source: str, target_hz: float | None, threshold_db: float = DEFAULT_THRESHOLD_DB,
                  extra: dict | None = None) -> dict:
    """The result file's content for one 4-port's mixed-mode terms (``sparams.MixedMode``), in a fixed key order.

    Keys: ``source``, ``port_order``, ``target_hz``, ``threshold_db``, ``scc21`` (the ``CurveSummary``),
    ``sdd21_at_notch_db`` (at Scc21's deepest grid point), ``scc21_at_target_db``, ``sdd21_at_target_db`` (linear in dB between grid points;
    None without a target or outside the sweep), ``target_in_stopband``, ``sdd21_worst_db`` and
    ``sdc21_worst_db`` (the highest mode conversion over the sweep), ``caution``, then ``extra``'s keys in their
    order, then the curves ``freq_hz``, ``scc21_db``, ``sdd21_db``.  Hz rounded to 1 Hz, dB to 0.0001 dB.
    Tolerance corners go in as ``extra={"tolerance": corners_json(...)}`` (the plot shades their common band).
    """
    if not isinstance(source, str) or not source.strip():
        raise EbgError(f"source = {source!r}: must name where the S-parameters came from")
    freq, scc21 = _curve(mm.freq_hz, db20(mm.scc21), "scc21")
    sdd21, sdc21 = db20(mm.sdd21), db20(mm.sdc21)
    _curve(freq, sdd21, "sdd21")
    _curve(freq, sdc21, "sdc21")
    summary = summarize(freq, scc21, threshold_db)
    notch = int(np.argmin(scc21))
    inside = target_hz is not None and freq[0] <= target_hz <= freq[-1]
    band = summary.stopband_hz
    out = {"source": source, "port_order": PORT_ORDER_NOTE,
           "target_hz": None if target_hz is None else _hz(target_hz), "threshold_db": _db(threshold_db),
           "scc21": summary.as_json(), "sdd21_at_notch_db": _db(sdd21[notch]),
           "scc21_at_target_db": _db(np.interp(target_hz, freq, scc21)) if inside else None,
           "sdd21_at_target_db": _db(np.interp(target_hz, freq, sdd21)) if inside else None,
           "target_in_stopband": bool(inside and band is not None and band[0] <= target_hz <= band[1]),
           "sdd21_worst_db": _db(sdd21.min()), "sdc21_worst_db": _db(sdc21.max()), "caution": RESPONSE_CAUTION}
    for key, value in (extra or {}).items():
        if key in out or key in ("freq_hz", "scc21_db", "sdd21_db"):
            raise EbgError(f"extra key {key!r}: clashes with a result key; rename it")
        out[key] = value
    out["freq_hz"] = [_hz(f) for f in freq]
    out["scc21_db"] = [_db(v) for v in scc21]
    out["sdd21_db"] = [_db(v) for v in sdd21]
    return out


def response_json_text(data: dict) -> str:
    """The result file's bytes: the dict's own key order, two-space indent, a final newline."""
    return json.dumps(data, indent=2, allow_nan=False) + "\n"


@dataclass(frozen=True)
class ObservedNotch:
    """The common-mode notch a result file reports, with where it came from."""

    notch_hz: float
    source: str
    path: str
    depth_db: float | None = None
    reached_threshold: bool = True
    """False when the curve never got down to the file's threshold (a shallow notch: its frequency is weak
    evidence)."""


def read_observed_notch(path) -> ObservedNotch:
    """``scc21.notch_hz`` of a result file written by the full-wave command or the fast model.

    One-line errors (EbgError) name the file and what is wrong: unreadable, not JSON, no ``scc21.notch_hz``,
    not a frequency, or a notch on the edge of the sweep (the true notch may lie outside it).
    """
    name = str(path)
    try:
        text = Path(path).read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as err:
        raise EbgError(f"--result = {name}: cannot be read ({getattr(err, 'strerror', None) or err})") from None
    try:
        data = json.loads(text)
    except json.JSONDecodeError as err:
        raise EbgError(f"--result = {name}: not JSON (line {err.lineno}, column {err.colno}: {err.msg})") from None
    scc21 = data.get("scc21") if isinstance(data, dict) else None
    if not isinstance(scc21, dict) or "notch_hz" not in scc21:
        raise EbgError(f"--result = {name}: has no key scc21.notch_hz (a result file of the full-wave command or "
                       "the fast model carries it)")
    notch = scc21["notch_hz"]
    if isinstance(notch, bool) or not isinstance(notch, (int, float)) or not math.isfinite(notch) or notch <= 0:
        raise EbgError(f"--result = {name}: scc21.notch_hz = {notch!r}: must be a frequency in Hz > 0")
    if scc21.get("notch_at_grid_edge"):
        raise EbgError(f"--result = {name}: scc21.notch_hz = {notch / 1e9:.6g} GHz lies on the edge of the sweep, "
                       "so the true notch may lie outside it; widen the sweep and run again")
    source = data.get("source")
    depth = scc21.get("depth_db")
    return ObservedNotch(notch_hz=float(notch), source=source if isinstance(source, str) else "(not stated)",
                         path=name, depth_db=depth if isinstance(depth, (int, float)) else None,
                         reached_threshold=scc21.get("stopband_hz") is not None)


def format_response(data: dict) -> str:
    """Terminal summary of a result file's content."""
    cc = data["scc21"]
    lines = [f"source: {data['source']}"]
    note = " (at the edge of the sweep: the true notch may lie outside it)" if cc.get("notch_at_grid_edge") else ""
    lines.append(f"Scc21 notch {cc['notch_hz'] / 1e9:.4g} GHz, depth {cc['depth_db']:.1f} dB{note}")
    if cc["stopband_hz"] is None:
        lines.append(f"Scc21 stopband: none (never at or below {cc['threshold_db']:g} dB)")
    else:
        low, high = cc["stopband_hz"]
        lines.append(f"Scc21 stopband ({cc['threshold_db']:g} dB): {low / 1e9:.4g} - {high / 1e9:.4g} GHz")
    if data.get("target_hz") is not None and data.get("scc21_at_target_db") is not None:
        lines.append(f"at target {data['target_hz'] / 1e9:.4g} GHz: Scc21 {data['scc21_at_target_db']:.1f} dB, "
                     f"Sdd21 {data['sdd21_at_target_db']:.2f} dB")
    lines.append(f"Sdd21 at the notch {data['sdd21_at_notch_db']:.2f} dB, worst {data['sdd21_worst_db']:.2f} dB; "
                 f"highest Sdc21 {data['sdc21_worst_db']:.1f} dB")
    lines.append(f"caution: {data['caution']}")
    return "\n".join(lines)


def _curve(freq_hz, s_db, name: str) -> tuple[np.ndarray, np.ndarray]:
    """The grid and curve as float arrays, or a one-line error naming what is wrong."""
    freq = np.asarray(freq_hz, dtype=float)
    curve = np.asarray(s_db, dtype=float)
    if freq.ndim != 1 or curve.ndim != 1 or len(freq) != len(curve) or len(freq) < 2:
        raise EbgError(f"{name}: {curve.shape} values on a grid of {freq.shape}: need one value per frequency, "
                       "at least two")
    if not np.all(np.isfinite(freq)) or not np.all(np.diff(freq) > 0):
        raise EbgError("freq_hz: must be finite and strictly increasing")
    bad = ~np.isfinite(curve)
    if bad.any():
        first = int(np.flatnonzero(bad)[0])
        raise EbgError(f"{name} = {curve[first]} at {freq[first] / 1e9:.6g} GHz ({int(bad.sum())} point(s)): "
                       "every value must be a finite number of dB")
    return freq, curve


def _check_threshold(threshold_db: float) -> None:
    if isinstance(threshold_db, bool) or not isinstance(threshold_db, (int, float)) or not math.isfinite(
            threshold_db):
        raise EbgError(f"threshold_db = {threshold_db!r}: must be a finite number of dB")


def _runs(freq: np.ndarray, curve: np.ndarray, threshold_db: float) -> list[tuple[float, float, bool, bool]]:
    """Every run of grid points at or below the threshold as (low, high, low_clipped, high_clipped): each edge
    interpolated linearly in dB towards the neighbouring point above, or the sweep's end (clipped)."""
    below = curve <= threshold_db
    if not below.any():
        return []
    change = np.flatnonzero(np.diff(below.astype(np.int8)))
    starts = [0] if below[0] else []
    starts += [int(i) + 1 for i in change if below[i + 1]]
    stops = [int(i) for i in change if below[i]]
    stops += [len(curve) - 1] if below[-1] else []
    runs = []
    for a, b in zip(starts, stops):
        low = freq[0] if a == 0 else _crossing(freq, curve, a - 1, a, threshold_db)
        high = freq[-1] if b == len(curve) - 1 else _crossing(freq, curve, b, b + 1, threshold_db)
        runs.append((float(low), float(high), a == 0, b == len(curve) - 1))
    return runs


def _vertex(freq: np.ndarray, curve: np.ndarray, k: int) -> float:
    """Frequency of the minimum of the parabola through |S|^2 (linear power) at grid points k-1, k, k+1."""
    if k == 0 or k == len(freq) - 1:
        return float(freq[k])
    x = freq[k - 1:k + 2]
    y = 10.0 ** (curve[k - 1:k + 2] / 10.0)
    # divided differences: y = y0 + d01 (f - x0) + d012 (f - x0)(f - x1); the vertex is where the slope is 0
    d01 = (y[1] - y[0]) / (x[1] - x[0])
    d12 = (y[2] - y[1]) / (x[2] - x[1])
    d012 = (d12 - d01) / (x[2] - x[0])
    if not d012 > 0:
        return float(freq[k])
    return float(np.clip((x[0] + x[1]) / 2 - d01 / (2 * d012), x[0], x[2]))


def _crossing(freq: np.ndarray, curve: np.ndarray, i: int, j: int, threshold_db: float) -> float:
    """Frequency between grid points i and j where the straight line through their dB values meets the threshold."""
    t = (threshold_db - curve[i]) / (curve[j] - curve[i])
    return float(freq[i] + t * (freq[j] - freq[i]))


def _intersect(a: list[tuple[float, float]], b: list[tuple[float, float]]) -> list[tuple[float, float]]:
    """Intersection of two sorted lists of disjoint closed intervals."""
    out, i, j = [], 0, 0
    while i < len(a) and j < len(b):
        low, high = max(a[i][0], b[j][0]), min(a[i][1], b[j][1])
        if low <= high:
            out.append((low, high))
        if a[i][1] < b[j][1]:
            i += 1
        else:
            j += 1
    return out



def _db(value: float) -> float:
    return float(round(float(value), DB_DECIMALS))
