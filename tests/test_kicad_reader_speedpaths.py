"""The reader's bulk paths against slower references: the tree parser, Python's ``float``, a plain-Python
scanner and KiCad's own loader (pcbnew).

``ebglayout.kicad.board`` reads segments, arcs and vias in bulk (fixed-width numpy windows, one
``np.fromstring`` per chunk, repeated texts converted once) and sends every item it cannot vouch for
through the tree parser; ``sexpr.scan`` finds strings and parentheses chunk by chunk.  These tests pin
that the fast paths decide only how fast, never what is read.
"""
from __future__ import annotations

import random
import re
from pathlib import Path

import numpy as np
import pytest

from ebglayout.errors import BoardError
from ebglayout.kicad import board as board_module
from ebglayout.kicad import sexpr
from ebglayout.kicad.board import parse_board, read_board

HERE = Path(__file__).resolve().parent
SAMPLE = HERE.parent / "samples" / "hx2_hub.kicad_pcb"
BOARDS = sorted((HERE / "boards").glob("*.kicad_pcb")) + [SAMPLE]

HEADER = """(kicad_pcb (version 20211014) (generator pcbnew)
  (layers
    (0 "F.Cu" signal)
    (1 "In1.Cu" signal)
    (2 "In2.Cu" signal)
    (31 "B.Cu" signal)
    (44 "Edge.Cuts" user)
  )
  (net 0 "")
  (net 1 "GND")
  (net 2 "Net-(U1-Pad3)")
  (net 3 "HX2_L0_TX_P")
"""
LAYERS = ("F.Cu", "In1.Cu", "In2.Cu", "B.Cu")


def _tree_only(monkeypatch) -> None:
    """Make the bulk reader vouch for no row, so every track item is parsed as a tree."""
    monkeypatch.setattr(board_module._Reader, "_bulk_numbers",
                        lambda self, starts, lengths, counts, sure, out, follows=None: np.zeros_like(sure))


def _arrays(board) -> dict:
    out = {}
    for kind in ("segments", "arcs", "vias"):
        items = getattr(board, kind)
        for name in items.__dataclass_fields__:
            out[f"{kind}.{name}"] = getattr(items, name)
    return out


def _assert_identical(a: dict, b: dict) -> None:
    assert a.keys() == b.keys()
    for key, x in a.items():
        y = b[key]
        if isinstance(x, tuple):
            assert x == y, key
            continue
        assert x.dtype == y.dtype and x.shape == y.shape, key
        if x.dtype.kind == "f":
            assert np.array_equal(x.view(np.int64), y.view(np.int64)), key
        else:
            assert np.array_equal(x, y), key


@pytest.mark.parametrize("path", BOARDS, ids=lambda p: p.name)
def test_bulk_reader_equals_the_tree_on_the_test_boards(path, monkeypatch):
    fast = _arrays(read_board(path))
    _tree_only(monkeypatch)
    _assert_identical(fast, _arrays(read_board(path)))


# ---- items in every spelling the format allows: bulk and tree agree, item by item ----

NUMBERS = ("1.5", "1.50", "+1.5", "15e-1", ".5", "5.", "-0", "0007.25", "-12.000001", "1.2345678901234567",
           "2147.483647", "0", "3", "2E-2", "1_0")
"""Odd spellings of numbers KiCad's coordinate range holds (the reader refuses coordinates beyond +-2147.483647 mm)."""


def _number(rng: random.Random) -> str:
    return rng.choice(NUMBERS) if rng.random() < 0.1 else f"{rng.uniform(-50, 250):.{rng.randint(0, 6)}f}"


def _width(rng: random.Random) -> str:
    """A width in some spelling; the reader refuses widths that are not > 0."""
    return rng.choice(["0.2", "0.2", "0.25", "15e-2", ".5", "5.", "0007.25", "1.2345678901234567", "2E-1",
                       f"{rng.uniform(0.01, 5):.{rng.randint(2, 6)}f}"])


