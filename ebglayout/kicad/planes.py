"""A pair's reference planes and the board's stack-up under it: the board's word on plane layers and stack-up.

Reads the board's copper zones and stack-up table near a pair's centre-line:
which layers carry its return current (the nearest copper-zone layer on each
side, of any net), whether the plane layers a spec names are those, and which
stack-up values (er, h, pair_h, pair_er, tan_d) the board gives for a cut.
Pair finding, spec completion and the `pairs` listing all ask these questions,
so they are answered in one place.
"""
from __future__ import annotations

import math
from typing import TYPE_CHECKING

from ..errors import SpecError
from ..path import polyline_of
from .board import Board

if TYPE_CHECKING:
    from .pairs import BoardPair


def _plane_zones(board: Board, layer: str, net: str | None, region) -> list:
    return [z for z in board.zones if not z.is_rule_area and layer in z.layers and (net is None or z.net_name == net)
            and (region is None or z.outline.intersects(region))]


def plane_layers_for(board: Board, layer: str, plane_net: str | None = "GND",
                     region=None) -> tuple[tuple[str, ...], list[str]]:
    """Nearest copper layer above and below ``layer`` holding a zone of ``plane_net`` (under ``region`` if given).

    ``plane_net`` None accepts a copper zone of any net.  Returns the layers
    (one: microstrip, two: stripline) and notes, e.g. when a zone of another net
    lies between the pair and the plane found.
    """
    order = board.copper_layers
    i = order.index(layer)
    found, notes = [], []
    for side in (order[:i][::-1], order[i + 1:]):
        for other in side:
            if _plane_zones(board, other, plane_net, region):
                found.append(other)
                break
            foreign = _plane_zones(board, other, None, region)
            if foreign:
                nets = ", ".join(sorted({z.net_name or "(no net)" for z in foreign}))
                notes.append(f"{other} carries zone(s) of {nets} between {layer} and the {plane_net} plane")
    if not found:
        notes.append(f"no {plane_net or 'copper'} zone on any copper layer next to {layer}"
                     + (" under the pair" if region is not None else ""))
    return tuple(sorted(found, key=order.index)), notes


def reference_layers(board: Board, plane_net: str = "GND") -> dict[str, tuple[str, ...]]:
    """For every copper layer, the nearest layers above and below with a zone of ``plane_net`` (board-wide)."""
    return {layer: plane_layers_for(board, layer, plane_net)[0] for layer in board.copper_layers}


def _nearest_plane(board: Board, layer: str, side: int, region) -> str | None:
    """The first copper layer above (side -1) or below (+1) ``layer`` with a copper zone of any net under ``region``."""
    order = board.copper_layers
    i = order.index(layer)
    for other in (order[:i][::-1] if side < 0 else order[i + 1:]):
        if _plane_zones(board, other, None, region):
            return other
    return None


def _zone_nets(board: Board, layer: str, region) -> str:
    return ", ".join(sorted({z.net_name or "(no net)" for z in _plane_zones(board, layer, None, region)})) or "no plane"


def nearest_planes(board: Board, layer: str, region) -> list[str]:
    """The nearest copper-zone layer (any net) above and below ``layer`` under ``region``: its reference planes."""
    return [r for r in (_nearest_plane(board, layer, side, region) for side in (-1, 1)) if r]


def board_layer_map(board: Board, layer: str, region) -> str:
    """The board's copper layers top to bottom with the nets of their zones under ``region``, and the references."""
    layers = ", ".join(f"{o} ({'the pair' if o == layer else _zone_nets(board, o, region)})"
                       for o in board.copper_layers)
    refs = nearest_planes(board, layer, region)
    implied = " and ".join(f"{r} ({_zone_nets(board, r, region)})" for r in refs) or "none"
    return f"{board.name} copper under the pair: {layers}; the pair's reference planes there: {implied}"


