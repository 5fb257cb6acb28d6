"""Output safety: never over an input, one winner between concurrent runs (two real processes), a killed run's
leftovers cleared by the next, a forked writer that dies with its parent, the demo all or nothing, and write
errors that name the output the user asked for.  The outside reference for the process tests is the operating
system itself: real processes, SIGKILL, and /proc (Linux) for whether a process still runs."""
from __future__ import annotations

import os
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from ebglayout.cli import main
from ebglayout.pipeline import output_names
from ebglayout.spec import load_spec

from conftest import ROOT, SAMPLES, SAMPLE_SPECS

STRAIGHT = SAMPLES / "hx2_l0_tx_straight.toml"
BOARD = SAMPLES / "hx2_hub.kicad_pcb"
NAME = "hx2_l0_tx_straight"

RUNNER = """
import os, pathlib, sys, time
import importlib
ready, seconds, target = sys.argv[1], float(sys.argv[2]), sys.argv[3]
module_name, _, func = target.rpartition(".")
module = importlib.import_module(module_name)
original, parent = getattr(module, func), os.getpid()
def slow(*args, **kwargs):
    if func == "write_dxf" and os.getpid() == parent:
        return original(*args, **kwargs)
    if func == "write_gds":
        pathlib.Path(args[1]).write_bytes(b"0" * 1_000_000)
    pathlib.Path(ready).write_text(str(os.getpid()))
    deadline = time.monotonic() + seconds
    while time.monotonic() < deadline and not pathlib.Path(ready + ".go").exists():
        time.sleep(0.02)
    return original(*args, **kwargs)
setattr(module, func, slow)
if func == "write_dxf":
    import ebglayout.pipeline
    ebglayout.pipeline.PARALLEL_DXF_CELLS = 1
from ebglayout.cli import main
sys.exit(main(sys.argv[4:]))
"""
"""Runs the CLI with one function held: it writes its pid to ``ready`` and waits until ``ready.go`` exists (at most
``seconds``), so a test can act while the run holds its outputs, however slow the machine (write_gds also writes
1 MB first; write_dxf is held only in a forked child)."""


