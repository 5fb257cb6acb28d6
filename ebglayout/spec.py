"""Filter spec: one declarative parameter table, a TOML reader and the frozen spec object.

The table ``PARAMETERS`` drives the reader, the CLI's ``params`` listing and the
README's parameter list, so a key is described in one place only.  Lengths are
mm inside.  Each key's value is parsed by its kind's parser in ``spec_values.py``,
which applies the file's ``units`` (or a unit on the value itself); this module
flattens the keys, fills defaults and checks keys against each other.
"""
from __future__ import annotations

import difflib
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from .errors import SpecError
from .spec_values import COPPER_LAYERS, PARSERS, STYLES, Arc, Line, TrackObstacle, ValueReader, ViaObstacle
from .units import LENGTH_UNITS_MM, format_mm

__all__ = [
    "COPPER_LAYERS", "MAX_NAME_BYTES", "MAX_TOML_BYTES", "PARAMETERS", "PARAMETER_BY_KEY", "REQUIRED", "STYLES",
    "Arc", "FilterSpec", "Line", "Parameter", "TrackObstacle", "ViaObstacle",
    "load_spec", "read_toml", "spec_from_dict",
]

MAX_NAME_BYTES = 100
"""Output files are named after the filter; this leaves room for suffixes and staging names within 255 bytes."""

REQUIRED = object()


@dataclass(frozen=True)
class Parameter:
    """One spec key: dotted name, value kind, default (or REQUIRED) and a one-line description."""

    key: str
    kind: str
    default: Any
    help: str