def verify_plane_layers(board: Board, pair: BoardPair, layers: list[str], net: str, given: bool) -> None:
    """Refuse plane layers that are not the pair's reference planes on this board (raises SpecError).

    Each layer must exist, carry a zone of ``net`` under the pair, and be the
    nearest copper-zone layer on its side of the pair (the return current runs
    on the nearest plane of any net); two layers must lie on opposite sides, and
    a pair with a plane on both sides (stripline) needs both.
    """
    order, region = board.copper_layers, polyline_of(pair.path)
    value = list(layers) if given else f"{list(layers)} (found on the board)"

    def refuse(why: str) -> None:
        raise SpecError("plane.layers", value, f"{why}; {board_layer_map(board, pair.layer, region)}")

    for layer in layers:
        if layer not in order:
            refuse(f"{layer} is not a copper layer of {board.name}")
        if layer == pair.layer:
            refuse(f"{layer} is the layer {pair.base} is routed on")
    sides = [1 if order.index(layer) > order.index(pair.layer) else -1 for layer in layers]
    if len(layers) == 2 and sides[0] == sides[1]:
        refuse(f"both planes lie {'below' if sides[0] > 0 else 'above'} {pair.layer}; a stripline cut goes into the "
               "plane above and the plane below the pair")
    for layer, side in zip(layers, sides):
        if not _plane_zones(board, layer, net, region):
            refuse(f"{layer} carries no {net} zone under {pair.base} (it has: {_zone_nets(board, layer, region)})")
        nearest = _nearest_plane(board, pair.layer, side, region)
        if nearest != layer:
            refuse(f"{nearest} ({_zone_nets(board, nearest, region)}) lies between {pair.layer} and {layer}, so the "
                   f"pair's return current runs on {nearest}, not on the {net} plane of {layer}")
    if len(layers) == 1:
        other = _nearest_plane(board, pair.layer, -sides[0], region)
        if other is not None:
            refuse(f"{pair.base} is stripline between {layers[0]} and {other}: cut both planes")


STACKUP_AGREEMENT = 0.01
"""Relative difference within which a spec's stack-up value agrees with the board's (1 %: stack-up tables are
rounded to two or three digits)."""


def board_stackup(board: Board, pair_layer: str, plane_layers: list[str], region) -> dict[str, float | list[float]]:
    """The stack-up keys (without "stackup.") the board's stack-up gives for a pair and its cut planes.

    er, h: the cavity under the first cut plane, towards the nearest copper layer
    beyond it with a zone under the pair (else the next copper layer).  pair_h: per
    cut plane, pair layer to plane.  pair_er: the series value of the dielectrics
    between the pair and its plane (stripline: between the two planes).  tan_d:
    the series value over every dielectric from the outermost cavity to the pair.
    A key is left out where the stack-up lacks the values.
    """
    if board.stackup is None or not plane_layers:
        return {}
    stack, order = board.stackup, board.copper_layers
    found: dict[str, float | list[float]] = {}
    cavities = _cavities(board, pair_layer, plane_layers, region)
    h, er = cavities[0][2:]
    if h is not None and er is not None:
        found.update(er=er, h=h)
    heights = [stack.between(pair_layer, plane)[0] for plane in plane_layers]
    if all(h is not None for h in heights):
        found["pair_h"] = heights
    ends = plane_layers if len(plane_layers) == 2 else [pair_layer, plane_layers[0]]
    pair_er = stack.between(*ends)[1]
    if pair_er is not None:
        found["pair_er"] = pair_er
    span = [order.index(layer) for _, target, _, _ in cavities for layer in (pair_layer, target)]
    tan_d = stack.loss_tangent(order[min(span)], order[max(span)])
    if tan_d is not None:
        found["tan_d"] = tan_d
    return found


def _cavities(board: Board, pair_layer: str, plane_layers: list[str], region) -> list[tuple[str, str, float | None,
                                                                                          float | None]]:
    """(plane, far layer, h, er) of the cavity beyond each cut plane, away from the pair (``board_stackup``)."""
    order, out = board.copper_layers, []
    for plane in plane_layers:
        i, j = order.index(plane), order.index(pair_layer)
        beyond = order[:i][::-1] if i < j else order[i + 1:]
        target = next((o for o in beyond if _plane_zones(board, o, None, region)), beyond[0] if beyond else pair_layer)
        out.append((plane, target, *board.stackup.between(plane, target)))
    return out


def stackup_notes(board: Board, pair_layer: str, plane_layers: list[str], region) -> list[str]:
    """Where the board's stack-up has more to say than one cavity value can carry (two different stripline cavities)."""
    if board.stackup is None or len(plane_layers) < 2:
        return []
    (plane, far, h, er), *others = _cavities(board, pair_layer, plane_layers, region)
    return [f"the cavity beyond {o_plane} (to {o_far}: {o_h:g} mm, er {o_er:g}) differs from the one beyond {plane} "
            f"(to {far}: {h:g} mm, er {er:g}) that stackup.er and stackup.h describe"
            for o_plane, o_far, o_h, o_er in others
            if None not in (h, er, o_h, o_er) and not (math.isclose(h, o_h, rel_tol=STACKUP_AGREEMENT)
                                                    and math.isclose(er, o_er, rel_tol=STACKUP_AGREEMENT))]


def cavity(board: Board, pair: BoardPair) -> tuple[float, float] | None:
    """(h, er) of the dielectric under the pair's first cut plane (``board_stackup``), None if the board lacks them."""
    found = board_stackup(board, pair.layer, list(pair.plane_layers), polyline_of(pair.path))
    return (found["h"], found["er"]) if "h" in found else None