SHADOW_VALUES = {"start": "9.5 9.5", "mid": "9.5 9.5", "end": "9.5 9.5", "at": "9.5 9.5", "width": "0.9", "size": "0.9",
                 "drill": "0.7", "layer": '"B.Cu"', "layers": '"In1.Cu" "In2.Cu"', "net": "2"}


def _item(rng: random.Random, head: str, fields: list[tuple[str, str]], words: str = "") -> str:
    """One item: fields in random order and spacing, sometimes with extra children and bare words."""
    extras = [("tstamp", "5f1d1c52-0d2a-4d6e-9f61-1c2a3b4c5d6e"), ("locked", "yes"), ("uuid", '"a-b"'),
              ("teardrops", "(best_length_ratio 0.5) (enabled no)"), ("remove_unused_layers", ""),
              ("status", "40000")]
    children = list(fields) + [rng.choice(extras) for _ in range(rng.randint(0, 2))]
    if rng.random() < 0.4:
        rng.shuffle(children)
    if rng.random() < 0.1:
        # the same field spelled so only the tree sees it as that field, placed first: the tree takes it
        name = rng.choice(fields)[0]
        value = SHADOW_VALUES[name]
        children.insert(0, (rng.choice([f"{name}\t", f" {name}", f'"{name}"']), value))
    gap = rng.choice([" ", " ", " ", "\n\t\t", "  "])
    inner = gap.join(f"({name}{rng.choice([' '] * 30 + ['  ', chr(9)])}{value})" if value else f"({name})"
                     for name, value in children)
    return f"  ({head} {words}{inner})\n"


def _variant_board(rng: random.Random, count: int) -> str:
    rows = []
    for _ in range(count):
        layer = rng.choice(LAYERS)
        layer_text = rng.choice([f'"{layer}"', layer])
        net = str(rng.randint(0, 3))
        kind = rng.random()
        if kind < 0.5:
            a = rows and rng.random() < 0.6 and rows[-1][1] or f"{_number(rng)} {_number(rng)}"
            if rng.random() < 0.2:
                a = a[:-1] + rng.choice("0123456789")  # the previous end but (maybe) for its last digit
            b = f"{_number(rng)} {_number(rng)}"
            fields = [("start", a), ("end", b), ("width", _width(rng)),
                      ("layer", layer_text), ("net", net)]
            if rng.random() < 0.05:
                fields.append(("width", "0.9"))
            rows.append((_item(rng, "segment", fields, rng.choice(["", "", "locked "])), b))
        elif kind < 0.7:
            fields = [("start", f"{_number(rng)} {_number(rng)}"), ("mid", f"{_number(rng)} {_number(rng)}"),
                      ("end", f"{_number(rng)} {_number(rng)}"), ("width", "0.15"), ("layer", layer_text),
                      ("net", net)]
            rows.append((_item(rng, "arc", fields), ""))
        else:
            pair = rng.sample(LAYERS, 2)
            fields = [("at", f"{_number(rng)} {_number(rng)}"), ("size", rng.choice(["0.6", "0.45"])),
                      ("drill", "0.3"), ("layers", " ".join(f'"{n}"' for n in pair)), ("net", net)]
            words = rng.choice(["", "", "blind ", "micro ", "locked ", "blind locked "])
            rows.append((_item(rng, "via", fields, words), ""))
    return HEADER + "".join(r[0] for r in rows) + ")\n"


@pytest.mark.parametrize("seed", range(6))
def test_unusual_spellings_read_like_the_tree(seed, monkeypatch):
    """Reordered fields, extra and nested children, tabs and line breaks, odd number spellings, bare words."""
    text = _variant_board(random.Random(seed), 400)
    fast = parse_board(text, "variants")
    assert len(fast.segments) + len(fast.arcs) + len(fast.vias) == 400
    _tree_only(monkeypatch)
    _assert_identical(_arrays(fast), _arrays(parse_board(text, "variants")))


