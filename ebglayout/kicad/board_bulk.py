"""Bulk reading of track fields straight from the board's bytes: fixed-width numpy windows, one C-level number
conversion per chunk, repeated texts decoded once.

``TrackBulk`` locates each wanted field from the structure scan (``sexpr.scan``) and converts the sure rows;
the helpers below it cut and decode the byte windows.  Nothing here decides what is read, only how fast: a row
this module cannot vouch for is reported unsure, and ``board_tracks.py`` reads it through the tree parser, which
also raises the errors.
"""
from __future__ import annotations

import math
import warnings
from dataclasses import dataclass

import numpy as np

from .sexpr import _TOKEN, group_values

MAX_FIELD = 64
"""Longest field text (bytes) read in bulk; longer ones are read through the tree."""
CHUNK = 1 << 16
"""Items read in bulk at a time: temporary arrays of about a megabyte, reused from chunk to chunk."""
ALTERNATE_WORD = np.tile(np.array([1, -1], dtype=np.int8), 4).view(np.uint64)[0]
"""Eight steps of consecutive childless lists, "(" then ")" four times, as one little-endian uint64."""
MASK = [np.uint64((1 << (8 * k)) - 1) for k in range(9)]
"""MASK[k] keeps the first k bytes of a little-endian uint64."""
KEEP = [np.array([[MASK[min(max(n - 8 * j, 0), 8)] for j in range(words)] for n in range(MAX_FIELD + 9)],
                  dtype=np.uint64) for words in range(MAX_FIELD // 8 + 2)]
"""KEEP[w][n]: per uint64 word of a w-word block, the mask keeping the block's first n bytes."""
SPACES = np.uint64(0x2020202020202020)
BLANK_BYTE = np.zeros(256, dtype=bool)
BLANK_BYTE[list(b" \t\n\r\x0b\x0c")] = True


@dataclass(frozen=True)
class FieldRows:
    """Fields of every item of one kind: numbers (n, k); per text field its code per row and distinct texts
    (None for a text the tree would reject, used by no row); with words, the via kind codes and names."""

    spans: np.ndarray
    numbers: np.ndarray
    texts: list[tuple[np.ndarray, list[bytes | None]]]
    kinds: tuple[np.ndarray, list[str]] | None


class Distinct:
    """The distinct texts of one field, numbered in order of first sight."""

    def __init__(self):
        self.values: list[bytes] = []
        self.index: dict[bytes, int] = {}
        self._normal: dict[int, list[bytes | None]] = {}

    def put(self, value: bytes) -> int:
        code = self.index.get(value)
        if code is None:
            code = self.index[value] = len(self.values)
            self.values.append(value)
        return code

    def add(self, window: np.ndarray, lengths: np.ndarray) -> np.ndarray:
        """Codes of zero-padded texts (rows of ``window``, width a multiple of 8); one ``put`` per numpy-found group."""
        if not len(window):
            return np.zeros(0, np.int64)
        words = window.view(np.uint64)
        key = words[:, 0].copy()
        for j in range(1, words.shape[1]):
            key *= np.uint64(0x9E3779B97F4A7C15)
            key += words[:, j]
        distinct, inverse = group_values(key)
        if words.shape[1] == 1:
            # the key is the text itself, zero-padded (texts hold no NUL)
            texts = [k.to_bytes(8, "little").rstrip(b"\0") for k in distinct.tolist()]
        else:
            first = np.empty(len(distinct), np.int64)
            first[inverse[::-1]] = np.arange(len(key) - 1, -1, -1)
            if not np.array_equal(window, window[first[inverse]]):
                _, first, inverse = np.unique(np.ascontiguousarray(window).view(f"V{window.shape[1]}").ravel(),
                                              return_index=True, return_inverse=True)
                inverse = inverse.ravel()
            texts = [window[i, :lengths[i]].tobytes() for i in first.tolist()]
        return np.array([self.put(text) for text in texts], np.int64)[inverse]

    def normal(self, count: int) -> list[bytes | None]:
        """Each text as the tree reads the field: its first ``count`` tokens joined by one space, None if fewer."""
        done = self._normal.setdefault(count, [])
        for value in self.values[len(done):]:
            if count == 1 and value.isalnum():
                done.append(value)
                continue
            tokens = _TOKEN.findall(value.decode("utf-8"))
            done.append(" ".join(tokens[:count]).encode("utf-8") if len(tokens) >= count else None)
        return list(done)

    def words(self) -> list[bytes]:
        """Each text's bare (unquoted) tokens joined by one space."""
        return [" ".join(t for t in _TOKEN.findall(v.decode("utf-8")) if t[0] != '"').encode("utf-8")
                for v in self.values]


def field_texts(data: bytes, starts: np.ndarray, lengths: np.ndarray, distinct: list[Distinct]) -> np.ndarray:
    """Codes (n, k) of the texts data[start:start + length] of k fields, field j numbered by ``distinct[j]``.

    One fixed-width gather for all fields; texts longer than ``MAX_FIELD`` are sliced one by one.
    """
    codes = np.zeros(starts.shape, np.int64)
    fits = lengths <= MAX_FIELD
    width = 8 * max(1, -(-int(lengths[fits].max()) // 8)) if fits.any() else 8
    fits &= starts + width <= len(data)
    window = byte_window(data, width)[np.where(fits, starts, 0)]
    words = window.view(np.uint64)
    words &= KEEP[width // 8][np.minimum(lengths, width)]
    for j, field in enumerate(distinct):
        rows = np.flatnonzero(fits[:, j])
        if len(rows) == len(window):
            codes[:, j] = field.add(window[:, j], lengths[:, j])
        elif len(rows):
            codes[rows, j] = field.add(window[rows, j], lengths[rows, j])
        for i in np.flatnonzero(~fits[:, j]).tolist():
            a = int(starts[i, j])
            codes[i, j] = field.put(data[a:a + int(lengths[i, j])])
    return codes


def first_row_of(codes: np.ndarray, bad: list[int]) -> int | None:
    """The first row (file order) whose code is one of ``bad``."""
    rows = np.flatnonzero(np.isin(codes, bad))
    return int(rows[0]) if len(rows) else None


def byte_window(data: bytes | np.ndarray, width: int) -> np.ndarray:
    """View (len - width + 1, width) of bytes or a 1-d array, row i = data[i:i + width]; indexing it gathers windows."""
    if isinstance(data, np.ndarray):
        return np.lib.stride_tricks.as_strided(data, (len(data) - width + 1, width), (data.itemsize,) * 2,
                                               writeable=False)
    return np.ndarray((len(data) - width + 1, width), np.uint8, buffer=data, strides=(1, 1))


def word_patterns(words: list[bytes], tail: bytes) -> np.ndarray:
    """Per word, word + tail as the little-endian uint64 ``prefix8`` reads for it."""
    return np.array([int.from_bytes(w + tail, "little") for w in words], dtype=np.uint64)


def prefix8(data: bytes, offsets: np.ndarray) -> np.ndarray:
    """The 8 bytes at each offset as one little-endian uint64 (0 where fewer than 8 bytes remain)."""
    if len(data) < 8:
        return np.zeros(offsets.shape, np.uint64)
    view = np.ndarray((len(data) - 7,), "<u8", buffer=data, strides=(1,))
    inside = offsets <= len(data) - 8
    if inside.all():
        return view[offsets]
    out = view[np.where(inside, offsets, 0)]
    out[~inside] = 0
    return out


def index_ranges(starts: np.ndarray, ends: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """All integers of the ranges [start, end), concatenated, and the range each came from."""
    lengths = np.maximum(ends - starts, 0)
    total = int(lengths.sum())
    index = np.repeat(starts - (np.cumsum(lengths) - lengths), lengths) + np.arange(total)
    return index, np.repeat(np.arange(len(starts)), lengths)


def all_blank(data: bytes, starts: np.ndarray, ends: np.ndarray) -> np.ndarray:
    """True for each byte range [start, end) that holds only ASCII whitespace."""
    index, owner = index_ranges(starts, ends)
    blank = np.ones(len(starts), dtype=bool)
    if len(index):
        blank[owner[~BLANK_BYTE[np.frombuffer(data, np.uint8)[index]]]] = False
    return blank


def rows_equal(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Row-wise equality of two (n, k) arrays, column by column (k is small)."""
    same = a[:, 0] == b[:, 0]
    for j in range(1, a.shape[1]):
        same &= a[:, j] == b[:, j]
    return same


def block_floats(block: np.ndarray, counts: tuple[int, ...], follows: dict[int, int] | None) -> np.ndarray | None:
    """Numbers (m, sum(counts)) of checked, space-padded field blocks (m, fields, w); None if one does not read.

    A field whose text equals the same field of the row before (a run of equal
    widths), or field ``follows[k]`` of the row before (a track starting where
    the previous one ended), is not converted again but copied: equal text,
    equal number.  The rest go through one ``np.fromstring``.
    """
    m, fields, _ = block.shape
    follows = follows or {}
    words = block.view(np.uint64)
    repeat = np.zeros((m, fields), dtype=bool)
    chained = np.zeros((m, fields), dtype=bool)
    if m > 1:
        for k in range(fields):
            repeat[1:, k] = rows_equal(words[1:, k], words[:-1, k])
        for k, j in follows.items():
            chained[1:, k] = rows_equal(words[1:, k], words[:-1, j])
    read = ~(repeat | chained)
    picked = block[read]
    picked.setflags(write=False)
    flat = parse_floats(picked)
    spread = np.repeat(read, counts, axis=1)
    if flat is None or len(flat) != np.count_nonzero(spread):
        return None
    out = np.empty(spread.shape)
    out[spread] = flat
    first = np.cumsum((0,) + counts)
    for k in sorted(range(fields), key=lambda k: k in follows):
        a, c = int(first[k]), counts[k]
        if k in follows:
            rows = np.flatnonzero(chained[:, k])
            j = follows[k]
            out[rows, a:a + c] = out[rows - 1, int(first[j]):int(first[j]) + counts[j]]
        if repeat[:, k].any():
            out[:, a:a + c] = out[np.maximum.accumulate(np.where(repeat[:, k], 0, np.arange(m))), a:a + c]
    return out


def parse_floats(text: np.ndarray) -> np.ndarray | None:
    """All numbers of a space-separated text (a read-only uint8 array); None unless every byte is read.

    ``np.fromstring`` converts with CPython's ``PyOS_string_to_double``, the
    routine behind ``float``, so values match ``float`` bit for bit; it stops at
    the first token it cannot read, which is turned into an error here.
    """
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        try:
            return np.fromstring(text, sep=" ")
        except (ValueError, DeprecationWarning):
            return None


def row_floats(line: np.ndarray, width: int) -> list[float]:
    """One text row's numbers by ``float``; NaNs when it does not hold exactly ``width`` numbers."""
    try:
        values = [float(v) for v in line.tobytes().split()]
    except ValueError:
        return [math.nan] * width
    return values if len(values) == width else [math.nan] * width


class TrackBulk:
    """The bulk path of ``board_tracks.TrackReader``: where each field of many items lies, and their numbers."""

    def _locate(self, rows: np.ndarray, head_length: int, heads: tuple[str, ...], words: bool):
        """Where each wanted field's values start and how long they are (n, fields), for these top-level items.

        A row is sure when each wanted field is its first child with that head,
        written "(head " and holding no list.  Most items have the fields as their
        first children in the wanted order (KiCad's writer), which a few array
        lookups confirm; the rest are looked up by name among their children.
        With ``words``, every gap between the item's children must be blank; the
        gap after the item's own head (where KiCad writes "blind" or "micro") is
        returned as (start, length) per row.
        """
        s = self.s
        o2, c2 = s.level_index(2)
        first, last = o2[rows], c2[rows]
        words_of = [name.encode() for name in heads]
        many = 2 * len(heads)
        width = 8 * -(-many // 8)
        sure = (last - first > many) & (first + width < len(s.step))
        starts = np.zeros((len(rows), len(heads)), s.paren.dtype)
        lengths = np.zeros_like(starts)
        if sure.any():
            at = np.where(sure, first + 1, 0)
            steps = byte_window(s.step, width)[at].view(np.uint64)
            for j in range(steps.shape[1]):
                keep = min(8, many - 8 * j)
                sure &= (steps[:, j] & MASK[keep]) == (ALTERNATE_WORD & MASK[keep])
            del steps
            parens = byte_window(s.paren, many)[at]
            starts[:] = parens[:, 0::2] + np.array([len(w) + 2 for w in words_of], dtype=parens.dtype)
            lengths[:] = parens[:, 1::2] - starts
            found = prefix8(self.data, parens[:, 0::2] + 1)
            del parens
            for k, word in enumerate(words_of):
                sure &= (found[:, k] & MASK[len(word) + 1]) == word_patterns([word], b" ")[0]
            del found
        other = np.flatnonzero(~sure)
        if len(other):
            sure[other] = self._locate_by_name(first[other], last[other], words_of, starts, lengths, other)
        gap = None
        if words:
            gap = np.empty((len(rows), 2), np.int64)
            gap[:, 0] = s.paren[first] + (head_length + 1)
            gap[:, 1] = s.paren[np.minimum(first + 1, last)] - gap[:, 0]
            done = np.flatnonzero(sure)
            sure[done] = self._blank_between(first[done], last[done])
        return starts, lengths, sure, gap

    def _locate_by_name(self, first: np.ndarray, last: np.ndarray, words: list[bytes], starts: np.ndarray,
                        lengths: np.ndarray, rows: np.ndarray) -> np.ndarray:
        """``_locate`` for items in another field order: each field is the first child with its head.

        Sure only where every child begins with a bare lower-case word and none is
        another spelling of a wanted head ("(start\\t", "(layers"...), so the tree
        cannot take a different child for a field.
        """
        s = self.s
        n = len(rows)
        index, owner = index_ranges(first + 1, last)
        depth, step = s.depth[index], s.step[index]
        child = (depth == 3) & (step > 0)
        co, cc, row_of = index[child], index[(depth == 2) & (step < 0)], owner[child]
        op = s.paren[co].astype(np.int64)
        cl = s.paren[cc].astype(np.int64)
        flat = cc == co + 1
        pre = prefix8(self.data, op + 1)
        sure = np.ones(n, dtype=bool)
        sure[row_of[(pre & np.uint64(0xFF)) - np.uint64(97) >= np.uint64(26)]] = False
        for k, word in enumerate(words):
            exact = (pre & MASK[len(word) + 1]) == word_patterns([word], b" ")[0]
            near = ((pre & MASK[len(word)]) == word_patterns([word], b"")[0]) & ~exact
            sure[row_of[near]] = False
            hit = np.flatnonzero(exact)
            r = row_of[hit]
            if len(r):
                keep = np.ones(len(r), dtype=bool)
                np.not_equal(r[1:], r[:-1], out=keep[1:])
                hit, r = hit[keep], r[keep]
            found = np.zeros(n, dtype=bool)
            found[r] = flat[hit]
            sure &= found
            starts[rows[r], k] = op[hit] + (len(word) + 2)
            lengths[rows[r], k] = cl[hit] - starts[rows[r], k]
        return sure

    def _blank_between(self, first: np.ndarray, last: np.ndarray) -> np.ndarray:
        """True for items (paren indices of their "(" and ")") whose children are separated by blanks only."""
        s = self.s
        index, owner = index_ranges(first, last + 1)
        after = np.flatnonzero((s.depth[index] == 2) & (s.step[index] < 0))
        ends = s.paren[index[after + 1]].astype(np.int64)
        blank = all_blank(self.data, s.paren[index[after]].astype(np.int64) + 1, ends)
        sure = np.ones(len(first), dtype=bool)
        sure[owner[after[~blank]]] = False
        return sure

    def _bulk_numbers(self, starts: np.ndarray, lengths: np.ndarray, counts: tuple[int, ...], sure: np.ndarray,
                      out: np.ndarray, follows: dict[int, int] | None = None) -> np.ndarray:
        """Numbers of the sure rows into ``out``; a row whose fields are not ``counts`` plain numbers becomes unsure.

        Every field of a row is cut out of the file as a fixed-width block padded
        with spaces and must hold ``counts[k] - 1`` spaces and no control
        character (tabs, line ends); all blocks then go through ``np.fromstring``
        (see ``block_floats``).  It converts with the routine behind ``float``
        (so bit for bit equal) and must read every byte, so each token gives one
        number or more, and a field holds at most spaces + 1 tokens: the total
        count proves every field gave exactly its count.  Anything else (a name,
        "1_0", "1e5e3", "1 ") fails and is re-read through the tree.
        """
        sure = sure & ((lengths > 0) & (lengths <= MAX_FIELD)).all(axis=1)
        rows = np.flatnonzero(sure)
        if not len(rows) or not counts:
            return sure
        size = len(self.data)
        width = 8 * (int(lengths[rows].max()) // 8 + 1)
        if int(starts[rows].max()) + width > size:
            sure[rows[(starts[rows] + width > size).any(axis=1)]] = False
            rows = np.flatnonzero(sure)
        if not len(rows):
            return sure
        length = lengths[rows]
        block = byte_window(self.data, width)[starts[rows]]
        keep = KEEP[width // 8][length]
        words = block.view(np.uint64)
        words &= keep
        words |= ~keep & SPACES
        del keep, words
        inner = np.count_nonzero(block == 32, axis=-1) - (width - length)
        good = inner[:, 0] == counts[0] - 1
        for k in range(1, len(counts)):
            good &= inner[:, k] == counts[k] - 1
        del inner
        if block.min() < 32:
            good &= block.reshape(len(rows), -1).min(axis=1) >= 32
        if not good.all():
            sure[rows[~good]] = False
            rows, block = rows[good], block[good]
        values = block_floats(block, counts, follows)
        if values is None:
            total = sum(counts)
            values = np.array([row_floats(line, total) for line in block.reshape(len(rows), -1)]).reshape(-1, total)
        if not np.isfinite(values).all():
            finite = np.isfinite(values).all(axis=1)
            sure[rows[~finite]] = False
            rows, values = rows[finite], values[finite]
        if len(rows) == len(out):
            out[:] = values
        else:
            out[rows] = values
        return sure
