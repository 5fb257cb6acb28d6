"""Board reader, second part: segments, arcs and vias, read in bulk with the tree as the reference.

``_track_rows`` locates every item's fields from the structure scan and converts them in bulk (``board_bulk.py``);
a row the bulk path cannot vouch for is parsed as a tree by ``_segment_tree`` / ``_arc_tree`` / ``_via_tree``
below, which also raise the errors.  So the fast path never decides what is read, only how fast.
"""
from __future__ import annotations

import re

import numpy as np

from ..errors import BoardError
from .board_bulk import CHUNK, Distinct, FieldRows, field_texts, first_row_of
from .board_model import Arcs, Segments, Vias
from .board_tree import _as_token, _child, _is_number, _row_numbers, _text
from .sexpr import Quoted

_SEGMENT_FIELDS = (("start", 2, True), ("end", 2, True), ("width", 1, True), ("layer", 1, False), ("net", 1, False))
_ARC_FIELDS = (("start", 2, True), ("mid", 2, True), ("end", 2, True), ("width", 1, True), ("layer", 1, False),
               ("net", 1, False))
_VIA_FIELDS = (("at", 2, True), ("size", 1, True), ("drill", 1, True), ("layers", 2, False), ("net", 1, False))
"""Fields read from each track item: head, how many values, numeric; tree rows give them in this order."""
_STRING_TOKEN = re.compile(rb'"(?:[^"\\]|\\.)*"|[^\s"]+')


