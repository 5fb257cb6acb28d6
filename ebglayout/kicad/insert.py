"""Put filter footprints into a .kicad_pcb text, and find board settings that would spoil the fill.

Only what these jobs need is read from the board text (top-level spans, nets,
layers, zones, our own footprints' zones); every byte outside the inserted text
stays as it was, so a diff of the board shows only the filter.
"""
from __future__ import annotations

import functools
import re

import shapely
from shapely.geometry import Polygon

from ..errors import BoardError, show
from ..layout import Layout
from .board_zones import zone_number
from .footprint import DIALECTS, KICAD6, KICAD9, area_name
from .rules import RULE_NAME, has_rule
from .sexpr import error_in_text

_TOKEN = re.compile(r'"(?:[^"\\]|\\.)*"|[()]|[^\s()"]+', re.S)
_OPENING_TOLERANCE = 0.0005
"""Plane copper lost to the min-width opening thinner than this (mm) is polygonisation noise, not a finding."""


def insert_footprints(board_text: str, items: list[str], source: str = "<board>") -> str:
    """Insert board-form footprint blocks before the board's final closing parenthesis.

    The result is ``board_text[:k] + inserted + board_text[k:]`` with ``k`` the
    position of that parenthesis, so every other byte is unchanged.
    """
    _, close = _root_span(board_text, source)
    inserted = "".join(item if item.endswith("\n") else item + "\n" for item in items)
    if inserted and board_text[close - 1:close] != "\n":
        inserted = "\n" + inserted
    return board_text[:close] + inserted + board_text[close:]


def board_version(board_text: str, source: str = "<board>") -> int:
    """The footprint dialect for a board: its ``(version N)`` mapped down to KiCad 6, 7, 8 or 9.

    Boards older than KiCad 6 or newer than KiCad 9's format are refused: the
    first have no rule areas in footprints, the second name nets instead of numbering them.
    """
    start, _ = _root_span(board_text, source)
    m = re.compile(r"\(kicad_pcb\s*\(version\s+(\d+)\)").match(board_text, start)
    if not m:
        raise error_in_text(source, board_text, start, "board has no (version N) right after '(kicad_pcb'")
    version = int(m.group(1))
    if version < KICAD6 or version > KICAD9:
        raise error_in_text(source, board_text, m.start(1), f"board format {version} is not supported "
                        f"(allowed: {KICAD6} to {KICAD9}, KiCad 6 to 9); place the .kicad_mod footprint by hand")
    return max(v for v in DIALECTS if v <= version)


def plane_net(board_text: str, name: str, source: str = "<board>") -> tuple[int, str]:
    """(net code, net name) of the board's net called ``name``; BoardError if it has none."""
    for head, start, end in _children(board_text, source):
        if head == "net":
            form = _parse(board_text[start:end])
            if len(form) >= 3 and form[2] == name:
                return int(form[1]), name
    raise BoardError(f"{source}: net {name!r} not found; the board's plane net must exist before the filter "
                     "is inserted (allowed: a net name declared by a top-level (net N \"name\") line)")


def zone_priority_for(board_text: str, layout: Layout, plane: str, source: str = "<board>") -> int:
    """A priority for the bridged patch zones: one above every plane zone on the cut layers."""
    layers = {c.layer for c in layout.cuts}
    prios = [z["priority"] for z in _board_zones(board_text, _children(board_text, source), source)
             if z["net"] == plane and set(z["layers"]) & layers and not z["keepout"]]
    return max(prios, default=0) + 1


