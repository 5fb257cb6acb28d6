"""Board reader, fourth part: footprints, parsed one at a time on demand, and every pad's position in one pass.

``pads`` reads all pads by one regular-expression pass (``_fast``, ``_numbers``); a pad the pattern misses or
cannot convert is read from its tree by ``_pad_tree``, the reference the pattern must agree with.
"""
from __future__ import annotations

import re
import warnings

import numpy as np
import shapely
from shapely.geometry import Polygon

from .board_model import MAX_SIZE_MM, Footprint, FootprintPolygon, Pad, PadArray
from .board_tree import _as_token, _atom, _child, _children, _is_number, _num, _ring, _row_numbers, expand_layers

_NUM = rb"[-+0-9.eE]+"
_TWO = rb"(" + _NUM + rb"\s+" + _NUM + rb")\s*"
_NAME = rb'("(?:[^"\\]|\\.)*"|[^\s()"]+)\s*'
_LOCKED = rb"(?:\(locked(?:\s+\w+)?\s*\)\s*)?"
_PAD = re.compile(
    rb"\(pad\s+" + _NAME + rb"([a-z_]+)\s+([a-z_]+)\s+(?:locked\s+)?\(at\s+" + _TWO + rb"(?:(" + _NUM
    + rb")\s*)?\)\s*" + _LOCKED + rb"\(size\s+" + _TWO + rb"\)")


