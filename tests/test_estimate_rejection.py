"""Model rejection over the tolerance corners: the corners move the notch the way the physics says, and the
guaranteed stopband is what every corner rejects.

References outside ebglayout:
- the cavity model's modes scale as 1 / sqrt(er) and fall as the patch grows (C. A. Balanis, Antenna
  Theory, 3rd ed., sec. 14.2.2, cavity model of the rectangular patch, from memory), so a higher er and an
  under-etched (larger) patch notch lower;
- scikit-rf computes the mixed-mode terms (ebglayout.sparams); ebglayout.response reads the curves.
"""
from __future__ import annotations

import math
import re
from dataclasses import replace

import numpy as np
import pytest

from ebglayout.bundled import samples_folder
from ebglayout.estimate.rejection import Rejection, model_rejection, sweep
from ebglayout.layout import build_layout
from ebglayout.response import summarize
from ebglayout.spec import load_spec


def _straight(**changes):
    spec = load_spec(samples_folder() / "hx2_l0_tx_straight.toml")
    return build_layout(replace(spec, **changes))


def test_corners_move_the_notch_as_the_cavity_does():
    layout = _straight(tan_d=0.0)
    freq = sweep(layout, 16e9, [], points=1201)
    rej = model_rejection(layout, freq)
    assert len(rej.corners) == 17
    notch = {label: summarize(freq, curve).notch_hz for label, curve in rej.corners.items()}
    t = layout.spec.er_tolerance
    for rest in ("h- pair_h- etch-", "h+ pair_h+ etch+"):
        ratio = notch[f"er+ {rest}"] / notch[f"er- {rest}"]
        assert ratio == pytest.approx(math.sqrt((1 - t) / (1 + t)), rel=0.015)
    # over-etch shrinks the patches: the notch rises
    assert notch["er- h- pair_h- etch+"] > notch["er- h- pair_h- etch-"]
    data = rej.to_json()
    low, high = data["notch_spread_hz"]
    assert low == pytest.approx(min(notch.values()), abs=1.0) and high == pytest.approx(max(notch.values()), abs=1.0)
    for band_low, band_high in data["tolerance"]["guaranteed_stopband_hz"]:
        for curve in rej.corners.values():
            inside = (freq >= band_low) & (freq <= band_high)
            assert curve[inside].max() <= data["threshold_db"] + 1e-6


def test_without_etch_there_are_eight_corners():
    layout = _straight()
    rej = model_rejection(layout, sweep(layout, 16e9, [], points=201), etch=False)
    assert len(rej.corners) == 9 and rej.tolerances["etch_mm"] == 0.0


def test_target_covered_needs_one_band_holding_the_margin():
    freq = np.linspace(9e9, 11e9, 2001)
    dip = -30 * np.exp(-((freq - 10e9) / 0.2e9) ** 2)
    shifted = -30 * np.exp(-((freq - 10.15e9) / 0.2e9) ** 2)
    def make(curves, margin):
        return Rejection(freq, None, curves, 10e9, -10.0, margin, {})
    # each dip is below -10 dB within about +-0.21 GHz of its centre; together 9.94 .. 10.21 GHz
    assert make({"a": dip, "b": shifted}, 0.005).target_covered() is True
    assert make({"a": dip, "b": shifted}, 0.02).target_covered() is False
    assert Rejection(freq, None, {"a": dip}, None, -10.0, 0.005, {}).target_covered() is None


def test_build_writes_a_touchstone_file_scikit_rf_reads_back(tmp_path):
    import json

    import skrf

    from ebglayout.estimate.lines import mode_reference_ohm
    from ebglayout.pipeline import build_to_folder
    from ebglayout.response import db20
    from ebglayout.sparams import mixed_mode

    spec = load_spec(samples_folder() / "hx2_l0_tx_straight.toml")
    build_to_folder(spec, tmp_path)
    net = skrf.Network(str(tmp_path / f"{spec.name}.s4p"))
    report = json.loads((tmp_path / f"{spec.name}.report.json").read_text())
    model = report["estimate"]["model"]
    assert net.nports == 4 and len(net.f) == len(model["freq_hz"])
    reference = model["mode_reference_ohm"]
    assert reference == pytest.approx(list(mode_reference_ohm(build_layout(spec).stackup, spec.pair_width,
                                                                spec.pair_spacing)))
    assert np.allclose(db20(mixed_mode(net, *reference).scc21), model["scc21_db"], atol=1e-3)
    assert "not a full-wave run" in model["model_caution"]
    assert (tmp_path / f"{spec.name}.response.svg").read_text().count("Scc21") >= 1


