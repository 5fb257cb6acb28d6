"""Estimate of built layouts: sizing round trips, the tolerance band, the JSON and the table.

References outside ebglayout: the cavity model's f10 = c / (2 a sqrt(er)) and its 1/sqrt(er)
scaling (C. A. Balanis, Antenna Theory, 3rd ed., sec. 14.2.2, cavity model of the rectangular patch, from memory),
the lumped resonance f = 1 / (2 pi sqrt(L C)) with C = e0 er A / h (so f ~ sqrt(h / er)),
evaluated by hand in the assertions below.
"""
from __future__ import annotations

import copy
import json
import math

import pytest

from ebglayout.errors import SpecError
from ebglayout.estimate import CAUTION, estimate_layout, format_table, refine, size_for_target
from ebglayout.estimate.cavity import C0
from ebglayout.estimate.lumped import lc_notch
from ebglayout.layout import build_layout
from ebglayout.spec import spec_from_dict
from ebglayout.units import format_hz


def _spec(patch, er, target_hz, style="straight", path=((0, 0), (40, 0)), layers=("In1.Cu",), pair_layer="F.Cu",
          count=2, bridge=None, h=0.1):
    raw = {
        "name": "hx2_sized", "target": target_hz,
        "pair": {"width": 0.12, "spacing": 0.15, "path": [list(p) for p in path], "layer": pair_layer,
                 "nets": ["HX2_L0_TX_P", "HX2_L0_TX_N"]},
        "plane": {"layers": list(layers)},
        "cut": {"style": style, "patch": list(patch), "count": count, "slot": 0.15, "web": 0.3},
        "stackup": {"er": er, "h": h},
    }
    if bridge:
        raw["cut"]["bridge"] = dict(zip(("width", "length", "per_side"), bridge))
    return spec_from_dict(raw)


@pytest.mark.parametrize("target, er, aspect, across, path, layers, pair_layer", [
    (16e9, 4.1, 0.5, None, ((0, 0), (40, 0)), ("In1.Cu",), "F.Cu"),
    (10e9, 3.6, 0.8, None, ((0, 0), (30, 17)), ("In1.Cu", "In3.Cu"), "In2.Cu"),
    (28e9, 3.0, 1.3, None, ((0, 0), (0, -25)), ("In1.Cu",), "F.Cu"),
    (12.5e9, 4.3, 0.5, 2.2, ((5, 5), (45, 25)), ("In1.Cu",), "F.Cu"),
])
def test_sized_rectangles_build_and_estimate_back_to_the_target(target, er, aspect, across, path, layers, pair_layer):
    sized = size_for_target(target, er, "straight", aspect=aspect, across=across)
    along, width = sized["patch"]
    # hand formula: the along side, whose TM10 the common mode excites, is c / (2 f sqrt(er))
    assert along == pytest.approx(C0 / (2 * target * math.sqrt(er)) * 1e3, rel=1e-6)
    if across is not None:
        assert width == across
    layout = build_layout(_spec(sized["patch"], er, target, path=path, layers=layers, pair_layer=pair_layer))
    est = estimate_layout(layout)
    assert len(est.cells) == 2
    for cell in est.cells:
        assert cell.notch_hz == pytest.approx(target, rel=0.01)
        assert cell.governs == "cavity"
        assert {m.method for m in cell.modes} == {"cavity-analytic"}
    assert est.target_in_spread is True


def test_sized_bridged_cell_builds_and_estimates_back_to_the_target():
    bridge = (0.12, 0.6, 1)
    sized = size_for_target(8e9, 4.1, "bridged", aspect=0.85, h=0.1, bridge=bridge, slot=0.15)
    assert sized["governs"] == "lc"
    layout = build_layout(_spec(sized["patch"], 4.1, 8e9, style="bridged", path=((0, 0), (12, 9)), bridge=bridge))
    est = estimate_layout(layout)
    for cell in est.cells:
        assert cell.notch_hz == pytest.approx(8e9, rel=0.01)
        assert cell.governs == "lc" and cell.lc_f_hz < cell.modes[0].f_hz


def test_rectangle_band_follows_the_er_scaling_and_ignores_h(sample_layouts):
    layout = sample_layouts["hx2_l0_tx_straight"]
    spec = layout.spec
    est = estimate_layout(layout)
    along = layout.cells[0].size[0]
    f10 = C0 / (2 * along * 1e-3 * math.sqrt(spec.er))
    assert est.cells[0].notch_hz == pytest.approx(f10, rel=1e-6)
    # hand formula: f ~ 1 / sqrt(er), no h dependence
    assert est.low_hz == pytest.approx(f10 / math.sqrt(1 + spec.er_tolerance), rel=1e-6)
    assert est.high_hz == pytest.approx(f10 / math.sqrt(1 - spec.er_tolerance), rel=1e-6)
    by_er: dict[float, set[float]] = {}
    for corner in est.corners:
        by_er.setdefault(round(corner.er, 9), set()).add(round(corner.low_hz))
    assert len(by_er) == 3 and all(len(v) == 1 for v in by_er.values())


