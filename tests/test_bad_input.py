"""Catalogue of bad inputs: each exits 2 with one line naming the problem, and writes nothing."""
from __future__ import annotations

import pytest

from ebglayout.cli import main
from ebglayout.errors import EbgError

GOOD = """
units = "mm"
[pair]
width = 0.1
spacing = 0.1
path = [[0, 0], [20, 0], [20, 10]]
[cut]
style = "straight"
patch = [3.0, 2.0]
count = 2
slot = 0.15
web = 0.3
[stackup]
er = 4.0
h = 0.1
"""


def variant(old: str, new: str) -> str:
    assert old in GOOD, old
    return GOOD.replace(old, new)


SPEC_CASES = [
    ("cavity thicker than a board", variant("\nh = 0.1", "\nh = 1000"),
     "stackup.h = 1000: must be a dielectric thickness of at most 10 mm"),
    ("pair height thicker than a board", variant("\nh = 0.1", "\nh = 0.1\npair_h = [20]"),
     "stackup.pair_h[0] = 20: must be a dielectric thickness of at most 10 mm"),
    ("missing width", variant("width = 0.1\n", ""), "pair.width = (missing)"),
    ("negative patch", variant("patch = [3.0, 2.0]", "patch = [-3.0, 2.0]"), "cut.patch = -3"),
    ("zero slot", variant("slot = 0.15", "slot = 0"), "cut.slot = 0"),
    ("slot >= patch", variant("slot = 0.15", "slot = 2.5"), "must be > 0 and < the patch size (2 mm)"),
    ("nan er", variant("er = 4.0", "er = nan"), "stackup.er = nan"),
    ("negative etch", variant("\nh = 0.1", "\nh = 0.1\netch_tolerance = -0.01"), "stackup.etch_tolerance = -0.01"),
    ("positive rejection level", variant("[stackup]", "[rules]\nrejection_db = 3\n[stackup]"),
     "rules.rejection_db = 3: must be a number between -60 and -1 dB"),
    ("huge target margin", variant("[stackup]", "[rules]\ntarget_margin = 0.9\n[stackup]"),
     "rules.target_margin = 0.9"),
    ("inf h", variant("\nh = 0.1", "\nh = inf"), "stackup.h = inf"),
    ("huge patch", variant("patch = [3.0, 2.0]", "patch = [3e6, 2.0]"), "to 1000 mm"),
    ("string count", variant("count = 2", 'count = "two"'), "cut.count = two: must be a whole number"),
    ("float count", variant("count = 2", "count = 2.5"), "cut.count = 2.5"),
    ("bool width", variant("width = 0.1", "width = true"), "pair.width = True"),
    ("unknown unit", variant("slot = 0.15", 'slot = "0.15furlong"'), "unknown length unit 'furlong'"),
    ("bad units key", variant('units = "mm"', 'units = "parsec"'), "units = parsec"),
    ("unknown key", variant("web = 0.3", "web = 0.3\nwebb = 0.2"), "did you mean 'cut.web'"),
    ("unknown group", GOOD + "\n[stakup]\ner = 4\n", "stakup = {...}: unknown key"),
    ("bad style", variant('style = "straight"', 'style = "zigzag"'), "cut.style = zigzag: must be one of straight, folded, bridged"),
    ("empty path", variant("path = [[0, 0], [20, 0], [20, 10]]", "path = []"), "pair.path"),
    ("single point", variant("path = [[0, 0], [20, 0], [20, 10]]", "path = [[0, 0]]"), "must list 2 to 2000 points"),
    ("duplicate point", variant("path = [[0, 0], [20, 0], [20, 10]]", "path = [[0, 0], [20, 0], [20, 0], [20, 10]]"),
     "zero-length segment"),
    ("point not a pair", variant("path = [[0, 0], [20, 0], [20, 10]]", "path = [[0, 0], [20, 0, 1]]"), "must be a point [x, y]"),
    ("self-crossing path", variant("path = [[0, 0], [20, 0], [20, 10]]", "path = [[0, 0], [20, 0], [20, 5], [10, 5], [10, -5]]"),
     "must not cross or touch itself"),
    ("hairpin corner", variant("path = [[0, 0], [20, 0], [20, 10]]", "path = [[0, 0], [20, 0], [0, 1]]"),
     "at most 135 degrees"),
    ("run too short", variant("path = [[0, 0], [20, 0], [20, 10]]", "path = [[0, 0], [5, 0], [5, 5]]"),
     "the cells need"),
    ("start beyond run", variant("web = 0.3", "web = 0.3\nstart = 15"), "cut.start = 15 mm"),
    ("patch narrower than pair", variant("patch = [3.0, 2.0]", "patch = [3.0, 0.25]"), "must exceed the pair's width"),
    ("zero spacing", variant("spacing = 0.1", "spacing = 0"), "pair.spacing = 0"),
    ("same nets", variant('style = "straight"', 'style = "straight"').replace("[cut]", '[cut]').replace(
        "width = 0.1\n", 'width = 0.1\nnets = ["A", "A"]\n', 1), "two different net names"),
    ("plane on pair layer", GOOD + '\n[plane]\nlayers = ["F.Cu"]\n', "must not include the pair's own layer"),
    ("three planes", GOOD + '\n[plane]\nlayers = ["In1.Cu", "In2.Cu", "In3.Cu"]\n', "one or two different layer names"),
    ("bridge on straight", variant("web = 0.3", "web = 0.3\nbridge = {width = 0.1, length = 0.5}"), "only the bridged style"),
    ("bridged without bridge", variant('style = "straight"', 'style = "bridged"'), "bridged style needs cut.bridge"),
    ("bridge shorter than slot", variant('style = "straight"', 'style = "bridged"').replace(
        "web = 0.3", "web = 0.3\nbridge = {width = 0.1, length = 0.1}"), "cut.bridge.length = 0.1"),
    ("passes on straight", variant("web = 0.3", "web = 0.3\npasses = 3"), "only the folded style takes passes"),
    ("even generated fold", variant('style = "straight"', 'style = "folded"').replace(
        "web = 0.3", "web = 0.3\npasses = 4").replace("patch = [3.0, 2.0]", "patch = [3.0, 4.0]"), "odd number of passes"),
    ("fold lanes do not fit", variant('style = "straight"', 'style = "folded"').replace("web = 0.3", "web = 0.3\npasses = 5"),
     "need patches at least"),
    ("patches and patch", variant("web = 0.3", "web = 0.3\npatches = [[3, 2], [3, 2]]"), "not both"),
    ("count mismatch", variant("patch = [3.0, 2.0]\ncount = 2", "patches = [[3, 2], [3, 2]]\ncount = 3"),
     "must equal the number of cut.patches"),
    ("bad target", GOOD.replace('units = "mm"', 'units = "mm"\ntarget = "8 parsecs"'), "target = 8 parsecs"),
    ("bad gds map", GOOD + '\n[gds]\n"In1.Cu/slot" = [1, -2]\n', "gds.In1.Cu/slot"),
    ("not toml", "this is not = toml = at all", "is not valid TOML"),
    ("empty file", "", "pair.width = (missing)"),
    ("binary file", "\x00\x01\x02", "is not valid TOML"),
    ("obstacle missing width", GOOD + '\n[[obstacles.tracks]]\npath = [[0, 1], [5, 1]]\nlayer = "F.Cu"\n',
     "obstacles.tracks[0]"),
]