PARAMETERS: tuple[Parameter, ...] = (
    Parameter("name", "text", None, "filter name used for output files (default: the spec file's stem)"),
    Parameter("units", "text", "mm", "unit of bare numbers: mm, um, nm, mil, thou, in, cm"),
    Parameter("target", "frequency", None, "notch target: a frequency (\"8GHz\") or an NRZ data rate "
              "(\"16Gbps\" targets 16 GHz, the second harmonic of the 8 GHz fundamental)"),
    Parameter("pair.width", "length", REQUIRED, "width of each trace"),
    Parameter("pair.spacing", "length", REQUIRED, "edge-to-edge gap between the two traces"),
    Parameter("pair.path", "path", REQUIRED, "centre-line: [[x,y],...] with {arc=[[x1,y1],[xm,ym],[x2,y2]]} items for arcs"),
    Parameter("pair.layer", "layer", "F.Cu", "copper layer the pair is routed on: F.Cu, In1.Cu .. In30.Cu or B.Cu"),
    Parameter("pair.nets", "nets", ("P", "N"), "net names [positive, negative]; the positive trace runs on the left of the path"),
    Parameter("plane.layers", "layers", ("In1.Cu",), "plane layer(s) that get the cut; two layers = stripline, same cut in both"),
    Parameter("plane.net", "text", "GND", "net of the reference plane"),
    Parameter("plane.outline", "points", None, "plane/board outline polygon [[x,y],...] used by the edge checks"),
    Parameter("cut.style", "choice", "straight", "cell style: " + " | ".join(STYLES)),
    Parameter("cut.patch", "size", None, "patch size [along the path, across the path]"),
    Parameter("cut.patches", "sizes", None, "one [along, across] per cell, for staggered cells (replaces patch and count)"),
    Parameter("cut.count", "int", 1, "number of cells in the row"),
    Parameter("cut.slot", "length", REQUIRED, "slot (etched gap) width around each patch"),
    Parameter("cut.web", "length", 0.0, "plane copper between neighbouring cells' slots; 0 = neighbours share one slot"),
    Parameter("cut.start", "length", None, "arc length along the path where the first cell's slot begins "
              "(default: centred on the longest straight run that fits)"),
    Parameter("cut.passes", "int", 1, "folded: how many times the pair crosses the patch row"),
    Parameter("cut.lane_gap", "length", None, "folded: edge-to-edge gap between neighbouring passes "
              "(default max(3 x width, 2 x spacing), common practice against self-crosstalk)"),
    Parameter("cut.turn_clearance", "length", None, "folded: straight run between the outer slot edge and a U-turn "
              "(default one lane pitch)"),
    Parameter("cut.bridge.width", "length", None, "bridged: width of each bridge"),
    Parameter("cut.bridge.length", "length", None, "bridged: length of each bridge (>= slot; longer pockets the patch)"),
    Parameter("cut.bridge.per_side", "int", 1, "bridged: bridges on each side the pair does not cross"),
    Parameter("stackup.er", "number", REQUIRED, "relative permittivity of the cavity dielectric: between each cut plane "
              "and the next plane beyond it, away from the pair (also for stripline)"),
    Parameter("stackup.h", "length", REQUIRED, "thickness of that cavity dielectric (at most 10 mm)"),
    Parameter("stackup.pair_h", "heights", None, "dielectric thickness between the pair and each cut plane: one length, "
              "or one per entry of plane.layers in that order (default stackup.h; at most 10 mm)"),
    Parameter("stackup.pair_er", "number", None, "relative permittivity of the dielectric around the pair "
              "(default stackup.er)"),
    Parameter("stackup.tan_d", "number", 0.02, "loss tangent of all dielectrics (0.02: common practice for "
              "FR-4-class laminates at GHz)"),
    Parameter("stackup.er_tolerance", "number", 0.05, "relative tolerance of er for the estimate sweep (0.05 = +-5 %)"),
    Parameter("stackup.h_tolerance", "number", 0.10, "relative tolerance of h for the estimate sweep (0.10 = +-10 %)"),
    Parameter("stackup.etch_tolerance", "length", 0.025, "etch tolerance for the model's corners: slots this much "
              "wider or narrower, bridges and patches the reverse (0.025 mm: common practice)"),
    Parameter("rules.min_slot", "length", 0.1, "least slot width the fab can etch"),
    Parameter("rules.min_copper", "length", 0.1, "least copper neck (web, bridge, patch) the fab can hold"),
    Parameter("rules.corner_margin", "length", 0.4, "least distance from a trace crossing to a patch corner"),
    Parameter("rules.min_angle", "number", 80.0, "least angle in degrees between a trace and the slot edge it crosses"),
    Parameter("rules.crossings", "int", None, "exact number of full slot crossings required per trace"),
    Parameter("rules.min_crossings", "int", 2, "least number of full slot crossings per trace when crossings is not given"),
    Parameter("rules.symmetry", "length", 0.005, "largest P/N offset in arc length between paired crossings"),
    Parameter("rules.skew_limit_ps", "number", 1.0, "largest P/N delay difference the cut and a folded route may add, in ps"),
    Parameter("rules.bridge_keep", "length", None, "least distance from a bridge to a trace (default 3 x stackup.h)"),
    Parameter("rules.edge_clearance", "length", 0.5, "least distance from the cut to the plane outline"),
    Parameter("rules.target_tolerance", "number", 0.15, "relative band around target the light notch check accepts "
              "(used when no model estimate is made, e.g. re-checks of a board)"),
    Parameter("rules.rejection_db", "number", -10.0, "Scc21 level in dB at or below which the model counts a "
              "frequency as rejected (about 10 dB of rejection: common practice)"),
    Parameter("rules.target_margin", "number", 0.005, "relative spread of the target harmonic the model's guaranteed "
              "stopband must cover (0.005: a 0.5 % spread-spectrum clock, common practice)"),
    Parameter("gds", "layermap", (), "GDSII layer map: {\"In1.Cu/slot\" = [layer, datatype], ...}"),
    Parameter("obstacles.tracks", "tracks", (), "other copper: [{path=[[x,y],...], width=, layer=, net=}]"),
    Parameter("obstacles.vias", "vias", (), "vias and pads: [{at=[x,y], diameter=, net=}] (through all layers)"),
)
PARAMETER_BY_KEY = {p.key: p for p in PARAMETERS}
_GROUPS = {"pair", "plane", "cut", "stackup", "rules", "obstacles", "cut.bridge"}


