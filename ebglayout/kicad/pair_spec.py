"""The spec a filter under a board pair is built from: the user's spec completed with the board's word.

``pair_spec_dict`` takes the pair's geometry from ``pairs``, its plane layers
and stack-up from ``planes`` (refusing values that disagree with the board) and
the Edge.Cuts outline under the pair, and writes them into the spec dict that
`place` builds; one function, so every board job completes specs the same way.
"""
from __future__ import annotations

import copy
import math

import numpy as np
from shapely.geometry import MultiPolygon

from ..errors import SpecError
from ..path import polyline_of
from ..spec import Line
from ..units import parse_length
from .board import Board
from .pairs import BoardPair
from .planes import STACKUP_AGREEMENT, board_stackup, plane_layers_for, verify_plane_layers


def _agrees(spec_value, board_value, units: str | None) -> bool:
    """A spec's stack-up value (a length in the file's ``units``, or a number when None) against the board's."""
    if isinstance(board_value, list):
        given = spec_value if isinstance(spec_value, list) else [spec_value] * len(board_value)
        return len(given) == len(board_value) and all(_agrees(a, b, units) for a, b in zip(given, board_value))
    try:
        value = parse_length(spec_value, "stackup", units) if units else float(spec_value)
    except (ValueError, TypeError):
        return False
    return math.isclose(value, board_value, rel_tol=STACKUP_AGREEMENT, abs_tol=1e-4)


def pair_spec_dict(board: Board, pair: BoardPair, cut_spec_dict: dict,
                   stackup_from_spec: bool = False) -> tuple[dict, frozenset[str]]:
    """The user's spec dict (cut, rules, stackup, ...) completed with the pair's geometry, ready for spec_from_dict.

    Returns the dict and the stack-up keys ("stackup.er", ...) whose values came
    from the board.  The board decides pair.width/spacing/path/layer/nets;
    plane.layers (the pair's reference planes of plane.net), plane.outline (the
    Edge.Cuts polygon under the pair) come from the board unless the spec gives
    them, and plane.layers are verified against the board (``verify_plane_layers``).
    Stack-up: the board's value wherever its stack-up has one; a spec value that
    differs by more than ``STACKUP_AGREEMENT`` is an error unless
    ``stackup_from_spec``, which keeps the spec's values.  Lengths are written in
    mm (as "...mm" strings when the spec's units are not mm), in KiCad's coordinates.
    """
    spec = copy.deepcopy(cut_spec_dict) if cut_spec_dict else {}
    units = str(spec.get("units", "mm")).lower()

    def mm(v: float):
        return float(v) if units == "mm" else f"{float(v)!r}mm"

    def point(p):
        return [mm(p[0]), mm(p[1])]

    path: list = [point(pair.path[0].start)]
    for piece in pair.path:
        path.append(point(piece.end) if isinstance(piece, Line) else {"arc": [point(piece.start), point(piece.mid),
                                                                              point(piece.end)]})
    spec.setdefault("name", _file_name(f"{pair.base}_{pair.layer}"))
    spec["pair"] = {**spec.get("pair", {}), "width": mm(pair.width), "spacing": mm(pair.spacing), "path": path,
                    "layer": pair.layer, "nets": [pair.net_p, pair.net_n]}
    plane = dict(spec.get("plane", {}))
    plane.setdefault("net", pair.plane_net)
    region = polyline_of(pair.path)
    given = "layers" in plane
    if not given:
        found = pair.plane_layers if plane["net"] == pair.plane_net else \
            plane_layers_for(board, pair.layer, str(plane["net"]), region)[0]
        if not found:
            raise SpecError("plane.layers", "(none found)", f"no {plane['net']} zone next to {pair.layer} under "
                            f"{pair.base}; give plane.layers in the spec")
        plane["layers"] = list(found)
    layers = plane["layers"]
    if isinstance(layers, list) and all(isinstance(x, str) for x in layers):
        verify_plane_layers(board, pair, layers, str(plane["net"]), given)
    outline = _outline_under(board, pair)
    if "outline" not in plane and outline is not None:
        plane["outline"] = [point(p) for p in outline]
    spec["plane"] = plane
    stack = dict(spec.get("stackup", {}))
    from_board = set()
    for key, value in board_stackup(board, pair.layer, list(layers), region).items():
        length = key in ("h", "pair_h")
        if key in stack and not _agrees(stack[key], value, units if length else None):
            if stackup_from_spec:
                continue
            shown = [round(v, 4) for v in value] if isinstance(value, list) else round(value, 4)
            raise SpecError(f"stackup.{key}", stack[key], f"the board's stack-up gives {shown}"
                            f"{' mm' if length else ''} here (agreement within {STACKUP_AGREEMENT:.0%}); "
                            "remove the key to use the board's value, or force the spec's with --stackup-from-spec "
                            "(plan: stackup_from_spec = true)")
        stack[key] = [mm(v) for v in value] if isinstance(value, list) else mm(value) if length else value
        from_board.add(f"stackup.{key}")
    for key in ("er", "h"):
        if key not in stack:
            raise SpecError(f"stackup.{key}", "(missing)", "the board's stack-up does not give it; "
                            "add stackup.er and stackup.h to the spec")
    spec["stackup"] = stack
    return spec, frozenset(from_board)


def _file_name(text: str) -> str:
    return "".join(c if c.isalnum() or c in "-_." else "_" for c in text).lstrip(".") or "pair"


def _outline_under(board: Board, pair: BoardPair) -> list[tuple[float, float]] | None:
    geom = board.outline
    if geom is None:
        return None
    polys = list(geom.geoms) if isinstance(geom, MultiPolygon) else [geom]
    region = polyline_of(pair.path)
    poly = max(polys, key=lambda g: g.intersection(region).length)
    return [tuple(p) for p in np.asarray(poly.exterior.coords)[:-1].tolist()]
