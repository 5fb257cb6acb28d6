"""Board reader, first part: the version stamp, the layer table, the net table and the stack-up.

These sections are small, so they are read from trees, except the net declarations: a board of many nets writes
them the plain way, and one pattern pass reads them as the tree would.
"""
from __future__ import annotations

import re

from ..errors import show
from ..spec import COPPER_LAYERS
from .board_model import MAX_SIZE_MM, Dielectric, Stackup, series_loss_tangent
from .board_tree import _atom, _atom_text, _child, _children, _is_number, _num
from .sexpr import Quoted, unescape

VERSIONS = {20211014: "6.0", 20221018: "7.0", 20240108: "8.0", 20241229: "9.0"}
"""Version stamps of the major releases (KiCad's own version history; 10.0 files carry 2026xxxx)."""
OLDEST_VERSION = 20211014
NEWEST_CHECKED = 20260206
"""The newest stamp this reader was tested with: tests/boards/hx2_v10.kicad_pcb, written as text by
tests/boards/make_boards.py after KiCad 10's format changes (net names instead of codes).  Not checked against a
file saved by a real KiCad of that version; newer stamps are read with a warning."""
COPPER_TYPES = frozenset({"signal", "power", "mixed", "jumper"})

_NET_NAME = re.compile(rb'\(net\s+"((?:[^"\\]|\\.)*)"\s*\)')
_NET_DECLARATION = re.compile(rb'\(net\s+([^\s()"]+)\s+("(?:[^"\\]|\\.)*"|[^\s()"]+)\s*\)')


