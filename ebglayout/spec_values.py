"""A spec's values one at a time: the value kinds, their limits, parsers and the small value types.

``spec.py`` reads a whole spec through ``PARSERS``, one parser per ``Parameter.kind``; the parsers
only turn one raw TOML value into mm, Hz or a value type (path pieces, obstacles) and reject what is
out of range.  Checks that involve more than one key stay in ``spec.py``.
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, Callable

from .errors import SpecError
from .units import format_mm, parse_frequency, parse_length, snap

STYLES = ("straight", "folded", "bridged")
MAX_LENGTH_MM = 1000.0
"""No board dimension is larger than a metre; anything beyond is a unit mistake."""
MIN_LENGTH_MM = 0.001
"""No etched feature is narrower than 1 um; a smaller length is a unit mistake and would vanish on the 1 nm grid."""
MAX_PATH_POINTS = 2000
"""Points (and arc items) of a centre-line or an obstacle track: keeps every check and writer fast."""
MAX_OUTLINE_POINTS = 20000
"""Points of plane.outline, which a board's rounded Edge.Cuts (arcs split to a 0.25 um sagitta) may fill."""
MAX_ARC_RADIUS_MM = 10 * MAX_LENGTH_MM
"""A flatter arc is a straight line within the grid, and its centre would lie far off the board."""
COPPER_LAYERS = ("F.Cu", *(f"In{k}.Cu" for k in range(1, 31)), "B.Cu")
"""KiCad's copper layer names, spelled as KiCad spells them."""


@dataclass(frozen=True)
class Line:
    """Straight path piece from ``start`` to ``end`` (mm)."""

    start: tuple[float, float]
    end: tuple[float, float]


@dataclass(frozen=True)
class Arc:
    """Circular path piece through three points (mm)."""

    start: tuple[float, float]
    mid: tuple[float, float]
    end: tuple[float, float]


@dataclass(frozen=True)
class TrackObstacle:
    points: tuple[tuple[float, float], ...]
    width: float
    layer: str
    net: str = ""


@dataclass(frozen=True)
class ViaObstacle:
    at: tuple[float, float]
    diameter: float
    net: str = ""


class ValueReader:
    """What every parser reads through: the spec's flattened keys, its ``units`` and the length and point readers."""

    def __init__(self, flat: dict, units: str):
        self.flat, self.units = flat, units

    def length(self, key: str, raw: object, allow_zero: bool = False) -> float:
        mm = parse_length(raw, key, self.units)
        if not (MIN_LENGTH_MM <= mm <= MAX_LENGTH_MM or (allow_zero and mm == 0)):
            bound = "0 or from" if allow_zero else "from"
            raise SpecError(key, raw, f"must be {bound} {MIN_LENGTH_MM:g} mm (1 um) to {MAX_LENGTH_MM:g} mm "
                            f"(got {format_mm(mm)})")
        return mm

    def point(self, key: str, raw: object) -> tuple[float, float]:
        if not isinstance(raw, list) or len(raw) != 2:
            raise SpecError(key, raw, "must be a point [x, y]")
        x, y = (parse_length(c, key, self.units) for c in raw)
        if max(abs(x), abs(y)) > 10 * MAX_LENGTH_MM:
            raise SpecError(key, raw, "coordinates must lie within 10 m of the origin")
        return (x, y)


def _parse_text(reader: ValueReader, key: str, raw: object) -> str:
    if not isinstance(raw, str) or not raw.strip() or not raw.isprintable():
        raise SpecError(key, raw, "must be a non-empty string of printable characters")
    return raw


def _parse_layer(reader: ValueReader, key: str, raw: object) -> str:
    if raw not in COPPER_LAYERS:
        raise SpecError(key, raw, "must be a KiCad copper layer name: F.Cu, In1.Cu .. In30.Cu or B.Cu (as KiCad "
                        "spells them)")
    return raw


MAX_DIELECTRIC_MM = 10.0
"""Thickest dielectric a spec may give between two copper layers: a few times the thickest common boards (common
practice, from memory: about 3 to 7 mm), and within the range where the line formulas the model uses were fitted."""


def _thickness(reader: ValueReader, key: str, raw: object) -> float:
    mm = reader.length(key, raw)
    if mm > MAX_DIELECTRIC_MM:
        raise SpecError(key, raw, f"must be a dielectric thickness of at most {MAX_DIELECTRIC_MM:g} mm "
                        f"(got {format_mm(mm)})")
    return mm


def _parse_length(reader: ValueReader, key: str, raw: object) -> float:
    if key == "stackup.h":
        return _thickness(reader, key, raw)
    zero_ok = key in ("cut.web", "cut.start", "rules.corner_margin", "rules.symmetry", "rules.edge_clearance",
                      "rules.bridge_keep", "cut.turn_clearance", "stackup.etch_tolerance")
    return reader.length(key, raw, allow_zero=zero_ok)


