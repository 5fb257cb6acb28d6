"""KiCad S-expressions: a whole-file structure scan at C speed and a small tree parser.

Why two parts: a large board holds millions of tokens and a Python tree of all
of them takes seconds.  ``scan`` checks the whole file once, chunk by chunk in numpy (encoding,
strings and their escapes, balanced parentheses, nesting depth) and finds the
byte span of every top-level item; ``Structure.parse`` then builds a tree only
for the spans a caller asks for.  Nothing here evaluates text or opens a path
named inside the file.

Tree form: a list is a Python list whose first element is its head symbol;
bare atoms are ``str``, quoted strings are ``Quoted`` (a ``str`` subclass), so
``(net 1)`` and ``(net "1")`` stay apart.  Numbers are left as text.
"""
from __future__ import annotations

import re
from dataclasses import dataclass, field

import numpy as np

from ..errors import BoardError

MAX_DEPTH = 200
"""Deepest list nesting accepted; KiCad's own files stay below 20."""

_ESCAPES = {"\\": "\\", '"': '"', "a": "\a", "b": "\b", "f": "\f", "n": "\n", "r": "\r", "t": "\t", "v": "\v"}
"""Escapes in quoted strings: KiCad's lexer takes these plus \\xHH and octal \\ooo (from memory of its DSN lexer)."""
_ESCAPE_CHARS = frozenset(b'\\"abfnrtvx01234567')
_TOKEN = re.compile(r'"(?:[^"\\]|\\.)*"|[()]|[^\s()"]+', re.S)
_UNESCAPE = re.compile(r"\\(x[0-9a-fA-F]{1,2}|[0-7]{1,3}|.)", re.S)
_OPEN, _CLOSE, _QUOTE, _BACKSLASH = 40, 41, 34, 92
_SCAN_CHUNK = 1 << 18
"""Bytes looked at per step of the structure scan."""
_NON_SPACE = re.compile(rb"\S")
_STOPS = np.zeros(256, dtype=bool)
_STOPS[[9, 10, 13, 32, _OPEN, _CLOSE, _QUOTE]] = True
_PREFIX_STOPS = _STOPS.copy()
_PREFIX_STOPS[[11, 12]] = True
"""Bytes ending a head inside the first 8 (the regex class [\\s()"]); longer heads end at ``_STOPS`` as before."""
_KEEP_BYTES = np.array([(1 << (8 * k)) - 1 for k in range(9)], dtype=np.uint64)


class Quoted(str):
    """An atom that was a quoted string in the file."""

    __slots__ = ()


def line_column(data: bytes, offset: int) -> tuple[int, int]:
    """1-based line and character column of a byte offset."""
    offset = max(0, min(offset, len(data)))
    line = data.count(b"\n", 0, offset) + 1
    start = data.rfind(b"\n", 0, offset) + 1
    return line, len(data[start:offset].decode("utf-8", errors="replace")) + 1


def error_at(name: str, data: bytes, offset: int, what: str) -> BoardError:
    """A BoardError naming file, line and column; the numbers are also attributes."""
    line, column = line_column(data, offset)
    err = BoardError(f"{name}: line {line}, column {column}: {what}")
    err.file, err.line, err.column = name, line, column
    return err


def error_in_text(name: str, text: str, index: int, what: str) -> BoardError:
    """``error_at`` for a character index into decoded text."""
    return error_at(name, text.encode("utf-8"), len(text[:index].encode("utf-8")), what)


def unescape(body: str) -> str:
    """Text of a quoted string without its quotes, escapes resolved."""
    if "\\" not in body:
        return body

    def one(m: re.Match) -> str:
        code = m.group(1)
        if code[0] == "x" and len(code) > 1:
            return chr(int(code[1:], 16))
        if code[0] in "01234567":
            return chr(int(code, 8))
        return _ESCAPES.get(code, code)

    return _UNESCAPE.sub(one, body)