class HeaderReader:
    """Reads the header sections into ``version``, ``copper``, ``layer_names``, ``nets``, ``net_codes`` and
    ``stackup`` of the board reader (``board._Reader``), and resolves net references for the other readers."""

    def _version(self) -> tuple[int, str]:
        spans = self.s.spans_of("version")
        if not len(spans):
            raise self.fail(self.s.root[0], "board has no (version ...) stamp")
        node = self.s.parse(*map(int, spans[0]))
        try:
            version = int(node[1])
        except (IndexError, ValueError):
            raise self.fail(int(spans[0][0]), "bad (version ...) stamp: expected a date number like 20211014") from None
        if version < OLDEST_VERSION:
            raise self.fail(int(spans[0][0]), f"version {version} is older than KiCad 6.0 ({OLDEST_VERSION}); "
                                              "open and save the board in KiCad 6 or newer first")
        if version > NEWEST_CHECKED:
            self.warnings.append(f"version {version} is newer than the newest this reader was checked with "
                                 f"({NEWEST_CHECKED}); unknown tokens are ignored")
        generator = ""
        gen = self.s.spans_of("generator")
        if len(gen):
            g = self.s.parse(*map(int, gen[0]))
            generator = str(g[1]) if len(g) > 1 else ""
        return version, generator

    def _layers(self) -> tuple[tuple[str, ...], dict[str, str]]:
        trees = self.tree("layers")
        if not trees:
            raise self.fail(self.s.root[0], "board has no (layers ...) table")
        node, start = trees[0]
        copper, names = [], {}
        for entry in node[1:]:
            if not isinstance(entry, list) or len(entry) < 3:
                raise self.fail(start, f"bad entry in the layer table: {show(entry)}")
            name, kind = str(entry[1]), str(entry[2])
            names[name] = str(entry[3]) if len(entry) > 3 else name
            if kind in COPPER_TYPES and name.endswith(".Cu"):
                if name not in COPPER_LAYERS:
                    raise self.fail(start, f"copper layer {name!r} in the layer table is not one of KiCad's F.Cu, "
                                    "In1.Cu .. In30.Cu, B.Cu")
                copper.append(name)
        if not copper:
            raise self.fail(start, "the layer table lists no copper layer")
        return tuple(sorted(copper, key=_copper_order)), names

    def _nets(self) -> tuple[list[str], dict[int, int]]:
        """Net table: declared (code, name) pairs (6-9), then names used by reference (10)."""
        nets, codes, codes_by_name = [""], {0: 0}, {"": 0}
        for node, start in self._net_declarations():
            if len(node) < 3:
                raise self.fail(start, f"bad net declaration {show(node)}: expected (net CODE \"NAME\")")
            try:
                code = int(node[1])
            except ValueError:
                raise self.fail(start, f"bad net code {node[1]!r}: expected a whole number") from None
            name = str(node[2])
            if code == 0:
                continue
            if name not in codes_by_name:
                codes_by_name[name] = len(nets)
                nets.append(name)
            codes[code] = codes_by_name[name]
        known = set(nets)
        named = _NET_NAME.findall(self.data) if self.version > max(VERSIONS) or len(nets) == 1 else []
        for raw in dict.fromkeys(named):
            name = unescape(raw.decode("utf-8"))
            if name not in known:
                known.add(name)
                nets.append(name)
        return nets, codes

    def _net_declarations(self) -> list[tuple[list, int]]:
        """The (net CODE NAME) items as trees; written the plain way they are read by one pattern pass."""
        spans = self.s.spans_of("net")
        if len(spans):
            found = list(_NET_DECLARATION.finditer(self.data, int(spans[0, 0]), int(spans[-1, 1])))
            if len(found) == len(spans) and all(m.span() == (a, b) for m, (a, b) in zip(found, spans.tolist())):
                return [(["net", m.group(1).decode("utf-8"), _atom_text(m.group(2))], m.start()) for m in found]
        return self.tree("net")

    def net_of(self, token, offset: int) -> int:
        """Net index of a net reference: a code (6-9) or a quoted name (10)."""
        if isinstance(token, Quoted) or token[:1] == '"':
            name = str(token) if isinstance(token, Quoted) else unescape(token[1:-1])
            if name not in self.net_lookup:
                raise self.fail(offset, f"net {name!r} is not in the board's net list")
            return self.net_lookup[name]
        try:
            return self.net_codes[int(token)]
        except (ValueError, KeyError):
            raise self.fail(offset, f"net {token} is not declared in the board's net list") from None

    def _stackup(self) -> Stackup | None:
        setup = self.tree("setup")
        stack = _child(setup[0][0], "stackup") if setup else None
        if stack is None:
            self.warnings.append("board has no stack-up (setup > stackup): give stackup.er and stackup.h yourself")
            return None
        copper: list[tuple[str, float | None]] = []
        pending: list[tuple] = []
        dielectrics: list[Dielectric] = []
        for layer in _children(stack, "layer"):
            name = str(layer[1])
            kind = str(_atom(layer, "type", default=""))
            if kind == "copper" or name in self.copper:
                copper.append((name, _num(layer, "thickness")))
                dielectrics.extend(Dielectric(*d[:7], name, d[7]) for d in pending)
                pending = []
            elif kind in ("core", "prepreg") or name.startswith("dielectric"):
                groups, current = [], []
                for item in layer[2:]:
                    if item == "addsublayer":
                        groups.append(current)
                        current = []
                    elif isinstance(item, list):
                        current.append(item)
                groups.append(current)
                where = self.data.find(b'"' + name.encode("utf-8") + b'"', setup[0][1])
                parts = [(self._dielectric_value(["x", *g], "thickness", name, where),
                          self._dielectric_value(["x", *g], "epsilon_r", name, where),
                          _num(["x", *g], "loss_tangent"), str(_atom(["x", *g], "material", default="")))
                         for g in groups]
                h = None if any(p[0] is None for p in parts) else sum(p[0] for p in parts)
                er = h / sum(p[0] / p[1] for p in parts) if h and all(p[1] for p in parts) else None
                if er is None:
                    self.warnings.append(f"stack-up layer {name!r} has no epsilon_r or thickness")
                tan_d = series_loss_tangent(p[:3] for p in parts)
                pending.append((name, kind, h, er, tan_d, parts[0][3], copper[-1][0] if copper else "",
                                tuple((p[0], p[1]) for p in parts) if len(parts) > 1 else ()))
        if [n for n, _ in copper] != list(self.copper):
            self.warnings.append("stack-up copper layers differ from the layer table; stack-up ignored")
            return None
        return Stackup(tuple(copper), tuple(dielectrics))

    def _dielectric_value(self, node: list, head: str, layer: str, offset: int) -> float | None:
        """A dielectric's thickness (> 0 mm) or epsilon_r (1 to 100); None when left out, an error when unusable."""
        value = _atom(node, head)
        if value is None:
            return None
        if head == "thickness":
            usable = _is_number(value) and 0 < float(value) <= MAX_SIZE_MM
            allowed = f"> 0 and at most {MAX_SIZE_MM:g} mm"
        else:
            usable, allowed = _is_number(value) and 1 <= float(value) <= 100, "from 1 to 100"
        if not usable:
            raise self.fail(max(offset, 0), f"stack-up layer {layer!r}: ({head} {value}) must be a number {allowed}")
        return float(value)


def _copper_order(name: str) -> tuple[int, int]:
    """Stack position from the layer name: F.Cu, In1.Cu, In2.Cu, ..., B.Cu."""
    if name == "F.Cu":
        return (0, 0)
    if name == "B.Cu":
        return (2, 0)
    m = re.fullmatch(r"In(\d+)\.Cu", name)
    return (1, int(m.group(1))) if m else (1, 10_000)
