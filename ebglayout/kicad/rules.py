"""The custom design rule (.kicad_dru) that lets the rule areas, not the clearance, define the slot.

Without it KiCad knocks the plane back from a graphic patch by max(zone clearance,
netclass clearance) + 0.5 um with round corners; a matching custom rule replaces
both ("winner takes all"), so a clearance <= slot - 0.5 um leaves the rule area's
sharp edge as the slot (measured by tests/test_kicad_fill.py: ``test_fill_reproduces_the_design``,
``test_large_zone_clearance_is_harmless_with_the_rule``, ``test_missing_rule_is_reported_and_real``, with KiCad
6.0.11 here and 9.0.2 in the KiCad 9 root).
``insideArea`` is a deprecated but still registered alias in KiCad 7-10 (KiCad's expression function table in
its source, from memory; the KiCad 9 root's fill tests run this rule text with 9.0.2), so the rule text is portable.
"""
from __future__ import annotations

import re

from ..errors import SpecError
from .sexpr import error_in_text

RULE_NAME = "ebglayout_plane_cut"
AREA_PREFIX = "EBGCUT_"
"""Every rule area the footprints write is named AREA_PREFIX + filter name."""
INNER_LAYER = re.compile(r"^In\d+\.Cu$")


def rule_text(*layouts, clearance: float = 0.0) -> str:
    """The rule block: plane zone to the filters' graphic copper, on the cut layers.

    ``clearance`` (mm) must stay <= slot - 0.0005 for every filter; 0 keeps it valid
    for any slot.  The layer clause is ``inner`` unless a cut lies on an outer layer.
    """
    for layout in layouts:
        if clearance > layout.spec.slot - 0.0005:
            raise SpecError("clearance", clearance, f"must be <= slot - 0.0005 mm ({layout.spec.slot - 0.0005:g} mm) "
                            f"for {layout.spec.name}")
    cut_layers = {c.layer for layout in layouts for c in layout.cuts}
    layer = "  (layer inner)\n" if all(INNER_LAYER.match(n) for n in cut_layers) else ""
    return (f"(rule \"{RULE_NAME}\"\n{layer}"
            f"  (constraint clearance (min {clearance:g}mm))\n"
            f"  (condition \"A.Type == 'Zone' && B.Type == 'Graphic' && B.insideArea('{AREA_PREFIX}*')\"))\n")


def rules_text(*layouts, clearance: float = 0.0) -> str:
    """A whole .kicad_dru holding only our rule."""
    return "(version 1)\n" + rule_text(*layouts, clearance=clearance)


def merge_rules(existing: str | None, ours: str) -> str:
    """Merge our rules into a user's .kicad_dru text.

    Keeps one version line and puts it first (KiCad ignores a file without it),
    keeps the user's rules and comments as written, replaces any earlier copy of our rules (by name) and puts ours last,
    because later rules win in KiCad.  Merging twice gives the same text.
    """
    our_forms = [(head, name, text) for head, name, text, _, _ in _forms(ours, "<ours>")]
    our_rules = [(name, text) for head, name, text in our_forms if head == "rule"]
    names = {name for name, _ in our_rules}
    tail = "".join(text.rstrip() + "\n" for _, text in our_rules)
    if existing is None or not existing.strip():
        return "(version 1)\n" + tail
    forms = _forms(existing, ".kicad_dru")
    version_first = bool(forms) and forms[0][0] == "version"
    kept, pos = [], 0
    for k, (head, name, text, start, end) in enumerate(forms):
        drop = (head == "rule" and name in names) or (head == "version" and (k > 0 or not version_first))
        if drop:
            kept.append(existing[pos:start])
            pos = end + 1 if existing[end:end + 1] == "\n" else end
    kept.append(existing[pos:])
    base = "".join(kept).rstrip()
    if not version_first:
        base = "(version 1)\n" + base.lstrip("\n")
    return base + "\n" + tail


def has_rule(text: str | None) -> tuple[bool, bool]:
    """(our rule present, our rule is the last rule) in a .kicad_dru text."""
    if not text:
        return False, False
    rules = [name for head, name, _, _, _ in _forms(text, ".kicad_dru") if head == "rule"]
    versions = [1 for head, *_ in _forms(text, ".kicad_dru") if head == "version"]
    present = RULE_NAME in rules and bool(versions)
    return present, present and rules[-1] == RULE_NAME


def _forms(text: str, source: str):
    """Top-level forms of a rules file: (head, name, text, start, end-exclusive); a # starting a line is a comment."""
    out, depth, start, i, n = [], 0, 0, 0, len(text)
    while i < n:
        ch = text[i]
        if ch == '"':
            i += 1
            while i < n and text[i] != '"':
                i += 2 if text[i] == "\\" else 1
            if i >= n:
                raise error_in_text(source, text, i, "unterminated string")
        elif ch == "#" and not text[text.rfind("\n", 0, i) + 1:i].strip():
            while i < n and text[i] != "\n":
                i += 1
            continue
        elif ch == "(":
            if depth == 0:
                start = i
            depth += 1
        elif ch == ")":
            depth -= 1
            if depth < 0:
                raise error_in_text(source, text, i, "unbalanced ')'")
            if depth == 0:
                form = text[start:i + 1]
                m = re.match(r'\(\s*([A-Za-z_]+)\s*(?:"((?:[^"\\]|\\.)*)"|([^\s()"]+))?', form)
                head = m.group(1) if m else ""
                name = (m.group(2) if m.group(2) is not None else m.group(3)) if m else None
                out.append((head, name, form, start, i + 1))
        i += 1
    if depth:
        raise error_in_text(source, text, start, "unclosed '('")
    return out


