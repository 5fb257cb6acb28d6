"""Read a .kicad_pcb board without KiCad: layers, stack-up, nets, tracks, vias, zones, footprints, board edge.

Speed matters (boards of 100k segments): the whole file is checked once by
``sexpr.scan``; segments, arcs and vias are then read in bulk from its
parenthesis offsets, in chunks (the byte-level helpers are in ``fields.py``):
each field's text is cut out as a fixed-width numpy window, checked, and all
numbers of a chunk are converted by one ``np.fromstring`` (the routine behind
``float``; a text equal to the one before it is converted once).  Only the small
sections that need structure (setup, layers, nets, zones, footprints,
board-edge drawings) are parsed into trees.  An item the bulk reader cannot
vouch for (an unusual field order or spelling, a newer token, a bad value) is
parsed through the tree instead, so the fast path never decides what is read,
only how fast.

Dialects: KiCad 6 (20211014), 7 (20221018), 8 (20240108), 9 (20241229) and the
10 files seen so far (2026xxxx, net names instead of net codes).  Layers are
matched by name, never by number (the numbers changed in 9).  Coordinates are
KiCad's: mm, y pointing down.  The file bytes and every top-level item's byte
span are kept, so a writer can splice new items in and leave every other byte
as it was.
"""
from __future__ import annotations

import math
import re
import warnings
from dataclasses import dataclass
from functools import cached_property
from pathlib import Path

import numpy as np
import shapely
from shapely.geometry import LineString, MultiPolygon, Polygon

from ..errors import BoardError, show
from ..path import piece_points
from ..spec import COPPER_LAYERS, Arc
from .fields import (ALTERNATE_WORD, CHUNK, KEEP, MASK, MAX_FIELD, SPACES, Distinct, FieldRows, all_blank, block_floats,
                     byte_window, field_texts, first_row_of, index_ranges, prefix8, row_floats, word_patterns)
from .sexpr import Quoted, Structure, _heads, error_at, scan, unescape

VERSIONS = {20211014: "6.0", 20221018: "7.0", 20240108: "8.0", 20241229: "9.0"}
"""Version stamps of the major releases (KiCad's own version history; 10.0 files carry 2026xxxx)."""
OLDEST_VERSION = 20211014
MAX_COORD_MM = 2147.483647
"""KiCad stores board coordinates as signed 32-bit counts of nanometres (from memory of its file format)."""
MAX_SIZE_MM = 1000.0
"""No track, via or pad is wider than a metre (the spec's largest length); anything beyond is a broken file."""
NEWEST_CHECKED = 20260206
COPPER_TYPES = frozenset({"signal", "power", "mixed", "jumper"})
ISLAND_MODES = {0: "always", 1: "never", 2: "area"}
KEEPOUT_FLAGS = ("tracks", "vias", "pads", "copperpour", "footprints")
KEEPOUT_DEFAULT_ALLOWED = {"tracks": False, "vias": False, "pads": True, "copperpour": False, "footprints": True}
"""What KiCad 6 assumed for a keepout flag left out of a rule area (measured with 6.0.11, see the KiCad fact sheet)."""
KNOWN_TOP = frozenset({
    "version", "generator", "generator_version", "general", "paper", "page", "title_block", "layers", "setup",
    "property", "net", "net_class", "footprint", "segment", "arc", "via", "zone", "group", "dimension", "target",
    "image", "table", "generated", "embedded_fonts", "embedded_files", "text", "text_box", "teardrops", "point",
    "barcode", "module",
})

_NUM = rb"[-+0-9.eE]+"
_TWO = rb"(" + _NUM + rb"\s+" + _NUM + rb")\s*"
_NAME = rb'("(?:[^"\\]|\\.)*"|[^\s()"]+)\s*'
_LOCKED = rb"(?:\(locked(?:\s+\w+)?\s*\)\s*)?"
_PAD = re.compile(
    rb"\(pad\s+" + _NAME + rb"([a-z_]+)\s+([a-z_]+)\s+(?:locked\s+)?\(at\s+" + _TWO + rb"(?:(" + _NUM
    + rb")\s*)?\)\s*" + _LOCKED + rb"\(size\s+" + _TWO + rb"\)")
_SEGMENT_FIELDS = (("start", 2, True), ("end", 2, True), ("width", 1, True), ("layer", 1, False), ("net", 1, False))
_ARC_FIELDS = (("start", 2, True), ("mid", 2, True), ("end", 2, True), ("width", 1, True), ("layer", 1, False),
               ("net", 1, False))
_VIA_FIELDS = (("at", 2, True), ("size", 1, True), ("drill", 1, True), ("layers", 2, False), ("net", 1, False))
"""Fields read from each track item: head, how many values, numeric; tree rows give them in this order."""
_STRING_TOKEN = re.compile(rb'"(?:[^"\\]|\\.)*"|[^\s"]+')
_NET_NAME = re.compile(rb'\(net\s+"((?:[^"\\]|\\.)*)"\s*\)')
_NET_DECLARATION = re.compile(rb'\(net\s+([^\s()"]+)\s+("(?:[^"\\]|\\.)*"|[^\s()"]+)\s*\)')
_XY = re.compile(rb"\(xy\s+([^()]*)\)")


@dataclass(frozen=True)
class Dielectric:
    """One dielectric of the stack-up, between copper layers ``above`` and ``below``.

    With sub-layers, ``thickness`` is their sum, ``epsilon_r`` the series value
    h / sum(h_i / er_i) (stacked parallel-plate capacitors, basic electrostatics)
    and ``loss_tangent`` the series value of ``series_loss_tangent``.
    """

    name: str
    kind: str
    thickness: float | None
    epsilon_r: float | None
    loss_tangent: float | None
    material: str
    above: str
    below: str
    sublayers: tuple[tuple[float | None, float | None], ...] = ()


@dataclass(frozen=True)
class Stackup:
    """Copper layers (name, thickness) top to bottom and the dielectrics between them."""

    copper: tuple[tuple[str, float | None], ...]
    dielectrics: tuple[Dielectric, ...]

    def between(self, a: str, b: str) -> tuple[float | None, float | None]:
        """Distance (mm) and series permittivity of the dielectric between copper layers a and b.

        The distance includes the copper of layers strictly between them; the
        permittivity counts dielectrics only (series capacitors, as above).
        None where the stack-up leaves a value out.
        """
        names = [n for n, _ in self.copper]
        if a not in names or b not in names or a == b:
            return None, None
        i, j = sorted((names.index(a), names.index(b)))
        between = set(names[i:j + 1])
        layers = [d for d in self.dielectrics if d.above in between and d.below in between]
        if not layers or any(d.thickness is None for d in layers):
            return None, None
        h = sum(d.thickness for d in layers)
        inner = [t for n, t in self.copper[i + 1:j]]
        if any(t is None for t in inner):
            return None, None
        er = None if any(d.epsilon_r is None for d in layers) else h / sum(d.thickness / d.epsilon_r for d in layers)
        return h + sum(inner), er

    def loss_tangent(self, a: str, b: str) -> float | None:
        """Series loss tangent of the dielectrics between copper layers a and b (``series_loss_tangent``)."""
        names = [n for n, _ in self.copper]
        if a not in names or b not in names or a == b:
            return None
        i, j = sorted((names.index(a), names.index(b)))
        between = set(names[i:j + 1])
        layers = [d for d in self.dielectrics if d.above in between and d.below in between]
        return series_loss_tangent([(d.thickness, d.epsilon_r, d.loss_tangent) for d in layers])