def fill_risks(board_text: str, layout: Layout, plane_net: str = "GND", rules_text: str | None = None,
               source: str = "<board>") -> list[str]:
    """Board settings that would stop KiCad's fill reproducing the cut; [] when none were found.

    ``rules_text`` is the board's .kicad_dru text, None when there is none.
    Measured with KiCad 6.0.11 and 9.0.2 (tests/test_kicad_fill.py) and therefore NOT
    reported: a plane zone clearance larger than the slot once our rule is in the
    .kicad_dru (the rule replaces it), a plane min width above the bridge width and
    the plane's island removal mode (bridges and patches are footprint copper, not
    plane pour).  Reported: a missing or overridden rule, a missing layer or plane
    zone, hatched fill, plane copper narrower than the plane's min width next to the
    cut (webs, convex plane corners), and bridged patch zones without the plane's
    net or below the plane's priority.
    """
    spec = layout.spec
    risks: list[str] = []
    children, board_layers, zones = _board_facts(board_text, source)
    graphic_patches = spec.style != "bridged"
    present, last = has_rule(rules_text)
    if graphic_patches and not present:
        why = ("there is no .kicad_dru" if rules_text is None else
               f"the .kicad_dru has no rule {RULE_NAME!r} (or no (version 1) line, which makes KiCad ignore it)")
        risks.append(f"{why}: KiCad then keeps max(zone clearance, netclass clearance) + 0.0005 mm between the plane "
                     f"and each patch with round corners instead of the {spec.slot:g} mm slot; write ebglayout's rule")
    elif graphic_patches and not last:
        risks.append(f"rule {RULE_NAME!r} is not the last rule in the .kicad_dru; a later matching clearance rule "
                     "would win and widen the slot")
    for cut in layout.cuts:
        layer = cut.layer
        if layer not in board_layers:
            risks.append(f"{layer}: the board has no such copper layer (it has {', '.join(board_layers)})")
            continue
        planes = [z for z in zones if z["net"] == plane_net and layer in z["layers"] and not z["keepout"]]
        covering = [z for z in planes if z["outline"] is not None and z["outline"].covers(cut.outline)]
        if not covering:
            what = "no" if not planes else "no single"
            risks.append(f"{layer}: {what} {plane_net} zone covers the cut (bounds "
                         f"{', '.join(f'{v:.3f}' for v in cut.outline.bounds)} mm): nothing for KiCad to cut")
            continue
        for zone in covering:
            label = f"{layer}: {plane_net} zone {zone['name']!r}" if zone["name"] else f"{layer}: {plane_net} zone"
            if zone["hatch"]:
                risks.append(f"{label} uses hatched fill; the slot is only reproduced by solid fill")
            lost = _narrow_plane(cut, zone["min_width"], zone["outline"])
            if lost is not None:
                x, y, width = lost
                risks.append(f"{label} has min width {zone['min_width']:g} mm: KiCad removes or rounds plane copper "
                             f"narrower than that next to the cut (near {x:.3f}, {y:.3f}, where it is {width:g} mm wide); "
                             "lower the zone's min width or widen cut.web")
        if spec.style == "bridged":
            risks.extend(_bridged_zone_risks(board_text, children, layout, layer, plane_net, covering,
                                             source))
    return risks


@functools.lru_cache(maxsize=4)
def _board_facts(text: str, source: str) -> tuple[list, list[str], list[dict]]:
    """(top-level items, copper layers, zones) of a board text, read once for all the filters checked against it."""
    children = _children(text, source)
    return children, _copper_layers(text, children), _board_zones(text, children, source)


def _bridged_zone_risks(board_text, children, layout, layer, plane, covering, source) -> list[str]:
    prefix = area_name(layout) + "_patch"
    ours = [z for z in _footprint_zones(board_text, children, source)
            if z["name"].startswith(prefix) and layer in z["layers"]]
    out = []
    top = max(z["priority"] for z in covering)
    for zone in ours:
        if zone["net"] != plane:
            out.append(f"{layer}: patch zone {zone['name']!r} has net {zone['net'] or '(none)'!r}, not {plane!r}; "
                       "its bridges cannot join the plane (give it the plane's net)")
        if zone["priority"] <= top:
            out.append(f"{layer}: patch zone {zone['name']!r} has priority {zone['priority']}, the {plane} plane "
                       f"{top}; the plane must rank lower or KiCad empties the patch (measured with a higher plane "
                       "priority; equal priorities leave the order to KiCad)")
    return out


def _narrow_plane(cut, min_width: float, zone_outline):
    """Largest piece of plane copper next to the cut that an opening by min_width/2 removes, or None."""
    if min_width <= 0:
        return None
    r = min_width / 2
    # A mitred window: its far corners cost no vertices, and what the opening takes there is not near the cut.
    window = cut.outline.buffer(min_width * 2 + 0.05, join_style="mitre")
    region = window.intersection(zone_outline).difference(cut.outline)
    opened = region.buffer(-r, quad_segs=32).buffer(r, quad_segs=32)
    lost = region.difference(opened)
    near = cut.outline.buffer(1e-3)
    pieces = [p for p in getattr(lost, "geoms", [lost])
              if not p.is_empty and p.intersects(near) and not p.buffer(-_OPENING_TOLERANCE).is_empty]
    if not pieces:
        return None
    worst = max(pieces, key=lambda p: p.area)
    point = worst.representative_point()
    width = 2 * _inscribed_radius(worst)
    return point.x, point.y, round(width, 4)


def _inscribed_radius(poly) -> float:
    """Radius of the largest circle inside ``poly`` (shapely's pole of inaccessibility)."""
    centre = shapely.maximum_inscribed_circle(poly, 1e-4)
    return centre.length


# --- minimal board reading -------------------------------------------------------------------------------


_STRUCTURE = re.compile(r'"(?:[^"\\]|\\.)*"|"|[()]', re.S)


def _walk(text: str, source: str):
    """Yield (position, depth after, char) for every structural parenthesis; checks strings and balance."""
    depth = 0
    for m in _STRUCTURE.finditer(text):
        tok = m.group()
        if tok == "(":
            depth += 1
            yield m.start(), depth, tok
        elif tok == ")":
            depth -= 1
            if depth < 0:
                raise error_in_text(source, text, m.start(), "unbalanced ')'")
            yield m.start(), depth, tok
        elif tok == '"':
            raise error_in_text(source, text, m.start(), "unterminated string")
    if depth:
        raise error_in_text(source, text, len(text), f"{depth} unclosed '('")