class FootprintReader:
    """Reads ``Footprint`` and ``PadArray`` for the board reader (``board._Reader``)."""

    def footprint(self, start: int, end: int) -> Footprint:
        node = self.s.parse(start, end, skip=("filled_polygon", "fill_segments", "model", "zone"))
        at = _child(node, "at")
        if at is None or len(at) < 3 or not _is_number(at[1]) or not _is_number(at[2]):
            raise self.fail(start, "footprint without (at X Y)")
        rot = float(at[3]) if len(at) > 3 and _is_number(at[3]) else 0.0
        reference = value = ""
        for text in _children(node, "fp_text"):
            if len(text) > 2 and text[1] in ("reference", "value"):
                reference, value = (str(text[2]), value) if text[1] == "reference" else (reference, str(text[2]))
        for prop in _children(node, "property"):
            if len(prop) > 2 and prop[1] in ("Reference", "Value"):
                reference, value = (str(prop[2]), value) if prop[1] == "Reference" else (reference, str(prop[2]))
        fp = Footprint(reference, value, str(node[1]) if len(node) > 1 else "", (float(at[1]), float(at[2])), rot,
                       str(_atom(node, "layer", default="F.Cu")), (), (start, end))
        pads = tuple(self._pad(p, fp, start) for p in _children(node, "pad"))
        polygons = tuple(p for item in _children(node, "fp_poly") for p in self._copper_polygon(item, fp, start))
        return Footprint(fp.reference, fp.value, fp.lib_id, fp.at, rot, fp.layer, pads, (start, end), polygons)

    def _copper_polygon(self, node: list, fp: Footprint, start: int) -> list[FootprintPolygon]:
        """A filled ``fp_poly`` on copper (KiCad 6-9 spellings) in board coordinates; [] for anything else.

        A polygon that cannot be read is left out with a warning: any footprint may hold one, and only
        ebglayout's own footprints are measured from these.
        """
        layer = _child(node, "layer")
        layers = expand_layers(str(layer[1]), self.copper, self.layer_names) if layer is not None and len(layer) > 1 \
            else []
        if not layers or _atom(node, "fill") not in ("solid", "yes"):
            return []
        try:
            ring = _ring(_child(node, "pts"))
        except (TypeError, ValueError, IndexError):
            ring = ()
        if len(ring) < 3:
            self.warnings.append(f"footprint {fp.reference}: an fp_poly on {layers[0]} without 3 readable points "
                                 f"(byte {start}) was left out")
            return []
        polygon = shapely.make_valid(Polygon([fp.to_board(x, y) for x, y in ring.tolist()]))
        width = _num(_child(node, "stroke"), "width") or _num(node, "width")
        if width:
            polygon = polygon.buffer(width / 2)
        return [FootprintPolygon(name, polygon) for name in layers]

    def _pad(self, node: list, fp: Footprint, start: int) -> Pad:
        if len(node) < 4:
            raise self.fail(start, f"footprint {fp.reference}: pad without number, kind and shape")
        at, size = _child(node, "at"), _child(node, "size")
        if (at is None or size is None or len(at) < 3 or len(size) < 3
                or not all(_is_number(v) for v in (at[1], at[2], size[1], size[2]))):
            raise self.fail(start, f"footprint {fp.reference}: pad {node[1]} needs (at X Y) and (size W H) with "
                            "finite numbers")
        if not all(0 < float(v) <= MAX_SIZE_MM for v in size[1:3]):
            raise self.fail(start, f"footprint {fp.reference}: pad {node[1]} (size {size[1]} {size[2]}) must be > 0 "
                            f"and at most {MAX_SIZE_MM:g} mm")
        drill_node = _child(node, "drill")
        drills = [float(v) for v in drill_node[1:] if _is_number(v)] if drill_node is not None else []
        net_field = _child(node, "net")
        net = self.net_of(net_field[1], start) if net_field is not None and len(net_field) > 1 else 0
        layers = _child(node, "layers")
        names = tuple(str(v) for v in layers[1:] if not isinstance(v, list)) if layers is not None else ()
        copper: list[str] = []
        for name in names:
            copper.extend(n for n in expand_layers(name, self.copper, self.layer_names) if n not in copper)
        return Pad(
            number=str(node[1]), kind=str(node[2]), shape=str(node[3]),
            at=fp.to_board(float(at[1]), float(at[2])),
            rotation=float(at[3]) if len(at) > 3 and _is_number(at[3]) else 0.0,
            size=(float(size[1]), float(size[2])), drill=min(drills) if drills else None, layers=names,
            copper=tuple(copper), net=net, net_name=self.nets[net],
        )

    def pads(self, fp_spans: np.ndarray) -> PadArray:
        """Positions and sizes of all pads by one pattern pass; footprint placement from each (at ...)."""
        rows = np.flatnonzero(self.s.heads == b"footprint")
        if not len(rows):
            z = np.zeros((0, 2))
            return PadArray(z, z, np.zeros(0), np.zeros(0, np.int32), np.zeros((0, 2), np.int64))
        spans, heads, owner = self.children(rows)
        fp_of_row = {int(r): i for i, r in enumerate(rows.tolist())}
        places = np.full((len(rows), 3), np.nan)
        for (a, b), parent in zip(spans[heads == b"at"].tolist(), owner[heads == b"at"].tolist()):
            try:
                values = [float(v) for v in self.data[a + 3:b - 1].split()[:3]]
            except ValueError:
                raise self.fail(a, "footprint (at ...) should hold numbers") from None
            if len(values) < 2:
                raise self.fail(a, "footprint (at X Y) needs two numbers")
            places[fp_of_row[parent]] = values + [0.0] * (3 - len(values))
        if np.isnan(places[:, :2]).any():
            missing = int(rows[int(np.argmax(np.isnan(places[:, 0])))])
            raise self.fail(int(self.s.items[missing, 0]), "footprint without (at X Y)")
        pad_spans = spans[heads == b"pad"]
        pad_fp = np.array([fp_of_row[int(p)] for p in owner[heads == b"pad"].tolist()], dtype=np.int32)
        rows_text = self._fast(pad_spans, (_PAD,), self._pad_tree)
        nums = self._numbers(rows_text, pad_spans, (3, 5), (2, 2), self._pad_tree)
        rotation = np.array([float(r[4]) if r[4] else 0.0 for r in rows_text])
        t = np.radians(places[pad_fp, 2])
        x, y = nums[:, 0], nums[:, 1]
        at = np.column_stack([places[pad_fp, 0] + x * np.cos(t) + y * np.sin(t),
                              places[pad_fp, 1] - x * np.sin(t) + y * np.cos(t)])
        return PadArray(at, nums[:, 2:4], rotation, pad_fp, pad_spans)

    def _pad_tree(self, node: list, start: int) -> tuple:
        at = _child(node, "at")
        if len(node) < 4 or at is None or len(at) < 3 or not all(_is_number(v) for v in at[1:]):
            raise self.fail(start, "pad without number, kind, shape and (at X Y [ANGLE])")
        return (_as_token(node[1]), str(node[2]).encode(), str(node[3]).encode(),
                f"{at[1]} {at[2]}".encode(), str(at[3]).encode() if len(at) > 3 else None,
                self._field(node, "size", 2, start))

    def _fast(self, spans: np.ndarray, patterns: tuple[re.Pattern, ...], tree_row) -> list[tuple]:
        """One row of field texts per item; items the patterns miss are read from their tree."""
        if not len(spans):
            return []
        starts = spans[:, 0]
        first, last = int(starts[0]), int(spans[-1, 1])
        pattern = patterns[-1]
        head = pattern.pattern[:pattern.pattern.index(rb"\s")].replace(b"\\(", b"(") + b" "
        follows = np.frombuffer(self.data, dtype=np.uint8)[starts + len(head) - 1]
        if (follows == 32).all() and self.data.count(head) == len(starts):
            # Each item holds one occurrence of "(head " and there is no other, so when a pattern
            # matches as often as there are items, the matches are the items, in file order.
            for candidate in patterns:
                rows = candidate.findall(self.data, first, last)
                if len(rows) == len(starts):
                    return rows
        matches = list(pattern.finditer(self.data, first, last))
        rows = [m.groups() for m in matches]
        found = [m.start() for m in matches]
        if len(found) == len(starts) and np.array_equal(np.asarray(found, dtype=np.int64), starts):
            return rows
        good = dict(zip(found, rows))
        return [good[a] if a in good else tree_row(self.s.parse(a, b), a) for a, b in spans.tolist()]

    def _numbers(self, rows: list[tuple], spans: np.ndarray, fields: tuple[int, ...], counts: tuple[int, ...],
                 tree_row) -> np.ndarray:
        """Float columns from the given fields (field k holds counts[k] numbers); bad rows re-read from their tree.

        The patterns already fix how many tokens each field holds, so one join and
        one conversion per field is exact; a token that is not a number sends the
        rows through the tree, which names the item's line and column.
        """
        width = sum(counts)
        if not rows:
            return np.zeros((0, width))
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                columns = [np.fromstring(b" ".join([r[f] for r in rows]), sep=" ") for f in fields]
            if all(len(c) == n * len(rows) for c, n in zip(columns, counts)):
                out = np.hstack([c.reshape(-1, n) for c, n in zip(columns, counts)])
                if np.isfinite(out).all():
                    return out
        except ValueError:
            pass
        out = np.empty((len(rows), width))
        for i, row in enumerate(rows):
            values = _row_numbers(row, fields, counts)
            if values is None:
                a, b = (int(v) for v in spans[i])
                values = _row_numbers(tree_row(self.s.parse(a, b), a), fields, counts)
                if values is None:
                    raise self.fail(a, f"{self.heads_at(a)} item with a field that is not a number")
            out[i] = values
        return out

    def heads_at(self, start: int) -> str:
        m = re.compile(rb"\(\s*([^\s()\"]+)").match(self.data, start)
        return m.group(1).decode("utf-8", "replace") if m else "?"