def series_loss_tangent(layers) -> float | None:
    """Loss tangent of dielectric slabs (h, er, tan d) stacked between two plates; None if any value is missing.

    Each slab is a capacitor with complex permittivity er (1 - j tan d); in series,
    h / e = sum(h_i / e_i).  To first order in tan d, 1 / (er (1 - j t)) = (1 + j t) / er,
    so the real parts give the series er and the imaginary parts
    tan d = sum(h_i tan d_i / er_i) / sum(h_i / er_i): each slab's loss weighted by
    its share of the voltage across the stack (series capacitors; complex
    permittivity as in Pozar, Microwave Engineering, 4th ed., sec. 1.3, from memory).
    """
    layers = list(layers)
    if not layers or any(v is None or v <= 0 for h, er, _ in layers for v in (h, er)) \
            or any(t is None for _, _, t in layers):
        return None
    weights = [h / er for h, er, _ in layers]
    return sum(w * t for w, (_, _, t) in zip(weights, layers)) / sum(weights)


@dataclass(frozen=True)
class Segments:
    """Straight tracks: (n, 2) start and end, width, copper-layer index, net index, byte span."""

    start: np.ndarray
    end: np.ndarray
    width: np.ndarray
    layer: np.ndarray
    net: np.ndarray
    span: np.ndarray

    def __len__(self) -> int:
        return len(self.width)


@dataclass(frozen=True)
class Arcs:
    """Arc tracks through three points: (n, 2) start, mid and end, width, layer index, net index, byte span."""

    start: np.ndarray
    mid: np.ndarray
    end: np.ndarray
    width: np.ndarray
    layer: np.ndarray
    net: np.ndarray
    span: np.ndarray

    def __len__(self) -> int:
        return len(self.width)


@dataclass(frozen=True)
class Vias:
    """Vias: (n, 2) position, pad size, drill, (n, 2) top and bottom copper-layer index, kind, net, span."""

    at: np.ndarray
    size: np.ndarray
    drill: np.ndarray
    layers: np.ndarray
    kind: tuple[str, ...]
    net: np.ndarray
    span: np.ndarray

    def __len__(self) -> int:
        return len(self.size)


@dataclass(frozen=True)
class PadArray:
    """Every pad of every footprint, found without parsing footprints: (n, 2) absolute position,
    (n, 2) size, rotation as written, owning footprint (index into ``Board.footprint_spans``), byte span."""

    at: np.ndarray
    size: np.ndarray
    rotation: np.ndarray
    footprint: np.ndarray
    span: np.ndarray

    def __len__(self) -> int:
        return len(self.rotation)


@dataclass(frozen=True)
class Zone:
    """A copper zone or a rule area (``keepout`` set).  Outline coordinates are absolute, also inside footprints.

    ``outline`` is the first polygon with every further ``(polygon ...)`` entry as a
    hole, which is how KiCad reads a zone outline back.  ``fill_spans`` are the
    byte spans of its ``filled_polygon`` items (read them with ``Board.zone_fill``).
    ``keepout`` maps tracks/vias/pads/copperpour/footprints to True when allowed.
    """

    layers: tuple[str, ...]
    net: int
    net_name: str
    name: str
    rings: tuple[np.ndarray, ...]
    outline: Polygon | MultiPolygon
    clearance: float | None
    min_thickness: float | None
    priority: int
    island_removal: str
    island_area_min: float | None
    keepout: dict[str, bool] | None
    filled: bool
    fill_spans: tuple[tuple[int, int], ...]
    footprint: str | None
    span: tuple[int, int]

    @property
    def is_rule_area(self) -> bool:
        return self.keepout is not None


@dataclass(frozen=True)
class Pad:
    """A footprint pad; ``at`` is the absolute board position, ``copper`` the copper layers it is on."""

    number: str
    kind: str
    shape: str
    at: tuple[float, float]
    rotation: float
    size: tuple[float, float]
    drill: float | None
    layers: tuple[str, ...]
    copper: tuple[str, ...]
    net: int
    net_name: str


@dataclass(frozen=True)
class FootprintPolygon:
    """A filled copper polygon drawn in a footprint (``fp_poly``), in board coordinates, stroke included."""

    layer: str
    polygon: Polygon


@dataclass(frozen=True)
class Footprint:
    """A placed footprint; ``layer`` is F.Cu, or B.Cu when it was flipped to the back.

    ``polygons`` are its filled ``fp_poly`` items on copper layers, moved from the
    footprint's own frame to the board (the file keeps them local; a flip is already
    in those local coordinates, so position and rotation are all it takes).
    """

    reference: str
    value: str
    lib_id: str
    at: tuple[float, float]
    rotation: float
    layer: str
    pads: tuple[Pad, ...]
    span: tuple[int, int]
    polygons: tuple[FootprintPolygon, ...] = ()

    def to_board(self, x: float, y: float) -> tuple[float, float]:
        """Footprint-local point to board coordinates: (X + x cos t + y sin t, Y - x sin t + y cos t), y down."""
        return _to_board(self.at, self.rotation, x, y)


class BoxIndex:
    """Axis-aligned boxes (lo, hi: (n, 2)) on a uniform grid, for window queries without a pass over every box.

    Each box is filed under the grid cell of its lower-left corner; the cell is as
    large as 99 % of the boxes, so a box reaches at most one cell beyond its own and
    a window query reads one run of the sorted cell keys per grid column it spans.
    The few larger boxes are always tested.  Build: one sort; query: numpy only,
    costing what lies near the window, not what is on the board.
    """

    def __init__(self, lo: np.ndarray, hi: np.ndarray):
        self.lo, self.hi = np.asarray(lo, dtype=np.float64), np.asarray(hi, dtype=np.float64)
        n = len(self.lo)
        extent = (self.hi - self.lo).max(axis=1) if n else np.zeros(0)
        span = float((self.hi.max(axis=0) - self.lo.min(axis=0)).max()) if n else 1.0
        self.cell = max(float(np.quantile(extent, 0.99)) if n else 0.0, span / 1024, 1e-3)
        wide = extent > self.cell
        self.wide = np.flatnonzero(wide)
        narrow = np.flatnonzero(~wide)
        self.origin = self.lo[narrow].min(axis=0) if len(narrow) else np.zeros(2)
        cells = np.floor((self.lo[narrow] - self.origin) / self.cell).astype(np.int64)
        self.shape = tuple(int(v) for v in (cells.max(axis=0) + 1)) if len(narrow) else (0, 0)
        keys = cells[:, 0] * max(self.shape[1], 1) + cells[:, 1]
        order = np.argsort(keys, kind="stable")
        self.order, self.keys = narrow[order], keys[order]

    def __len__(self) -> int:
        return len(self.lo)

    def query(self, x0: float, y0: float, x1: float, y1: float) -> np.ndarray:
        """Indices (ascending) of the boxes that touch the window [x0, x1] x [y0, y1]."""
        nx, ny = self.shape
        ox, oy, c = float(self.origin[0]), float(self.origin[1]), self.cell
        # A box filed in cell k starts at or after k * c and ends by (k + 2) * c; one more cell absorbs rounding.
        cx0, cy0 = max(math.floor((x0 - ox) / c) - 2, 0), max(math.floor((y0 - oy) / c) - 2, 0)
        cx1, cy1 = min(math.floor((x1 - ox) / c), nx - 1), min(math.floor((y1 - oy) / c), ny - 1)
        parts = [self.wide]
        if cx0 <= cx1 and cy0 <= cy1:
            columns = np.arange(cx0, cx1 + 1) * ny
            first = np.searchsorted(self.keys, columns + cy0, side="left")
            last = np.searchsorted(self.keys, columns + cy1, side="right")
            parts += [self.order[a:b] for a, b in zip(first.tolist(), last.tolist()) if b > a]
        rows = np.concatenate(parts)
        lo, hi = self.lo[rows], self.hi[rows]
        hit = (lo[:, 0] <= x1) & (hi[:, 0] >= x0) & (lo[:, 1] <= y1) & (hi[:, 1] >= y0)
        return np.sort(rows[hit])