@dataclass(frozen=True)
class Structure:
    """Where the lists of a checked file are.

    ``paren`` holds the byte offsets of all structural parentheses (not those in
    strings; int32 below 2 GiB, else int64), ``step`` +1 for "(" and -1 for ")",
    and ``depth`` the nesting depth after each.  Spans are [start, end) byte
    ranges (int64), ``end`` one past the ")".
    """

    name: str
    data: bytes
    paren: np.ndarray
    depth: np.ndarray
    step: np.ndarray
    root: tuple[int, int]
    root_head: str
    _closes: dict = field(default_factory=dict, repr=False, compare=False)
    _levels: dict = field(default_factory=dict, repr=False, compare=False)
    _spans: dict = field(default_factory=dict, repr=False, compare=False)

    def error(self, offset: int, what: str) -> BoardError:
        return error_at(self.name, self.data, offset, what)

    def _offsets(self, offsets) -> np.ndarray:
        """Byte offsets in ``paren``'s own type, so binary searches never convert the whole array."""
        return np.asarray(offsets).astype(self.paren.dtype, copy=False)

    def level_index(self, depth: int) -> tuple[np.ndarray, np.ndarray]:
        """Indices into ``paren`` of the "(" and the matching ")" of every list at a nesting level."""
        if ("index", depth) not in self._levels:
            opens = np.flatnonzero((self.depth == depth) & (self.step > 0))
            closes = np.flatnonzero((self.depth == depth - 1) & (self.step < 0))
            self._levels["index", depth] = (opens, closes)
        return self._levels["index", depth]

    def level(self, depth: int) -> tuple[np.ndarray, np.ndarray]:
        """Spans (n, 2) and head symbols of all lists at a nesting level (1 = root, 2 = its children, ...)."""
        if depth not in self._levels:
            opens, closes = self.level_index(depth)
            spans = np.empty((len(opens), 2), np.int64)
            spans[:, 0] = self.paren[opens]
            spans[:, 1] = self.paren[closes]
            spans[:, 1] += 1
            codes, names = _head_codes(np.frombuffer(self.data, dtype=np.uint8), spans[:, 0])
            self._levels["codes", depth] = (codes, names)
            heads = np.array(names, dtype="S20")[codes] if len(codes) else np.zeros(0, dtype="S20")
            self._levels[depth] = (spans, heads)
        return self._levels[depth]

    def children(self, parents: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Lists directly inside the given top-level items (indices into ``items``).

        Returns their spans (n, 2), head symbols and the index of the parent item.
        Heads are computed only for these, not for every list in the file.
        """
        spans = self.items[np.asarray(parents, dtype=np.int64)]
        if not len(spans):
            return np.zeros((0, 2), np.int64), np.zeros(0, dtype="S20"), np.zeros(0, np.int64)
        inside = np.zeros(len(self.paren) + 1, dtype=np.int32)
        np.add.at(inside, np.searchsorted(self.paren, self._offsets(spans[:, 0])), 1)
        np.add.at(inside, np.searchsorted(self.paren, self._offsets(spans[:, 1] - 1)) + 1, -1)
        inside = np.cumsum(inside[:-1]) > 0
        opens = self.paren[inside & (self.depth == 3) & (self.step > 0)].astype(np.int64)
        closes = self.paren[inside & (self.depth == 2) & (self.step < 0)].astype(np.int64)
        owner = np.searchsorted(self.items[:, 0], opens, side="right") - 1
        spans = np.column_stack([opens, closes[:len(opens)] + 1])
        return spans, _heads(np.frombuffer(self.data, dtype=np.uint8), opens), owner

    @property
    def items(self) -> np.ndarray:
        """Spans of the root's child lists (the board's top-level items), in file order."""
        return self.level(2)[0]

    @property
    def heads(self) -> np.ndarray:
        return self.level(2)[1]

    def head_kinds(self) -> tuple[np.ndarray, tuple[bytes, ...]]:
        """Each top-level item's head as a small integer code, and the distinct heads (sorted) the codes index."""
        self.level(2)
        return self._levels["codes", 2]

    def opens_at(self, offset: int) -> bool:
        """True when a list opens at byte ``offset`` (a "(" outside any string)."""
        i = int(np.searchsorted(self.paren, self._offsets(offset)))
        return i < len(self.paren) and self.paren[i] == offset and self.step[i] > 0

    def end_of(self, start: int) -> int:
        """Exclusive end of the list that opens at byte ``start`` (binary search, no scan)."""
        i = int(np.searchsorted(self.paren, self._offsets(start)))
        if i >= len(self.paren) or self.paren[i] != start or self.step[i] < 0:
            raise ValueError(f"no list opens at byte {start}")
        level = int(self.depth[i]) - 1
        if level not in self._closes:
            self._closes[level] = np.flatnonzero((self.depth == level) & (self.step < 0))
        closes = self._closes[level]
        return int(self.paren[closes[int(np.searchsorted(closes, i))]]) + 1

    def spans_of(self, head: str) -> np.ndarray:
        """Spans (n, 2) of the top-level items with this head, in file order."""
        if head not in self._spans:
            codes, names = self.head_kinds()
            key = head.encode()
            found = names.index(key) if key in names else -1
            self._spans[head] = self.items[codes == found] if found >= 0 else np.zeros((0, 2), np.int64)
        return self._spans[head].copy()

    def parse(self, start: int, end: int | None = None, skip: tuple[str, ...] = ()) -> list:
        """Tree of the list spanning [start, end); sub-lists whose head is in ``skip`` are left out."""
        end = self.end_of(start) if end is None else end
        chunk = self.data[start:end]
        if skip:
            chunk = self._without(start, end, skip)
        return parse_tokens(_TOKEN.findall(chunk.decode("utf-8")))

    def _without(self, start: int, end: int, skip: tuple[str, ...]) -> bytes:
        cuts = []
        for head in skip:
            pattern = re.compile(rb"\(\s*" + re.escape(head.encode()) + rb"[\s()]")
            pos = start + 1
            for m in pattern.finditer(self.data, pos, end):
                if (cuts and m.start() < cuts[-1][1]) or not self.opens_at(m.start()):
                    continue
                cuts.append((m.start(), self.end_of(m.start())))
        cuts.sort()
        pieces, pos = [], start
        for a, b in cuts:
            if a >= pos:
                pieces.append(self.data[pos:a])
                pos = b
        pieces.append(self.data[pos:end])
        return b" ".join(pieces)


