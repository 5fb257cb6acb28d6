"""The user's own units: a spec written in mil gets every number shown to people in mil, with the unit written,
and every suggested spec line pastes back as it is.  The outside reference is the definition of the unit:
1 mil = 0.001 in = 0.0254 mm exactly (the international inch of 1959, 25.4 mm; NIST SP 811, appendix B)."""
from __future__ import annotations

import json
import re

import pytest

from ebglayout.cli import main
from ebglayout.spec import load_spec

MIL_MM = 0.0254
"""NIST SP 811, appendix B: 1 mil = 2.54e-5 m, exactly."""

MIL_SPEC = """name = "hx2_l0_tx_mil"
units = "mil"
target = "16Gbps"

[pair]
width = 4.8
spacing = 6
path = [[0, 0], [866, 0], [945, 79], [945, 394]]
layer = "F.Cu"
nets = ["HX2_L0_TX_P", "HX2_L0_TX_N"]

[plane]
layers = ["In1.Cu"]
outline = [[-118, -236], [1181, -236], [1181, 512], [-118, 512]]

[cut]
style = "straight"
patch = [181, 94.5]
count = 3
slot = 6
web = 12

[stackup]
er = 4.1
h = 4
"""
"""Lane 0 of the Halyard HX2 hub drawn by a shop that works in mil."""


@pytest.fixture
def mil_spec(tmp_path):
    path = tmp_path / "hx2_l0_tx_mil.toml"
    path.write_text(MIL_SPEC)
    return path


def _pasted(spec_text: str, line: str, replaces: tuple[str, ...]) -> str:
    """The spec with ``line`` pasted under [cut] in place of the keys it replaces."""
    kept = [ln for ln in spec_text.splitlines() if ln.split("=")[0].strip() not in replaces]
    at = kept.index("[cut]") + 1
    return "\n".join(kept[:at] + [line] + kept[at:]) + "\n"


def test_refine_prints_mil_and_its_line_pastes_back(mil_spec, tmp_path, capsys):
    assert main(["refine", str(mil_spec), "--observed", "15.2GHz"]) == 0
    text = capsys.readouterr().out
    assert main(["refine", str(mil_spec), "--observed", "15.2GHz", "--json"]) == 0
    mm = json.loads(capsys.readouterr().out)["patches"]
    assert " mm" not in text and 'units = "mil"' in text
    shown = re.search(r"cell 0: patch ([\d.]+) mil along x ([\d.]+) mil across", text)
    assert float(shown.group(1)) == pytest.approx(mm[0][0] / MIL_MM, rel=1e-3)
    line = next(ln for ln in text.splitlines() if ln.startswith("patches = "))
    pasted = tmp_path / "refined.toml"
    pasted.write_text(_pasted(MIL_SPEC, line, ("patch", "count")))
    spec = load_spec(pasted)
    assert len(spec.patches) == 3
    for got, want in zip(spec.patches, mm):
        assert got == pytest.approx(tuple(want), abs=1e-6)  # the 1 nm grid


def test_size_prints_the_asked_units_and_its_line_pastes_back(tmp_path, capsys):
    argv = ["size", "--target", "8GHz", "--er", "4.1", "--h", "4", "--units", "mil", "--style", "bridged",
            "--bridge", "5,24"]
    assert main(argv) == 0
    text = capsys.readouterr().out
    assert main(argv + ["--json"]) == 0
    sized = json.loads(capsys.readouterr().out)
    assert sized["h_mm"] == pytest.approx(4 * MIL_MM) and sized["bridge"]["width"] == pytest.approx(5 * MIL_MM)
    assert " mm" not in text and "5 mil wide, 24 mil long" in text
    line = next(ln for ln in text.splitlines() if ln.startswith("patch = "))
    pasted = tmp_path / "sized.toml"
    pasted.write_text(_pasted(MIL_SPEC, line, ("patch",)))
    assert load_spec(pasted).patches[0] == pytest.approx(tuple(sized["patch"]), abs=1e-6)


def test_check_table_is_in_mil_and_the_json_says_mm(mil_spec, capsys):
    mil_spec.write_text(MIL_SPEC + "\n[rules]\nmin_slot = 7\n")
    assert main(["check", str(mil_spec)]) == 1
    table = capsys.readouterr().out
    assert main(["check", str(mil_spec), "--json"]) == 1
    data = json.loads(capsys.readouterr().out)
    assert data["units"]["length"] == "mm" and data["units"]["spec"] == "mil"
    assert data["min_slot_width"] == pytest.approx(6 * MIL_MM, abs=1e-6)
    assert " mm" not in table
    assert re.search(r"slot-width +3 +\d+ +0 +6 mil +7 mil +FAIL", table)
    finding = data["findings"][0]
    assert finding["limit"] == pytest.approx(7 * MIL_MM)
    x, y = (f"{v / MIL_MM:.6g}" for v in finding["at"])
    assert f"ERROR   slot-width: In1.Cu: slot 6 mil wide (min 7 mil) at ({x}, {y}) mil" in table


def test_report_json_says_its_numbers_are_mm(mil_spec, tmp_path, capsys):
    assert main(["build", str(mil_spec), "--out", str(tmp_path / "out")]) == 0
    report = json.loads((tmp_path / "out" / "hx2_l0_tx_mil.report.json").read_text())
    assert report["units"] == {"length": "mm", "area": "mm2", "spec": "mil", "frequency": "Hz"}
    assert report["min_slot_width"] == pytest.approx(6 * MIL_MM, abs=1e-6)


def test_dxf_dimensions_and_notes_are_in_mil(mil_spec, tmp_path):
    """The drawing stays in mm ($INSUNITS = 4); ezdxf renders each DIMENSION's text from its measurement times
    DIMLFAC with DIMPOST, so the text a CAD user reads is the measured length in mil."""
    import ezdxf

    from ebglayout.export.dxf import write_dxf
    from ebglayout.layout import build_layout

    doc = ezdxf.readfile(write_dxf(build_layout(load_spec(mil_spec)), tmp_path / "m.dxf"))
    assert doc.header["$INSUNITS"] == 4
    dims = doc.modelspace().query("DIMENSION")
    assert len(dims) == 4
    for dim in dims:
        texts = [e.plain_text() for e in dim.get_geometry_block() if e.dxftype() in ("TEXT", "MTEXT")]
        value, unit = texts[0].split()
        assert unit == "mil" and float(value) == pytest.approx(dim.get_measurement() / MIL_MM, abs=1e-4)
    notes = " ".join(m.plain_text() for m in doc.modelspace().query("MTEXT"))
    assert "Slot 6 mil; web 12 mil" in notes and "h 4 mil" in notes and " mm," not in notes.replace("mm;", "")


def test_estimate_speaks_mil_down_to_the_etch_corner(mil_spec, capsys):
    """Every length `estimate` prints for a mil spec is in mil, the etch tolerance of the model's corners too."""
    assert main(["estimate", str(mil_spec)]) == 0
    text = capsys.readouterr().out
    assert not re.search(r"\d mm\b", text), text
    assert main(["estimate", str(mil_spec), "--json"]) == 0
    etch_mm = float(re.search(r'"etch_mm": ([\d.e-]+)', capsys.readouterr().out).group(1))
    assert f"etch +-{etch_mm / MIL_MM:.4g} mil" in text