def arc_circles(start: np.ndarray, mid: np.ndarray, end: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Centres (n, 2) and radii of the circles through each arc's three points (circumcentre formula)."""
    (ax, ay), (mx, my), (bx, by) = start.T, mid.T, end.T
    d = 2 * (ax * (my - by) + mx * (by - ay) + bx * (ay - my))
    safe = np.where(np.abs(d) < 1e-15, 1.0, d)
    ux = ((ax**2 + ay**2) * (my - by) + (mx**2 + my**2) * (by - ay) + (bx**2 + by**2) * (ay - my)) / safe
    uy = ((ax**2 + ay**2) * (bx - mx) + (mx**2 + my**2) * (ax - bx) + (bx**2 + by**2) * (mx - ax)) / safe
    centre = np.column_stack([ux, uy])
    radius = np.hypot(ax - ux, ay - uy)
    straight = np.abs(d) < 1e-15
    centre[straight] = ((start + end) / 2)[straight]
    radius[straight] = np.hypot(*(end - start)[straight].T) / 2
    return centre, radius


def _to_board(at: tuple[float, float], rotation: float, x: float, y: float) -> tuple[float, float]:
    t = math.radians(rotation)
    c, s = math.cos(t), math.sin(t)
    return (at[0] + x * c + y * s, at[1] - x * s + y * c)


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


class _Reader:
    """Turns a scanned board into a Board; collects warnings as it goes and parses footprints on demand."""

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

    # ---- header, layers, nets, stack-up ----

    def _version(self) -> tuple[int, str]:
        spans = self.s.spans_of("version")
        if not len(spans):
            raise self.fail(self.s.root[0], "board has no (version ...) stamp")
        node = self.s.parse(*map(int, spans[0]))
        try:
            version = int(node[1])
        except (IndexError, ValueError):
            raise self.fail(int(spans[0][0]), "bad (version ...) stamp: expected a date number like 20211014") from None
        if version < OLDEST_VERSION:
            raise self.fail(int(spans[0][0]), f"version {version} is older than KiCad 6.0 ({OLDEST_VERSION}); "
                                              "open and save the board in KiCad 6 or newer first")
        if version > NEWEST_CHECKED:
            self.warnings.append(f"version {version} is newer than the newest this reader was checked with "
                                 f"({NEWEST_CHECKED}); unknown tokens are ignored")
        generator = ""
        gen = self.s.spans_of("generator")
        if len(gen):
            g = self.s.parse(*map(int, gen[0]))
            generator = str(g[1]) if len(g) > 1 else ""
        return version, generator

    def _layers(self) -> tuple[tuple[str, ...], dict[str, str]]:
        trees = self.tree("layers")
        if not trees:
            raise self.fail(self.s.root[0], "board has no (layers ...) table")
        node, start = trees[0]
        copper, names = [], {}
        for entry in node[1:]:
            if not isinstance(entry, list) or len(entry) < 3:
                raise self.fail(start, f"bad entry in the layer table: {show(entry)}")
            name, kind = str(entry[1]), str(entry[2])
            names[name] = str(entry[3]) if len(entry) > 3 else name
            if kind in COPPER_TYPES and name.endswith(".Cu"):
                if name not in COPPER_LAYERS:
                    raise self.fail(start, f"copper layer {name!r} in the layer table is not one of KiCad's F.Cu, "
                                    "In1.Cu .. In30.Cu, B.Cu")
                copper.append(name)
        if not copper:
            raise self.fail(start, "the layer table lists no copper layer")
        return tuple(sorted(copper, key=_copper_order)), names

    def _nets(self) -> tuple[list[str], dict[int, int]]:
        """Net table: declared (code, name) pairs (6-9), then names used by reference (10)."""
        nets, codes, codes_by_name = [""], {0: 0}, {"": 0}
        for node, start in self._net_declarations():
            if len(node) < 3:
                raise self.fail(start, f"bad net declaration {show(node)}: expected (net CODE \"NAME\")")
            try:
                code = int(node[1])
            except ValueError:
                raise self.fail(start, f"bad net code {node[1]!r}: expected a whole number") from None
            name = str(node[2])
            if code == 0:
                continue
            if name not in codes_by_name:
                codes_by_name[name] = len(nets)
                nets.append(name)
            codes[code] = codes_by_name[name]
        known = set(nets)
        named = _NET_NAME.findall(self.data) if self.version > max(VERSIONS) or len(nets) == 1 else []
        for raw in dict.fromkeys(named):
            name = unescape(raw.decode("utf-8"))
            if name not in known:
                known.add(name)
                nets.append(name)
        return nets, codes

    def _net_declarations(self) -> list[tuple[list, int]]:
        """The (net CODE NAME) items as trees; written the plain way they are read by one pattern pass."""
        spans = self.s.spans_of("net")
        if len(spans):
            found = list(_NET_DECLARATION.finditer(self.data, int(spans[0, 0]), int(spans[-1, 1])))
            if len(found) == len(spans) and all(m.span() == (a, b) for m, (a, b) in zip(found, spans.tolist())):
                return [(["net", m.group(1).decode("utf-8"), _atom_text(m.group(2))], m.start()) for m in found]
        return self.tree("net")

    def net_of(self, token, offset: int) -> int:
        """Net index of a net reference: a code (6-9) or a quoted name (10)."""
        if isinstance(token, Quoted) or token[:1] == '"':
            name = str(token) if isinstance(token, Quoted) else unescape(token[1:-1])
            if name not in self.net_lookup:
                raise self.fail(offset, f"net {name!r} is not in the board's net list")
            return self.net_lookup[name]
        try:
            return self.net_codes[int(token)]
        except (ValueError, KeyError):
            raise self.fail(offset, f"net {token} is not declared in the board's net list") from None

    def _stackup(self) -> Stackup | None:
        setup = self.tree("setup")
        stack = _child(setup[0][0], "stackup") if setup else None
        if stack is None:
            self.warnings.append("board has no stack-up (setup > stackup): give stackup.er and stackup.h yourself")
            return None
        copper: list[tuple[str, float | None]] = []
        pending: list[tuple] = []
        dielectrics: list[Dielectric] = []
        for layer in _children(stack, "layer"):
            name = str(layer[1])
            kind = str(_atom(layer, "type", default=""))
            if kind == "copper" or name in self.copper:
                copper.append((name, _num(layer, "thickness")))
                dielectrics.extend(Dielectric(*d[:7], name, d[7]) for d in pending)
                pending = []
            elif kind in ("core", "prepreg") or name.startswith("dielectric"):
                groups, current = [], []
                for item in layer[2:]:
                    if item == "addsublayer":
                        groups.append(current)
                        current = []
                    elif isinstance(item, list):
                        current.append(item)
                groups.append(current)
                where = self.data.find(b'"' + name.encode("utf-8") + b'"', setup[0][1])
                parts = [(self._dielectric_value(["x", *g], "thickness", name, where),
                          self._dielectric_value(["x", *g], "epsilon_r", name, where),
                          _num(["x", *g], "loss_tangent"), str(_atom(["x", *g], "material", default="")))
                         for g in groups]
                h = None if any(p[0] is None for p in parts) else sum(p[0] for p in parts)
                er = h / sum(p[0] / p[1] for p in parts) if h and all(p[1] for p in parts) else None
                if er is None:
                    self.warnings.append(f"stack-up layer {name!r} has no epsilon_r or thickness")
                tan_d = series_loss_tangent(p[:3] for p in parts)
                pending.append((name, kind, h, er, tan_d, parts[0][3], copper[-1][0] if copper else "",
                                tuple((p[0], p[1]) for p in parts) if len(parts) > 1 else ()))
        if [n for n, _ in copper] != list(self.copper):
            self.warnings.append("stack-up copper layers differ from the layer table; stack-up ignored")
            return None
        return Stackup(tuple(copper), tuple(dielectrics))

    def _dielectric_value(self, node: list, head: str, layer: str, offset: int) -> float | None:
        """A dielectric's thickness (> 0 mm) or epsilon_r (1 to 100); None when left out, an error when unusable."""
        value = _atom(node, head)
        if value is None:
            return None
        if head == "thickness":
            usable = _is_number(value) and 0 < float(value) <= MAX_SIZE_MM
            allowed = f"> 0 and at most {MAX_SIZE_MM:g} mm"
        else:
            usable, allowed = _is_number(value) and 1 <= float(value) <= 100, "from 1 to 100"
        if not usable:
            raise self.fail(max(offset, 0), f"stack-up layer {layer!r}: ({head} {value}) must be a number {allowed}")
        return float(value)

    # ---- tracks and vias: located from the structure scan, numbers converted in one C call ----

    def _track_rows(self, head: str, fields: tuple[tuple[str, int, bool], ...], tree_row,
                    words: bool = False) -> FieldRows:
        """Field values of every item with this head, in file order.

        Numbers come out as one float array (converted like ``float``, so exact);
        other fields as codes into their distinct texts, each text the field's
        first ``count`` tokens as the tree reads them.  Rows the bulk reader cannot
        vouch for (see ``_locate``) are parsed as trees, which also raise the
        errors; with ``words`` the tree row starts with the item's bare words.
        Items are read in chunks so the temporary arrays stay small and reused.
        """
        spans = self.s.spans_of(head)
        codes_of, names = self.s.head_kinds()
        key = head.encode()
        items = np.flatnonzero(codes_of == names.index(key)) if key in names else np.zeros(0, np.int64)
        n = len(spans)
        numeric = [k for k, f in enumerate(fields) if f[2]]
        counts = tuple(fields[k][1] for k in numeric)
        heads = [fields[k][0] for k in numeric]
        follows = {heads.index("start"): heads.index("end")} if "start" in heads and "end" in heads else {}
        texts = [k for k, f in enumerate(fields) if not f[2]]
        # np.full writes the arrays once, front to back: filling them chunk by chunk later faults pages in far slower
        numbers = np.full((n, sum(counts)), 0.0)
        codes = np.full((n, len(texts)), 0, np.int64)
        kind_codes = np.full(n if words else 0, 0, np.int64)
        sure = np.full(n, False)
        distinct = [Distinct() for _ in texts]
        kinds = Distinct()
        for a in range(0, n, CHUNK):
            part = slice(a, a + CHUNK)
            starts, lengths, ok, gap = self._locate(items[part], len(key), tuple(f[0] for f in fields), words)
            ok = self._bulk_numbers(starts[:, numeric], lengths[:, numeric], counts, ok, numbers[part], follows)
            rows = np.flatnonzero(ok)
            if len(rows) and texts:
                found = field_texts(self.data, starts[rows][:, texts], lengths[rows][:, texts], distinct)
                codes[part][rows] = found
                for j, k in enumerate(texts):
                    rejected = np.array([v is None for v in distinct[j].normal(fields[k][1])], dtype=bool)
                    ok[rows[rejected[found[:, j]]]] = False
            if words and len(rows):
                kind_codes[part][rows] = field_texts(self.data, gap[rows, :1], gap[rows, 1:], [kinds])[:, 0]
            sure[part] = ok
        for i in np.flatnonzero(~sure).tolist():
            a, b = (int(v) for v in spans[i])
            row = tree_row(self.s.parse(a, b), a)
            if words:
                kind_codes[i] = kinds.put(row[0])
                row = row[1:]
            values = _row_numbers(row, tuple(numeric), counts)
            if values is None:
                raise self.fail(a, f"{head} item with a field that is not a number")
            numbers[i] = values
            for j, k in enumerate(texts):
                codes[i, j] = distinct[j].put(row[k])
        return FieldRows(spans, numbers, [(codes[:, j], d.normal(fields[k][1])) for j, (d, k) in
                                      enumerate(zip(distinct, texts))],
                     (kind_codes, [_via_kind(w) for w in kinds.words()]) if words else None)

    def _locate(self, rows: np.ndarray, head_length: int, heads: tuple[str, ...], words: bool):
        """Where each wanted field's values start and how long they are (n, fields), for these top-level items.

        A row is sure when each wanted field is its first child with that head,
        written "(head " and holding no list.  Most items have the fields as their
        first children in the wanted order (KiCad's writer), which a few array
        lookups confirm; the rest are looked up by name among their children.
        With ``words``, every gap between the item's children must be blank; the
        gap after the item's own head (where KiCad writes "blind" or "micro") is
        returned as (start, length) per row.
        """
        s = self.s
        o2, c2 = s.level_index(2)
        first, last = o2[rows], c2[rows]
        words_of = [name.encode() for name in heads]
        many = 2 * len(heads)
        width = 8 * -(-many // 8)
        sure = (last - first > many) & (first + width < len(s.step))
        starts = np.zeros((len(rows), len(heads)), s.paren.dtype)
        lengths = np.zeros_like(starts)
        if sure.any():
            at = np.where(sure, first + 1, 0)
            steps = byte_window(s.step, width)[at].view(np.uint64)
            for j in range(steps.shape[1]):
                keep = min(8, many - 8 * j)
                sure &= (steps[:, j] & MASK[keep]) == (ALTERNATE_WORD & MASK[keep])
            del steps
            parens = byte_window(s.paren, many)[at]
            starts[:] = parens[:, 0::2] + np.array([len(w) + 2 for w in words_of], dtype=parens.dtype)
            lengths[:] = parens[:, 1::2] - starts
            found = prefix8(self.data, parens[:, 0::2] + 1)
            del parens
            for k, word in enumerate(words_of):
                sure &= (found[:, k] & MASK[len(word) + 1]) == word_patterns([word], b" ")[0]
            del found
        other = np.flatnonzero(~sure)
        if len(other):
            sure[other] = self._locate_by_name(first[other], last[other], words_of, starts, lengths, other)
        gap = None
        if words:
            gap = np.empty((len(rows), 2), np.int64)
            gap[:, 0] = s.paren[first] + (head_length + 1)
            gap[:, 1] = s.paren[np.minimum(first + 1, last)] - gap[:, 0]
            done = np.flatnonzero(sure)
            sure[done] = self._blank_between(first[done], last[done])
        return starts, lengths, sure, gap

    def _locate_by_name(self, first: np.ndarray, last: np.ndarray, words: list[bytes], starts: np.ndarray,
                        lengths: np.ndarray, rows: np.ndarray) -> np.ndarray:
        """``_locate`` for items in another field order: each field is the first child with its head.

        Sure only where every child begins with a bare lower-case word and none is
        another spelling of a wanted head ("(start\\t", "(layers"...), so the tree
        cannot take a different child for a field.
        """
        s = self.s
        n = len(rows)
        index, owner = index_ranges(first + 1, last)
        depth, step = s.depth[index], s.step[index]
        child = (depth == 3) & (step > 0)
        co, cc, row_of = index[child], index[(depth == 2) & (step < 0)], owner[child]
        op = s.paren[co].astype(np.int64)
        cl = s.paren[cc].astype(np.int64)
        flat = cc == co + 1
        pre = prefix8(self.data, op + 1)
        sure = np.ones(n, dtype=bool)
        sure[row_of[(pre & np.uint64(0xFF)) - np.uint64(97) >= np.uint64(26)]] = False
        for k, word in enumerate(words):
            exact = (pre & MASK[len(word) + 1]) == word_patterns([word], b" ")[0]
            near = ((pre & MASK[len(word)]) == word_patterns([word], b"")[0]) & ~exact
            sure[row_of[near]] = False
            hit = np.flatnonzero(exact)
            r = row_of[hit]
            if len(r):
                keep = np.ones(len(r), dtype=bool)
                np.not_equal(r[1:], r[:-1], out=keep[1:])
                hit, r = hit[keep], r[keep]
            found = np.zeros(n, dtype=bool)
            found[r] = flat[hit]
            sure &= found
            starts[rows[r], k] = op[hit] + (len(word) + 2)
            lengths[rows[r], k] = cl[hit] - starts[rows[r], k]
        return sure

    def _blank_between(self, first: np.ndarray, last: np.ndarray) -> np.ndarray:
        """True for items (paren indices of their "(" and ")") whose children are separated by blanks only."""
        s = self.s
        index, owner = index_ranges(first, last + 1)
        after = np.flatnonzero((s.depth[index] == 2) & (s.step[index] < 0))
        ends = s.paren[index[after + 1]].astype(np.int64)
        blank = all_blank(self.data, s.paren[index[after]].astype(np.int64) + 1, ends)
        sure = np.ones(len(first), dtype=bool)
        sure[owner[after[~blank]]] = False
        return sure

    def _bulk_numbers(self, starts: np.ndarray, lengths: np.ndarray, counts: tuple[int, ...], sure: np.ndarray,
                      out: np.ndarray, follows: dict[int, int] | None = None) -> np.ndarray:
        """Numbers of the sure rows into ``out``; a row whose fields are not ``counts`` plain numbers becomes unsure.

        Every field of a row is cut out of the file as a fixed-width block padded
        with spaces and must hold ``counts[k] - 1`` spaces and no control
        character (tabs, line ends); all blocks then go through ``np.fromstring``
        (see ``block_floats``).  It converts with the routine behind ``float``
        (so bit for bit equal) and must read every byte, so each token gives one
        number or more, and a field holds at most spaces + 1 tokens: the total
        count proves every field gave exactly its count.  Anything else (a name,
        "1_0", "1e5e3", "1 ") fails and is re-read through the tree.
        """
        sure = sure & ((lengths > 0) & (lengths <= MAX_FIELD)).all(axis=1)
        rows = np.flatnonzero(sure)
        if not len(rows) or not counts:
            return sure
        size = len(self.data)
        width = 8 * (int(lengths[rows].max()) // 8 + 1)
        if int(starts[rows].max()) + width > size:
            sure[rows[(starts[rows] + width > size).any(axis=1)]] = False
            rows = np.flatnonzero(sure)
        if not len(rows):
            return sure
        length = lengths[rows]
        block = byte_window(self.data, width)[starts[rows]]
        keep = KEEP[width // 8][length]
        words = block.view(np.uint64)
        words &= keep
        words |= ~keep & SPACES
        del keep, words
        inner = np.count_nonzero(block == 32, axis=-1) - (width - length)
        good = inner[:, 0] == counts[0] - 1
        for k in range(1, len(counts)):
            good &= inner[:, k] == counts[k] - 1
        del inner
        if block.min() < 32:
            good &= block.reshape(len(rows), -1).min(axis=1) >= 32
        if not good.all():
            sure[rows[~good]] = False
            rows, block = rows[good], block[good]
        values = block_floats(block, counts, follows)
        if values is None:
            total = sum(counts)
            values = np.array([row_floats(line, total) for line in block.reshape(len(rows), -1)]).reshape(-1, total)
        if not np.isfinite(values).all():
            finite = np.isfinite(values).all(axis=1)
            sure[rows[~finite]] = False
            rows, values = rows[finite], values[finite]
        if len(rows) == len(out):
            out[:] = values
        else:
            out[rows] = values
        return sure

    # ---- pads: one regular-expression pass, straight into numpy ----

    def _fast(self, spans: np.ndarray, patterns: tuple[re.Pattern, ...], tree_row) -> list[tuple]:
        """One row of field texts per item; items the patterns miss are read from their tree."""
        if not len(spans):
            return []
        starts = spans[:, 0]
        first, last = int(starts[0]), int(spans[-1, 1])
        pattern = patterns[-1]
        head = pattern.pattern[:pattern.pattern.index(rb"\s")].replace(b"\\(", b"(") + b" "
        follows = np.frombuffer(self.data, dtype=np.uint8)[starts + len(head) - 1]
        if (follows == 32).all() and self.data.count(head) == len(starts):
            # Each item holds one occurrence of "(head " and there is no other, so when a pattern
            # matches as often as there are items, the matches are the items, in file order.
            for candidate in patterns:
                rows = candidate.findall(self.data, first, last)
                if len(rows) == len(starts):
                    return rows
        matches = list(pattern.finditer(self.data, first, last))
        rows = [m.groups() for m in matches]
        found = [m.start() for m in matches]
        if len(found) == len(starts) and np.array_equal(np.asarray(found, dtype=np.int64), starts):
            return rows
        good = dict(zip(found, rows))
        return [good[a] if a in good else tree_row(self.s.parse(a, b), a) for a, b in spans.tolist()]

    def _numbers(self, rows: list[tuple], spans: np.ndarray, fields: tuple[int, ...], counts: tuple[int, ...],
                 tree_row) -> np.ndarray:
        """Float columns from the given fields (field k holds counts[k] numbers); bad rows re-read from their tree.

        The patterns already fix how many tokens each field holds, so one join and
        one conversion per field is exact; a token that is not a number sends the
        rows through the tree, which names the item's line and column.
        """
        width = sum(counts)
        if not rows:
            return np.zeros((0, width))
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                columns = [np.fromstring(b" ".join([r[f] for r in rows]), sep=" ") for f in fields]
            if all(len(c) == n * len(rows) for c, n in zip(columns, counts)):
                out = np.hstack([c.reshape(-1, n) for c, n in zip(columns, counts)])
                if np.isfinite(out).all():
                    return out
        except ValueError:
            pass
        out = np.empty((len(rows), width))
        for i, row in enumerate(rows):
            values = _row_numbers(row, fields, counts)
            if values is None:
                a, b = (int(v) for v in spans[i])
                values = _row_numbers(tree_row(self.s.parse(a, b), a), fields, counts)
                if values is None:
                    raise self.fail(a, f"{self.heads_at(a)} item with a field that is not a number")
            out[i] = values
        return out

    def heads_at(self, start: int) -> str:
        m = re.compile(rb"\(\s*([^\s()\"]+)").match(self.data, start)
        return m.group(1).decode("utf-8", "replace") if m else "?"

    def _layer_lut(self, names: list[bytes | None]) -> tuple[np.ndarray, list[int]]:
        """Copper-layer index of each distinct layer text (-1 where unused), and the texts that are no copper layer."""
        lut = np.full(len(names), -1, dtype=np.int16)
        bad = []
        for i, v in enumerate(names):
            if v is None:
                continue
            name = _text(v.strip())
            if name in self.copper:
                lut[i] = self.copper.index(name)
            else:
                bad.append(i)
        return lut, bad

    def _layer_column(self, codes: np.ndarray, names: list[bytes | None], spans: np.ndarray, what: str) -> np.ndarray:
        """Copper-layer index per row; the first row (file order) on a layer that is no copper layer is an error."""
        lut, bad = self._layer_lut(names)
        if bad:
            row = first_row_of(codes, bad)
            if row is not None:
                name = _text(names[int(codes[row])].strip())
                raise self.fail(int(spans[row, 0]),
                                f"{what} on layer {name!r}, which is not a copper layer of this board")
        return lut[codes]

    def _net_column(self, codes: np.ndarray, names: list[bytes | None], spans: np.ndarray) -> np.ndarray:
        """Net index per row; the first row (file order) naming an unknown net is an error."""
        lut = np.zeros(len(names), dtype=np.int32)
        bad = []
        for i, v in enumerate(names):
            if v is None:
                continue
            try:
                lut[i] = self.net_of(v.decode("utf-8"), 0)
            except BoardError:
                bad.append(i)
        if bad:
            row = first_row_of(codes, bad)
            if row is not None:
                self.net_of(names[int(codes[row])].decode("utf-8"), int(spans[row, 0]))
        return lut[codes]

    def _segments(self) -> Segments:
        r = self._track_rows("segment", _SEGMENT_FIELDS, self._segment_tree)
        nums = r.numbers
        return Segments(nums[:, 0:2], nums[:, 2:4], nums[:, 4], self._layer_column(*r.texts[0], r.spans, "segment"),
                        self._net_column(*r.texts[1], r.spans), r.spans)

    def _arcs(self) -> Arcs:
        r = self._track_rows("arc", _ARC_FIELDS, self._arc_tree)
        nums = r.numbers
        return Arcs(nums[:, 0:2], nums[:, 2:4], nums[:, 4:6], nums[:, 6],
                    self._layer_column(*r.texts[0], r.spans, "arc"), self._net_column(*r.texts[1], r.spans), r.spans)

    def _vias(self) -> Vias:
        r = self._track_rows("via", _VIA_FIELDS, self._via_tree, words=True)
        nums, spans = r.numbers, r.spans
        codes, texts = r.texts[0]
        pairs: list[tuple[bytes, bytes] | None] = []
        lonely = []
        for i, v in enumerate(texts):
            names = _STRING_TOKEN.findall(v) if v is not None else []
            if v is not None and len(names) < 2:
                lonely.append(i)
            pairs.append((names[0], names[-1]) if len(names) >= 2 else None)
        if lonely and (row := first_row_of(codes, lonely)) is not None:
            raise self.fail(int(spans[row, 0]), "via without two layers in (layers ...)")
        tops = self._layer_column(codes, [p[0] if p else None for p in pairs], spans, "via")
        bottoms = self._layer_column(codes, [p[1] if p else None for p in pairs], spans, "via")
        layers = np.sort(np.column_stack([tops, bottoms]), axis=1) if len(spans) else np.zeros((0, 2), np.int16)
        kind_codes, kind_names = r.kinds
        kinds = tuple(kind_names[c] for c in kind_codes.tolist())
        return Vias(nums[:, 0:2], nums[:, 2], nums[:, 3], layers, kinds, self._net_column(*r.texts[1], spans), spans)

    def _field(self, node: list, head: str, count: int, start: int, numeric: bool = True) -> bytes:
        child = _child(node, head)
        if child is None or len(child) < count + 1 or (numeric and len(child) != count + 1):
            raise self.fail(start, f"{node[0]} item: expected ({head} followed by {count} value(s))")
        values = child[1:count + 1]
        if numeric and not all(_is_number(v) for v in values):
            shown = " ".join(map(str, values))
            raise self.fail(start, f"{node[0]} item: ({head} {shown}) holds something that is not a number")
        return b" ".join(_as_token(v) for v in values)

    def _segment_tree(self, node: list, start: int) -> tuple:
        f = self._field
        return (f(node, "start", 2, start), f(node, "end", 2, start), f(node, "width", 1, start),
                f(node, "layer", 1, start, False), f(node, "net", 1, start, False))

    def _arc_tree(self, node: list, start: int) -> tuple:
        f = self._field
        return (f(node, "start", 2, start), f(node, "mid", 2, start), f(node, "end", 2, start),
                f(node, "width", 1, start), f(node, "layer", 1, start, False), f(node, "net", 1, start, False))

    def _via_tree(self, node: list, start: int) -> tuple:
        f = self._field
        words = b" ".join(a.encode() for a in node[1:] if isinstance(a, str) and not isinstance(a, Quoted))
        return (words, f(node, "at", 2, start), f(node, "size", 1, start), f(node, "drill", 1, start),
                f(node, "layers", 2, start, False), f(node, "net", 1, start, False))

    # ---- zones: small trees, fills skipped ----

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

    # ---- footprints, on demand ----

    def footprint(self, start: int, end: int) -> Footprint:
        node = self.s.parse(start, end, skip=("filled_polygon", "fill_segments", "model", "zone"))
        at = _child(node, "at")
        if at is None or len(at) < 3 or not _is_number(at[1]) or not _is_number(at[2]):
            raise self.fail(start, "footprint without (at X Y)")
        rot = float(at[3]) if len(at) > 3 and _is_number(at[3]) else 0.0
        reference = value = ""
        for text in _children(node, "fp_text"):
            if len(text) > 2 and text[1] in ("reference", "value"):
                reference, value = (str(text[2]), value) if text[1] == "reference" else (reference, str(text[2]))
        for prop in _children(node, "property"):
            if len(prop) > 2 and prop[1] in ("Reference", "Value"):
                reference, value = (str(prop[2]), value) if prop[1] == "Reference" else (reference, str(prop[2]))
        fp = Footprint(reference, value, str(node[1]) if len(node) > 1 else "", (float(at[1]), float(at[2])), rot,
                       str(_atom(node, "layer", default="F.Cu")), (), (start, end))
        pads = tuple(self._pad(p, fp, start) for p in _children(node, "pad"))
        polygons = tuple(p for item in _children(node, "fp_poly") for p in self._copper_polygon(item, fp, start))
        return Footprint(fp.reference, fp.value, fp.lib_id, fp.at, rot, fp.layer, pads, (start, end), polygons)

    def _copper_polygon(self, node: list, fp: Footprint, start: int) -> list[FootprintPolygon]:
        """A filled ``fp_poly`` on copper (KiCad 6-9 spellings) in board coordinates; [] for anything else.

        A polygon that cannot be read is left out with a warning: any footprint may hold one, and only
        ebglayout's own footprints are measured from these.
        """
        layer = _child(node, "layer")
        layers = expand_layers(str(layer[1]), self.copper, self.layer_names) if layer is not None and len(layer) > 1 \
            else []
        if not layers or _atom(node, "fill") not in ("solid", "yes"):
            return []
        try:
            ring = _ring(_child(node, "pts"))
        except (TypeError, ValueError, IndexError):
            ring = ()
        if len(ring) < 3:
            self.warnings.append(f"footprint {fp.reference}: an fp_poly on {layers[0]} without 3 readable points "
                                 f"(byte {start}) was left out")
            return []
        polygon = shapely.make_valid(Polygon([fp.to_board(x, y) for x, y in ring.tolist()]))
        width = _num(_child(node, "stroke"), "width") or _num(node, "width")
        if width:
            polygon = polygon.buffer(width / 2)
        return [FootprintPolygon(name, polygon) for name in layers]

    def _pad(self, node: list, fp: Footprint, start: int) -> Pad:
        if len(node) < 4:
            raise self.fail(start, f"footprint {fp.reference}: pad without number, kind and shape")
        at, size = _child(node, "at"), _child(node, "size")
        if (at is None or size is None or len(at) < 3 or len(size) < 3
                or not all(_is_number(v) for v in (at[1], at[2], size[1], size[2]))):
            raise self.fail(start, f"footprint {fp.reference}: pad {node[1]} needs (at X Y) and (size W H) with "
                            "finite numbers")
        if not all(0 < float(v) <= MAX_SIZE_MM for v in size[1:3]):
            raise self.fail(start, f"footprint {fp.reference}: pad {node[1]} (size {size[1]} {size[2]}) must be > 0 "
                            f"and at most {MAX_SIZE_MM:g} mm")
        drill_node = _child(node, "drill")
        drills = [float(v) for v in drill_node[1:] if _is_number(v)] if drill_node is not None else []
        net_field = _child(node, "net")
        net = self.net_of(net_field[1], start) if net_field is not None and len(net_field) > 1 else 0
        layers = _child(node, "layers")
        names = tuple(str(v) for v in layers[1:] if not isinstance(v, list)) if layers is not None else ()
        copper: list[str] = []
        for name in names:
            copper.extend(n for n in expand_layers(name, self.copper, self.layer_names) if n not in copper)
        return Pad(
            number=str(node[1]), kind=str(node[2]), shape=str(node[3]),
            at=fp.to_board(float(at[1]), float(at[2])),
            rotation=float(at[3]) if len(at) > 3 and _is_number(at[3]) else 0.0,
            size=(float(size[1]), float(size[2])), drill=min(drills) if drills else None, layers=names,
            copper=tuple(copper), net=net, net_name=self.nets[net],
        )

    def pads(self, fp_spans: np.ndarray) -> PadArray:
        """Positions and sizes of all pads by one pattern pass; footprint placement from each (at ...)."""
        rows = np.flatnonzero(self.s.heads == b"footprint")
        if not len(rows):
            z = np.zeros((0, 2))
            return PadArray(z, z, np.zeros(0), np.zeros(0, np.int32), np.zeros((0, 2), np.int64))
        spans, heads, owner = self.children(rows)
        fp_of_row = {int(r): i for i, r in enumerate(rows.tolist())}
        places = np.full((len(rows), 3), np.nan)
        for (a, b), parent in zip(spans[heads == b"at"].tolist(), owner[heads == b"at"].tolist()):
            try:
                values = [float(v) for v in self.data[a + 3:b - 1].split()[:3]]
            except ValueError:
                raise self.fail(a, "footprint (at ...) should hold numbers") from None
            if len(values) < 2:
                raise self.fail(a, "footprint (at X Y) needs two numbers")
            places[fp_of_row[parent]] = values + [0.0] * (3 - len(values))
        if np.isnan(places[:, :2]).any():
            missing = int(rows[int(np.argmax(np.isnan(places[:, 0])))])
            raise self.fail(int(self.s.items[missing, 0]), "footprint without (at X Y)")
        pad_spans = spans[heads == b"pad"]
        pad_fp = np.array([fp_of_row[int(p)] for p in owner[heads == b"pad"].tolist()], dtype=np.int32)
        rows_text = self._fast(pad_spans, (_PAD,), self._pad_tree)
        nums = self._numbers(rows_text, pad_spans, (3, 5), (2, 2), self._pad_tree)
        rotation = np.array([float(r[4]) if r[4] else 0.0 for r in rows_text])
        t = np.radians(places[pad_fp, 2])
        x, y = nums[:, 0], nums[:, 1]
        at = np.column_stack([places[pad_fp, 0] + x * np.cos(t) + y * np.sin(t),
                              places[pad_fp, 1] - x * np.sin(t) + y * np.cos(t)])
        return PadArray(at, nums[:, 2:4], rotation, pad_fp, pad_spans)

    def _pad_tree(self, node: list, start: int) -> tuple:
        at = _child(node, "at")
        if len(node) < 4 or at is None or len(at) < 3 or not all(_is_number(v) for v in at[1:]):
            raise self.fail(start, "pad without number, kind, shape and (at X Y [ANGLE])")
        return (_as_token(node[1]), str(node[2]).encode(), str(node[3]).encode(),
                f"{at[1]} {at[2]}".encode(), str(at[3]).encode() if len(at) > 3 else None,
                self._field(node, "size", 2, start))

    # ---- board edge ----

    def _outline(self) -> Polygon | MultiPolygon | None:
        open_lines: list[np.ndarray] = []
        rings: list[np.ndarray] = []
        codes, names = self.s.head_kinds()
        graphic = np.isin(codes, [i for i, name in enumerate(names) if name.startswith(b"gr_")])
        for a, b in self.s.items[graphic].tolist():
            if self.data.find(b"Edge.Cuts", a, b) >= 0:
                node = self.s.parse(a, b)
                if _on_edge(node):
                    self._edge_item(node, None, a, open_lines, rings)
        self._footprint_edges(open_lines, rings)
        if not open_lines and not rings:
            self.warnings.append("no board outline on Edge.Cuts")
            return None
        if open_lines:
            merged = shapely.line_merge(shapely.set_precision(
                shapely.MultiLineString([LineString(p) for p in open_lines]), 1e-6))
            for part in getattr(merged, "geoms", [merged]):
                coords = np.asarray(part.coords)
                if len(coords) >= 4 and np.allclose(coords[0], coords[-1], atol=1e-6):
                    rings.append(coords)
                else:
                    self.warnings.append(f"Edge.Cuts outline is not closed: open end near "
                                         f"({coords[0][0]:g}, {coords[0][1]:g})")
        result = None
        for ring in rings:
            poly = shapely.make_valid(Polygon(ring))
            result = poly if result is None else result.symmetric_difference(poly)
        if result is None or result.is_empty:
            return None
        polys = [g for g in getattr(result, "geoms", [result]) if isinstance(g, Polygon)]
        return polys[0] if len(polys) == 1 else MultiPolygon(polys)

    def _footprint_edges(self, open_lines: list, rings: list) -> None:
        """Edge.Cuts drawings inside footprints: only footprints that mention Edge.Cuts are parsed."""
        rows = self.footprint_rows()
        if not len(rows):
            return
        items = self.s.items
        end = int(items[rows[-1], 1])
        hits, at = [], self.data.find(b"Edge.Cuts", int(items[rows[0], 0]), end)
        while at >= 0:
            hits.append(at)
            at = self.data.find(b"Edge.Cuts", at + 9, end)
        owners = np.searchsorted(items[:, 0], np.asarray(hits, dtype=np.int64), side="right") - 1 if hits else []
        for parent in sorted({int(o) for o in owners if o >= 0 and self.s.heads[int(o)] == b"footprint"}):
            a, b = (int(v) for v in items[parent])
            fp = self.footprint(a, b)
            node = self.s.parse(a, b, skip=("filled_polygon", "fill_segments", "model", "zone", "pad"))
            for item in node[1:]:
                if isinstance(item, list) and item and str(item[0]).startswith("fp_") and _on_edge(item):
                    self._edge_item(item, fp, a, open_lines, rings)

    def footprint_rows(self) -> np.ndarray:
        return np.flatnonzero(self.s.heads == b"footprint")

    def _edge_item(self, node: list, fp: Footprint | None, offset: int, open_lines: list, rings: list) -> None:
        kind = str(node[0])[3:]
        far = _far_point(node)
        if far is not None:
            raise self.fail(offset, f"{node[0]} on Edge.Cuts: ({' '.join(show(v) for v in far[:3])}) must lie "
                            f"within +-{MAX_COORD_MM} mm (KiCad's board range)")
        move = (lambda p: fp.to_board(*p)) if fp is not None else (lambda p: p)
        try:
            if kind == "line":
                open_lines.append(np.array([move(_xy(node, "start")), move(_xy(node, "end"))]))
            elif kind == "arc":
                if _child(node, "mid") is None:
                    raise ValueError("arc without (mid ...); KiCad 5 arcs are not read")
                arc = Arc(move(_xy(node, "start")), move(_xy(node, "mid")), move(_xy(node, "end")))
                open_lines.append(np.array(piece_points(arc)))
            elif kind == "rect":
                (x0, y0), (x1, y1) = _xy(node, "start"), _xy(node, "end")
                rings.append(np.array([move(p) for p in ((x0, y0), (x1, y0), (x1, y1), (x0, y1), (x0, y0))]))
            elif kind == "circle":
                (cx, cy), (ex, ey) = _xy(node, "center"), _xy(node, "end")
                r = math.hypot(ex - cx, ey - cy)
                n = max(16, math.ceil(math.pi / math.acos(max(-1.0, 1 - 0.25e-3 / r)))) if r > 1e-3 else 16
                t = np.linspace(0, 2 * math.pi, n + 1)
                pts = np.column_stack([cx + r * np.cos(t), cy + r * np.sin(t)])
                pts[-1] = pts[0]
                rings.append(np.array([move(p) for p in pts]))
            elif kind == "poly":
                ring = _ring(_child(node, "pts"))
                rings.append(np.array([move(p) for p in np.vstack([ring, ring[:1]])]))
            elif kind == "curve":
                p0, p1, p2, p3 = _ring(_child(node, "pts"))[:4]
                t = np.linspace(0, 1, 65)[:, None]
                pts = (1 - t) ** 3 * p0 + 3 * (1 - t) ** 2 * t * p1 + 3 * (1 - t) * t ** 2 * p2 + t ** 3 * p3
                open_lines.append(np.array([move(p) for p in pts]))
        except (TypeError, ValueError, IndexError) as err:
            raise self.fail(offset, f"bad {node[0]} on Edge.Cuts: {err}") from None


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


def _far_point(node: list) -> list | None:
    """The first (start|mid|end|center|xy X Y) under ``node`` with a finite coordinate outside KiCad's range."""
    for item in node[1:]:
        if not isinstance(item, list) or not item:
            continue
        if item[0] in ("start", "mid", "end", "center", "xy") and any(
                _is_number(v) and abs(float(v)) > MAX_COORD_MM for v in item[1:3]):
            return item
        found = _far_point(item) if item[0] in ("pts", "arc") else None
        if found is not None:
            return found
    return None


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


# ---- small tree helpers ----

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


def _via_kind(words: bytes) -> str:
    found = words.split()
    return "blind" if b"blind" in found else "micro" if b"micro" in found else "through"


def _on_edge(node: list) -> bool:
    layer = _child(node, "layer")
    return layer is not None and len(layer) > 1 and layer[1] == "Edge.Cuts"


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


def _copper_order(name: str) -> tuple[int, int]:
    """Stack position from the layer name: F.Cu, In1.Cu, In2.Cu, ..., B.Cu."""
    if name == "F.Cu":
        return (0, 0)
    if name == "B.Cu":
        return (2, 0)
    m = re.fullmatch(r"In(\d+)\.Cu", name)
    return (1, int(m.group(1))) if m else (1, 10_000)


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
