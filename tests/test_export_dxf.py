"""DXF export, read back with ezdxf (readfile + audit) and compared with the engine's shapely geometry."""
from __future__ import annotations

from functools import reduce
from pathlib import Path

import ezdxf
import pytest
from shapely.geometry import Polygon

from ebglayout.checks import Finding
from ebglayout.export import CAUTION
from ebglayout.export import dxf as dxf_export
from ebglayout.export.dxf import dxf_layer_name, dxf_layer_names, dxf_layers, write_dxf
from ebglayout.layout import ROLES

from conftest import SAMPLE_SPECS

NAMES = [p.stem for p in SAMPLE_SPECS]


@pytest.fixture(scope="module")
def dxf_docs(sample_layouts, tmp_path_factory):
    """name -> document read back from disk by ezdxf."""
    out = tmp_path_factory.mktemp("dxf")
    return {name: ezdxf.readfile(write_dxf(layout, out / f"{name}.dxf")) for name, layout in sample_layouts.items()}


def even_odd(rings: list[Polygon]):
    """Filled area of closed rings under the even-odd rule (how DXF hatch fills nested boundaries)."""
    return reduce(lambda a, b: a.symmetric_difference(b), rings, Polygon())


def layer_fill(doc, layer: str):
    polylines = doc.modelspace().query(f'LWPOLYLINE[layer=="{layer}"]')
    assert all(p.closed for p in polylines), layer
    return even_odd([Polygon(list(p.vertices())) for p in polylines])


@pytest.mark.parametrize("name", NAMES)
def test_audit_clean_and_units(name, dxf_docs):
    """ezdxf's auditor finds no error; $INSUNITS = 4 (mm) and $MEASUREMENT = 1 (metric), per the DXF reference."""
    doc = dxf_docs[name]
    auditor = doc.audit()
    assert not auditor.has_errors, [e.message for e in auditor.errors]
    assert doc.header["$INSUNITS"] == 4
    assert doc.header["$MEASUREMENT"] == 1
    assert doc.dxfversion == "AC1024"  # R2010


@pytest.mark.parametrize("name", NAMES)
def test_layer_areas_match_engine(name, dxf_docs, sample_layouts):
    """Even-odd area of each layer's closed polylines equals the engine's shapely area (1e-6 mm^2),
    and the filled shapes coincide (symmetric difference below 1e-6 mm^2)."""
    doc, layout = dxf_docs[name], sample_layouts[name]
    for cut in layout.cuts:
        for role in ROLES:
            fill, geom = layer_fill(doc, dxf_layer_name(cut.layer, role)), cut.role(role)
            assert fill.area == pytest.approx(geom.area, abs=1e-6), (cut.layer, role)
            assert fill.symmetric_difference(geom).area < 1e-6, (cut.layer, role)
    traces = layer_fill(doc, dxf_layer_name(layout.spec.pair_layer, "trace"))
    assert traces.area == pytest.approx(sum(t.polygon.area for t in layout.traces), abs=1e-6)


def test_layers_listed_and_coloured(dxf_docs, sample_layouts):
    """Every layer the writer lists exists in the file with its colour; nothing is drawn on other layers."""
    for name, doc in dxf_docs.items():
        spec = sample_layouts[name].spec
        for layer, colour in dxf_layers(spec):
            assert doc.layers.get(layer).color == colour
        used = {e.dxf.layer for e in doc.modelspace()}
        assert used <= set(dxf_layer_names(spec)), used - set(dxf_layer_names(spec))
    assert "EBG_In3.Cu_SLOT" in dxf_layer_names(sample_layouts["hx2_l3_rx_stripline"].spec)


@pytest.mark.parametrize("name", NAMES)
def test_dimensions_measure_the_first_cell(name, dxf_docs, sample_layouts):
    """The DIMENSION entities measure (from their own definition points) patch along/across, slot, web, bridge."""
    doc, layout = dxf_docs[name], sample_layouts[name]
    spec = layout.spec
    dims = doc.modelspace().query('DIMENSION[layer=="EBG_DIMENSIONS"]')
    measured = sorted(round(d.get_measurement(), 6) for d in dims)
    expected = [*layout.cells[0].size, spec.slot]
    if spec.web > 0:
        expected.append(spec.web)
    if spec.style == "bridged":
        expected += [spec.bridge_width, spec.bridge_length]
    assert measured == pytest.approx(sorted(expected), abs=1e-6)
    assert all(d.get_geometry_block() is not None for d in dims), "dimension not rendered"


def test_notes_carry_counts_cautions_and_findings(sample_layouts, tmp_path):
    """The notes MTEXT lists crossings per trace, the fab and plane-fill notes, findings and the caution."""
    layout = sample_layouts["hx2_l2_tx_bridged"]
    finding = Finding("TEST-CORNER", "error", "crossing too close to a patch corner", layout.crossings[0].point,
                      value=0.1, limit=0.4, layer="In1.Cu")
    doc = ezdxf.readfile(write_dxf(layout, tmp_path / "n.dxf", findings=[finding]))
    text = " ".join(m.plain_text() for m in doc.modelspace().query("MTEXT"))
    text = " ".join(text.split())
    for trace in layout.traces:
        full = len(layout.full_crossings("In1.Cu", trace.polarity))
        assert f"{trace.net} ({trace.polarity}) {full} full" in text
    assert "fab least etch" in text and "Plane fill" in text
    assert " ".join(CAUTION.split()) in text
    assert "TEST-CORNER" in text
    marks = doc.modelspace().query('TEXT[layer=="EBG_FINDINGS"]')
    assert [t.dxf.text for t in marks] == ["TEST-CORNER"]
    assert marks[0].dxf.color == 1


def test_byte_identical_writes(sample_layouts, tmp_path):
    """Two writes give identical bytes: ezdxf's dates, GUIDs and version marker are frozen."""
    option_before = ezdxf.options.write_fixed_meta_data_for_testing
    for name, layout in sample_layouts.items():
        a, b = write_dxf(layout, tmp_path / f"{name}_a.dxf"), write_dxf(layout, tmp_path / f"{name}_b.dxf")
        assert a.read_bytes() == b.read_bytes(), name
    assert ezdxf.options.write_fixed_meta_data_for_testing == option_before, "global ezdxf option left changed"


def test_failed_write_leaves_no_file(sample_layouts, tmp_path, monkeypatch):
    """An error half-way through saving leaves neither the target nor a temporary file behind."""
    class HalfWritten:
        def saveas(self, path):
            Path(path).write_text("0\nSECTION\n")
            raise ValueError("boom")

    def broken(layout, findings=()):
        return HalfWritten()

    monkeypatch.setattr(dxf_export, "build_document", broken)
    with pytest.raises(ValueError, match="boom"):
        write_dxf(sample_layouts["hx2_l0_tx_straight"], tmp_path / "x.dxf")
    assert list(Path(tmp_path).iterdir()) == []
