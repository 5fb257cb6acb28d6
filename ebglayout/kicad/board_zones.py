"""Board reader, third part: zones and rule areas, on the board and inside footprints.

Zones are small trees; their fills (``filled_polygon``) are skipped while parsing and only their byte spans kept,
so ``Board.zone_fill`` reads a fill when someone asks for it.
"""
from __future__ import annotations

import re

import numpy as np
import shapely
from shapely.geometry import Polygon

from ..errors import show
from .board_model import MAX_COORD_MM, MAX_SIZE_MM, Zone
from .board_tree import _atom, _child, _children, _is_number, _ring, _text, expand_layers

ISLAND_MODES = {0: "always", 1: "never", 2: "area"}
KEEPOUT_FLAGS = ("tracks", "vias", "pads", "copperpour", "footprints")
KEEPOUT_DEFAULT_ALLOWED = {"tracks": False, "vias": False, "pads": True, "copperpour": True, "footprints": True}
"""What KiCad assumes for a keepout flag left out of a rule area: pcbnew's own reading of a bare ``(keepout)``
(tests/test_kicad_board.py::test_keepout_flags_left_out_are_read_as_kicad_reads_them; measured with 6.0.11, and the
KiCad 9 root runs the same test with 9.0.2)."""


ZONE_NUMBERS = {
    "clearance": (lambda x: 0 <= x <= MAX_SIZE_MM, f"a length from 0 to {MAX_SIZE_MM:g} mm"),
    "min_thickness": (lambda x: 0 <= x <= MAX_SIZE_MM, f"a width from 0 to {MAX_SIZE_MM:g} mm"),
    "priority": (lambda x: x == int(x) and 0 <= x <= 2147483647, "a whole number from 0 to 2147483647"),
    "island_removal_mode": (lambda x: x in ISLAND_MODES, "0, 1 or 2 (always, never, below an area)"),
    "island_area_min": (lambda x: x >= 0, "an area of 0 mm2 or more"),
    "xy": (lambda x: abs(x) <= MAX_COORD_MM, f"a coordinate within +-{MAX_COORD_MM} mm (KiCad's board range)"),
}
"""The zone settings read as numbers: which values a board may hold, and how an error says so."""


def zone_number(head: str, value) -> float:
    """A zone setting ``(head value)`` as a number; ValueError naming the value and what is allowed."""
    usable, allowed = ZONE_NUMBERS[head]
    if not (_is_number(value) and usable(float(value))):
        raise ValueError(f"({head} {show(value)}) must be {allowed}")
    return float(value)


class ZoneReader:
    """Reads ``Zone`` items for the board reader (``board._Reader``)."""

    def _zone(self, start: int, footprint: str | None) -> Zone:
        end = self.s.end_of(start)
        node = self.s.parse(start, end, skip=("filled_polygon", "fill_segments"))
        name = str(_atom(node, "name", default=""))
        net_field = _child(node, "net")
        net = self.net_of(net_field[1], start) if net_field is not None and len(net_field) > 1 else 0
        rings = []
        for poly in _children(node, "polygon"):
            try:
                ring = _ring(_child(poly, "pts"))
            except ValueError as err:
                raise self.fail(start, f"zone {name!r}: outline point {err}") from None
            if len(ring) < 3:
                raise self.fail(start, f"zone {name!r} has a polygon with fewer than 3 points")
            rings.append(ring)
        if not rings:
            raise self.fail(start, f"zone {name!r} without an outline (polygon (pts ...))")
        far = [ring for ring in rings if not (np.abs(ring) <= MAX_COORD_MM).all()]
        if far:
            x, y = far[0][np.argmax(~(np.abs(far[0]) <= MAX_COORD_MM).all(axis=1))].tolist()
            raise self.fail(start, f"zone {name!r}: outline vertex (xy {x:g} {y:g}) must lie within +-{MAX_COORD_MM} "
                            "mm (KiCad's board range)")
        outline = Polygon(rings[0], rings[1:])
        if not outline.is_valid:
            outline = shapely.make_valid(outline)
            self.warnings.append(f"zone {name!r}: outline crosses itself; repaired")
        fill = _child(node, "fill")
        mode = _child(fill, "island_removal_mode") or _child(node, "island_removal_mode")
        area = _child(fill, "island_area_min") or _child(node, "island_area_min")
        connect = _child(node, "connect_pads")
        keep = _child(node, "keepout")
        keepout = None
        if keep is not None:
            keepout = dict(KEEPOUT_DEFAULT_ALLOWED)
            for flag in keep[1:]:
                if isinstance(flag, list) and len(flag) > 1 and flag[0] in KEEPOUT_FLAGS:
                    keepout[flag[0]] = flag[1] == "allowed"
        fill_spans = tuple(self._subspans(start, end, b"filled_polygon"))

        def number(field: list | None) -> float | None:
            """The checked value of a ``(head value)`` setting; None when the board leaves it out."""
            if field is None:
                return None
            try:
                return zone_number(field[0], field[1] if len(field) > 1 else None)
            except ValueError as err:
                raise self.fail(start, f"zone {show(name)}: {err}") from None

        return Zone(
            layers=self._layer_list(node), net=net, net_name=str(_atom(node, "net_name", default=self.nets[net])),
            name=name, rings=tuple(rings), outline=outline,
            clearance=number(_child(connect, "clearance")), min_thickness=number(_child(node, "min_thickness")),
            priority=int(number(_child(node, "priority")) or 0),
            island_removal=ISLAND_MODES[int(number(mode))] if mode is not None else "always",
            island_area_min=number(area), keepout=keepout,
            filled=(fill is not None and len(fill) > 1 and fill[1] == "yes") or bool(fill_spans),
            fill_spans=fill_spans, footprint=footprint, span=(start, end),
        )

    def _subspans(self, start: int, end: int, head: bytes):
        pattern = re.compile(rb"\(\s*" + head + rb"[\s()]")
        pos = start + 1
        while (m := pattern.search(self.data, pos, end)) is not None:
            if not self.s.opens_at(m.start()):
                pos = m.end()
                continue
            stop = self.s.end_of(m.start())
            yield (m.start(), stop)
            pos = stop

    def _layer_list(self, node: list) -> tuple[str, ...]:
        single = _child(node, "layer")
        multi = _child(node, "layers")
        names = [str(single[1])] if single is not None and len(single) > 1 else \
            [str(a) for a in multi[1:] if not isinstance(a, list)] if multi is not None else []
        out: list[str] = []
        for name in names:
            out.extend(n for n in expand_layers(name, self.copper, self.layer_names) if n not in out)
        return tuple(out)

    def _footprint_zones(self) -> tuple[Zone, ...]:
        rows = np.flatnonzero(self.s.heads == b"footprint")
        if not len(rows):
            return ()
        spans, heads, owner = self.children(rows)
        zones = []
        for (a, _), parent in zip(spans[heads == b"zone"].tolist(), owner[heads == b"zone"].tolist()):
            zones.append(self._zone(a, self._reference(*map(int, self.s.items[parent]))))
        return tuple(zones)

    def _reference(self, start: int, end: int) -> str:
        m = re.compile(rb'\(fp_text\s+reference\s+("(?:[^"\\]|\\.)*"|[^\s()"]+)|'
                       rb'\(property\s+"Reference"\s+("(?:[^"\\]|\\.)*")').search(self.data, start, end)
        if m is None:
            return ""
        return _text(m.group(1) or m.group(2))