def _parse_number(reader: ValueReader, key: str, raw: object) -> float:
    limits = {
        "stackup.er": (1.0, 30.0, "between 1 and 30"),
        "stackup.pair_er": (1.0, 30.0, "between 1 and 30"),
        "stackup.tan_d": (0.0, 0.2, "between 0 and 0.2"),
        "stackup.er_tolerance": (0.0, 0.5, "between 0 and 0.5"),
        "stackup.h_tolerance": (0.0, 0.5, "between 0 and 0.5"),
        "rules.min_angle": (0.0, 90.0, "between 0 and 90 degrees"),
        "rules.skew_limit_ps": (0.0, 1e4, "between 0 and 10000 ps"),
        "rules.target_tolerance": (0.0, 1.0, "between 0 and 1"),
        "rules.rejection_db": (-60.0, -1.0, "between -60 and -1 dB"),
        "rules.target_margin": (0.0, 0.5, "between 0 and 0.5"),
    }
    low, high, text = limits[key]
    if isinstance(raw, bool) or not isinstance(raw, (int, float)) or not math.isfinite(raw) or not low <= raw <= high:
        raise SpecError(key, raw, f"must be a number {text}")
    return float(raw)


def _parse_int(reader: ValueReader, key: str, raw: object) -> int:
    limits = {"cut.count": (1, 1000), "cut.passes": (1, 99), "cut.bridge.per_side": (1, 16),
              "rules.crossings": (1, 10000), "rules.min_crossings": (1, 10000)}
    low, high = limits[key]
    if isinstance(raw, bool) or not isinstance(raw, int) or not low <= raw <= high:
        raise SpecError(key, raw, f"must be a whole number from {low} to {high}")
    return raw


def _parse_choice(reader: ValueReader, key: str, raw: object) -> str:
    if raw not in STYLES:
        raise SpecError(key, raw, f"must be one of {', '.join(STYLES)}")
    return raw


def _parse_frequency(reader: ValueReader, key: str, raw: object) -> float:
    return parse_frequency(raw, key)


def _parse_size(reader: ValueReader, key: str, raw: object) -> tuple[float, float]:
    if not isinstance(raw, list) or len(raw) != 2:
        raise SpecError(key, raw, "must be [along, across], two lengths")
    return (reader.length(key, raw[0]), reader.length(key, raw[1]))


def _parse_sizes(reader: ValueReader, key: str, raw: object) -> tuple[tuple[float, float], ...]:
    if not isinstance(raw, list) or not raw or len(raw) > 1000:
        raise SpecError(key, raw, "must be a list of 1 to 1000 [along, across] sizes")
    return tuple(_parse_size(reader, f"{key}[{i}]", item) for i, item in enumerate(raw))


def _parse_nets(reader: ValueReader, key: str, raw: object) -> tuple[str, str]:
    if not isinstance(raw, list) or len(raw) != 2 or not all(isinstance(n, str) and n for n in raw) or raw[0] == raw[1]:
        raise SpecError(key, raw, "must be two different net names [positive, negative]")
    return (raw[0], raw[1])


def _parse_layers(reader: ValueReader, key: str, raw: object) -> tuple[str, ...]:
    if not isinstance(raw, list) or not 1 <= len(raw) <= 2 or len({str(n) for n in raw}) != len(raw):
        raise SpecError(key, raw, "must be one or two different layer names, e.g. [\"In1.Cu\"] or [\"In1.Cu\", \"In2.Cu\"]")
    return tuple(_parse_layer(reader, f"{key}[{i}]", name) for i, name in enumerate(raw))


def _parse_heights(reader: ValueReader, key: str, raw: object) -> tuple[float, ...]:
    if isinstance(raw, list):
        if not 1 <= len(raw) <= 2:
            raise SpecError(key, raw, "must be one length, or one length per entry of plane.layers")
        return tuple(_thickness(reader, f"{key}[{i}]", item) for i, item in enumerate(raw))
    return (_thickness(reader, key, raw),)



def _parse_points(reader: ValueReader, key: str, raw: object) -> tuple[tuple[float, float], ...]:
    if not isinstance(raw, list) or not 3 <= len(raw) <= MAX_OUTLINE_POINTS:
        raise SpecError(key, raw, f"must be a polygon of 3 to {MAX_OUTLINE_POINTS} points [[x,y],...]")
    points = tuple(reader.point(f"{key}[{i}]", p) for i, p in enumerate(raw))
    import shapely

    polygon = shapely.Polygon(points)
    if not polygon.is_valid or polygon.area <= 0:
        reason = shapely.is_valid_reason(polygon)
        raise SpecError(key, f"{len(points)} points", f"must be a simple polygon that does not cross itself ({reason})")
    return points