def parse_tokens(tokens: list[str]) -> list:
    """Build the tree of one balanced token list (already checked by ``scan``)."""
    stack: list[list] = []
    current: list = []
    top = current
    for tok in tokens:
        if tok == "(":
            new: list = []
            current.append(new)
            stack.append(current)
            current = new
        elif tok == ")":
            current = stack.pop()
        elif tok[0] == '"':
            current.append(Quoted(unescape(tok[1:-1])))
        else:
            current.append(tok)
    return top[0] if top and isinstance(top[0], list) else top


def scan(data: bytes, name: str, max_depth: int = MAX_DEPTH) -> Structure:
    """Check a whole S-expression file and locate its top-level items.

    Raises BoardError with file, line and column for: an empty or binary file,
    text that is not UTF-8, an unterminated string or a bad escape, unbalanced
    parentheses, nesting deeper than ``max_depth``, or anything but one list.
    All passes over the bytes run in C (bytes methods, numpy); only
    backslashes, where a file has any, are walked one by one.
    """
    lead = _NON_SPACE.search(data)
    if lead is None:
        raise error_at(name, data, 0, "empty file: expected a KiCad S-expression starting with '('")
    nul = data.find(b"\0")
    if nul >= 0:
        raise error_at(name, data, nul, "binary data (NUL byte): not a KiCad text file")
    if not data.isascii():
        try:
            data.decode("utf-8")
        except UnicodeDecodeError as err:
            what = f"invalid UTF-8 byte 0x{data[err.start]:02x}: not a KiCad text file"
            raise error_at(name, data, err.start, what) from None
    found = _parens_with_escapes(name, data) if b"\\" in data else _parens(data)
    paren, step, depth = found
    if isinstance(depth, int):
        raise error_at(name, data, depth, "unterminated string: no closing '\"' before the end of the file")

    first = lead.start()
    if not len(paren) or data[first] != _OPEN:
        raise error_at(name, data, first, "expected '(' at the start of the file")
    closes_root = np.flatnonzero(depth == 0)
    if len(closes_root) and closes_root[0] != len(depth) - 1:
        at = int(paren[closes_root[0]])
        raise error_at(name, data, at, "this ')' closes the top-level list but the file goes on "
                                       "(one ')' too many on or before this line?)")
    if depth.max() > max_depth:
        i = int(np.argmax(depth > max_depth))
        raise error_at(name, data, int(paren[i]), f"lists nested deeper than {max_depth} levels")
    if depth[-1] != 0:
        unclosed = np.flatnonzero((depth <= depth[-1]) & (step > 0))
        at = int(paren[unclosed[-1]]) if len(unclosed) else len(data)
        end_line = line_column(data, len(data))[0]
        raise error_at(name, data, at, f"{depth[-1]} list(s) still open at the end of the file (line {end_line}; "
                                       "truncated?): this '(' is never closed")
    root_end = int(paren[-1]) + 1
    trailing = _NON_SPACE.search(data, root_end)
    if trailing is not None:
        raise error_at(name, data, trailing.start(), "text after the end of the top-level list")
    head_match = re.compile(rb"\(\s*([^\s()\"]+)").match(data, first)
    if head_match is None:
        raise error_at(name, data, first, "the top-level list has no head symbol")
    return Structure(name, data, paren, depth, step, (first, root_end), head_match.group(1).decode("utf-8"))


