"""The ``fullwave`` command: refusals without the engine or with bad options, and one small live run."""
from __future__ import annotations

import json
import os
from pathlib import Path

import numpy as np
import pytest

from ebglayout.cli import main

from conftest import SAMPLES


def _one_cell_spec(tmp_path):
    text = (SAMPLES / "hx2_l0_tx_straight.toml").read_text()
    text = text.replace("count = 3", "count = 1")
    path = tmp_path / "one_cell.toml"
    path.write_text(text)
    return path


def test_missing_engine_is_one_line_and_exit_2(tmp_path, monkeypatch, capsys):
    """Without openEMS the command says what to install, in one line, exits 2 and writes nothing."""
    monkeypatch.setenv("PATH", str(tmp_path / "empty"))
    monkeypatch.delenv("EBGLAYOUT_OPENEMS", raising=False)
    out = tmp_path / "out"
    code = main(["fullwave", str(_one_cell_spec(tmp_path)), "--out", str(out), "--preset", "fast"])
    err = capsys.readouterr().err.strip()
    assert code == 2
    assert len(err.splitlines()) == 1 and "apt-get install openems python3-openems" in err
    assert not out.exists()


@pytest.mark.parametrize("args, key", [(["--threads", "0"], "--threads"), (["--time-limit", "-1"], "--time-limit")])
def test_bad_options(tmp_path, capsys, args, key):
    code = main(["fullwave", str(_one_cell_spec(tmp_path)), "--out", str(tmp_path / "o"), *args])
    err = capsys.readouterr().err.strip()
    assert code == 2 and key in err and len(err.splitlines()) == 1


def test_existing_output_refused_before_the_run(tmp_path, capsys, openems):
    """An existing output is refused before any engine run (no --force), and nothing else is written."""
    out = tmp_path / "out"
    out.mkdir()
    (out / "hx2_l0_tx_straight.s4p").write_text("mine")
    code = main(["fullwave", str(_one_cell_spec(tmp_path)), "--out", str(out), "--preset", "fast"])
    assert code == 2 and "--force" in capsys.readouterr().err
    assert sorted(p.name for p in out.iterdir()) == ["hx2_l0_tx_straight.s4p"]
    assert (out / "hx2_l0_tx_straight.s4p").read_text() == "mine"


def test_live_run_writes_touchstone_json_and_plot(tmp_path, capsys, openems):
    """A one-cell fast run writes a Touchstone file scikit-rf reads back as a 4-port at 50 ohm, the result JSON
    with the full-wave metadata, and the plot; the run folder is gone without --keep-run."""
    import skrf

    out = tmp_path / "out"
    code = main(["fullwave", str(_one_cell_spec(tmp_path)), "--out", str(out), "--preset", "fast"])
    assert code == 0, capsys.readouterr().err
    names = sorted(p.name for p in out.iterdir())
    assert names == ["hx2_l0_tx_straight.fullwave.json", "hx2_l0_tx_straight.fullwave.png",
                     "hx2_l0_tx_straight.fullwave.svg", "hx2_l0_tx_straight.s4p"]
    net = skrf.Network(str(out / "hx2_l0_tx_straight.s4p"))
    assert net.nports == 4 and np.allclose(net.z0, 50.0)
    data = json.loads((out / "hx2_l0_tx_straight.fullwave.json").read_text())
    assert data["source"].startswith("full-wave: openEMS")
    assert data["fullwave"]["preset"] == "fast" and data["fullwave"]["symmetry"].startswith("half domain")
    assert "compliance" in data["caution"]


def test_ctrl_c_stops_the_engine_and_writes_nothing(tmp_path, openems):
    """SIGINT during an engine run: exit 130 with one line, no output files, the engine process gone."""
    import os
    import signal
    import subprocess
    import sys
    import time

    out = tmp_path / "out"
    keep = out / "hx2_l0_tx_straight.fullwave-run"
    proc = subprocess.Popen([sys.executable, "-m", "ebglayout", "fullwave", str(_one_cell_spec(tmp_path)), "--out",
                             str(out), "--preset", "fine", "--keep-run"], stderr=subprocess.PIPE, text=True)
    deadline = time.monotonic() + 120
    engine_pids: list[int] = []
    while time.monotonic() < deadline and not engine_pids:
        time.sleep(0.2)
        engine_pids = [int(p) for p in os.listdir("/proc") if p.isdigit() and _cwd(p) == str(keep / "even-near")]
    proc.send_signal(signal.SIGINT)
    err = proc.communicate(timeout=60)[1].strip()
    assert proc.returncode == 130 and err.splitlines() == ["ebglayout: interrupted"], err
    assert not [p for p in out.glob("hx2_l0_tx_straight.*") if p.is_file()]
    assert engine_pids and not any(Path(f"/proc/{pid}").exists() for pid in engine_pids)


def _cwd(pid: str) -> str:
    try:
        return os.readlink(f"/proc/{pid}/cwd")
    except OSError:
        return ""


def test_time_limit_stops_the_run_and_writes_nothing(tmp_path, capsys, openems):
    """--time-limit reached: one line naming the option, exit 2, no outputs."""
    out = tmp_path / "out"
    code = main(["fullwave", str(_one_cell_spec(tmp_path)), "--out", str(out), "--preset", "fine",
                 "--time-limit", "0.1"])
    err = capsys.readouterr().err.strip()
    assert code == 2 and "--time-limit" in err and len(err.splitlines()) == 1
    assert not out.exists() or not list(out.iterdir())