def _root_span(text: str, source: str) -> tuple[int, int]:
    """(position of the root '(', position of its closing ')'); the root must be kicad_pcb."""
    stripped = text.lstrip("\ufeff \t\r\n")
    start = len(text) - len(stripped)
    if not stripped.startswith("(kicad_pcb"):
        raise error_in_text(source, text, start, "not a KiCad board (expected '(kicad_pcb' at the start)")
    close = None
    for pos, depth, ch in _walk(text, source):
        if ch == ")" and depth == 0:
            if close is not None:
                raise error_in_text(source, text, pos, "text after the board's closing parenthesis")
            close = pos
    if text[close + 1:].strip():
        raise error_in_text(source, text, close + 1, "text after the board's closing parenthesis")
    return start, close


def _children(text: str, source: str):
    """(head, start, end-exclusive) of each top-level item of the board."""
    out, start = [], None
    for pos, depth, ch in _walk(text, source):
        if ch == "(" and depth == 2:
            start = pos
        elif ch == ")" and depth == 1 and start is not None:
            m = re.match(r"\(\s*([^\s()\"]+)", text[start:start + 64])
            out.append((m.group(1) if m else "", start, pos + 1))
            start = None
    return out


def _parse(text: str):
    """Nested lists of atoms (quoted strings unquoted) for one small form."""
    stack: list[list] = [[]]
    for tok in _TOKEN.findall(text):
        if tok == "(":
            stack.append([])
        elif tok == ")":
            done = stack.pop()
            stack[-1].append(done)
        elif tok.startswith('"'):
            stack[-1].append(re.sub(r"\\(.)", lambda m: {"n": "\n"}.get(m.group(1), m.group(1)), tok[1:-1]))
        else:
            stack[-1].append(tok)
    return stack[0][0] if stack[0] else []


def _find(form, head):
    return next((x for x in form[1:] if isinstance(x, list) and x and x[0] == head), None)


def _copper_layers(text: str, children) -> list[str]:
    for head, start, end in children:
        if head == "layers":
            names = [entry[1] for entry in _parse(text[start:end])[1:] if isinstance(entry, list) and len(entry) > 1]
            return [n for n in names if n.endswith(".Cu")]
    return []


def _zone_record(text: str, start: int, end: int, source: str) -> dict:
    """A zone's facts, its numbers checked as the board reader checks them (the texts here are read boards)."""
    form = _parse(text[start:end])
    name = _find(form, "name")
    name = name[1] if name and len(name) > 1 else ""

    def number(head: str, value):
        try:
            return zone_number(head, value)
        except ValueError as err:
            raise error_in_text(source, text, start, f"zone {show(name)}: {err}") from None

    def field(head: str) -> float | None:
        found = _find(form, head)
        return number(head, found[1] if len(found) > 1 else None) if found is not None else None

    def xy(p: list) -> tuple[float, float]:
        return tuple(number("xy", v) for v in (p[1:] + [None, None])[:2])

    net_name = _find(form, "net_name")
    layer = _find(form, "layer")
    layers = _find(form, "layers")
    prio = field("priority")
    minw = field("min_thickness")
    fill = _find(form, "fill") or []
    polys = []
    for poly in (x for x in form[1:] if isinstance(x, list) and x and x[0] == "polygon"):
        pts = _find(poly, "pts") or []
        ring = []
        for p in pts[1:]:
            if not isinstance(p, list) or not p:
                continue
            if p[0] == "xy":
                ring.append(xy(p))
            elif p[0] == "arc":
                ring.extend(xy(q) for q in p[1:] if isinstance(q, list) and q)
        if len(ring) >= 3:
            polys.append(Polygon(ring))
    outline = None
    if polys:
        outline = shapely.make_valid(polys[0])
        for hole in polys[1:]:
            outline = outline.difference(hole)
    return {
        "net": net_name[1] if net_name and len(net_name) > 1 else "",
        "layers": tuple(layers[1:]) if layers else ((layer[1],) if layer and len(layer) > 1 else ()),
        "name": name,
        "priority": int(prio) if prio is not None else 0,
        "min_width": minw if minw is not None else 0.0,
        "hatch": any(isinstance(x, list) and x[:2] == ["mode", "hatch"] for x in fill[1:]),
        "keepout": _find(form, "keepout") is not None,
        "outline": outline,
    }


def _board_zones(text: str, children, source: str) -> list[dict]:
    return [_zone_record(text, s, e, source) for head, s, e in children if head == "zone"]


def _zone_spans(text: str):
    """Spans of '(zone' lists anywhere in a text (used on one footprint block)."""
    spans, stack = [], []
    for pos, depth, ch in _walk(text, "<footprint>"):
        if ch == "(":
            stack.append(pos)
        else:
            start = stack.pop()
            if text.startswith("(zone", start) and text[start + 5:start + 6] in " \n\t":
                spans.append((start, pos + 1))
    return sorted(spans)


def _footprint_zones(text: str, children, source: str) -> list[dict]:
    out = []
    for head, start, end in children:
        if head == "footprint":
            block = text[start:end]
            if "(zone" not in block:
                continue
            for s, e in _zone_spans(block):
                out.append(_zone_record(text, start + s, start + e, source))
    return out
