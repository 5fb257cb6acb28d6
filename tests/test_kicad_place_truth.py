"""`place` writes a board only when the spec agrees with the board: plane layers, reference planes, stack-up.

Each refusal is checked the way a user meets it: exit code 2, one line on stderr naming the spec key, its value
and the board's layers, no output board and no .kicad_dru, and the input board byte for byte as it was.  The
accepted cases are judged by KiCad's own loader and zone fill (tests/kicad_rig.py).
"""
from __future__ import annotations

import json
import shutil

import pytest

from ebglayout.cli import main

from conftest import SAMPLES
from kicad_rig import assert_exact_slots, placed_slot_reports, spec_variant

HUB = SAMPLES / "hx2_hub.kicad_pcb"
"""4 layers: F.Cu pairs, GND plane on In1.Cu, +3V3 plane on In2.Cu, the USB pair on B.Cu."""
STRIPLINE = SAMPLES.parent / "tests" / "boards" / "hx2_stripline6.kicad_pcb"
"""6 layers: the HX2_L3_RX pair on In2.Cu between GND planes on In1.Cu and In3.Cu."""
STRAIGHT = SAMPLES / "hx2_l0_tx_straight.toml"
HUB_LAYERS = "F.Cu (the pair), In1.Cu (GND), In2.Cu (+3V3), B.Cu (no plane)"
USB = ("HX2_USB_D+", "HX2_USB_D-")
L0 = ("HX2_L0_TX_P", "HX2_L0_TX_N")


@pytest.fixture
def hub(tmp_path):
    path = tmp_path / "hub.kicad_pcb"
    shutil.copyfile(HUB, path)
    return path


@pytest.fixture
def stripline(tmp_path):
    path = tmp_path / "six.kicad_pcb"
    shutil.copyfile(STRIPLINE, path)
    return path


