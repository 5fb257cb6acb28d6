"""KiCad S-expressions: a whole-file structure scan at C speed and a small tree parser.

Why two parts: a large board holds millions of tokens and a Python tree of all
of them takes seconds.  ``scan`` checks the whole file once with numpy (encoding,
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
_M_OPEN, _M_CLOSE, _M_QUOTE, _M_BACKSLASH, _M_NUL = 1, 2, 3, 4, 5
_MARKS = bytes(_M_OPEN if c == _OPEN else _M_CLOSE if c == _CLOSE else _M_QUOTE if c == _QUOTE
               else _M_BACKSLASH if c == _BACKSLASH else _M_NUL if c == 0 else 0 for c in range(256))
"""bytes.translate table: every byte that matters for structure gets a small code, the rest 0."""
_STOPS = np.zeros(256, dtype=bool)
_STOPS[[9, 10, 13, 32, _OPEN, _CLOSE, _QUOTE]] = True


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
    strings), ``step`` +1 for "(" and -1 for ")", and ``depth`` the nesting depth
    after each.  Spans are [start, end) byte ranges, ``end`` one past the ")".
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

    def error(self, offset: int, what: str) -> BoardError:
        return error_at(self.name, self.data, offset, what)

    def level(self, depth: int) -> tuple[np.ndarray, np.ndarray]:
        """Spans (n, 2) and head symbols of all lists at a nesting level (1 = root, 2 = its children, ...)."""
        if depth not in self._levels:
            opens = self.paren[(self.depth == depth) & (self.step > 0)]
            closes = self.paren[(self.depth == depth - 1) & (self.step < 0)]
            spans = np.column_stack([opens, closes + 1]).astype(np.int64) if len(opens) else np.zeros((0, 2), np.int64)
            self._levels[depth] = (spans, _heads(np.frombuffer(self.data, dtype=np.uint8), opens))
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
        np.add.at(inside, np.searchsorted(self.paren, spans[:, 0]), 1)
        np.add.at(inside, np.searchsorted(self.paren, spans[:, 1] - 1) + 1, -1)
        inside = np.cumsum(inside[:-1]) > 0
        opens = self.paren[inside & (self.depth == 3) & (self.step > 0)]
        closes = self.paren[inside & (self.depth == 2) & (self.step < 0)]
        owner = np.searchsorted(self.items[:, 0], opens, side="right") - 1
        spans = np.column_stack([opens, closes[:len(opens)] + 1]).astype(np.int64)
        return spans, _heads(np.frombuffer(self.data, dtype=np.uint8), opens), owner

    @property
    def items(self) -> np.ndarray:
        """Spans of the root's child lists (the board's top-level items), in file order."""
        return self.level(2)[0]

    @property
    def heads(self) -> np.ndarray:
        return self.level(2)[1]

    def opens_at(self, offset: int) -> bool:
        """True when a list opens at byte ``offset`` (a "(" outside any string)."""
        i = int(np.searchsorted(self.paren, offset))
        return i < len(self.paren) and self.paren[i] == offset and self.step[i] > 0

    def end_of(self, start: int) -> int:
        """Exclusive end of the list that opens at byte ``start`` (binary search, no scan)."""
        i = int(np.searchsorted(self.paren, start))
        if i >= len(self.paren) or self.paren[i] != start or self.step[i] < 0:
            raise ValueError(f"no list opens at byte {start}")
        level = int(self.depth[i]) - 1
        if level not in self._closes:
            self._closes[level] = np.flatnonzero((self.depth == level) & (self.step < 0))
        closes = self._closes[level]
        return int(self.paren[closes[int(np.searchsorted(closes, i))]]) + 1

    def spans_of(self, head: str) -> np.ndarray:
        """Spans (n, 2) of the top-level items with this head, in file order."""
        return self.items[self.heads == head.encode()]

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
    All passes over the bytes run in C (bytes.translate, numpy).
    """
    if not data.strip():
        raise error_at(name, data, 0, "empty file: expected a KiCad S-expression starting with '('")
    marks = np.frombuffer(data.translate(_MARKS), dtype=np.uint8)
    pos = np.flatnonzero(marks)
    kind = marks[pos]
    if (kind == _M_NUL).any():
        raise error_at(name, data, int(pos[np.argmax(kind == _M_NUL)]), "binary data (NUL byte): not a KiCad text file")
    try:
        data.decode("utf-8")
    except UnicodeDecodeError as err:
        what = f"invalid UTF-8 byte 0x{data[err.start]:02x}: not a KiCad text file"
        raise error_at(name, data, err.start, what) from None
    if (kind == _M_BACKSLASH).any():
        pos, kind = _resolve_escapes(name, data, pos, kind)
    is_quote = kind == _M_QUOTE
    parity = np.cumsum(is_quote, dtype=np.int64) & 1
    if parity[-1] if len(parity) else False:
        raise error_at(name, data, int(pos[np.flatnonzero(is_quote)[-1]]),
                       "unterminated string: no closing '\"' before the end of the file")
    structural = ~is_quote & (parity == 0)
    paren = pos[structural]
    step = np.where(kind[structural] == _M_OPEN, 1, -1).astype(np.int8)
    depth = np.cumsum(step, dtype=np.int32)

    first = len(data) - len(data.lstrip())
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
    trailing = data[root_end:].strip()
    if trailing:
        raise error_at(name, data, root_end + data[root_end:].index(trailing[:1]),
                       "text after the end of the top-level list")
    head_match = re.compile(rb"\(\s*([^\s()\"]+)").match(data, first)
    if head_match is None:
        raise error_at(name, data, first, "the top-level list has no head symbol")
    structure = Structure(name, data, paren, depth, step, (first, root_end), head_match.group(1).decode("utf-8"))
    return structure