@dataclass(frozen=True)
class FilterSpec:
    """A validated filter spec, all lengths in mm, all frequencies in Hz."""

    name: str
    pair_width: float
    pair_spacing: float
    path: tuple[Line | Arc, ...]
    pair_layer: str
    nets: tuple[str, str]
    plane_layers: tuple[str, ...]
    plane_net: str
    plane_outline: tuple[tuple[float, float], ...] | None
    style: str
    patches: tuple[tuple[float, float], ...]
    slot: float
    web: float
    start: float | None
    passes: int
    lane_gap: float
    turn_clearance: float
    bridge_width: float | None
    bridge_length: float | None
    bridges_per_side: int
    er: float
    h: float
    pair_h: tuple[float, ...]
    pair_er: float
    tan_d: float
    er_tolerance: float
    h_tolerance: float
    min_slot: float
    min_copper: float
    corner_margin: float
    min_angle: float
    crossings: int | None
    min_crossings: int
    symmetry: float
    skew_limit_ps: float
    bridge_keep: float
    edge_clearance: float
    target_tolerance: float
    etch_tolerance: float
    rejection_db: float
    target_margin: float
    target_hz: float | None
    gds_layers: tuple[tuple[str, int, int], ...] = ()
    track_obstacles: tuple[TrackObstacle, ...] = ()
    via_obstacles: tuple[ViaObstacle, ...] = ()
    units: str = field(default="mm", compare=False)
    """The spec file's length unit: every length shown to the user is written in it (lengths inside stay mm)."""
    echo: dict = field(default_factory=dict, compare=False, hash=False)
    stackup_from_board: frozenset[str] = field(default=frozenset(), compare=False, hash=False)
    """Stack-up keys ("stackup.er", ...) whose values `place` took from a board (see stackup.stackup_of)."""

    @property
    def trace_offset(self) -> float:
        """Distance from the centre-line to each trace's centre."""
        return (self.pair_width + self.pair_spacing) / 2

    @property
    def count(self) -> int:
        return len(self.patches)

    @property
    def lane_pitch(self) -> float:
        """Centre-to-centre distance of neighbouring passes of a folded route."""
        return 2 * self.pair_width + self.pair_spacing + self.lane_gap


def load_spec(path: str | Path) -> FilterSpec:
    """Read and validate a spec file; raise SpecError with a one-line message on any problem."""
    path = Path(path)
    return spec_from_dict(read_toml(path), default_name=path.stem)


MAX_TOML_BYTES = 16 * 2**20
"""A spec or plan larger than this is not a spec; refusing it keeps every command within seconds."""


def read_toml(path: str | Path) -> dict:
    """Parse a UTF-8 TOML file (a leading byte-order mark is accepted); any problem is a one-line SpecError."""
    path = Path(path)
    try:
        data = path.read_bytes()
        if len(data) > MAX_TOML_BYTES:
            raise SpecError("spec", path.name, f"is {len(data)} bytes; a spec may be at most {MAX_TOML_BYTES} bytes")
        text = data.decode("utf-8-sig")
    except OSError as err:
        raise SpecError("spec", str(path),
                        f"cannot be read ({err.__class__.__name__}: {err.strerror or err})") from None
    except UnicodeDecodeError as err:
        raise SpecError("spec", path.name, f"is not UTF-8 text (byte {err.start}: {err.reason})") from None
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as err:
        raise SpecError("spec", path.name, f"is not valid TOML ({err})") from None
    except RecursionError:
        raise SpecError("spec", path.name, "nests arrays or tables too deeply to be a spec") from None