def refused(board, capsys, *args) -> str:
    """Run `place` expecting a refusal; the one error line.  Nothing written, the input untouched."""
    before = board.read_bytes()
    out = board.with_name(f"{board.stem}_placed.kicad_pcb")
    assert main(["place", str(board), *args, "--out", str(out)]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1
    assert not out.exists() and not out.with_suffix(".kicad_dru").exists()
    assert board.read_bytes() == before
    return err


def placed(board, capsys, *args):
    out = board.with_name(f"{board.stem}_placed.kicad_pcb")
    art = board.with_name(f"{board.stem}_art")
    assert main(["place", str(board), *args, "--out", str(out), "--artifacts", str(art)]) == 0
    capsys.readouterr()
    reports = [json.loads(p.read_text()) for p in sorted(art.glob("*/*report.json"))]
    return out, reports


def spec(tmp_path, name, **tables):
    return str(spec_variant(STRAIGHT, tmp_path, name, **tables))


def test_stripline_spec_under_a_microstrip_pair_is_refused(hub, tmp_path, capsys):
    """Planes In2.Cu and In4.Cu on a 4-layer board: In4.Cu does not exist and the pair on F.Cu has one plane."""
    wrong = spec(tmp_path, "strip", plane={"layers": ["In2.Cu", "In4.Cu"], "net": "GND"})
    err = refused(hub, capsys, "--pair", *L0, "--spec", wrong)
    assert "plane.layers = ['In2.Cu', 'In4.Cu']: In4.Cu is not a copper layer of hub.kicad_pcb" in err
    assert HUB_LAYERS in err and "the pair's reference planes there: In1.Cu (GND)" in err


def test_cut_behind_another_plane_is_refused(hub, tmp_path, capsys):
    """The USB pair on B.Cu returns on the +3V3 plane on In2.Cu: a cut in the GND plane on In1.Cu, given or found,
    is behind it; likewise a +3V3 cut under the F.Cu pair lies behind its GND plane."""
    err = refused(hub, capsys, "--pair", *USB, "--spec", str(STRAIGHT))
    assert "plane.layers = ['In1.Cu']: In2.Cu (+3V3) lies between B.Cu and In1.Cu" in err
    assert "F.Cu (no plane), In1.Cu (GND), In2.Cu (+3V3), B.Cu (the pair)" in err
    assert "the pair's reference planes there: In2.Cu (+3V3)" in err
    found = spec(tmp_path, "found", plane={"net": "GND"})
    err = refused(hub, capsys, "--pair", *USB, "--spec", found)
    assert "plane.layers = ['In1.Cu'] (found on the board): In2.Cu (+3V3) lies between" in err
    behind = spec(tmp_path, "behind", plane={"layers": ["In2.Cu"], "net": "+3V3"})
    err = refused(hub, capsys, "--pair", *L0, "--spec", behind)
    assert "plane.layers = ['In2.Cu']: In1.Cu (GND) lies between F.Cu and In2.Cu" in err and HUB_LAYERS in err


def test_plane_without_the_net_is_refused(hub, tmp_path, capsys):
    wrong_net = spec(tmp_path, "net", plane={"layers": ["In1.Cu"], "net": "+3V3"})
    err = refused(hub, capsys, "--pair", *L0, "--spec", wrong_net)
    assert "plane.layers = ['In1.Cu']: In1.Cu carries no +3V3 zone under HX2_L0_TX (it has: GND)" in err


def test_stripline_planes_on_one_side_are_refused(stripline, tmp_path, capsys):
    one_side = spec(tmp_path, "side", plane={"layers": ["In3.Cu", "In4.Cu"], "net": "GND"}, stackup=None)
    err = refused(stripline, capsys, "--pair", "HX2_L3_RX_DP", "HX2_L3_RX_DN", "--spec", one_side)
    assert "plane.layers = ['In3.Cu', 'In4.Cu']: both planes lie below In2.Cu" in err
    assert "In1.Cu (GND), In2.Cu (the pair), In3.Cu (GND), In4.Cu (no plane)" in err


def test_stripline_pair_cut_in_one_plane_is_refused(stripline, tmp_path, capsys):
    """A pair between two planes returns its common mode on both (common practice): a cut in one of them alone
    leaves the other plane as an uncut return path, so place refuses instead of writing the half cut."""
    one_plane = spec(tmp_path, "one", plane={"layers": ["In1.Cu"], "net": "GND"}, stackup=None)
    err = refused(stripline, capsys, "--pair", "HX2_L3_RX_DP", "HX2_L3_RX_DN", "--spec", one_plane)
    assert "plane.layers = ['In1.Cu']: HX2_L3_RX is stripline between In1.Cu and In3.Cu: cut both planes" in err


def test_spec_stackup_against_the_board(hub, tmp_path, capsys):
    """er 3.8 / h 0.09 in the spec against the board's 4.1 / 0.1: refused, unless forced; the report says which
    value came from where."""
    mine = spec(tmp_path, "mine", stackup={"er": 3.8, "h": 0.09})
    err = refused(hub, capsys, "--pair", *L0, "--spec", mine)
    assert err.startswith("ebglayout: error: under pair HX2_L0_TX (HX2_L0_TX_P/HX2_L0_TX_N): stackup.er = 3.8: "
                          "the board's stack-up gives 4.1 here")
    assert "--stackup-from-spec" in err
    _, (report,) = placed(hub, capsys, "--pair", *L0, "--spec", mine, "--stackup-from-spec")
    assert report["stackup"]["sources"] == {"stackup.er": "spec", "stackup.h": "spec", "stackup.pair_h": "board",
                                            "stackup.pair_er": "board", "stackup.tan_d": "board"}
    (plane,) = report["stackup"]["planes"]
    assert plane["cavity"] == {"h_mm": 0.09, "er": 3.8, "tan_d": 0.02}
    assert plane["pair"] == {"h_mm": 0.1, "er": 3.9, "tan_d": 0.02}


def test_plan_forces_the_spec_stackup_per_entry_and_names_a_failing_entry(hub, tmp_path, capsys):
    mine = spec(tmp_path, "mine", stackup={"er": 3.8, "h": 0.09})
    plan = tmp_path / "plan.toml"
    plan.write_text(f'[[filter]]\nspec = "{STRAIGHT.as_posix()}"\nmatch = "HX2_L1*"\n\n'
                    f'[[filter]]\nspec = "{mine}"\npair = ["HX2_L0_TX_P", "HX2_L0_TX_N"]\n')
    err = refused(hub, capsys, "--plan", str(plan))
    assert 'plan.toml filter[1] (pair [\'HX2_L0_TX_P\', \'HX2_L0_TX_N\']) under pair HX2_L0_TX ' in err
    assert "stackup.er = 3.8" in err
    plan.write_text(plan.read_text() + "stackup_from_spec = true\n")
    _, reports = placed(hub, capsys, "--plan", str(plan))
    assert sorted(r["stackup"]["sources"]["stackup.er"] for r in reports) == ["board", "spec"]


def test_plan_errors_name_the_entry_and_the_pair(hub, tmp_path, capsys):
    """One entry whose cells do not fit, one that matches nothing: each error names the entry, its selector and
    (when one was chosen) the pair."""
    huge = spec(tmp_path, "huge", cut={"style": "straight", "patch": [4.6, 2.4], "count": 40, "slot": 0.15,
                                       "web": 0.3})
    plan = tmp_path / "plan.toml"
    plan.write_text(f'[[filter]]\nspec = "{STRAIGHT.as_posix()}"\npair = ["HX2_L0_TX_P", "HX2_L0_TX_N"]\n\n'
                    f'[[filter]]\nspec = "{huge}"\nmatch = "HX2_L1*"\n')
    err = refused(hub, capsys, "--plan", str(plan))
    assert err.startswith('ebglayout: error: plan.toml filter[1] (match "HX2_L1*") under pair HX2_L1_RX '
                          "(HX2_L1_RX_P/HX2_L1_RX_N): ")
    plan.write_text(f'[[filter]]\nspec = "{STRAIGHT.as_posix()}"\nmatch = "NOPE*"\n')
    err = refused(hub, capsys, "--plan", str(plan))
    assert err.startswith('ebglayout: error: plan.toml filter[0] (match "NOPE*"): match = NOPE*: matches no')


def test_reference_planes_place_and_fill(pcbnew, hub, stripline, tmp_path, capsys):
    """The accepted cases: a cut in the +3V3 plane under the USB pair, and a stripline cut in both GND planes of the
    6-layer board with plane layers and stack-up found on the board.  KiCad's own fill leaves the designed slots."""
    usb = spec(tmp_path, "usb", plane={"layers": ["In2.Cu"], "net": "+3V3"},
               cut={"style": "straight", "patch": [4.6, 2.4], "count": 2, "slot": 0.15, "web": 0.3})
    out, (report,) = placed(hub, capsys, "--pair", *USB, "--spec", usb)
    assert report["stackup"]["planes"][0]["pair"]["h_mm"] == pytest.approx(1.2)
    reports = placed_slot_reports(pcbnew, out)
    assert [(ref, layer) for ref, layer, _ in reports] == [("FIL1", "In2.Cu")]
    assert_exact_slots(reports[0][2])

    found = spec(tmp_path, "found", plane={"net": "GND"}, stackup=None)
    out, (report,) = placed(stripline, capsys, "--pair", "HX2_L3_RX_DP", "HX2_L3_RX_DN", "--spec", found)
    assert [p["layer"] for p in report["stackup"]["planes"]] == ["In1.Cu", "In3.Cu"]
    assert set(report["stackup"]["sources"].values()) == {"board"}
    reports = placed_slot_reports(pcbnew, out)
    assert [layer for _, layer, _ in reports] == ["In1.Cu", "In3.Cu"]
    for _, _, slot in reports:
        assert_exact_slots(slot)