def slowed(tmp_path: Path, target: str, argv: list[str], seconds: float = 60.0) -> tuple[subprocess.Popen, int]:
    """Start the CLI in a process with ``target`` held; return it and the pid that reached the held call.
    ``release(proc)`` lets it go on."""
    ready = tmp_path / f"ready-{time.monotonic_ns()}"
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    proc = subprocess.Popen([sys.executable, "-c", RUNNER, str(ready), str(seconds), target, *argv], env=env,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    deadline = time.monotonic() + 60
    while not (ready.exists() and ready.read_text()):
        assert proc.poll() is None, proc.communicate()
        assert time.monotonic() < deadline, "the slowed run never reached its slow call"
        time.sleep(0.02)
    proc.ready = ready
    return proc, int(ready.read_text())


def release(proc: subprocess.Popen) -> int:
    """Let a held run go on; its exit code."""
    Path(f"{proc.ready}.go").touch()
    return proc.wait(60)


def cli(*argv: str) -> subprocess.CompletedProcess:
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    return subprocess.run([sys.executable, "-m", "ebglayout", *argv], env=env, capture_output=True, text=True)


def listing(folder: Path) -> list[str]:
    return sorted(str(p.relative_to(folder)) for p in folder.rglob("*")) if folder.exists() else []


# ---- never over an input ----

def _spec_as(tmp_path: Path, name: str) -> Path:
    """The straight sample at ``tmp_path / name``, without its name key (so its outputs are named after it)."""
    path = tmp_path / name
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(STRAIGHT.read_text().replace(f'name = "{NAME}"\n', ""))
    return path


def _junit_is_spec(tmp_path):
    spec = _spec_as(tmp_path, "s.toml")
    return ["check", str(spec), "--junit", str(spec)], spec


def _junit_is_spec_through_dotdot(tmp_path):
    spec = _spec_as(tmp_path, "s.toml")
    (tmp_path / "sub").mkdir()
    return ["check", str(spec), "--junit", str(tmp_path / "sub" / ".." / "s.toml")], spec


def _junit_is_board(tmp_path):
    board = tmp_path / "b.kicad_pcb"
    shutil.copyfile(BOARD, board)
    return ["check", "--board", str(board), "--junit", str(board)], board


def _junit_is_the_board_rules(tmp_path):
    board = tmp_path / "b.kicad_pcb"
    shutil.copyfile(BOARD, board)
    rules = board.with_suffix(".kicad_dru")
    rules.write_text("(version 1)\n")
    return ["check", "--board", str(board), "--junit", str(rules)], rules


def _spec_is_an_output_name(tmp_path):
    spec = _spec_as(tmp_path, "out/hx2.kicad_mod")  # its name is its stem, so the footprint would replace it
    return ["build", str(spec), "--out", str(tmp_path / "out"), "--force"], spec


def _output_is_a_symlink_to_the_spec(tmp_path):
    spec = _spec_as(tmp_path, "s.toml")
    (tmp_path / "out").mkdir()
    (tmp_path / "out" / "s.gds").symlink_to(spec)
    return ["build", str(spec), "--out", str(tmp_path / "out"), "--force"], spec


def _output_is_a_hard_link_to_the_spec(tmp_path):
    spec = _spec_as(tmp_path, "s.toml")
    (tmp_path / "out").mkdir()
    os.link(spec, tmp_path / "out" / "s.gds")
    return ["build", str(spec), "--out", str(tmp_path / "out"), "--force"], spec


def _place_rules_over_the_spec(tmp_path):
    board = tmp_path / "b.kicad_pcb"
    shutil.copyfile(BOARD, board)
    spec = _spec_as(tmp_path, "x.kicad_dru")  # the new board's rules are written beside it as x.kicad_dru
    return ["place", str(board), "--pair", "HX2_L0_TX_P", "HX2_L0_TX_N", "--spec", str(spec),
            "--out", str(tmp_path / "x.kicad_pcb"), "--force"], spec


def _place_artifacts_over_the_spec(tmp_path):
    board = tmp_path / "b.kicad_pcb"
    shutil.copyfile(BOARD, board)
    folder = "HX2_L0_TX_s"
    spec = _spec_as(tmp_path, f"art/{folder}/{folder}.report.json")
    os.rename(spec, spec.with_name("s.toml"))
    spec = spec.with_name("s.toml")
    (spec.parent / f"{folder}.report.json").symlink_to(spec)
    return ["place", str(board), "--pair", "HX2_L0_TX_P", "HX2_L0_TX_N", "--spec", str(spec),
            "--out", str(tmp_path / "new.kicad_pcb"), "--artifacts", str(tmp_path / "art"), "--force"], spec


@pytest.mark.parametrize("case", [_junit_is_spec, _junit_is_spec_through_dotdot, _junit_is_board,
                                  _junit_is_the_board_rules,
                                  _spec_is_an_output_name, _output_is_a_symlink_to_the_spec,
                                  _output_is_a_hard_link_to_the_spec, _place_rules_over_the_spec,
                                  _place_artifacts_over_the_spec], ids=lambda f: f.__name__.strip("_"))
def test_no_command_writes_over_its_input(tmp_path, capsys, case):
    argv, source = case(tmp_path)
    before, files = source.read_bytes(), listing(tmp_path)
    assert main(argv) == 2
    captured = capsys.readouterr()
    assert captured.err.count("\n") == 1 and "never writes over its input" in captured.err, captured.err
    assert source.read_bytes() == before
    assert listing(tmp_path) == files


# ---- names, concurrency, leftovers ----

def test_two_filters_share_a_folder(tmp_path, capsys):
    out = tmp_path / "out"
    names = [load_spec(p).name for p in SAMPLE_SPECS[:2]]
    for path in SAMPLE_SPECS[:2]:
        assert main(["build", str(path), "--out", str(out)]) == 0
    assert listing(out) == sorted(n for name in names for n in output_names(name))
    assert f"{names[0]}.report.json" in capsys.readouterr().out


def test_of_two_builds_into_one_folder_one_wins_and_the_other_says_why(tmp_path):
    """Both with --force over an older set of the same names: the slow first run holds the outputs, the second
    stops with exit 2 naming the other run, and the folder holds exactly the first run's set."""
    other = tmp_path / "other.toml"
    text = STRAIGHT.read_text()
    assert "count = 3" in text, "the sample spec no longer has count = 3; pick another difference"
    other.write_text(text.replace("count = 3", "count = 2"))
    out, reference = tmp_path / "out", tmp_path / "reference"
    assert cli("build", str(other), "--out", str(out)).returncode == 0
    first, _ = slowed(tmp_path, "ebglayout.pipeline.make_filter", ["build", str(STRAIGHT), "--out", str(out),
                                                                     "--force", "--jobs", "1"])
    second = cli("build", str(other), "--out", str(out), "--force")
    assert release(first) == 0
    assert second.returncode == 2
    assert "another ebglayout run" in second.stderr and second.stderr.count("\n") == 1
    assert cli("build", str(STRAIGHT), "--out", str(reference)).returncode == 0
    assert listing(out) == listing(reference)
    for name in listing(out):
        assert (out / name).read_bytes() == (reference / name).read_bytes(), name


def test_of_two_new_builds_only_one_succeeds(tmp_path):
    """Without --force neither output exists yet when both start: the existence check and the write are one
    locked step, so the second does not also succeed."""
    out = tmp_path / "out"
    first, _ = slowed(tmp_path, "ebglayout.pipeline.make_filter", ["build", str(STRAIGHT), "--out", str(out)])
    second = cli("build", str(STRAIGHT), "--out", str(out))
    assert release(first) == 0
    assert second.returncode == 2 and "another ebglayout run" in second.stderr
    assert listing(out) == sorted(output_names(NAME))


def test_of_two_place_runs_to_one_board_one_wins(tmp_path):
    board = tmp_path / "b.kicad_pcb"
    shutil.copyfile(BOARD, board)
    argv = ["place", str(board), "--pair", "HX2_L0_TX_P", "HX2_L0_TX_N", "--spec", str(STRAIGHT),
            "--out", str(tmp_path / "new.kicad_pcb")]
    first, _ = slowed(tmp_path, "ebglayout.kicad.place.plan_placement", argv)
    second = cli(*argv)
    assert release(first) == 0
    assert second.returncode == 2 and "another ebglayout run" in second.stderr
    assert (tmp_path / "new.kicad_pcb").exists() and (tmp_path / "new.kicad_dru").exists()


def test_a_killed_run_leaves_named_leftovers_that_the_next_run_clears(tmp_path):
    out = tmp_path / "out"
    proc, _ = slowed(tmp_path, "ebglayout.export.gds.write_gds", ["build", str(STRAIGHT), "--out", str(out),
                                                                  "--jobs", "1"])
    proc.send_signal(signal.SIGKILL)
    proc.wait(10)
    (out / f".{NAME}.png.k3x9q1.part").write_bytes(b"0" * 1000)  # as versions before the lock named them
    left = [n for n in listing(out) if ".ebglayout-unfinished-" in n]
    assert sorted(n.split(".ebglayout-unfinished-")[0] for n in left) == [f"{NAME}.dxf", f"{NAME}.gds"]
    assert (out / left[1]).stat().st_size == 1_000_000
    again = cli("build", str(STRAIGHT), "--out", str(out))
    assert again.returncode == 0, again.stderr
    assert "removed 3 unfinished file(s)" in again.stderr
    assert listing(out) == sorted(output_names(NAME))


def _alive(pid: int) -> bool:
    """Whether ``pid`` still runs: /proc/<pid>/stat exists and its state is not Z (zombie) or X (dead)."""
    try:
        stat = Path(f"/proc/{pid}/stat").read_text()
    except (FileNotFoundError, ProcessLookupError):
        return False
    return stat.rsplit(")", 1)[1].split()[0] not in ("Z", "X")


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="the DXF is written by a forked child only on Linux")
def test_the_forked_dxf_writer_dies_with_its_killed_parent(tmp_path):
    out = tmp_path / "out"
    parent, child = slowed(tmp_path, "ebglayout.export.dxf.write_dxf", ["build", str(STRAIGHT), "--out", str(out),
                                                                        "--jobs", "2"])
    assert child != parent.pid and _alive(child)
    parent.send_signal(signal.SIGKILL)
    parent.wait(10)
    deadline = time.monotonic() + 5
    while _alive(child) and time.monotonic() < deadline:
        time.sleep(0.02)
    assert not _alive(child), "the forked writer outlived its killed parent"
    assert not any(p.name.endswith(f".ebglayout-unfinished-{child}") for p in out.iterdir())