def parse_text(text: str | bytes, name: str = "<text>", max_depth: int = MAX_DEPTH) -> list:
    """Check and parse a whole (small) S-expression text into a tree."""
    data = text.encode("utf-8") if isinstance(text, str) else text
    structure = scan(data, name, max_depth)
    return structure.parse(*structure.root)


def _resolve_escapes(name: str, data: bytes, pos: np.ndarray, kind: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Drop backslashes and the quotes they escape from the marks; reject bad escapes inside strings.

    Walks the quotes and backslashes only (parentheses cannot follow a valid escape).
    """
    sub = np.flatnonzero((kind == _M_QUOTE) | (kind == _M_BACKSLASH))
    drop: list[int] = []
    in_string = False
    escaped_at = -1
    for i, p, k in zip(sub.tolist(), pos[sub].tolist(), kind[sub].tolist()):
        if p == escaped_at:
            drop.append(i)
            continue
        if k == _M_QUOTE:
            in_string = not in_string
            continue
        drop.append(i)
        if in_string:
            nxt = data[p + 1] if p + 1 < len(data) else None
            if nxt not in _ESCAPE_CHARS:
                shown = "the end of the file" if nxt is None else repr(chr(nxt))
                raise error_at(name, data, p, f"bad escape in a string: backslash before {shown}")
            escaped_at = p + 1
    keep = np.ones(len(pos), dtype=bool)
    keep[drop] = False
    return pos[keep], kind[keep]


def _heads(raw: np.ndarray, opens: np.ndarray, width: int = 20) -> np.ndarray:
    """Head symbol of each list opening at ``opens``, as a bytes array (vectorised).

    Items sharing their first 8 bytes share their head when it ends inside those
    bytes, so heads are worked out once per distinct 8-byte prefix; only longer
    heads (footprint, generator_version, ...) are cut out item by item, still in numpy.
    """
    if not len(opens):
        return np.zeros(0, dtype=f"S{width}")
    idx = np.minimum(opens[:, None] + np.arange(1, 9), len(raw) - 1)
    prefix = np.ascontiguousarray(raw[idx]).view(np.uint64).ravel()
    uniq, inverse = np.unique(prefix, return_inverse=True)
    table = np.zeros(len(uniq), dtype=f"S{width}")
    short = np.zeros(len(uniq), dtype=bool)
    for k in range(len(uniq)):
        text = uniq[k:k + 1].view(np.uint8).tobytes()
        end = re.match(rb"[^\s()\"]*", text).end()
        if 0 < end < 8:
            table[k], short[k] = text[:end], True
    heads = table[inverse.ravel()]
    rest = np.flatnonzero(~short[inverse.ravel()])
    if len(rest):
        idx = np.minimum(opens[rest, None] + np.arange(1, width + 1), len(raw) - 1)
        window = raw[idx]
        stop = _STOPS[window]
        first = np.where(stop.any(axis=1), stop.argmax(axis=1), width)
        window = np.where(np.arange(width) < first[:, None], window, 0).astype(np.uint8)
        heads[rest] = np.ascontiguousarray(window).view(f"S{width}").ravel()
        for i in rest[first == 0].tolist():
            heads[i] = _slow_head(raw, int(opens[i]), width)
    return heads


def _slow_head(raw: np.ndarray, start: int, width: int) -> bytes:
    text = raw[start + 1:start + 1 + 4 * width].tobytes()
    m = re.match(rb"\s*([^\s()\"]*)", text)
    return m.group(1)[:width]