def spec_from_dict(raw: dict, default_name: str = "filter") -> FilterSpec:
    """Validate a spec given as the dict a TOML file parses to."""
    flat = _flatten(raw)
    units = flat.get("units", "mm")
    if not isinstance(units, str) or units.lower() not in LENGTH_UNITS_MM:
        raise SpecError("units", units, f"must be one of {', '.join(LENGTH_UNITS_MM)}")
    reader = _Reader(flat, units.lower())
    value = reader.value

    pair_width, pair_spacing = value("pair.width"), value("pair.spacing")
    style = value("cut.style")
    patches = _cell_sizes(reader)
    h, er = value("stackup.h"), value("stackup.er")
    spec = FilterSpec(
        name=_file_name(value("name") or default_name),
        pair_width=pair_width,
        pair_spacing=pair_spacing,
        path=value("pair.path"),
        pair_layer=value("pair.layer"),
        nets=value("pair.nets"),
        plane_layers=value("plane.layers"),
        plane_net=value("plane.net"),
        plane_outline=value("plane.outline"),
        style=style,
        patches=patches,
        slot=value("cut.slot"),
        web=value("cut.web"),
        start=value("cut.start"),
        passes=value("cut.passes"),
        lane_gap=value("cut.lane_gap") if flat.get("cut.lane_gap") is not None else max(3 * pair_width, 2 * pair_spacing),
        turn_clearance=0.0,
        bridge_width=value("cut.bridge.width"),
        bridge_length=value("cut.bridge.length"),
        bridges_per_side=value("cut.bridge.per_side"),
        er=er,
        h=h,
        pair_h=_pair_heights(reader, h),
        pair_er=value("stackup.pair_er") if flat.get("stackup.pair_er") is not None else er,
        tan_d=value("stackup.tan_d"),
        er_tolerance=value("stackup.er_tolerance"),
        h_tolerance=value("stackup.h_tolerance"),
        min_slot=value("rules.min_slot"),
        min_copper=value("rules.min_copper"),
        corner_margin=value("rules.corner_margin"),
        min_angle=value("rules.min_angle"),
        crossings=value("rules.crossings"),
        min_crossings=value("rules.min_crossings"),
        symmetry=value("rules.symmetry"),
        skew_limit_ps=value("rules.skew_limit_ps"),
        bridge_keep=value("rules.bridge_keep") if flat.get("rules.bridge_keep") is not None else 3 * h,
        edge_clearance=value("rules.edge_clearance"),
        target_tolerance=value("rules.target_tolerance"),
        etch_tolerance=value("stackup.etch_tolerance"),
        rejection_db=value("rules.rejection_db"),
        target_margin=value("rules.target_margin"),
        target_hz=value("target"),
        gds_layers=value("gds"),
        track_obstacles=value("obstacles.tracks"),
        via_obstacles=value("obstacles.vias"),
        units=units.lower(),
        echo=raw,
    )
    turn = value("cut.turn_clearance") if flat.get("cut.turn_clearance") is not None else spec.lane_pitch
    spec = _replace(spec, turn_clearance=turn)
    _check_relations(spec, reader)
    return spec


def _replace(spec: FilterSpec, **changes) -> FilterSpec:
    from dataclasses import replace

    return replace(spec, **changes)


def _file_name(name: object) -> str:
    if (not isinstance(name, str) or not name or any(c in name for c in '/\\:*?"<>|') or name.startswith(".")
            or not name.isprintable() or name != name.strip() or len(name.encode("utf-8")) > MAX_NAME_BYTES):
        raise SpecError("name", name, "must be a plain file name: printable, no path separators, no leading dot or "
                        f"surrounding spaces, at most {MAX_NAME_BYTES} bytes as UTF-8")
    return name


def _flatten(raw: dict, prefix: str = "") -> dict:
    """Dotted keys for the known groups; unknown keys are rejected with a did-you-mean."""
    flat: dict[str, Any] = {}
    for key, val in raw.items():
        dotted = f"{prefix}{key}"
        if dotted in _GROUPS and isinstance(val, dict) and dotted not in PARAMETER_BY_KEY:
            flat.update(_flatten(val, dotted + "."))
        elif dotted == "cut.bridge" and not isinstance(val, dict):
            raise SpecError(dotted, val, "must be a table {width=, length=, per_side=}")
        elif dotted in PARAMETER_BY_KEY:
            flat[dotted] = val
        else:
            known = [p.key for p in PARAMETERS] + sorted(_GROUPS)
            close = difflib.get_close_matches(dotted, known, n=1) if key else []
            hint = f"did you mean {close[0]!r}?" if close else "see `ebglayout params` for the keys"
            raise SpecError(dotted, val if not isinstance(val, dict) else "{...}", f"unknown key; {hint}")
    return flat


class _Reader(ValueReader):
    """Reads one dotted key with its kind's parser; defaults come from the table."""

    def value(self, key: str):
        param = PARAMETER_BY_KEY[key]
        if key not in self.flat or self.flat[key] is None:
            if param.default is REQUIRED:
                raise SpecError(key, "(missing)", f"is required: {param.help}")
            return param.default
        return PARSERS[param.kind](self, key, self.flat[key])