def test_spellings_give_the_numbers_float_gives():
    board = parse_board(HEADER + '  (segment locked (net 1) (layer F.Cu) (width 2E-1) (end 5. +7)\n'
                        '\t(start 15e-1 .5))\n'
                        '  (via micro (at 0007.25 -0) (size 0.6) (drill 0.3) (layers "In1.Cu" "F.Cu") (net 2))\n'
                        '  (via (at 1 2) (size 0.6) (drill 0.3) (layers "F.Cu" "B.Cu") (net 3) blind)\n)\n', "x")
    seg, via = board.segments, board.vias
    assert seg.start.tolist() == [[1.5, 0.5]] and seg.end.tolist() == [[5.0, 7.0]] and seg.width.tolist() == [0.2]
    assert board.copper_layers[seg.layer[0]] == "F.Cu" and board.nets[seg.net[0]] == "GND"
    assert via.at[0].tolist() == [7.25, 0.0] and np.signbit(via.at[0, 1])
    assert via.kind == ("micro", "blind") and via.layers[0].tolist() == [0, 1]
    assert board.nets[via.net[0]] == "Net-(U1-Pad3)"


def test_decimal_texts_read_bit_for_bit_like_float():
    """np.fromstring through the bulk path against Python's float on the same text.

    Consecutive tracks share texts (a start at the previous end, equal widths), which the bulk path
    converts once; half the shared starts differ from the previous end in their last digit only.
    """
    rng = random.Random(7)

    def decimal() -> str:
        """Up to 18 significant digits, within KiCad's coordinate range (the reader refuses numbers beyond it)."""
        digits = str(rng.randint(0, 10 ** rng.randint(1, 17)))
        cut = rng.randint(0, min(len(digits), 3))
        text = ("-" if rng.random() < 0.3 else "") + (digits[:cut] or "0") + "." + digits[cut:]
        return text + (f"e{rng.randint(-30, -1)}" if rng.random() < 0.1 else "")

    def positive() -> str:
        text = decimal().lstrip("-")
        return text if float(text) > 0 else "0.2"

    rows, expected = [], []
    end = f"{decimal()} {decimal()}"
    for i in range(1500):
        start = end
        if rng.random() < 0.5 and start[-1].isdigit():
            start = start[:-1] + rng.choice("0123456789")
        if rng.random() < 0.2:
            start = f"{decimal()} {decimal()}"
        end = f"{decimal()} {decimal()}"
        width = rng.choice(["0.2", "0.20", "0.2000000000000000111", positive()])
        rows.append(f'  (segment (start {start}) (end {end}) (width {width}) (layer "F.Cu") (net 1))\n')
        expected.append([float(v) for v in f"{start} {end} {width}".split()])
    seg = parse_board(HEADER + "".join(rows) + ")\n", "numbers").segments
    got = np.column_stack([seg.start, seg.end, seg.width])
    assert np.array_equal(got.view(np.int64), np.array(expected).view(np.int64))


@pytest.mark.parametrize("field, what", [
    ("(width 0.2 0.3)", r"expected \(width followed by 1 value"),
    ("(width 0.2x)", "not a number"),
    ("(width nan)", "not a number"),
    ("(width)", r"expected \(width followed by 1 value"),
    ("(width 0.2(x))", r"expected \(width followed by 1 value"),
    ("(width0.2)", r"expected \(width followed by 1 value"),
    ("(net 1) (width 0.2(x)) (layer \"F.Cu\")", r"expected \(width followed by 1 value"),
])
def test_bad_fields_are_still_errors_at_the_item(field, what):
    """A bad field among good items raises at its own item (file, line, column), not later or silently."""
    good = '  (segment (start 1 2) (end 3 4) (width 0.2) (layer "F.Cu") (net 1))\n'
    bad = good.replace("(width 0.2)", field)
    text = HEADER + good * 300 + bad + good * 300 + ")\n"
    line = HEADER.count("\n") + 301
    with pytest.raises(BoardError, match=f"line {line}, column 3: .*{what}"):
        parse_board(text, "bad.kicad_pcb")


