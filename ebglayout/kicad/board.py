"""Read a .kicad_pcb board without KiCad: layers, stack-up, nets, tracks, vias, zones, footprints, board edge.

Where each part is read (``_Reader`` below joins them):

- ``board_model.py``: what a read board holds (Stackup, Segments/Arcs/Vias arrays, Zone, Footprint, Pad, BoxIndex);
- ``board_header.py``: version stamp, layer table, net table, stack-up;
- ``board_tracks.py``: segments, arcs and vias, tree path and bulk orchestration; ``board_bulk.py``: the bulk
  path itself (field location from the structure scan, byte windows, one number conversion per chunk);
- ``board_zones.py``: zones and rule areas; ``board_footprints.py``: footprints on demand and all pads at once;
- ``board_outline.py``: the Edge.Cuts outline; ``board_tree.py``: small helpers over parsed trees.

Speed matters (boards of 100k segments): the whole file is checked once by
``sexpr.scan``; segments, arcs and vias are then read in bulk from its
parenthesis offsets, in chunks: each field's text is cut out as a fixed-width
numpy window, checked, and all numbers of a chunk are converted by one
``np.fromstring`` (the routine behind ``float``; a text equal to the one before
it is converted once).  Only the small sections that need structure (setup,
layers, nets, zones, footprints, board-edge drawings) are parsed into trees.
An item the bulk reader cannot vouch for (an unusual field order or spelling,
a newer token, a bad value) is parsed through the tree instead, so the fast
path never decides what is read, only how fast.

Dialects: KiCad 6 (20211014), 7 (20221018), 8 (20240108), 9 (20241229) and the
10 files seen so far (2026xxxx, net names instead of net codes).  Layers are
matched by name, never by number (the numbers changed in 9).  Coordinates are
KiCad's: mm, y pointing down.  The file bytes and every top-level item's byte
span are kept, so a writer can splice new items in and leave every other byte
as it was.
"""
from __future__ import annotations

import re
from functools import cached_property
from pathlib import Path

import numpy as np
import shapely
from shapely.geometry import MultiPolygon, Polygon

from ..errors import BoardError
from .board_bulk import TrackBulk, index_ranges
from .board_footprints import FootprintReader
from .board_header import NEWEST_CHECKED, OLDEST_VERSION, VERSIONS, HeaderReader
from .board_model import (MAX_COORD_MM, MAX_SIZE_MM, Arcs, BoxIndex, Dielectric, Footprint, FootprintPolygon, Pad,
                          PadArray, Segments, Stackup, Vias, Zone, arc_circles, series_loss_tangent)
from .board_outline import OutlineReader
from .board_tracks import TrackReader
from .board_tree import expand_layers
from .board_zones import ZoneReader
from .sexpr import Structure, _heads, error_at, scan

__all__ = ["Arcs", "Board", "BoxIndex", "Dielectric", "Footprint", "FootprintPolygon", "MAX_COORD_MM", "MAX_SIZE_MM",
           "NEWEST_CHECKED", "OLDEST_VERSION", "Pad", "PadArray", "Segments", "Stackup", "VERSIONS", "Vias", "Zone",
           "arc_circles", "expand_layers", "parse_board", "read_board", "series_loss_tangent"]

KNOWN_TOP = frozenset({
    "version", "generator", "generator_version", "general", "paper", "page", "title_block", "layers", "setup",
    "property", "net", "net_class", "footprint", "segment", "arc", "via", "zone", "group", "dimension", "target",
    "image", "table", "generated", "embedded_fonts", "embedded_files", "text", "text_box", "teardrops", "point",
    "barcode", "module",
})
_XY = re.compile(rb"\(xy\s+([^()]*)\)")