class TrackReader:
    """Reads ``Segments``, ``Arcs`` and ``Vias`` for the board reader (``board._Reader``)."""

    def _track_rows(self, head: str, fields: tuple[tuple[str, int, bool], ...], tree_row,
                    words: bool = False) -> FieldRows:
        """Field values of every item with this head, in file order.

        Numbers come out as one float array (converted like ``float``, so exact);
        other fields as codes into their distinct texts, each text the field's
        first ``count`` tokens as the tree reads them.  Rows the bulk reader cannot
        vouch for (see ``_locate``) are parsed as trees, which also raise the
        errors; with ``words`` the tree row starts with the item's bare words.
        Items are read in chunks so the temporary arrays stay small and reused.
        """
        spans = self.s.spans_of(head)
        codes_of, names = self.s.head_kinds()
        key = head.encode()
        items = np.flatnonzero(codes_of == names.index(key)) if key in names else np.zeros(0, np.int64)
        n = len(spans)
        numeric = [k for k, f in enumerate(fields) if f[2]]
        counts = tuple(fields[k][1] for k in numeric)
        heads = [fields[k][0] for k in numeric]
        follows = {heads.index("start"): heads.index("end")} if "start" in heads and "end" in heads else {}
        texts = [k for k, f in enumerate(fields) if not f[2]]
        # np.full writes the arrays once, front to back: filling them chunk by chunk later faults pages in far slower
        numbers = np.full((n, sum(counts)), 0.0)
        codes = np.full((n, len(texts)), 0, np.int64)
        kind_codes = np.full(n if words else 0, 0, np.int64)
        sure = np.full(n, False)
        distinct = [Distinct() for _ in texts]
        kinds = Distinct()
        for a in range(0, n, CHUNK):
            part = slice(a, a + CHUNK)
            starts, lengths, ok, gap = self._locate(items[part], len(key), tuple(f[0] for f in fields), words)
            ok = self._bulk_numbers(starts[:, numeric], lengths[:, numeric], counts, ok, numbers[part], follows)
            rows = np.flatnonzero(ok)
            if len(rows) and texts:
                found = field_texts(self.data, starts[rows][:, texts], lengths[rows][:, texts], distinct)
                codes[part][rows] = found
                for j, k in enumerate(texts):
                    rejected = np.array([v is None for v in distinct[j].normal(fields[k][1])], dtype=bool)
                    ok[rows[rejected[found[:, j]]]] = False
            if words and len(rows):
                kind_codes[part][rows] = field_texts(self.data, gap[rows, :1], gap[rows, 1:], [kinds])[:, 0]
            sure[part] = ok
        for i in np.flatnonzero(~sure).tolist():
            a, b = (int(v) for v in spans[i])
            row = tree_row(self.s.parse(a, b), a)
            if words:
                kind_codes[i] = kinds.put(row[0])
                row = row[1:]
            values = _row_numbers(row, tuple(numeric), counts)
            if values is None:
                raise self.fail(a, f"{head} item with a field that is not a number")
            numbers[i] = values
            for j, k in enumerate(texts):
                codes[i, j] = distinct[j].put(row[k])
        return FieldRows(spans, numbers, [(codes[:, j], d.normal(fields[k][1])) for j, (d, k) in
                                      enumerate(zip(distinct, texts))],
                     (kind_codes, [_via_kind(w) for w in kinds.words()]) if words else None)

    def _layer_lut(self, names: list[bytes | None]) -> tuple[np.ndarray, list[int]]:
        """Copper-layer index of each distinct layer text (-1 where unused), and the texts that are no copper layer."""
        lut = np.full(len(names), -1, dtype=np.int16)
        bad = []
        for i, v in enumerate(names):
            if v is None:
                continue
            name = _text(v.strip())
            if name in self.copper:
                lut[i] = self.copper.index(name)
            else:
                bad.append(i)
        return lut, bad

    def _layer_column(self, codes: np.ndarray, names: list[bytes | None], spans: np.ndarray, what: str) -> np.ndarray:
        """Copper-layer index per row; the first row (file order) on a layer that is no copper layer is an error."""
        lut, bad = self._layer_lut(names)
        if bad:
            row = first_row_of(codes, bad)
            if row is not None:
                name = _text(names[int(codes[row])].strip())
                raise self.fail(int(spans[row, 0]),
                                f"{what} on layer {name!r}, which is not a copper layer of this board")
        return lut[codes]

    def _net_column(self, codes: np.ndarray, names: list[bytes | None], spans: np.ndarray) -> np.ndarray:
        """Net index per row; the first row (file order) naming an unknown net is an error."""
        lut = np.zeros(len(names), dtype=np.int32)
        bad = []
        for i, v in enumerate(names):
            if v is None:
                continue
            try:
                lut[i] = self.net_of(v.decode("utf-8"), 0)
            except BoardError:
                bad.append(i)
        if bad:
            row = first_row_of(codes, bad)
            if row is not None:
                self.net_of(names[int(codes[row])].decode("utf-8"), int(spans[row, 0]))
        return lut[codes]

    def _segments(self) -> Segments:
        r = self._track_rows("segment", _SEGMENT_FIELDS, self._segment_tree)
        nums = r.numbers
        return Segments(nums[:, 0:2], nums[:, 2:4], nums[:, 4], self._layer_column(*r.texts[0], r.spans, "segment"),
                        self._net_column(*r.texts[1], r.spans), r.spans)

    def _arcs(self) -> Arcs:
        r = self._track_rows("arc", _ARC_FIELDS, self._arc_tree)
        nums = r.numbers
        return Arcs(nums[:, 0:2], nums[:, 2:4], nums[:, 4:6], nums[:, 6],
                    self._layer_column(*r.texts[0], r.spans, "arc"), self._net_column(*r.texts[1], r.spans), r.spans)

    def _vias(self) -> Vias:
        r = self._track_rows("via", _VIA_FIELDS, self._via_tree, words=True)
        nums, spans = r.numbers, r.spans
        codes, texts = r.texts[0]
        pairs: list[tuple[bytes, bytes] | None] = []
        lonely = []
        for i, v in enumerate(texts):
            names = _STRING_TOKEN.findall(v) if v is not None else []
            if v is not None and len(names) < 2:
                lonely.append(i)
            pairs.append((names[0], names[-1]) if len(names) >= 2 else None)
        if lonely and (row := first_row_of(codes, lonely)) is not None:
            raise self.fail(int(spans[row, 0]), "via without two layers in (layers ...)")
        tops = self._layer_column(codes, [p[0] if p else None for p in pairs], spans, "via")
        bottoms = self._layer_column(codes, [p[1] if p else None for p in pairs], spans, "via")
        layers = np.sort(np.column_stack([tops, bottoms]), axis=1) if len(spans) else np.zeros((0, 2), np.int16)
        kind_codes, kind_names = r.kinds
        kinds = tuple(kind_names[c] for c in kind_codes.tolist())
        return Vias(nums[:, 0:2], nums[:, 2], nums[:, 3], layers, kinds, self._net_column(*r.texts[1], spans), spans)

    def _field(self, node: list, head: str, count: int, start: int, numeric: bool = True) -> bytes:
        child = _child(node, head)
        if child is None or len(child) < count + 1 or (numeric and len(child) != count + 1):
            raise self.fail(start, f"{node[0]} item: expected ({head} followed by {count} value(s))")
        values = child[1:count + 1]
        if numeric and not all(_is_number(v) for v in values):
            shown = " ".join(map(str, values))
            raise self.fail(start, f"{node[0]} item: ({head} {shown}) holds something that is not a number")
        return b" ".join(_as_token(v) for v in values)

    def _segment_tree(self, node: list, start: int) -> tuple:
        f = self._field
        return (f(node, "start", 2, start), f(node, "end", 2, start), f(node, "width", 1, start),
                f(node, "layer", 1, start, False), f(node, "net", 1, start, False))

    def _arc_tree(self, node: list, start: int) -> tuple:
        f = self._field
        return (f(node, "start", 2, start), f(node, "mid", 2, start), f(node, "end", 2, start),
                f(node, "width", 1, start), f(node, "layer", 1, start, False), f(node, "net", 1, start, False))

    def _via_tree(self, node: list, start: int) -> tuple:
        f = self._field
        words = b" ".join(a.encode() for a in node[1:] if isinstance(a, str) and not isinstance(a, Quoted))
        return (words, f(node, "at", 2, start), f(node, "size", 1, start), f(node, "drill", 1, start),
                f(node, "layers", 2, start, False), f(node, "net", 1, start, False))


def _via_kind(words: bytes) -> str:
    found = words.split()
    return "blind" if b"blind" in found else "micro" if b"micro" in found else "through"