@pytest.mark.parametrize("text, words", [(t, w) for _, t, w in SPEC_CASES], ids=[n for n, _, _ in SPEC_CASES])
def test_bad_spec_exits_2_with_one_line_and_writes_nothing(tmp_path, capsys, text, words):
    spec = tmp_path / "bad.toml"
    spec.write_text(text, encoding="utf-8")
    out = tmp_path / "out"
    assert main(["build", str(spec), "--out", str(out)]) == 2
    err = capsys.readouterr().err.strip()
    assert err.startswith("ebglayout: error: ") and "\n" not in err, err
    assert words in err, err
    assert not out.exists()


def test_missing_spec_file_and_unreadable_folder(tmp_path, capsys):
    assert main(["check", str(tmp_path / "nope.toml")]) == 2
    assert "cannot be read" in capsys.readouterr().err
    assert main(["check", str(tmp_path)]) == 2
    assert "cannot be read" in capsys.readouterr().err


# ---- boards and plans ----


def sample_board_text() -> str:
    from conftest import SAMPLES

    return (SAMPLES / "hx2_hub.kicad_pcb").read_text(encoding="utf-8")


def _board_cases():
    text = sample_board_text()
    half = text[: len(text) // 2]
    end = text.rstrip().rfind(")")
    return [
        ("truncated board", half, "line"),
        ("unbalanced close", text[:end] + ")\n)" + text[end + 1:], "line"),
        ("deep nesting", text[:end] + "(a " * 5000 + ")" * 5000 + text[end:], "nest"),
        ("empty board", "", "empty"),
        ("binary board", "\x00\x01\x02\x03PK", "line"),
        ("spec given as board", GOOD, "line"),
        ("kicad 5 board", text.replace("(version 20211014)", "(version 20171130)", 1), "20171130"),
    ]


BOARD_CASES = _board_cases()


def test_negative_jobs_exits_2_naming_the_option(capsys):
    from conftest import SAMPLES

    assert main(["check", "--board", str(SAMPLES / "hx2_hub.kicad_pcb"), "--jobs", "-1"]) == 2
    err = capsys.readouterr().err.strip()
    assert err.startswith("ebglayout: error: --jobs: -1") and "\n" not in err and "positive count" in err


@pytest.mark.parametrize("text, words", [(t, w) for _, t, w in BOARD_CASES], ids=[n for n, _, _ in BOARD_CASES])
@pytest.mark.parametrize("command", ["pairs", "place", "check"])
def test_bad_board_exits_2_naming_the_place(tmp_path, capsys, text, words, command):
    board = tmp_path / "bad.kicad_pcb"
    board.write_bytes(text.encode("utf-8", "surrogatepass"))
    out = tmp_path / "new.kicad_pcb"
    from conftest import SAMPLE_SPECS

    argv = {"pairs": ["pairs", str(board)],
            "place": ["place", str(board), "--pair", "HX2_L0_TX_P", "HX2_L0_TX_N", "--spec", str(SAMPLE_SPECS[0]),
                      "--out", str(out)],
            "check": ["check", "--board", str(board)]}[command]
    assert main(argv) == 2
    err = capsys.readouterr().err.strip()
    assert err.startswith("ebglayout: error: ") and "\n" not in err and "Traceback" not in err, err
    assert "bad.kicad_pcb" in err and words.lower() in err.lower(), err
    assert not out.exists()


@pytest.mark.parametrize("argv_tail, words", [
    (["--pair", "HX2_NOPE_P", "HX2_NOPE_N"], "is not a routed differential pair"),
    (["--pair", "HX2_L0_TX_P", "HX2_L1_RX_N"], "is not a routed differential pair"),
    ([], "needs --pair NET_P NET_N with --spec SPEC, or --plan PLAN"),
])
def test_place_with_bad_pair_choice(tmp_path, capsys, argv_tail, words):
    from conftest import SAMPLE_SPECS, SAMPLES

    out = tmp_path / "new.kicad_pcb"
    spec = ["--spec", str(SAMPLE_SPECS[0])] if argv_tail else []
    assert main(["place", str(SAMPLES / "hx2_hub.kicad_pcb"), *argv_tail, *spec, "--out", str(out)]) == 2
    assert words in capsys.readouterr().err
    assert not out.exists()


@pytest.mark.parametrize("plan, words", [
    ("[[filter]]\nspec = \"nope.toml\"\npair = [\"A_P\", \"A_N\"]\n", "cannot be read"),
    ("[[filter]]\nspec = \"s.toml\"\n", "give exactly one of pair"),
    ("[[filter]]\nspec = \"s.toml\"\npair = [\"A_P\"]\n", "must be two net names"),
    ("title = \"x\"\n", "must hold one or more [[filter]] tables"),
    ("[[filter]]\nspec = \"s.toml\"\nmatch = \"ZZZ*\"\n", "matches no differential pair"),
])
def test_bad_plans(tmp_path, capsys, plan, words):
    from conftest import SAMPLE_SPECS, SAMPLES

    (tmp_path / "s.toml").write_text(SAMPLE_SPECS[0].read_text())
    path = tmp_path / "plan.toml"
    path.write_text(plan)
    out = tmp_path / "new.kicad_pcb"
    assert main(["place", str(SAMPLES / "hx2_hub.kicad_pcb"), "--plan", str(path), "--out", str(out)]) == 2
    assert words in capsys.readouterr().err
    assert not out.exists()


# ---- fuzz findings (tools/fuzz.py): each class once, through check and build alike ----

ZIGZAG = "[[0, 0], [20, 0]" + "".join(f", [{20 + 0.01 * k:.2f}, {0.01 * (k % 2) * (1 if k % 4 == 3 else -1)}]"
                                     for k in range(1, 1999)) + "]"
"""A pair path zig-zagging in 0.01 mm steps: its traces would overlap themselves (GEOS took 12 s to buffer them)."""
FUZZ_CASES = [
    ("TOML nested 1000 deep", GOOD + "\n[plane]\nnet = " + "[" * 1000 + "]" * 1000 + "\n",
     "nests arrays or tables too deeply"),
    ("slot 1e-9", variant("slot = 0.15", "slot = 1e-9"), "cut.slot = 1e-09: must be from 0.001 mm (1 um)"),
    ("self-crossing outline", GOOD + "\n[plane]\noutline = [[0, -5], [30, 5], [30, -5], [0, 5]]\n",
     "plane.outline = 4 points: must be a simple polygon that does not cross itself"),
    ("layer names differing in case", GOOD + '\n[plane]\nlayers = ["in1.cu", "In1.Cu"]\n',
     "plane.layers[0] = in1.cu: must be a KiCad copper layer name"),
    ("wildcard layer", GOOD + '\n[plane]\nlayers = ["*.Cu"]\n', "plane.layers[0] = *.Cu"),
    ("slash in layer", GOOD + '\n[plane]\nlayers = ["In1/Cu"]\n', "plane.layers[0] = In1/Cu"),
    ("pair layer In31", variant("spacing = 0.1", 'spacing = 0.1\nlayer = "In31.Cu"'), "pair.layer = In31.Cu"),
    ("NUL in name", 'name = "a\\u0000b"\n' + GOOD, "name = a\\x00b: must be a non-empty string of printable"),
    ("newline in name", 'name = "a\\nb"\n' + GOOD, "name = a\\nb: must be a non-empty string of printable"),
    ("255-byte name", f'name = "{"n" * 255}"\n' + GOOD, "at most 100 bytes as UTF-8"),
    ("trace width under 1 nm", variant("width = 0.1", "width = 1e-7"), "pair.width = 1e-07: must be from 0.001 mm"),
    ("bridge width 1e-9", variant('style = "straight"', 'style = "bridged"').replace(
        "web = 0.3", "web = 0.3\nbridge = {width = 1e-9, length = 0.5}"), "cut.bridge.width = 1e-09"),
    ("near-collinear arc", variant("path = [[0, 0], [20, 0], [20, 10]]",
                                   "path = [[0, 0], [20, 0], {arc = [[20, 0], [25, 2e-10], [30, 0]]}, [40, 0]]"),
     "pair.path[2] = {'arc': [[20, 0], [25, 2e-10], [30, 0]]}: arc points must not coincide or lie on one line"),
    ("zig-zag path", variant("path = [[0, 0], [20, 0], [20, 10]]", f"path = {ZIGZAG}"),
     "pair.path = 1999 pieces: bends too tightly for the pair"),
    ("path over the point limit", variant("path = [[0, 0], [20, 0], [20, 10]]", "path = [" + ", ".join(
        f"[{0.01 * k:.2f}, 0]" for k in range(2001)) + "]"), "must list 2 to 2000 points"),
    ("slot under build's rule limit", variant("slot = 0.15", "slot = 0.0004") + "\n[rules]\nmin_slot = 0.0001\n",
     "cut.slot = 0.0004: must be from 0.001 mm"),
]


@pytest.mark.parametrize("text, words", [(t, w) for _, t, w in FUZZ_CASES], ids=[n for n, _, _ in FUZZ_CASES])
def test_fuzz_findings_exit_2_in_check_and_build_alike(tmp_path, capsys, text, words):
    """What fuzzing found: check and build accept exactly the same specs (one validation path) and name the key."""
    spec = tmp_path / "bad.toml"
    spec.write_text(text, encoding="utf-8")
    messages = []
    for argv in (["check", str(spec)], ["build", str(spec), "--out", str(tmp_path / "out")]):
        assert main(argv) == 2
        err = capsys.readouterr().err
        assert err.count("\n") == 1 and err.startswith("ebglayout: error: "), err
        assert all(c.isprintable() for c in err.rstrip("\n")), err
        assert words in err, err
        messages.append(err)
    assert messages[0] == messages[1]
    assert not (tmp_path / "out").exists()


@pytest.mark.parametrize("text, words", [
    ('name = "' + "long-" * 40 + '"\n' + GOOD, "..."),
    (GOOD.replace("[stackup]", '[stackup]\n"" = 1'), 'stackup."" (the empty key) = 1: unknown key'),
    (GOOD.replace("width = 0.1", 'width = "0.1\\u001b[31m"'),
     "pair.width = 0.1\\x1b[31m: must be a number with a length unit"),
])
def test_messages_stay_one_readable_line(tmp_path, capsys, text, words):
    """Control characters are escaped, long values shortened with an ellipsis, the empty key named."""
    spec = tmp_path / "bad.toml"
    spec.write_text(text, encoding="utf-8")
    assert main(["check", str(spec)]) == 2
    err = capsys.readouterr().err.rstrip("\n")
    assert "\n" not in err and all(c.isprintable() for c in err) and len(err) < 300, err
    assert words in err, err


def test_byte_order_mark_terahertz_and_nanometres_are_accepted(tmp_path, capsys):
    """A UTF-8 BOM is accepted; 1 THz is both allowed and accepted as written; nm is a documented unit."""
    spec = tmp_path / "bom.toml"
    text = GOOD.replace('units = "mm"', 'units = "mm"\ntarget = "1THz"').replace("slot = 0.15", 'slot = "150000nm"')
    spec.write_bytes(b"\xef\xbb\xbf" + text.encode("utf-8"))
    assert main(["check", str(spec)]) in (0, 1), capsys.readouterr().err
    spec.write_text(GOOD.replace('units = "mm"', 'units = "mm"\ntarget = "1.01THz"'), encoding="utf-8")
    assert main(["check", str(spec)]) == 2
    assert "target = 1.01THz: must be a frequency above 0 and at most 1 THz" in capsys.readouterr().err
    from ebglayout.spec import PARAMETER_BY_KEY

    assert "nm" in PARAMETER_BY_KEY["units"].help


def _hub_line(text: str, needle: str) -> int:
    return text[: text.index(needle)].count("\n") + 1


@pytest.mark.parametrize("old, new, item, words", [
    ("(size 0.8 1.2)", "(size 1.6 abc)", "(footprint",
     "footprint U2: pad 1 needs (at X Y) and (size W H) with finite numbers"),
    ("(end 127.865 112)", "(end 127.865 1e308)", "(segment",
     "segment of net 'HX2_L0_TX_P': (end 127.865 1e+308) coordinates must lie within"),
    ("(xy 145 101)", "(xy nan 101)", "(zone", "zone 'KO1_RA': outline point (xy nan 101) must hold two finite numbers"),
    ("(epsilon_r 3.9)", "(epsilon_r inf)", '"dielectric 1"',
     "stack-up layer 'dielectric 1': (epsilon_r inf) must be a number from 1 to 100"),
    ("(epsilon_r 3.9)", "(epsilon_r nan)", '"dielectric 1"', "stack-up layer 'dielectric 1': (epsilon_r nan)"),
    ('"dielectric 1" (type "prepreg") (thickness 0.1)', '"dielectric 1" (type "prepreg") (thickness 0)',
     '"dielectric 1"',
     "stack-up layer 'dielectric 1': (thickness 0) must be a number > 0"),
    ("(end 110 90.135) (width 0.12)", "(end 110 90.135) (width 0)", "(segment", "(width 0) must be > 0"),
    ("(end 110 90.135) (width 0.12)", "(end 110 90.135) (width -0.12)", "(segment", "(width -0.12) must be > 0"),
    ("(end 110 90.135) (width 0.12)", "(end 110 90.135) (width 1e9)", "(segment",
     "(width 1e+09) must be > 0 and at most 1000 mm"),
    ("(end 110 90.135) (width 0.12)", "(end 1e15 90.135) (width 0.12)", "(segment",
     "(end 1e+15 90.135) coordinates must lie within +-2147.483647 mm"),
    ("(min_thickness 0.2)", '(min_thickness "*.Cu")', "(zone", "(min_thickness *.Cu) must be a width from 0 to 1000 mm"),
    ("(min_thickness 0.2)", "(min_thickness 0.2) (priority 1.5)", "(zone",
     "(priority 1.5) must be a whole number from 0 to 2147483647"),
    ("(gr_line (start 92 80)", "(gr_line (start 1e308 80)", "(gr_line",
     "gr_line on Edge.Cuts: (start 1e308 80) must lie within +-2147.483647 mm"),
])
@pytest.mark.parametrize("command", ["pairs", "place"])
def test_board_values_name_file_line_and_item(tmp_path, capsys, old, new, item, words, command):
    """Fuzzed board numbers: one line naming the board file, the item's line and the item; nothing written.

    Pads are read only when a filter is placed, so `pairs` reads past a broken pad."""
    from conftest import SAMPLE_SPECS

    text = sample_board_text()
    at = text.index(old)
    line = text[: text.rindex(item, 0, at + len(item))].count("\n") + 1
    board = tmp_path / "bad.kicad_pcb"
    board.write_text(text[:at] + new + text[at + len(old):], encoding="utf-8")
    out = tmp_path / "new.kicad_pcb"
    argv = ["pairs", str(board)] if command == "pairs" else [
        "place", str(board), "--pair", "HX2_L0_TX_P", "HX2_L0_TX_N", "--spec", str(SAMPLE_SPECS[0]), "--out", str(out)]
    if command == "pairs" and item == "(footprint":
        assert main(argv) == 0
        return
    assert main(argv) == 2
    err = capsys.readouterr().err.rstrip("\n")
    assert "\n" not in err and err.startswith(f"ebglayout: error: bad.kicad_pcb: line {line}, column "), err
    assert words in err, err
    assert not out.exists()


def test_check_board_names_the_footprint_of_a_broken_stored_design(tmp_path, capsys):
    """A stored design with a near-collinear arc: board file, the footprint's line and reference, then the key."""
    from conftest import SAMPLE_SPECS, SAMPLES

    placed = tmp_path / "placed.kicad_pcb"
    assert main(["place", str(SAMPLES / "hx2_hub.kicad_pcb"), "--pair", "HX2_L0_TX_P", "HX2_L0_TX_N",
                 "--spec", str(SAMPLE_SPECS[0]), "--out", str(placed)]) in (0, 1)
    capsys.readouterr()
    text = placed.read_text(encoding="utf-8")
    old = '[124.9999995,90.0],'
    assert text.count(old) == 1
    broken = tmp_path / "broken.kicad_pcb"
    broken.write_text(text.replace(old, '[110,90.0],{\\"arc\\":[[110,90.0],[115,90.0000000004],[120,90.0]]},' + old),
                      encoding="utf-8")
    assert main(["check", "--board", str(broken), "--jobs", "1"]) == 2
    err = capsys.readouterr().err.rstrip("\n")
    line = text[: text.index('(footprint "ebglayout')].count("\n") + 1 if '(footprint "ebglayout' in text else None
    assert err.startswith("ebglayout: error: broken.kicad_pcb: line ") and "footprint FIL1" in err, err
    assert line is None or f"line {line}," in err, err
    assert "pair.path[2]" in err and "\n" not in err


def test_placed_filter_names_stay_within_the_name_limit():
    """A long hierarchical net name must not make `place` refuse its own filter name (spec.MAX_NAME_BYTES)."""
    from ebglayout.kicad.place import _filter_name
    from ebglayout.spec import MAX_NAME_BYTES, spec_from_dict

    base = "/Top/Very_Long_Hierarchical_Sheet_Name/Another_Level/HX2_LANE0_TRANSMIT_DIFFERENTIAL"
    names = {_filter_name(base + tail, {}, "hx2_l0_tx_straight_with_a_long_name.toml") for tail in ("_A", "_B")}
    assert len(names) == 2 and all(len(n.encode()) <= MAX_NAME_BYTES for n in names)
    import tomllib

    raw = tomllib.loads(GOOD)
    raw["name"] = names.pop()
    assert spec_from_dict(raw).name == raw["name"]
    assert _filter_name("HX2_L0_TX", {}, "hx2_l0_tx_straight.toml") == "HX2_L0_TX_hx2_l0_tx_straight"


def test_a_pair_the_line_formulas_cannot_evaluate_is_one_line_not_a_crash():
    """A spacing of 1 um over a 10 mm dielectric (s/h 1e-4) overflows the coupled-microstrip fit: an error
    naming the pair's keys, not an internal error."""
    from ebglayout.estimate.lines import pair_lines
    from ebglayout.stackup import CutPlaneStack, Dielectric, Stackup

    stack = Stackup(planes=(CutPlaneStack("In1.Cu", Dielectric(10.0, 4.1, 0.02), Dielectric(0.1, 4.1, 0.02)),),
                    sources=())
    with pytest.raises(EbgError, match="pair.spacing = 0.001 mm") as err:
        pair_lines(stack, 0.1, 0.001)
    assert "\n" not in str(err.value)
