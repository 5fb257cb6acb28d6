"""What a read board holds: stack-up, track arrays, zones, footprints and pads, and a box index for window queries.

Plain data, filled by the readers (``board_*.py``) and read by checks, placement and export glue.  Coordinates are
KiCad's: mm, y pointing down.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from shapely.geometry import MultiPolygon, Polygon

MAX_COORD_MM = 2147.483647
"""KiCad stores board coordinates as signed 32-bit counts of nanometres (from memory of its file format)."""
MAX_SIZE_MM = 1000.0
"""No track, via or pad is wider than a metre (the spec's largest length); anything beyond is a broken file."""


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
