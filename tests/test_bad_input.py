"""Catalogue of bad inputs: each exits 2 with one line naming the problem, and writes nothing."""
from __future__ import annotations

import pytest

from ebglayout.cli import main

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
    ("huge patch", variant("patch = [3.0, 2.0]", "patch = [3e6, 2.0]"), "at most 1000 mm"),
    ("string count", variant("count = 2", 'count = "two"'), "cut.count = two: must be a whole number"),
    ("float count", variant("count = 2", "count = 2.5"), "cut.count = 2.5"),
    ("bool width", variant("width = 0.1", "width = true"), "pair.width = True"),
    ("unknown unit", variant("slot = 0.15", 'slot = "0.15furlong"'), "unknown length unit 'furlong'"),
    ("bad units key", variant('units = "mm"', 'units = "parsec"'), "units = parsec"),
    ("unknown key", variant("web = 0.3", "web = 0.3\nwebb = 0.2"), "did you mean 'cut.web'"),
    ("unknown group", GOOD + "\n[stakup]\ner = 4\n", "stakup = {...}: unknown key"),
    ("bad style", variant('style = "straight"', 'style = "zigzag"'), "cut.style = zigzag: must be one of straight, folded, bridged"),
    ("empty path", variant("path = [[0, 0], [20, 0], [20, 10]]", "path = []"), "pair.path"),
    ("single point", variant("path = [[0, 0], [20, 0], [20, 10]]", "path = [[0, 0]]"), "at least two points"),
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