class Board:
    """A parsed board.  Net index 0 is the unconnected net ""; layer indices point into ``copper_layers``.

    Footprints are parsed on first use (``footprints``, ``footprint(i)``); their
    pads' positions are available earlier and cheaper as ``pads``.
    """

    def __init__(self, reader: "_Reader", segments: Segments, arcs: Arcs, vias: Vias, zones: tuple[Zone, ...],
                 outline: Polygon | MultiPolygon | None):
        s = reader.s
        self.name = s.name
        self.data = s.data
        self.version = reader.version
        self.generator = reader.generator
        self.copper_layers: tuple[str, ...] = reader.copper
        self.layer_names: dict[str, str] = reader.layer_names
        self.stackup: Stackup | None = reader.stackup
        self.nets: tuple[str, ...] = tuple(reader.nets)
        self.segments, self.arcs, self.vias, self.zones, self.outline = segments, arcs, vias, zones, outline
        self.warnings: list[str] = reader.warnings
        self.items: np.ndarray = s.items
        self.root: tuple[int, int] = s.root
        self.footprint_spans: np.ndarray = s.spans_of("footprint")
        self._reader = reader
        self._net_index = {n: i for i, n in enumerate(self.nets)}
        self._footprints: dict[int, Footprint] = {}
        self._by_net: dict[str, tuple[np.ndarray, np.ndarray]] = {}
        self._boxes: dict[str, BoxIndex] = {}

    def __repr__(self) -> str:
        return (f"<Board {self.name} v{self.version}: {len(self.copper_layers)} copper layers, {len(self.nets)} nets, "
                f"{len(self.segments)} segments, {len(self.arcs)} arcs, {len(self.vias)} vias, "
                f"{len(self.zones)} zones, "
                f"{len(self.footprint_spans)} footprints>")

    @cached_property
    def text(self) -> str:
        return self.data.decode("utf-8")

    @cached_property
    def heads(self) -> tuple[str, ...]:
        """Head symbol of each top-level item, parallel to ``items``."""
        names = self._reader.head_names
        return tuple(names[h] for h in self._reader.s.heads.tolist())

    def net_index(self, name: str) -> int | None:
        return self._net_index.get(name)

    def net_rows(self, kind: str, net: int) -> np.ndarray:
        """Rows of ``kind`` ("segments", "arcs" or "vias") on net index ``net``, in file order.

        One stable sort by net per kind on first use, then a binary search per net,
        so looking up a few nets never scans the whole board again.
        """
        if kind not in self._by_net:
            nets = getattr(self, kind).net
            order = np.argsort(nets, kind="stable")
            self._by_net[kind] = (order, nets[order])
        order, keys = self._by_net[kind]
        a, b = np.searchsorted(keys, [net, net + 1])
        return order[a:b]

    def boxes(self, kind: str) -> BoxIndex:
        """Bounding boxes of every item of ``kind``, copper width included, indexed for window queries.

        Kinds: "segments", "arcs" (the box of the arc's whole circle: conservative),
        "vias" (pad disc), "pads" (each pad's circumscribed disc).
        Built once per board on first use.
        """
        if kind not in self._boxes:
            self._boxes[kind] = BoxIndex(*self._box_arrays(kind))
        return self._boxes[kind]

    def _box_arrays(self, kind: str) -> tuple[np.ndarray, np.ndarray]:
        if kind == "segments":
            seg = self.segments
            half = seg.width[:, None] / 2
            return np.minimum(seg.start, seg.end) - half, np.maximum(seg.start, seg.end) + half
        if kind == "arcs":
            arc = self.arcs
            if not len(arc):
                return np.zeros((0, 2)), np.zeros((0, 2))
            centre, radius = arc_circles(arc.start, arc.mid, arc.end)
            reach = radius[:, None] + arc.width[:, None] / 2
            return centre - reach, centre + reach
        if kind == "vias":
            r = self.vias.size[:, None] / 2
            return self.vias.at - r, self.vias.at + r
        if kind == "pads":
            pads = self.pads
            r = np.hypot(pads.size[:, 0], pads.size[:, 1])[:, None] / 2
            return pads.at - r, pads.at + r
        raise ValueError(f"no boxes for {kind!r}: allowed segments, arcs, vias, pads")

    def layer_index(self, name: str) -> int | None:
        return self.copper_layers.index(name) if name in self.copper_layers else None

    def footprint(self, index: int) -> Footprint:
        """Footprint ``index`` (file order), parsed on first use."""
        if index not in self._footprints:
            a, b = (int(v) for v in self.footprint_spans[index])
            self._footprints[index] = self._reader.footprint(a, b)
        return self._footprints[index]

    @cached_property
    def footprints(self) -> tuple[Footprint, ...]:
        return tuple(self.footprint(i) for i in range(len(self.footprint_spans)))

    @cached_property
    def pads(self) -> PadArray:
        return self._reader.pads(self.footprint_spans)

    def spans(self, head: str) -> np.ndarray:
        """Byte spans (n, 2) of the top-level items with this head ("footprint", "zone", ...), in file order."""
        return self._reader.s.spans_of(head)

    def splice(self, start: int, end: int, new: bytes | str) -> bytes:
        """The file bytes with [start, end) replaced by ``new``; everything else byte-identical."""
        new = new.encode("utf-8") if isinstance(new, str) else new
        return self.data[:start] + new + self.data[end:]

    @property
    def insert_offset(self) -> int:
        """Byte offset of the root's closing parenthesis: new top-level items go here."""
        return self.root[1] - 1

    def zone_fill(self, zone: Zone) -> MultiPolygon:
        """The zone's filled copper as saved in the file (empty when unfilled)."""
        polys = []
        for start, end in zone.fill_spans:
            found = _XY.findall(self.data, start, end)
            nums = np.array(b" ".join(found).split(), dtype="S32").astype(np.float64).reshape(-1, 2)
            if len(nums) >= 3:
                polys.append(shapely.make_valid(Polygon(nums)))
        geom = shapely.union_all(polys) if polys else MultiPolygon()
        parts = [g for g in getattr(geom, "geoms", [geom]) if isinstance(g, Polygon) and not g.is_empty]
        return MultiPolygon(parts)


def read_board(path: str | Path) -> Board:
    """Read a .kicad_pcb file; raise BoardError (file, line, column) when it cannot be read."""
    path = Path(path)
    try:
        data = path.read_bytes()
    except OSError as err:
        raise BoardError(f"{path}: cannot be read ({err.strerror or err})") from None
    return parse_board(data, path.name)


