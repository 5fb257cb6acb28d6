"""GDSII export, read back and measured with KLayout's own DRC functions (klayout.db), not with our code."""
from __future__ import annotations

import struct
import tomllib
from pathlib import Path

import klayout.db as kdb
import pytest

from ebglayout.export import gds as gds_export
from ebglayout.export.gds import default_gds_layers, gds_layers, write_gds
from ebglayout.layout import ROLES, build_layout
from ebglayout.spec import spec_from_dict

from conftest import SAMPLES, SAMPLE_SPECS

NM = 1e-6
"""1 nm in mm: the GDS database unit and KLayout's dbu (0.001 um) for these files."""
NAMES = [p.stem for p in SAMPLE_SPECS]


@pytest.fixture(scope="module")
def gds_files(sample_layouts, tmp_path_factory):
    out = tmp_path_factory.mktemp("gds")
    return {name: write_gds(layout, out / f"{name}.gds") for name, layout in sample_layouts.items()}


def read_regions(path: Path) -> tuple[kdb.Layout, dict[tuple[int, int], kdb.Region]]:
    """KLayout layout and one merged Region per (layer, datatype) in the file."""
    ly = kdb.Layout()
    ly.read(str(path))
    top = ly.top_cell()
    regions = {}
    for index in ly.layer_indexes():
        info = ly.get_info(index)
        regions[(info.layer, info.datatype)] = kdb.Region(top.begin_shapes_rec(index)).merged()
    return ly, regions


def width_profile(region: kdb.Region, width_mm: float) -> tuple[int, int, float]:
    """KLayout width check (projection metrics) 2 um below and 2 um above the nominal width.

    Returns (violations at width - 2 um, violations at width + 2 um, least width KLayout measured, in mm).
    """
    nominal = round(width_mm / NM)
    below = region.width_check(nominal - 2000, False, kdb.Metrics.Projection)
    above = region.width_check(nominal + 2000, False, kdb.Metrics.Projection)
    least = min((ep.distance() for ep in above.each()), default=None)
    return below.count(), above.count(), None if least is None else least * NM


def test_units_and_top_cell(gds_files, sample_layouts):
    """KLayout reads a 1 nm database unit (dbu 0.001 um) and one top cell named after the filter."""
    for name, path in gds_files.items():
        ly = kdb.Layout()
        ly.read(str(path))
        assert ly.dbu == pytest.approx(0.001, rel=1e-12)
        assert [c.name for c in ly.top_cells()] == [sample_layouts[name].spec.name]


@pytest.mark.parametrize("name", NAMES)
def test_slots_exactly_slot_wide(name, gds_files, sample_layouts):
    """KLayout width_check: no violation at slot - 2 um, violations at slot + 2 um, least width = slot within 2 nm."""
    layout = sample_layouts[name]
    _, regions = read_regions(gds_files[name])
    layers = gds_layers(layout.spec)
    for plane in layout.spec.plane_layers:
        below, above, least = width_profile(regions[layers[f"{plane}/slot"]], layout.spec.slot)
        assert below == 0, f"{plane}: slot narrower than {layout.spec.slot} mm somewhere"
        assert above > 0, f"{plane}: width check found no slot edge at all"
        assert least == pytest.approx(layout.spec.slot, abs=2 * NM)


def test_bridges_exactly_bridge_wide(gds_files, sample_layouts):
    """KLayout width_check on the bridge layer of the bridged sample: every bridge is spec.bridge_width wide."""
    layout = sample_layouts["hx2_l2_tx_bridged"]
    spec = layout.spec
    _, regions = read_regions(gds_files["hx2_l2_tx_bridged"])
    region = regions[gds_layers(spec)[f"{spec.plane_layers[0]}/bridge"]]
    assert region.count() == sum(len(c.bridges) for c in layout.cells)
    below, above, least = width_profile(region, spec.bridge_width)
    assert below == 0 and above > 0
    assert least == pytest.approx(spec.bridge_width, abs=2 * NM)