@pytest.mark.parametrize("first, second", [
    ("(width 1\t2)", "(start 3 )"),
    ("(start 1 2 3)", "(start 4)"),
    ("(end 1 2 3)", "(end 4)"),
    ("(width 1 2)", "(end 3)"),
])
def test_two_bad_fields_do_not_cancel_out(first, second):
    """One field with a number too many and a later one with one too few still raise, at the first."""
    good = '  (segment (start 1 2) (end 3 4) (width 0.2) (layer "F.Cu") (net 1))\n'
    head = re.match(r"\((\w+)", first).group(1)
    other = re.match(r"\((\w+)", second).group(1)
    bad_a = re.sub(rf"\({head} [^)]*\)", lambda m: first, good)
    bad_b = re.sub(rf"\({other} [^)]*\)", lambda m: second, good)
    text = HEADER + good * 50 + bad_a + good * 50 + bad_b + good * 50 + ")\n"
    with pytest.raises(BoardError, match=f"line {HEADER.count(chr(10)) + 51}, column 3: "):
        parse_board(text, "bad.kicad_pcb")


@pytest.mark.parametrize("layers", ['"F.Cu"', "F.Cu", "Top"])
def test_via_with_one_layer_is_an_error(layers):
    good = '  (via (at 1 2) (size 0.6) (drill 0.3) (layers "F.Cu" "B.Cu") (net 1))\n'
    text = HEADER + good * 40 + good.replace('"F.Cu" "B.Cu"', layers) + good * 40 + ")\n"
    with pytest.raises(BoardError, match=f"line {HEADER.count(chr(10)) + 41}, column 3: .*layers followed by 2"):
        parse_board(text, "bad.kicad_pcb")


