"""The complete stack-up keys: which dielectric each value describes, defaults, and where each value came from."""
from __future__ import annotations

import copy
import tomllib

import pytest

from ebglayout.errors import SpecError
from ebglayout.layout import build_layout
from ebglayout.spec import spec_from_dict
from ebglayout.stackup import stackup_of

from conftest import SAMPLES


def _raw(name: str) -> dict:
    return tomllib.loads((SAMPLES / f"{name}.toml").read_text())


def test_defaults_follow_the_cavity_values_and_say_so():
    spec = spec_from_dict(_raw("hx2_l0_tx_straight"))
    stack = stackup_of(spec)
    (plane,) = stack.planes
    assert plane.layer == "In1.Cu"
    assert plane.pair.h == spec.h and plane.pair.er == spec.er
    assert plane.cavity.h == spec.h and plane.cavity.er == spec.er
    assert plane.pair.tan_d == plane.cavity.tan_d == 0.02
    assert stack.source("stackup.er") == "spec"
    assert stack.source("stackup.pair_h").startswith("default")
    assert stack.source("stackup.tan_d").startswith("default")


def test_stripline_takes_one_pair_height_per_plane_in_plane_layers_order():
    raw = _raw("hx2_l3_rx_stripline")  # units = mil
    raw["stackup"].update(pair_h=[4, 6], pair_er=3.4, tan_d=0.004)
    stack = build_layout(spec_from_dict(raw)).stackup
    assert stack.stripline
    assert [p.layer for p in stack.planes] == ["In1.Cu", "In3.Cu"]
    assert [p.pair.h for p in stack.planes] == pytest.approx([4 * 0.0254, 6 * 0.0254], abs=1e-12)
    assert all(p.pair.er == 3.4 and p.cavity.er == 3.6 for p in stack.planes)
    assert all(p.pair.tan_d == p.cavity.tan_d == 0.004 for p in stack.planes)
    assert {stack.source(k) for k in ("stackup.pair_h", "stackup.pair_er", "stackup.tan_d")} == {"spec"}


def test_one_pair_height_applies_to_both_planes():
    raw = _raw("hx2_l3_rx_stripline")
    raw["stackup"]["pair_h"] = 5
    assert spec_from_dict(raw).pair_h == pytest.approx((0.127, 0.127), abs=1e-12)


@pytest.mark.parametrize("key, value, words", [
    ("pair_h", [0.1, 0.1, 0.1], "one length, or one length per entry"),
    ("pair_h", 0, r"must be from 0.001 mm \(1 um\)"),
    ("pair_er", 0.5, "between 1 and 30"),
    ("tan_d", -0.01, "between 0 and 0.2"),
    ("tan_d", True, "between 0 and 0.2"),
])
def test_bad_stackup_values_name_the_key(key, value, words):
    raw = copy.deepcopy(_raw("hx2_l0_tx_straight"))
    raw["stackup"][key] = value
    with pytest.raises(SpecError, match=f"stackup.{key}.*{words}"):
        spec_from_dict(raw)


def test_microstrip_given_two_pair_heights_is_refused():
    raw = _raw("hx2_l0_tx_straight")
    raw["stackup"]["pair_h"] = [0.1, 0.2]
    with pytest.raises(SpecError, match=r"stackup.pair_h.*one per entry of plane.layers \(1\)"):
        spec_from_dict(raw)