def _parse_path(reader: ValueReader, key: str, raw: object) -> tuple[Line | Arc, ...]:
    """Centre-line items: points continue the polyline; an arc item starts at the current point."""
    if not isinstance(raw, list) or not 2 <= len(raw) <= MAX_PATH_POINTS:
        raise SpecError(key, raw, f"must list 2 to {MAX_PATH_POINTS} points [[x0,y0],[x1,y1],...]")
    pieces: list[Line | Arc] = []
    current: tuple[float, float] | None = None
    for i, item in enumerate(raw):
        where = f"{key}[{i}]"
        if isinstance(item, dict):
            if set(item) != {"arc"} or not isinstance(item["arc"], list) or len(item["arc"]) != 3:
                raise SpecError(where, item, "an arc item must be {arc=[[x1,y1],[xm,ym],[x2,y2]]}")
            a, m, b = (reader.point(where, p) for p in item["arc"])
            if current is not None and math.dist(current, a) > 1e-6:
                raise SpecError(where, item, f"arc must start at the previous point ({current[0]:g}, {current[1]:g})")
            if _arc_radius(a, m, b) > MAX_ARC_RADIUS_MM or math.dist(a, b) < 1e-6:
                raise SpecError(where, item, "arc points must not coincide or lie on one line (on the 1 nm grid, the "
                                f"circle through them must have a radius of at most {MAX_ARC_RADIUS_MM:g} mm; "
                                "use a straight segment instead)")
            pieces.append(Arc(a, m, b))
            current = b
        else:
            p = reader.point(where, item)
            if current is not None:
                if math.dist(current, p) < 1e-6:
                    raise SpecError(where, item, "repeats the previous point (zero-length segment)")
                pieces.append(Line(current, p))
            current = p
    if not pieces:
        raise SpecError(key, raw, "must contain at least one segment")
    return tuple(pieces)


def _arc_radius(a: tuple[float, float], m: tuple[float, float], b: tuple[float, float]) -> float:
    """Radius of the circle through three points as the engine sees them, on the 1 nm grid (inf when collinear)."""
    (ax, ay), (mx, my), (bx, by) = ((snap(x), snap(y)) for x, y in (a, m, b))
    cross = (mx - ax) * (by - ay) - (my - ay) * (bx - ax)
    if cross == 0:
        return math.inf
    return math.dist(a, m) * math.dist(m, b) * math.dist(a, b) / (2 * abs(cross))


def _parse_layermap(reader: ValueReader, key: str, raw: object) -> tuple[tuple[str, int, int], ...]:
    if not isinstance(raw, dict):
        raise SpecError(key, raw, "must be a table {\"In1.Cu/slot\" = [layer, datatype], ...}")
    out = []
    for name, pair in sorted(raw.items()):
        if (not isinstance(pair, list) or len(pair) != 2
                or not all(isinstance(v, int) and not isinstance(v, bool) and 0 <= v <= 65535 for v in pair)):
            raise SpecError(f"{key}.{name}", pair, "must be [layer, datatype], whole numbers 0..65535")
        out.append((name, pair[0], pair[1]))
    return tuple(out)


def _parse_tracks(reader: ValueReader, key: str, raw: object) -> tuple[TrackObstacle, ...]:
    if not isinstance(raw, list):
        raise SpecError(key, raw, "must be a list of {path=[[x,y],...], width=, layer=}")
    out = []
    for i, item in enumerate(raw):
        where = f"{key}[{i}]"
        if not isinstance(item, dict) or not {"path", "width", "layer"} <= set(item) or set(item) - {"path", "width", "layer", "net"}:
            raise SpecError(where, item, "must be {path=[[x,y],...], width=, layer=} with optional net=")
        if not isinstance(item["path"], list) or not 2 <= len(item["path"]) <= MAX_PATH_POINTS:
            raise SpecError(f"{where}.path", item["path"], f"must list 2 to {MAX_PATH_POINTS} points")
        points = tuple(reader.point(f"{where}.path", p) for p in item["path"])
        out.append(TrackObstacle(points, reader.length(f"{where}.width", item["width"]),
                                 _parse_layer(reader, f"{where}.layer", item["layer"]), str(item.get("net", ""))))
    return tuple(out)


def _parse_vias(reader: ValueReader, key: str, raw: object) -> tuple[ViaObstacle, ...]:
    if not isinstance(raw, list):
        raise SpecError(key, raw, "must be a list of {at=[x,y], diameter=}")
    out = []
    for i, item in enumerate(raw):
        where = f"{key}[{i}]"
        if not isinstance(item, dict) or not {"at", "diameter"} <= set(item) or set(item) - {"at", "diameter", "net"}:
            raise SpecError(where, item, "must be {at=[x,y], diameter=} with optional net=")
        out.append(ViaObstacle(reader.point(f"{where}.at", item["at"]),
                               reader.length(f"{where}.diameter", item["diameter"]), str(item.get("net", ""))))
    return tuple(out)


PARSERS: dict[str, Callable[[ValueReader, str, object], Any]] = {
    "text": _parse_text, "length": _parse_length, "number": _parse_number, "int": _parse_int,
    "choice": _parse_choice, "frequency": _parse_frequency, "size": _parse_size, "sizes": _parse_sizes,
    "nets": _parse_nets, "layer": _parse_layer, "layers": _parse_layers, "heights": _parse_heights,
    "points": _parse_points, "path": _parse_path,
    "layermap": _parse_layermap, "tracks": _parse_tracks, "vias": _parse_vias,
}