def test_staggered_bridged_sample_band_is_wider_than_any_one_cell(sample_layouts):
    layout = sample_layouts["hx2_l2_tx_bridged"]
    spec = layout.spec
    est = estimate_layout(layout)
    assert len({round(c.notch_hz) for c in est.cells}) == len(est.cells) > 1
    # larger patch area -> larger C -> lower LC resonance
    by_area = sorted(zip((c.patch.area for c in layout.cells), (e.notch_hz for e in est.cells)))
    assert all(f1 > f2 for (_, f1), (_, f2) in zip(by_area, by_area[1:]))
    band = est.high_hz - est.low_hz
    for cell_est, cell in zip(est.cells, layout.cells):
        assert cell_est.governs == "lc"
        swept = []
        for er in (spec.er * (1 - spec.er_tolerance), spec.er, spec.er * (1 + spec.er_tolerance)):
            for h in (spec.h * (1 - spec.h_tolerance), spec.h, spec.h * (1 + spec.h_tolerance)):
                # recomputed from the LC formula at the swept stack-up, not scaled
                lc = lc_notch(cell.patch, cell.bridges, h, er, spec.bridge_length)
                swept.append(min(lc, cell_est.modes[0].f_hz * math.sqrt(spec.er / er)))
        assert est.low_hz <= min(swept) * (1 + 1e-9) and max(swept) <= est.high_hz * (1 + 1e-9)
        assert band > (max(swept) - min(swept)) * 1.05
    assert est.low_hz == min(c.low_hz for c in est.corners) and est.high_hz == max(c.high_hz for c in est.corners)


EXPECTED_KEYS = ["cells", "notch_spread", "target_hz", "target_in_spread", "sweep", "caution", "model"]


def test_every_sample_estimates(sample_layouts):
    for name, layout in sorted(sample_layouts.items()):
        est = estimate_layout(layout)
        data = est.to_json()
        assert list(data) == EXPECTED_KEYS if layout.spec.target_hz is not None else [
            k for k in EXPECTED_KEYS if k != "target_hz"], name
        assert data["caution"] == CAUTION
        text = json.dumps(data, sort_keys=False)
        assert text == json.dumps(estimate_layout(layout).to_json(), sort_keys=False), name
        bridged = layout.spec.style == "bridged"
        assert [c["index"] for c in data["cells"]] == [c.index for c in layout.cells]
        for cell in data["cells"]:
            keys = ["index", "modes", "lc_f_hz", "notch_hz", "governs"] if bridged else [
                "index", "modes", "notch_hz", "governs", "notch_mode"]
            assert list(cell) == keys, name
            freqs = [m["f_hz"] for m in cell["modes"]]
            assert len(freqs) == 3 and freqs == sorted(freqs) and freqs[0] > 0
            assert {m["method"] for m in cell["modes"]} == {"cavity-numeric" if bridged else "cavity-analytic"}
            assert cell["notch_hz"] <= freqs[0]
            assert data["notch_spread"]["low_hz"] <= cell["notch_hz"] <= data["notch_spread"]["high_hz"]
        target = layout.spec.target_hz
        assert data["target_in_spread"] == (None if target is None else
                                          data["notch_spread"]["low_hz"] <= target <= data["notch_spread"]["high_hz"])
        table = format_table(est)
        assert format_hz(est.low_hz) in table and format_hz(est.high_hz) in table and CAUTION in table
        assert all(format_hz(c.notch_hz) in table for c in est.cells)
        assert table.count("governs") == len(est.cells)


def test_refine_rectangles_scales_the_patch_by_the_observed_error(sample_layouts):
    spec = sample_layouts["hx2_l0_tx_straight"].spec
    observed = 0.95 * spec.target_hz
    for keep in ("across", "aspect"):
        out = refine(spec, observed, keep=keep)
        formula = out["formula"]
        assert out["factor"] == pytest.approx(1 / 0.95, rel=1e-9)
        assert out["design_hz"] == pytest.approx(spec.target_hz / 0.95, abs=1e3)
        for (along, across), (new_along, new_across) in zip(spec.patches, formula["patches"]):
            # hand formula: f10 ~ 1 / a, so a' = a * f_obs / f_target
            assert new_along == pytest.approx(along * 0.95, abs=2e-6)
            assert new_across == pytest.approx(across if keep == "across" else across * 0.95, abs=2e-6)


def test_refine_bridged_then_rebuild_hits_each_cells_design_frequency(sample_layouts):
    layout = sample_layouts["hx2_l2_tx_bridged"]
    spec = layout.spec
    out = refine(spec, 1.1 * spec.target_hz)
    raw = copy.deepcopy(spec.echo)
    raw["cut"]["patches"] = out["formula"]["patches"]
    est = estimate_layout(build_layout(spec_from_dict(raw)))
    for cell, want in zip(est.cells, out["formula"]["cells"]):
        assert cell.notch_hz == pytest.approx(want["design_hz"], rel=0.01)
        assert want["design_hz"] == pytest.approx(want["model_hz"] / 1.1, rel=1e-6)


@pytest.mark.parametrize("kwargs", [
    dict(target_hz=8e9, er=4.1, style="bridged"),
    dict(target_hz=8e9, er=4.1, style="wavy"),
    dict(target_hz=8e9, er=4.1, style="straight", bridge=(0.1, 0.2, 1)),
    dict(target_hz=60e9, er=4.1, style="bridged", h=0.1, bridge=(0.12, 0.6, 1), slot=0.15),
])
def test_sizing_rejects_what_it_cannot_size(kwargs):
    with pytest.raises(SpecError):
        size_for_target(**kwargs)