def parse_text(text: str | bytes, name: str = "<text>", max_depth: int = MAX_DEPTH) -> list:
    """Check and parse a whole (small) S-expression text into a tree."""
    data = text.encode("utf-8") if isinstance(text, str) else text
    structure = scan(data, name, max_depth)
    return structure.parse(*structure.root)


def _parens(data: bytes) -> tuple[np.ndarray, np.ndarray, np.ndarray | int]:
    """Structural parentheses chunk by chunk: offsets, steps (+1/-1) and depth after each, in a file without escapes.

    Quotes pair up into strings (a string still open at the end of a chunk is
    carried into the next, like the depth); marks between a pair are dropped.
    Chunks are written straight into arrays sized for a paren every fourth byte
    (grown if ever needed; pages never written are never mapped), so the
    temporaries stay small and cached.  With an unterminated string the third
    value is the offset of the last quote.
    """
    raw = np.frombuffer(data, dtype=np.uint8)
    size = len(data) // 4 + 1024
    out = (np.empty(size, _offset_type(len(data))), np.empty(size, np.int8), np.empty(size, np.int32))
    count, inside, depth, last_quote = 0, 0, 0, -1
    for start in range(0, len(data), _SCAN_CHUNK):
        chunk = raw[start:start + _SCAN_CHUNK]
        at = _marks(chunk)
        kind = chunk[at]
        is_quote = kind == _QUOTE
        quotes = np.flatnonzero(is_quote)
        if not len(quotes):
            if inside:
                continue
        else:
            last_quote = start + int(at[quotes[-1]])
            keep = ~is_quote
            if inside:
                keep[:quotes[0]] = False
                quotes = quotes[1:]
            opening, closing = quotes[0::2], quotes[1::2]
            inside = len(opening) - len(closing)
            if inside:
                keep[opening[-1]:] = False
                opening = opening[:-1]
            hidden = closing - opening > 1
            if hidden.any():
                keep[_spans_index(opening[hidden] + 1, closing[hidden])] = False
            at, kind = at[keep], kind[keep]
        end = count + len(at)
        if end > len(out[0]):
            out = tuple(_grown(a, count, max(2 * len(a), end)) for a in out)
        paren, step, level = (a[count:end] for a in out)
        np.add(at, start, out=paren, casting="unsafe")
        np.equal(kind, _OPEN, out=step.view(np.bool_))
        step *= 2
        step -= 1
        np.cumsum(step, dtype=np.int32, out=level)
        level += depth
        if end > count:
            depth = int(level[-1])
        count = end
    if inside:
        return out[0][:0], out[1][:0], last_quote
    return out[0][:count], out[1][:count], out[2][:count]