def _pair_heights(reader: _Reader, h: float) -> tuple[float, ...]:
    """stackup.pair_h as one value per plane layer; a single value applies to every plane."""
    planes = len(reader.value("plane.layers"))
    given = reader.value("stackup.pair_h")
    if given is None:
        return (h,) * planes
    if len(given) == 1:
        return given * planes
    if len(given) != planes:
        raise SpecError("stackup.pair_h", reader.flat["stackup.pair_h"],
                        f"must give one length, or one per entry of plane.layers ({planes})")
    return given


def _cell_sizes(reader: _Reader) -> tuple[tuple[float, float], ...]:
    flat = reader.flat
    if flat.get("cut.patches") is not None:
        if flat.get("cut.patch") is not None:
            raise SpecError("cut.patches", "[...]", "give either cut.patch with cut.count, or cut.patches, not both")
        sizes = reader.value("cut.patches")
        if flat.get("cut.count") is not None and flat["cut.count"] != len(sizes):
            raise SpecError("cut.count", flat["cut.count"], f"must equal the number of cut.patches ({len(sizes)}) or be left out")
        return sizes
    if flat.get("cut.patch") is None:
        raise SpecError("cut.patch", "(missing)", "is required (or cut.patches for staggered cells)")
    return (reader.value("cut.patch"),) * reader.value("cut.count")


def _check_relations(spec: FilterSpec, reader: _Reader) -> None:
    """Checks that involve more than one key."""
    smallest = min(min(a, b) for a, b in spec.patches)
    if spec.slot >= smallest:
        raise SpecError("cut.slot", reader.flat["cut.slot"],
                        f"must be > 0 and < the patch size ({format_mm(smallest)})")
    if spec.style == "bridged":
        if spec.bridge_width is None or spec.bridge_length is None:
            raise SpecError("cut.bridge", reader.flat.get("cut.bridge", "(missing)"),
                            "bridged style needs cut.bridge = {width=, length=}")
        if spec.bridge_length < spec.slot - 1e-9:
            raise SpecError("cut.bridge.length", reader.flat["cut.bridge.length"],
                            f"must be >= the slot width ({format_mm(spec.slot)}): a bridge spans the slot")
        for i, (a, b) in enumerate(spec.patches):
            need = spec.bridges_per_side * (spec.bridge_width + 2 * spec.slot) + spec.slot
            if need > a:
                raise SpecError("cut.bridge.per_side", spec.bridges_per_side,
                                f"bridges and their pockets need {format_mm(need)} along cell {i} but it is {format_mm(a)} long")
            if spec.bridge_length - spec.slot >= b / 2 - spec.trace_offset - spec.pair_width / 2:
                raise SpecError("cut.bridge.length", reader.flat["cut.bridge.length"],
                                f"the pocket ({format_mm(spec.bridge_length - spec.slot)} deep) would reach the traces of cell {i}")
    elif reader.flat.get("cut.bridge") is not None or reader.flat.get("cut.bridge.width") is not None:
        raise SpecError("cut.bridge", "{...}", f"only the bridged style takes bridges (cut.style is {spec.style!r})")
    if spec.style != "folded" and spec.passes != 1:
        raise SpecError("cut.passes", spec.passes, f"only the folded style takes passes (cut.style is {spec.style!r})")
    if spec.style == "folded" and spec.passes < 2:
        raise SpecError("cut.passes", spec.passes, "folded style needs at least 2 passes")
    if spec.pair_layer in spec.plane_layers:
        raise SpecError("plane.layers", list(spec.plane_layers), f"must not include the pair's own layer {spec.pair_layer!r}")
    across_need = 2 * spec.trace_offset + spec.pair_width
    for i, (a, b) in enumerate(spec.patches):
        if spec.style != "folded" and across_need >= b:
            raise SpecError("cut.patch" if reader.flat.get("cut.patch") is not None else f"cut.patches[{i}]",
                            [a, b], f"across size must exceed the pair's width ({format_mm(across_need)})")
    if spec.gds_layers:
        allowed_roles = {"slot", "patch", "bridge", "outline", "trace"}
        for name, _, _ in spec.gds_layers:
            layer, _, role = name.partition("/")
            if role not in allowed_roles or layer not in (*spec.plane_layers, spec.pair_layer):
                raise SpecError(f"gds.{name}", name, "keys are \"<plane layer>/<slot|patch|bridge|outline>\" "
                                "or \"<pair layer>/trace\"")