@pytest.mark.parametrize("name", NAMES)
def test_area_and_holes_per_layer(name, gds_files, sample_layouts):
    """KLayout's area of each merged layer equals shapely's area of the engine geometry within 1e-6 mm^2,
    and KLayout recovers every hole from the keyholed boundaries (GDSII has no holes of its own)."""
    layout = sample_layouts[name]
    layers = gds_layers(layout.spec)
    _, regions = read_regions(gds_files[name])
    expected = {}
    for cut in layout.cuts:
        for role in ROLES:
            expected[layers[f"{cut.layer}/{role}"]] = cut.role(role)
    for key, geom in expected.items():
        region = regions.get(key, kdb.Region())
        assert region.area() * NM * NM == pytest.approx(geom.area, abs=1e-6), key
        holes = sum(p.holes() for p in region.each())
        assert holes == sum(len(p.interiors) for p in geom.geoms), key
        assert region.count() == len(geom.geoms), key
    trace_key = layers[f"{layout.spec.pair_layer}/trace"]
    trace_area = sum(t.polygon.area for t in layout.traces)
    assert regions[trace_key].area() * NM * NM == pytest.approx(trace_area, abs=1e-6)
    assert set(regions) <= set(expected) | {trace_key}


def test_default_layer_map():
    """Plane i gets 10*(i+1)+1..+4 for slot, patch, bridge, outline; the pair's layer gets (1, 0)."""
    raw = tomllib.loads((SAMPLES / "hx2_l3_rx_stripline.toml").read_text())
    spec = spec_from_dict(raw)
    layers = default_gds_layers(spec)
    assert layers["In1.Cu/slot"] == (11, 0) and layers["In1.Cu/outline"] == (14, 0)
    assert layers["In3.Cu/slot"] == (21, 0) and layers["In3.Cu/bridge"] == (23, 0)
    assert layers[f"{spec.pair_layer}/trace"] == (1, 0)
    assert len(layers) == 4 * len(spec.plane_layers) + 1


def test_spec_layer_map_overrides_defaults(tmp_path):
    """A spec's gds table moves a role to its own layer/datatype, and KLayout finds the slots there."""
    raw = tomllib.loads((SAMPLES / "hx2_l0_tx_straight.toml").read_text())
    raw["gds"] = {"In1.Cu/slot": [100, 7]}
    layout = build_layout(spec_from_dict(raw))
    assert gds_layers(layout.spec)["In1.Cu/slot"] == (100, 7)
    assert gds_layers(layout.spec)["In1.Cu/patch"] == (12, 0)
    _, regions = read_regions(write_gds(layout, tmp_path / "mapped.gds"))
    assert (11, 0) not in regions
    assert regions[(100, 7)].area() * NM * NM == pytest.approx(layout.cuts[0].slot.area, abs=1e-6)


def test_byte_identical_writes(sample_layouts, tmp_path):
    """Two writes of the same layout give identical bytes (timestamp frozen)."""
    for name, layout in sample_layouts.items():
        a, b = write_gds(layout, tmp_path / f"{name}_a.gds"), write_gds(layout, tmp_path / f"{name}_b.gds")
        assert a.read_bytes() == b.read_bytes(), name


def gds_dates(data: bytes) -> list[tuple[int, ...]]:
    """The 12 date words of every BGNLIB (0x01) and BGNSTR (0x05) record, per the GDSII stream format.

    Each record is a big-endian uint16 length, a record type byte and a data type byte, then data.
    """
    dates, pos = [], 0
    while pos < len(data):
        length, record = struct.unpack(">HB", data[pos:pos + 3])
        if record in (0x01, 0x05):
            dates.append(struct.unpack(">12h", data[pos + 4:pos + 28]))
        if record == 0x04 or length == 0:  # ENDLIB
            break
        pos += length
    return dates


def test_stored_dates_are_frozen(gds_files):
    """Library and cell dates are the frozen stamp, not the clock, so writes in different seconds agree too."""
    stamp = gds_export.FROZEN_TIMESTAMP
    rest = (stamp.month, stamp.day, stamp.hour, stamp.minute, stamp.second)
    # Writers store the year either in full or as years since 1900 (C's tm_year); readers accept both.
    frozen = {(year, *rest) * 2 for year in (stamp.year, stamp.year - 1900)}
    for path in gds_files.values():
        dates = gds_dates(path.read_bytes())
        assert len(dates) == 2 and all(d in frozen for d in dates), dates


def test_failed_write_leaves_no_file(sample_layouts, tmp_path, monkeypatch):
    """An error while writing leaves neither the target nor a temporary file behind."""
    class Failing:
        def write_gds(self, path, **_):
            Path(path).write_bytes(b"partial")
            raise OSError("disk full")

    monkeypatch.setattr(gds_export, "build_library", lambda layout: Failing())
    with pytest.raises(OSError, match="disk full"):
        write_gds(sample_layouts["hx2_l0_tx_straight"], tmp_path / "x.gds")
    assert list(tmp_path.iterdir()) == []