def _grown(array: np.ndarray, used: int, size: int) -> np.ndarray:
    """A longer array starting with the first ``used`` entries of ``array``."""
    out = np.empty(size, array.dtype)
    out[:used] = array[:used]
    return out


def _spans_index(starts: np.ndarray, ends: np.ndarray) -> np.ndarray:
    """All integers of the ranges [start, end), concatenated (ranges non-empty)."""
    lengths = ends - starts
    return np.repeat(starts - (np.cumsum(lengths) - lengths), lengths) + np.arange(int(lengths.sum()))


def _marks(chunk: np.ndarray) -> np.ndarray:
    """Offsets in a chunk of bytes of every parenthesis, quote and backslash."""
    found = (chunk | 1) == _CLOSE  # "(" and ")" differ only in the lowest bit
    found |= chunk == _QUOTE
    found |= chunk == _BACKSLASH
    return np.flatnonzero(found)


def _parens_with_escapes(name: str, data: bytes) -> tuple[np.ndarray, np.ndarray, np.ndarray | int]:
    """``_parens`` for a file with backslashes: all marks first, escapes resolved, then the same string rule."""
    raw = np.frombuffer(data, dtype=np.uint8)
    positions, values = [], []
    for start in range(0, len(data), _SCAN_CHUNK):
        chunk = raw[start:start + _SCAN_CHUNK]
        at = _marks(chunk)
        values.append(chunk[at])
        at += start
        positions.append(at.astype(_offset_type(len(data))))
    pos, kind = _resolve_escapes(name, data, np.concatenate(positions), np.concatenate(values))
    is_quote = kind == _QUOTE
    if is_quote.any():
        inside = (np.cumsum(is_quote, dtype=np.int8) & 1).view(np.bool_)
        if inside[-1]:
            return pos[:0], np.zeros(0, np.int8), int(pos[np.flatnonzero(is_quote)[-1]])
        keep = ~(inside | is_quote)
        pos, kind = pos[keep], kind[keep]
    step = (kind == _OPEN).view(np.int8) * np.int8(2) - np.int8(1)
    return pos, step, np.cumsum(step, dtype=np.int32)


def _offset_type(size: int) -> type:
    """Smallest integer type for byte offsets into a file of ``size`` bytes (int32 below 2 GiB)."""
    return np.int32 if size < 2**31 - 1 else np.int64