@pytest.mark.parametrize("kwargs", [
    dict(target_hz=16e9, er=4.1, pair=(0.12, 0.15)),
    dict(target_hz=16e9, er=4.1, pair=(0.2, 0.3), style="folded", tan_d=0.0),
    dict(target_hz=8e9, er=4.1, pair=(0.12, 0.15), style="bridged", aspect=1.2, bridge=(0.12, 0.6, 1)),
])
def test_size_with_model_lands_the_modelled_notch_on_the_target(kwargs):
    from ebglayout.checks import run_checks
    from ebglayout.estimate.lines import mode_reference_ohm
    from ebglayout.estimate.network import filter_network
    from ebglayout.estimate.sizing import MODEL_TOLERANCE, size_with_model
    from ebglayout.response import db20, dip_indices
    from ebglayout.sparams import mixed_mode
    from ebglayout.spec import spec_from_dict

    sized = size_with_model(**kwargs)
    target = kwargs["target_hz"]
    assert sized["model_hz"] == pytest.approx(target, rel=MODEL_TOLERANCE)
    # rebuilt independently from the printed size: the same row, the same notch, and the checks pass
    along, across = sized["patch"]
    assert sized["patch"] == [round(along, 3), round(across, 3)]  # what a fab drawing holds: 1 um
    width, spacing = kwargs["pair"]
    cut = {"style": kwargs.get("style", "straight"), "patch": [along, across], "count": 3, "slot": 0.15, "web": 0.3}
    passes = 3 if cut["style"] == "folded" else 1
    if passes > 1:
        assert sized["passes"] == passes
        cut["passes"] = passes
    if "bridge" in kwargs:
        w, length, per_side = kwargs["bridge"]
        cut["bridge"] = {"width": w, "length": length, "per_side": per_side}
    layout = build_layout(spec_from_dict({
        "target": target, "pair": {"width": width, "spacing": spacing, "path": [[0, 0], [3 * (along + 0.45) + 10, 0]]},
        "cut": cut, "stackup": {"er": kwargs["er"], "h": 0.1, "tan_d": kwargs.get("tan_d", 0.02)}}))
    freq = np.linspace(0.6 * target, 1.4 * target, 1001)
    modes = mode_reference_ohm(layout.stackup, width, spacing)
    curve = db20(mixed_mode(filter_network(layout, freq), *modes).scc21)
    # the cells' own dip (a folded row's loop resonances add others, not always shallower)
    k = min(dip_indices(curve), key=lambda i: abs(freq[i] - target))
    notch = summarize(freq[k - 1:k + 2], curve[k - 1:k + 2]).notch_hz
    assert notch == pytest.approx(target, rel=2 * MODEL_TOLERANCE)
    assert not run_checks(layout).errors
    # room for every pass with both traces 0.4 mm (rules.corner_margin) from the corners, at the default lane gap
    lane_pitch = 2 * width + spacing + max(3 * width, 2 * spacing)
    assert across >= 2 * width + spacing + (passes - 1) * lane_pitch + 2 * 0.4 - 1e-9


def test_size_command_with_the_pair_prints_the_model_notch(capsys):
    from ebglayout.cli import main

    assert main(["size", "--target", "16GHz", "--er", "4.1", "--pair", "0.12,0.15"]) == 0
    from ebglayout.estimate.sizing import MODEL_TOLERANCE

    out = capsys.readouterr().out
    assert "circuit model (not a full-wave run)" in out and "caution:" in out
    printed = re.search(r"notch ([0-9.]+) GHz", out)
    assert printed and float(printed.group(1)) == pytest.approx(16.0, rel=MODEL_TOLERANCE)
    assert main(["size", "--target", "16GHz", "--er", "4.1", "--pair", "0.12"]) == 2
    assert "--pair = 0.12" in capsys.readouterr().err


def test_sweep_leaves_out_a_target_far_from_every_notch():
    """A target more than TARGET_REACH from the cells' notches (a typo such as 1THz) does not stretch the model's
    grid to it: the grid stays around the notches, where the filter acts."""
    from ebglayout.estimate.rejection import SPAN, TARGET_REACH

    layout = build_layout(load_spec(samples_folder() / "hx2_l0_tx_straight.toml"))
    far = sweep(layout, 1e12, [16e9], points=11)
    assert far[0] == pytest.approx(SPAN[0] * 16e9) and far[-1] == pytest.approx(SPAN[1] * 16e9)
    near = sweep(layout, 0.9 * TARGET_REACH * 16e9, [16e9], points=11)
    assert near[-1] == pytest.approx(SPAN[1] * 0.9 * TARGET_REACH * 16e9)
