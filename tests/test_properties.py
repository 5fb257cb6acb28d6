"""Property tests over random specs: the engine builds valid geometry with its invariants, or refuses cleanly.

Seeded (derandomize) and bounded so CI is reproducible and quick.
"""
from __future__ import annotations

import math
import sys
from collections import Counter

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from ebglayout.checks import run_checks
from ebglayout.errors import EbgError
from ebglayout.layout import build_layout
from ebglayout.spec import spec_from_dict

lengths = st.floats(min_value=0.03, max_value=0.4, allow_nan=False)


@st.composite
def random_specs(draw):
    style = draw(st.sampled_from(["straight", "bridged", "folded"]))
    n_points = draw(st.integers(2, 4))
    heading = draw(st.floats(-math.pi, math.pi))
    points = [(0.0, 0.0)]
    for _ in range(n_points - 1):
        run = draw(st.floats(3.0, 40.0))
        x, y = points[-1]
        points.append((round(x + run * math.cos(heading), 4), round(y + run * math.sin(heading), 4)))
        heading += math.radians(draw(st.floats(-135.0, 135.0)))
    slot = draw(st.floats(0.05, 0.4))
    along = draw(st.floats(0.5, 6.0))
    across = draw(st.floats(0.5, 6.0))
    cut = {"style": style, "patch": [along, across], "count": draw(st.integers(1, 4)), "slot": slot,
           "web": draw(st.sampled_from([0.0, 0.1, 0.3]))}
    if style == "bridged":
        cut["bridge"] = {"width": draw(st.floats(0.05, 0.3)), "length": slot + draw(st.floats(0.0, 0.8)),
                         "per_side": draw(st.integers(1, 2))}
    if style == "folded":
        cut["passes"] = draw(st.sampled_from([3, 5]))
    return {
        "pair": {"width": draw(lengths), "spacing": draw(lengths), "path": [list(p) for p in points]},
        "cut": cut,
        "stackup": {"er": draw(st.floats(2.0, 10.0)), "h": draw(st.floats(0.05, 0.5))},
        "rules": {"corner_margin": draw(st.floats(0.0, 0.5))},
    }


@settings(max_examples=150, derandomize=True, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(random_specs())
def test_engine_builds_valid_geometry_or_refuses(data):
    try:
        spec = spec_from_dict(data)
        layout = build_layout(spec)
    except EbgError as err:
        assert "\n" not in str(err)
        return
    implied = (spec.count + 1 if spec.web == 0 else 2 * spec.count) * spec.passes
    for cut in layout.cuts:
        for role in ("slot", "patch", "bridge", "outline"):
            assert cut.role(role).is_valid
        p = layout.full_crossings(cut.layer, "P")
        n = layout.full_crossings(cut.layer, "N")
        assert len(p) == len(n) == implied
        # the slot is exactly its width: erosion by half of it (+-10 nm) empties it / leaves some
        assert cut.slot.buffer(-(spec.slot / 2 + 1e-5), join_style="mitre").is_empty
        assert not cut.slot.buffer(-(spec.slot / 2 - 1e-5), join_style="mitre").is_empty
    report = run_checks(layout)
    assert report.crossings["P"] == report.crossings["N"]
    assert abs(report.min_slot_width - spec.slot) < 1e-5


MIN_BUILT = 10
MIN_BUILT_SHARE = 0.15
"""Each style must build at least this many random layouts, and this share of the specs drawn for it, so the
invariants above are really exercised. Hypothesis's example mix shifts a little with what ran before it in the
same process (alone: straight 26 of 46, bridged 20 of 51, folded 22 of 53 build; in the full suite folded once
15 of 64), so the bounds sit below the lowest seen, and fail if building broke for a style."""


def test_enough_random_specs_build_per_style(monkeypatch):
    """Runs the property test above again, counting per style the specs drawn and the layouts built."""
    drawn: Counter = Counter()
    built: Counter = Counter()
    read, build = spec_from_dict, build_layout

    def counting_spec(data):
        drawn[data["cut"]["style"]] += 1
        return read(data)

    def counting_build(spec):
        layout = build(spec)
        built[spec.style] += 1
        return layout

    monkeypatch.setattr(sys.modules[__name__], "spec_from_dict", counting_spec)
    monkeypatch.setattr(sys.modules[__name__], "build_layout", counting_build)
    test_engine_builds_valid_geometry_or_refuses()
    for style in ("straight", "bridged", "folded"):
        assert built[style] >= max(MIN_BUILT, MIN_BUILT_SHARE * drawn[style]), (style, built[style], drawn[style])


def test_turned_bridged_cells_keep_bridges_joined_to_plane_and_patch():
    """A bridged cell on a run at any angle: its slot is exactly the slot width everywhere (no sliver left where a
    bridge meets the plane or the pocket floor, which would cut the bridge off) and each bridge touches both the
    patch and the plane around the cut.  Found by the property test above with another seed: at 36.3 degrees a
    bridge end rounded 0.24 nm off the outer edge left a slot 2.4e-7 mm wide."""
    for degrees in [36.33, *range(0, 91, 7)]:
        turn = math.radians(degrees)
        data = {"pair": {"width": 0.25, "spacing": 0.25,
                         "path": [[0.0, 0.0], [round(9 * math.cos(turn), 4), round(9 * math.sin(turn), 4)]]},
                "cut": {"style": "bridged", "patch": [1.5, 2.8387506], "count": 2, "slot": 0.2360419, "web": 0.0,
                        "bridge": {"width": 0.1171875, "length": 0.4860419, "per_side": 1}},
                "stackup": {"er": 2.0, "h": 0.5}, "rules": {"corner_margin": 0.0}}
        layout = build_layout(spec_from_dict(data))
        cut = layout.cuts[0]
        assert abs(run_checks(layout).min_slot_width - 0.2360419) < 1e-5, degrees
        plane = cut.outline.exterior if hasattr(cut.outline, "exterior") else cut.outline.boundary
        for bridge in cut.bridge.geoms:
            assert bridge.distance(plane) < 1e-6 and bridge.distance(cut.patch) < 1e-6, degrees
            assert not bridge.intersection(cut.slot).area > 1e-9, degrees