def _resolve_escapes(name: str, data: bytes, pos: np.ndarray, kind: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Drop backslashes and the quotes they escape from the marks; reject bad escapes inside strings.

    Walks the backslashes only: a backslash is inside a string when an odd number
    of unescaped quotes precede it, and every quote escaped so far lies before it.
    """
    quotes = pos[kind == _QUOTE]
    slashes = pos[kind == _BACKSLASH]
    escaped: list[int] = []
    escaped_at = -1
    for p, before in zip(slashes.tolist(), np.searchsorted(quotes, slashes).tolist()):
        if p == escaped_at or (before - len(escaped)) % 2 == 0:
            continue
        nxt = data[p + 1] if p + 1 < len(data) else None
        if nxt not in _ESCAPE_CHARS:
            shown = "the end of the file" if nxt is None else repr(chr(nxt))
            raise error_at(name, data, p, f"bad escape in a string: backslash before {shown}")
        escaped_at = p + 1
        if nxt == _QUOTE:
            escaped.append(p + 1)
    keep = kind != _BACKSLASH
    if escaped:
        keep[np.searchsorted(pos, np.asarray(escaped, dtype=pos.dtype))] = False
    return pos[keep], kind[keep]


def distinct_values(values: np.ndarray) -> np.ndarray:
    """Sorted distinct values of a 1-d array (one sort; cheaper here than ``np.unique``'s hash table)."""
    ordered = np.sort(values)
    if len(ordered) < 2:
        return ordered
    keep = np.empty(len(ordered), dtype=bool)
    keep[0] = True
    np.not_equal(ordered[1:], ordered[:-1], out=keep[1:])
    return ordered[keep]


def group_values(values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Sorted distinct values of a 1-d array and, per element, the index of its value among them.

    Equal values tend to come in runs (items of one kind, tracks of one net), so
    only the first element of each run is sorted and looked up.
    """
    n = len(values)
    if not n:
        return values[:0], np.zeros(0, np.int64)
    change = np.empty(n, dtype=bool)
    change[0] = True
    np.not_equal(values[1:], values[:-1], out=change[1:])
    starts = np.flatnonzero(change)
    heads = values[starts]
    distinct = distinct_values(heads)
    found = np.searchsorted(distinct, heads)
    if len(starts) == n:
        return distinct, found
    return distinct, np.repeat(found, np.diff(np.append(starts, n)))


def _heads(raw: np.ndarray, opens: np.ndarray, width: int = 20) -> np.ndarray:
    """Head symbol of each list opening at ``opens``, as a bytes array (vectorised)."""
    codes, names = _head_codes(raw, opens, width)
    return np.array(names, dtype=f"S{width}")[codes] if len(codes) else np.zeros(0, dtype=f"S{width}")


def _head_codes(raw: np.ndarray, opens: np.ndarray, width: int = 20) -> tuple[np.ndarray, tuple[bytes, ...]]:
    """Head symbol of each list opening at ``opens`` as a code into the sorted distinct heads (at most ``width`` bytes).

    Items sharing their first 8 bytes share their head when it ends inside those
    bytes, so heads are worked out once per distinct 8-byte prefix, in numpy;
    only longer heads (footprint, generator_version, ...) are cut out item by item.
    """
    n = len(opens)
    if not n:
        return np.zeros(0, np.int32), ()
    size = len(raw)
    at = np.asarray(opens, dtype=np.int64) + 1
    inside = at <= size - 8
    if inside.all():
        prefix = np.ndarray((size - 7,), "<u8", buffer=raw, strides=(1,))[at]
    else:
        idx = np.minimum(at[:, None] + np.arange(8), size - 1)
        prefix = np.ascontiguousarray(raw[idx]).view("<u8").ravel()
    distinct, inverse = group_values(prefix)
    stop = _PREFIX_STOPS[distinct.view(np.uint8).reshape(-1, 8)]
    end = np.where(stop.any(axis=1), stop.argmax(axis=1), 8)
    short = (end > 0) & (end < 8)
    keys = distinct & _KEEP_BYTES[end]
    found = {k: k.to_bytes(8, "little").rstrip(b"\0") for k in distinct_values(keys[short]).tolist()}
    names = sorted(set(found.values()))
    position = {name: i for i, name in enumerate(names)}
    table = np.full(len(distinct), -1, np.int64)
    table[short] = [position[found[k]] for k in keys[short].tolist()]
    codes = table[inverse]
    rest = np.flatnonzero(codes < 0)
    if len(rest):
        idx = np.minimum(opens[rest, None] + np.arange(1, width + 1), size - 1)
        window = raw[idx]
        stop = _STOPS[window]
        first = np.where(stop.any(axis=1), stop.argmax(axis=1), width)
        window = np.where(np.arange(width) < first[:, None], window, 0).astype(np.uint8)
        long = np.ascontiguousarray(window).view(f"S{width}").ravel().tolist()
        for j in np.flatnonzero(first == 0).tolist():
            long[j] = _slow_head(raw, int(opens[rest[j]]), width)
        names = sorted(set(names) | set(long))
        position = {name: i for i, name in enumerate(names)}
        remap = np.array([position[name] for name in sorted(found.values())] or [0], dtype=np.int64)
        short_rows = np.flatnonzero(codes >= 0)
        codes[short_rows] = remap[codes[short_rows]]
        codes[rest] = [position[name] for name in long]
    return codes.astype(np.int32), tuple(names)


def _slow_head(raw: np.ndarray, start: int, width: int) -> bytes:
    text = raw[start + 1:start + 1 + 4 * width].tobytes()
    m = re.match(rb"\s*([^\s()\"]*)", text)
    return m.group(1)[:width]