# ---- the demo ----

def test_demo_refuses_existing_outputs_where_it_writes_them(tmp_path, capsys):
    out = tmp_path / "demo"
    existing = out / NAME / f"{NAME}.dxf"
    existing.parent.mkdir(parents=True)
    existing.write_text("mine")
    assert main(["demo", "--out", str(out)]) == 2
    assert str(existing) in capsys.readouterr().err
    assert listing(out) == [NAME, f"{NAME}/{NAME}.dxf"] and existing.read_text() == "mine"


def test_demo_is_all_or_nothing(tmp_path, monkeypatch, capsys):
    import ebglayout.pipeline as pipeline

    write_filter, calls = pipeline.write_filter, []

    def fails_on_the_third(result, staged, **kwargs):
        calls.append(result.name)
        if len(calls) == 3:
            raise OSError(28, "No space left on device")
        write_filter(result, staged, **kwargs)

    monkeypatch.setattr(pipeline, "write_filter", fails_on_the_third)
    assert main(["demo", "--out", str(tmp_path / "demo")]) == 2
    assert "No space left on device" in capsys.readouterr().err
    assert len(calls) == 3 and listing(tmp_path / "demo") == []


# ---- messages ----

@pytest.mark.parametrize("filename", [None, "staged"], ids=["no-file-named", "staged-file-named"])
def test_a_write_error_names_the_output_asked_for(tmp_path, monkeypatch, capsys, filename):
    """As on a full disk (ENOSPC from write() names no file) or a failed open of the staged file."""
    import ebglayout.export.gds as gds

    def full(layout, path):
        raise OSError(28, "No space left on device", str(path) if filename else None)

    monkeypatch.setattr(gds, "write_gds", full)
    out = tmp_path / "out"
    assert main(["build", str(STRAIGHT), "--out", str(out)]) == 2
    err = capsys.readouterr().err
    assert err == f"ebglayout: error: cannot write {out / NAME}.gds: No space left on device\n"
    assert listing(out) == []


def test_size_names_a_bad_bridge_count(capsys):
    assert main(["size", "--target", "8GHz", "--er", "4.1", "--style", "bridged", "--bridge", "0.12,0.6,two"]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "0.12,0.6,two" in err and "PER_SIDE = two" in err
