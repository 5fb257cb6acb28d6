"""The rule set: each rule's stable id, what it checks, its default limit and where that limit comes from
(``RULES``; ``tools/gen_docs.py`` writes the README's rule table from it), and the functions that check a layout
(``RULE_FUNCTIONS``, in report order; the boards-only rules are checked in ``kicad/workflow.py`` and
``kicad/placed.py``).  Each function reads the Layout (and the board context) and returns a RuleResult; they
live by what they look at in ``crossing_rules.py``, ``cut_rules.py`` and ``board_rules.py``.

Every number is measured on the polygons the engine built or the board holds,
never taken from the spec's intent; the spec only supplies the limits.
"""
from __future__ import annotations

from dataclasses import dataclass

from .board_rules import foreign_track, foreign_via, notch_target, plane_edge, stripline_cut
from .crossing_rules import corner_margin, crossing_along, crossing_angle, crossing_count, crossing_symmetry, fold_skew
from .cut_rules import bridge_keepout, bridge_symmetry, cell_overlap, copper_width, slot_width


@dataclass(frozen=True)
class Rule:
    """A rule's stable id, what it checks, its default limit and where that limit comes from."""

    id: str
    title: str
    limit: str
    source: str


RULES: tuple[Rule, ...] = (
    Rule("crossing-count", "each trace fully crosses slots; P and N counts equal and pair up slot by slot; "
         "count = rules.crossings, else >= rules.min_crossings", "min_crossings = 2",
         "common practice: one cell gives two crossings per trace; P/N symmetry keeps the cut from converting modes"),
    Rule("crossing-along", "no trace runs along a slot or ends inside one", "0 mm inside",
         "common practice: a trace over a slot edge has no defined return path"),
    Rule("crossing-angle", "angle between trace and slot edge at every crossing", "min_angle = 80 deg",
         "common practice: cross slots at right angles so both traces see the same gap"),
    Rule("corner-margin", "distance from each crossing trace to the nearest patch corner", "corner_margin = 0.4 mm",
         "common practice: fields crowd at patch corners; keep crossings several dielectric heights away"),
    Rule("crossing-symmetry", "P and N cross each slot at the same arc length; reported as skew",
         "symmetry = 0.005 mm", "common practice: any P/N offset at a slot converts differential to common mode"),
    Rule("slot-width", "every slot at least the fab's minimum etch gap", "min_slot = 0.1 mm",
         "typical fab capability for inner-layer etch of 1/2 oz copper (from memory; ask your fab)"),
    Rule("copper-width", "every copper neck (patch, bridge, web) at least the fab's minimum", "min_copper = 0.1 mm",
         "typical fab capability for inner-layer features of 1/2 oz copper (from memory; ask your fab)"),
    Rule("bridge-keepout", "no bridge closer to a trace than the keep distance", "bridge_keep = 3 x h",
         "common practice: the return current spreads about three dielectric heights either side of a trace"),
    Rule("bridge-symmetry", "bridges mirror-symmetric about the pair in every cell", "exact",
         "common practice: asymmetric bridges load P and N differently"),
    Rule("cell-overlap", "patches do not overlap; slots merge only when web = 0 was asked", "no overlap",
         "geometry: overlapping cells are not the drawn filter"),
    Rule("plane-edge", "every cell inside the plane outline and away from its edge", "edge_clearance = 0.5 mm",
         "common practice: a cut near the plane edge couples to the board-edge resonance"),
    Rule("stripline-cut", "a pair between two planes has the cut in both, aligned (patch overlap >= 95 %); the two cut "
         "planes lie one on each side of the pair (board: they are its nearest planes; no board: by KiCad's layer "
         "order)", "95 %",
         "common practice: with one plane left solid the return current takes it and the notch mostly vanishes"),
    Rule("foreign-track", "no other net's track referenced to the cut plane crosses a slot or runs over a patch", "none",
         "common practice: a track over a slot or a floating patch loses its return path"),
    Rule("foreign-via", "no via or pad through a floating patch (error) or near a slot (warning)",
         "one via diameter from slots", "common practice: a plane-net via shorts a floating patch; any other needs an antipad"),
    Rule("fold-skew", "P/N length difference through the filter, as delay", "skew_limit_ps = 1 ps",
         "common practice: keep intra-pair skew a small fraction of the unit interval"),
    Rule("kicad-fill", "(boards only) settings that would keep KiCad's pour from reproducing the cut: missing or "
         "overridden rule, plane min width above a web, zone priorities, unfilled or hatched planes", "none",
         "measured with the zone filler of KiCad 6.0.11 and 9.0.2 (tests/test_kicad_fill.py)"),
    Rule("placed-slot", "(boards only) the slots on the board, read from the filter footprint's rule areas and copper, "
         "are the stored design's: every designed slot inside the rule areas and clear of patch copper, nothing cut "
         "beyond it", "0 mm2 differing",
         "geometry: the design that was checked when placed is the reference (differences under 1 um are rounding)"),
    Rule("placed-copper", "(boards only) the patch and bridge copper on the board (footprint polygons and copper zones) "
         "is the stored design's: no patch removed, edited or moved", "0 mm2 differing",
         "geometry: the design that was checked when placed is the reference (differences under 1 um are rounding)"),
    Rule("placed-footprint", "(boards only) the filter footprint sits where it was placed: same position, rotation 0, "
         "front side, a cut on each of the design's plane layers and no other, under the pair", "0 mm moved",
         "geometry: a moved, turned or flipped footprint takes its cut away from the pair it was designed for"),
    Rule("notch-target", "the model's guaranteed stopband covers the target +- its margin at every tolerance corner "
         "(light check without the model: target within target_tolerance of the cells' notch spread)",
         "target_margin = 0.5 %",
         "circuit model: coupled lines (Hammerstad-Jensen, Kirschning-Jansen, Cohn) and the cavity's modal expansion "
         "(Okoshi); light check: cavity model of a rectangular patch (C. A. Balanis, Antenna Theory, 3rd ed., "
         "sec. 14.2.2, from memory)"),
)
RULE_BY_ID = {r.id: r for r in RULES}


RULE_FUNCTIONS = (
    crossing_count, crossing_along, crossing_angle, corner_margin, crossing_symmetry, slot_width, copper_width,
    bridge_keepout, bridge_symmetry, cell_overlap, plane_edge, stripline_cut, foreign_track, foreign_via, fold_skew,
    notch_target,
)
