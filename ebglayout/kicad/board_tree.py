"""Small helpers over parsed S-expression trees (lists whose first item is the head), shared by the board readers.

The tree path is the reference every fast path must agree with: these helpers read one item's fields the way the
bulk readers (``board_bulk.py``, ``board_footprints.py``) read many at once.
"""
from __future__ import annotations

import math

import numpy as np

from ..path import piece_points
from ..spec import Arc
from .sexpr import Quoted, unescape


def _child(node: list | None, head: str) -> list | None:
    if node is None:
        return None
    for item in node:
        if isinstance(item, list) and item and item[0] == head:
            return item
    return None


def _children(node: list, head: str) -> list[list]:
    return [item for item in node if isinstance(item, list) and item and item[0] == head]


def _atom(node: list, head: str, default=None):
    child = _child(node, head)
    return child[1] if child is not None and len(child) > 1 else default


def _num(node: list, head: str) -> float | None:
    value = _atom(node, head)
    return float(value) if value is not None and _is_number(value) else None


def _xy(node: list, head: str) -> tuple[float, float]:
    child = _child(node, head)
    if child is None or len(child) < 3:
        raise ValueError(f"missing ({head} X Y)")
    if not (_is_number(child[1]) and _is_number(child[2])):
        raise ValueError(f"({head} {child[1]} {child[2]}) must hold two finite numbers")
    return float(child[1]), float(child[2])


def _is_number(value) -> bool:
    if not isinstance(value, str) or isinstance(value, Quoted):
        return False
    try:
        return math.isfinite(float(value))
    except ValueError:
        return False


def _as_token(value) -> bytes:
    if isinstance(value, Quoted):
        return b'"' + value.replace("\\", "\\\\").replace('"', '\\"').encode("utf-8") + b'"'
    return str(value).encode("utf-8")


def _atom_text(token: bytes) -> str:
    """An atom as the tree holds it: a quoted string unescaped (a ``Quoted``), a bare word as it is."""
    text = token.decode("utf-8")
    return Quoted(unescape(text[1:-1])) if text[:1] == '"' else text


def _text(token: bytes) -> str:
    text = token.decode("utf-8")
    return unescape(text[1:-1]) if text[:1] == '"' else text


def _ring(pts: list | None) -> np.ndarray:
    """Points of a (pts ...) list; (arc (start) (mid) (end)) entries are discretised (sagitta under 0.25 um)."""
    out: list[tuple[float, float]] = []
    if pts is None:
        return np.zeros((0, 2))
    for item in pts[1:]:
        if not isinstance(item, list) or not item:
            continue
        if item[0] == "xy":
            new = [_xy(["", item], "xy")]
        elif item[0] == "arc":
            new = piece_points(Arc(_xy(item, "start"), _xy(item, "mid"), _xy(item, "end")))
        else:
            continue
        for p in new:
            if not out or math.dist(out[-1], p) > 1e-9:
                out.append(p)
    if len(out) > 1 and math.dist(out[0], out[-1]) <= 1e-9:
        out.pop()
    return np.asarray(out, dtype=np.float64)


def _row_numbers(row: tuple, fields: tuple[int, ...], counts: tuple[int, ...]) -> list[float] | None:
    out: list[float] = []
    for f, n in zip(fields, counts):
        parts = row[f].split()
        if len(parts) != n:
            return None
        try:
            values = [float(v) for v in parts]
        except ValueError:
            return None
        if not all(math.isfinite(v) for v in values):
            return None
        out.extend(values)
    return out


def expand_layers(name: str, copper: tuple[str, ...], names: dict[str, str] | None = None) -> list[str]:
    """Copper layers a layer token stands for: "*.Cu" is all, "F&B.Cu" the outer two; non-copper gives []."""
    if name == "*.Cu":
        return list(copper)
    if name == "F&B.Cu":
        return [n for n in ("F.Cu", "B.Cu") if n in copper]
    if name in copper:
        return [name]
    if names:
        for canonical, user in names.items():
            if user == name and canonical in copper:
                return [canonical]
    return []