def parse_board(text: str | bytes, name: str = "<board>") -> Board:
    """Parse board text (str or the file's bytes)."""
    data = text.encode("utf-8") if isinstance(text, str) else bytes(text)
    s = scan(data, name)
    if s.root_head != "kicad_pcb":
        raise error_at(name, data, s.root[0], f"expected a (kicad_pcb ...) board, found ({s.root_head} ...)")
    return _Reader(s).board()


class _Reader(HeaderReader, TrackReader, TrackBulk, ZoneReader, FootprintReader, OutlineReader):
    """Turns a scanned board into a Board; collects warnings as it goes and parses footprints on demand.

    Each kind of item has its own reader class (``board_header``, ``board_tracks`` with ``board_bulk``,
    ``board_zones``, ``board_footprints``, ``board_outline``); this class holds what they share: the scan, the
    warnings, errors at a byte offset, and the children of top-level items."""

    def __init__(self, s: Structure):
        self.s = s
        self.data = s.data
        self.warnings: list[str] = []
        self.head_names = {h: h.decode("utf-8", "replace") for h in s.head_kinds()[1]}
        self._children: dict[tuple[int, ...], tuple[np.ndarray, np.ndarray, np.ndarray]] = {}

    def fail(self, offset: int, what: str) -> BoardError:
        return self.s.error(offset, what)

    def tree(self, kind: str) -> list[tuple[list, int]]:
        return [(self.s.parse(int(a), int(b)), int(a)) for a, b in self.s.spans_of(kind)]

    def board(self) -> Board:
        self.version, self.generator = self._version()
        self.copper, self.layer_names = self._layers()
        self.nets, self.net_codes = self._nets()
        self.net_lookup = {name: i for i, name in enumerate(self.nets)}
        self.stackup = self._stackup()
        segments, arcs, vias = self._segments(), self._arcs(), self._vias()
        self._check_items("segment", segments.span, segments.net, (("start", segments.start), ("end", segments.end)),
                          (("width", segments.width),))
        self._check_items("arc", arcs.span, arcs.net, (("start", arcs.start), ("mid", arcs.mid), ("end", arcs.end)),
                          (("width", arcs.width),))
        self._check_items("via", vias.span, vias.net, (("at", vias.at),), (("size", vias.size), ("drill", vias.drill)))
        zones = tuple(self._zone(start, None) for start, _ in self.s.spans_of("zone").tolist())
        zones += self._footprint_zones()
        outline = self._outline()
        names = set(self.head_names.values())
        unknown = sorted(names - KNOWN_TOP - {h for h in names if h.startswith("gr_")})
        if unknown:
            self.warnings.append(f"ignored top-level items this reader does not know: {', '.join(unknown)}")
        return Board(self, segments, arcs, vias, zones, outline)

    def _check_items(self, kind: str, spans: np.ndarray, nets: np.ndarray, coordinates, sizes) -> None:
        """Refuse the first item whose numbers the engine cannot use, naming it: a coordinate off KiCad's range or
        a width/size that is not positive (non-finite numbers never get this far), so no item is silently dropped."""
        for field, values, bad, allowed in (
                *((f, v, ~(np.abs(v) <= MAX_COORD_MM).all(axis=1), f"coordinates must lie within +-{MAX_COORD_MM} mm "
                   "(KiCad's board range)") for f, v in coordinates),
                *((f, v, ~((v > 0) & (v <= MAX_SIZE_MM)), f"must be > 0 and at most {MAX_SIZE_MM:g} mm")
                  for f, v in sizes)):
            if bad.any():
                row = int(np.argmax(bad))
                shown = " ".join(f"{x:g}" for x in np.atleast_1d(values[row]).tolist())
                raise self.fail(int(spans[row, 0]), f"{kind} of net {self.nets[int(nets[row])]!r}: ({field} {shown}) "
                                f"{allowed}")

    def children(self, rows: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """``Structure.children`` of these top-level items, reading only the parentheses inside them.

        Same spans, heads and owners; the work is proportional to the items' own
        size (footprints), not to the whole file's parentheses (tracks included).
        """
        rows = np.asarray(rows, dtype=np.int64)
        key = tuple(rows.tolist())
        if key in self._children:
            return self._children[key]
        s = self.s
        items = s.items[rows]
        if not len(items):
            return np.zeros((0, 2), np.int64), np.zeros(0, dtype="S20"), np.zeros(0, np.int64)
        o2, c2 = s.level_index(2)
        index, owner = index_ranges(o2[rows], c2[rows] + 1)
        paren, depth, step = s.paren[index], s.depth[index], s.step[index]
        child = (depth == 3) & (step > 0)
        opens = paren[child].astype(np.int64)
        closes = paren[(depth == 2) & (step < 0)].astype(np.int64)
        owner = rows[owner[child]]
        spans = np.column_stack([opens, closes[:len(opens)] + 1])
        found = (spans, _heads(np.frombuffer(self.data, dtype=np.uint8), opens), owner)
        self._children[key] = found
        return found