def test_bulk_reader_agrees_with_pcbnew_on_unusual_spellings(pcbnew, tmp_path):
    """KiCad reads the same tracks and vias (positions on its 1 nm grid) from a board in mixed spellings.

    Items sit on a 3 mm grid, apart: KiCad 9.0.2's LoadBoard gives touching copper of different nets one net
    (measured), which would compare its connectivity rather than the file."""
    rng = random.Random(11)
    rows = []
    for i in range(150):
        x, y = 10 + 3 * (i % 15) + rng.uniform(0, 0.5), 10 + 3 * (i // 15) + rng.uniform(0, 0.5)
        if i < 120:
            fields = [("start", f"{x:.4f} {y:.4f}"), ("end", f"{x + 1:.6f} {y:.3f}"), ("width", "0.2"),
                      ("layer", f'"{LAYERS[i % 4]}"'), ("net", str(i % 4)), ("tstamp", f"{i:08d}-0000-4000-8000-0")]
            head = "segment" + rng.choice(["", "", " locked"])
        else:
            fields = [("at", f"{x:.4f} {y:.4f}"), ("size", "0.6"), ("drill", "0.3"), ("layers", '"F.Cu" "B.Cu"'),
                      ("net", str(i % 4))]
            head = "via"
        if rng.random() < 0.5:
            rng.shuffle(fields)
        gap = rng.choice([" ", "\n\t\t", "  "])
        rows.append(f"  ({head}{gap}" + gap.join(f"({k}{rng.choice([' ', chr(9)])}{v})" for k, v in fields) + ")\n")
    path = tmp_path / "spellings.kicad_pcb"
    path.write_text(HEADER + "".join(rows) + ")\n")
    ours = read_board(path)
    theirs = pcbnew.LoadBoard(str(path))

    def nm(v: float) -> int:
        return round(v * 1e6)

    mine = sorted((nm(a[0]), nm(a[1]), nm(b[0]), nm(b[1]), nm(w), ours.copper_layers[la], ours.nets[n])
                  for a, b, w, la, n in zip(ours.segments.start, ours.segments.end, ours.segments.width,
                                            ours.segments.layer, ours.segments.net))
    vias = sorted((nm(p[0]), nm(p[1]), nm(s), ours.nets[n]) for p, s, n in zip(ours.vias.at, ours.vias.size,
                                                                                 ours.vias.net))
    kicad, kicad_vias = [], []
    for t in theirs.GetTracks():
        if t.GetClass() == "PCB_VIA":
            kicad_vias.append((t.GetPosition().x, t.GetPosition().y, t.GetWidth(), t.GetNetname()))
        else:
            kicad.append((t.GetStart().x, t.GetStart().y, t.GetEnd().x, t.GetEnd().y, t.GetWidth(),
                          t.GetLayerName(), t.GetNetname()))
    assert mine == sorted(kicad) and vias == sorted(kicad_vias)


# ---- the chunked structure scan against a plain-Python scanner ----

def _reference_scan(text: bytes):
    """Offsets of the structural parentheses (strings and escapes honoured), or where an unterminated
    string opens, or where a bad escape is (escapes as KiCad's lexer takes them, from memory)."""
    out, in_string, escaped, opened = [], False, False, -1
    for i, c in enumerate(text):
        if in_string:
            if escaped:
                escaped = False
            elif c == 0x5C:
                if i + 1 >= len(text) or text[i + 1] not in b'\\"abfnrtvx01234567':
                    return "bad escape", i
                escaped = True
            elif c == 0x22:
                in_string = False
        elif c == 0x22:
            in_string, opened = True, i
        elif c in (0x28, 0x29):
            out.append(i)
    return ("open string", opened) if in_string else ("ok", out)


def _reference_well_formed(text: bytes, parens: list[int]) -> bool:
    """One top-level list with a head symbol, balanced, not too deep, nothing after it."""
    stripped = text.strip()
    depth = np.cumsum([1 if text[i] == 0x28 else -1 for i in parens])
    return (bool(parens) and stripped[:1] == b"(" and depth[-1] == 0 and not (depth[:-1] == 0).any()
            and depth.max() <= sexpr.MAX_DEPTH and parens[-1] == len(text.rstrip()) - 1
            and re.match(rb"\(\s*[^\s()\"]", stripped) is not None)


ATOMS = ["a", "b1", "1.5", '"x"', '"a(b"', '"(("', '")"', r'"q\"(\""', r'"\\"', r'"\\("', '""', '"s p"', "µ",
         '"Ω("', r'"\x41)"']


def _expression(rng: random.Random, depth: int = 0) -> str:
    if depth > 4 or rng.random() < 0.3:
        return rng.choice(ATOMS)
    return "(" + " ".join(_expression(rng, depth + 1) for _ in range(rng.randint(0, 5))) + ")"


@pytest.mark.parametrize("chunk", [1, 3, 8, 64])
def test_chunked_scan_matches_a_plain_scanner(chunk, monkeypatch):
    """Strings with parentheses, quotes and escapes cut at every chunk boundary; unterminated strings found."""
    monkeypatch.setattr(sexpr, "_SCAN_CHUNK", chunk)
    rng = random.Random(chunk)
    dense = "(kicad_pcb " + '(a "(")' * 3000 + "()" * 3000 + ")"  # more parentheses than the first guess holds
    for trial in range(300):
        text = (dense if trial == 0 else
                "(kicad_pcb " + " ".join(_expression(rng, 1) for _ in range(rng.randint(1, 5))) + ")").encode()
        if rng.random() < 0.3:
            i = rng.choice([i for i, c in enumerate(text) if c < 0x80])
            text = text[:i] + rng.choice([b'"', b" "]) + text[i + 1:]
        kind, found = _reference_scan(text)
        try:
            s = sexpr.scan(text, "x")
        except BoardError as err:
            if kind == "open string":
                assert "unterminated string" in str(err)
                assert (err.line, err.column) == sexpr.line_column(text, text.rindex(b'"'))
            elif kind == "bad escape":
                assert "bad escape" in str(err) and (err.line, err.column) == sexpr.line_column(text, found)
            else:
                assert not _reference_well_formed(text, found), str(err)
            continue
        assert kind == "ok" and _reference_well_formed(text, found)
        assert s.paren.tolist() == found
        assert s.depth.tolist() == np.cumsum([1 if text[i] == 0x28 else -1 for i in found]).tolist()
