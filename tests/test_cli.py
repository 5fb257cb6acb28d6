"""The command line end to end: demo, build, check (table, JSON, JUnit), estimate, size, refine, and file safety."""
from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
from pathlib import Path
from xml.etree import ElementTree as ET

import pytest

from ebglayout.cli import main
from ebglayout.spec import load_spec

from conftest import ROOT, SAMPLE_SPECS

REPORT_KEYS = {"filter", "units", "spec", "stackup", "cells", "crossings", "crossings_by_layer", "min_slot_width",
               "min_copper_width", "gds_layers", "route", "checks", "findings", "estimate", "caution"}
CHECK_KEYS = {"filter", "units", "crossings", "crossings_by_layer", "min_slot_width", "min_copper_width", "summary", "rules",
              "findings"}
FINDING_KEYS = {"rule", "severity", "message", "at", "value", "limit", "layer"}


def test_demo_writes_every_output_for_every_sample(tmp_path, capsys):
    out = tmp_path / "demo"
    assert main(["demo", "--out", str(out)]) == 0
    printed = capsys.readouterr().out
    for path in SAMPLE_SPECS:
        name = load_spec(path).name
        folder = out / name
        assert sorted(p.name for p in folder.iterdir()) == sorted(
            [f"{name}.{ext}" for ext in ("dxf", "gds", "png", "svg", "kicad_mod", "kicad_dru", "report.json", "s4p",
                                         "response.svg", "response.png")])
        report = json.loads((folder / f"{name}.report.json").read_text())
        assert set(report) == REPORT_KEYS
        assert report["crossings"]["P"] == report["crossings"]["N"] > 0
        assert all(set(f) == FINDING_KEYS for f in report["findings"])
        assert report["estimate"]["notch_spread"]["low_hz"] < report["estimate"]["notch_spread"]["high_hz"]
        assert name in printed
    # a second run refuses to overwrite, --force replaces
    assert main(["demo", "--out", str(out)]) == 2
    assert "--force" in capsys.readouterr().err
    assert main(["demo", "--out", str(out), "--force"]) == 0


@pytest.mark.parametrize("path", [SAMPLE_SPECS[0], SAMPLE_SPECS[2]], ids=lambda p: p.stem)
def test_build_is_byte_stable_across_processes(tmp_path, path):
    """Two separate processes with different string-hash seeds write identical bytes in every format.

    Seeds 1 and 4 are two under which ezdxf 1.4.5 lists a DXF's CLASSES in different orders when nothing
    sorts them (it adds them from a set), so this fails for any set- or hash-ordered output.
    """
    for folder, seed in (("a", "1"), ("b", "4")):
        env = dict(os.environ, PYTHONPATH=str(ROOT), PYTHONHASHSEED=seed)
        subprocess.run([sys.executable, "-m", "ebglayout", "build", str(path), "--out", str(tmp_path / folder)],
                       env=env, check=True, capture_output=True)
    written = sorted(f.name for f in (tmp_path / "a").iterdir())
    assert len(written) == 10
    for name in written:
        assert (tmp_path / "a" / name).read_bytes() == (tmp_path / "b" / name).read_bytes(), name


@pytest.mark.parametrize("path", SAMPLE_SPECS, ids=lambda p: p.stem)
def test_check_samples_clean_json_and_junit(tmp_path, capsys, path):
    junit = tmp_path / "rules.xml"
    assert main(["check", str(path), "--json", "--junit", str(junit)]) == 0
    data = json.loads(capsys.readouterr().out)
    assert set(data) == CHECK_KEYS
    assert data["summary"]["errors"] == 0
    assert {r["rule"] for r in data["rules"]} >= {"crossing-count", "slot-width", "copper-width"}
    suite = ET.parse(junit).getroot().find("testsuite")
    cases = suite.findall("testcase")
    assert len(cases) == int(suite.get("tests")) == len(data["rules"])
    assert suite.get("failures") == "0"


def test_check_failure_names_rule_value_limit_and_place(tmp_path, capsys):
    text = SAMPLE_SPECS[0].read_text().replace("min_slot = 0.1", "min_slot = 0.2")
    spec = tmp_path / "tight.toml"
    spec.write_text(text)
    junit = tmp_path / "rules.xml"
    assert main(["check", str(spec), "--junit", str(junit)]) == 1
    out = capsys.readouterr().out
    assert "ERROR   slot-width: In1.Cu: slot 0.15 mm wide (min 0.2 mm) at (" in out
    failing = [c for c in ET.parse(junit).getroot().iter("testcase") if c.find("failure") is not None]
    assert [c.get("name") for c in failing] == ["slot-width"]


def test_strict_turns_warnings_into_failures(tmp_path, capsys):
    text = SAMPLE_SPECS[0].read_text().replace('target = "16Gbps"', 'target = "9GHz"')
    spec = tmp_path / "off.toml"
    spec.write_text(text)
    assert main(["check", str(spec)]) == 0
    assert "WARNING notch-target" in capsys.readouterr().out
    assert main(["check", str(spec), "--strict"]) == 1


def test_estimate_size_refine(capsys):
    bridged = [p for p in SAMPLE_SPECS if "bridged" in p.stem][0]
    assert main(["estimate", str(bridged), "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert len(data["cells"]) == 3 and all("lc_f_hz" in c for c in data["cells"])
    assert main(["size", "--target", "16Gbps", "--er", "4.1", "--json"]) == 0
    sized = json.loads(capsys.readouterr().out)
    # f10 = c / (2 a sqrt(er)) (cavity model) solved for a at 16 GHz, er 4.1: hand-computed 4.6268 mm
    assert sized["patch"][0] == pytest.approx(299792458 / (2 * 16e9 * 4.1 ** 0.5) * 1e3, rel=1e-4)
    assert main(["refine", str(SAMPLE_SPECS[0]), "--observed", "15.2GHz"]) == 0
    assert "patches = [[" in capsys.readouterr().out
    assert main(["size", "--target", "8GHz", "--er", "40"]) == 2


def test_read_only_output_folder_leaves_nothing(tmp_path, capsys):
    """A folder the user may not write: exit 2, one line naming the output, nothing left in it.

    Root ignores folder permissions, so as root (as in CI) the build runs as the unprivileged user nobody
    (util-linux ``setpriv``) on a root-owned folder, which nobody may read but not write.
    """
    if os.geteuid() != 0:
        out = tmp_path / "ro"
        out.mkdir()
        out.chmod(0o500)
        try:
            assert main(["build", str(SAMPLE_SPECS[0]), "--out", str(out)]) == 2
            assert list(out.iterdir()) == []
        finally:
            out.chmod(0o700)
        return
    if shutil.which("setpriv") is None:
        pytest.skip("running as root without util-linux setpriv: cannot drop to an unprivileged user")
    import tempfile

    with tempfile.TemporaryDirectory(prefix="ebglayout-ro-") as folder:
        os.chmod(folder, 0o755)  # nobody may enter it and read, not write
        out = Path(folder) / "out"
        out.mkdir(mode=0o755)
        done = subprocess.run(["setpriv", "--reuid=65534", "--regid=65534", "--clear-groups", "env", f"HOME={folder}",
                               sys.executable, "-m", "ebglayout", "build", str(SAMPLE_SPECS[0]), "--out", str(out)],
                              capture_output=True, text=True, cwd=ROOT, check=False)
        assert done.returncode == 2, done.stderr
        assert "Permission denied" in done.stderr and len(done.stderr.strip().splitlines()) == 1
        assert list(out.iterdir()) == []


def test_failure_inside_a_writer_leaves_no_partial_file(tmp_path, monkeypatch, capsys):
    """A writer that dies half-way (as on a full disk): no output and no temporary file remain."""
    import ebglayout.export.preview as preview

    def broken(*args, **kwargs):
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(preview, "write_png", broken)
    out = tmp_path / "out"
    assert main(["build", str(SAMPLE_SPECS[0]), "--out", str(out)]) == 2
    assert "No space left on device" in capsys.readouterr().err
    assert not out.exists() or list(out.iterdir()) == []


def test_module_entry_point_and_help_need_no_exporters():
    code = ("import sys, runpy; sys.argv = ['ebglayout', '--help']\n"
            "try:\n runpy.run_module('ebglayout', run_name='__main__')\nexcept SystemExit: pass\n"
            "heavy = [m for m in ('ezdxf', 'gdstk', 'PIL', 'scipy') if m in sys.modules]\n"
            "print('HEAVY', heavy)")
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, env=env, check=True).stdout
    assert "usage: ebglayout" in out and "HEAVY []" in out


def test_console_script_is_installed():
    beside = Path(sys.executable).parent / "ebglayout"
    exe = str(beside) if beside.exists() else shutil.which("ebglayout")
    if exe is None:
        pytest.skip("ebglayout is not installed as a command in this environment (tests run from the source tree)")
    out = subprocess.run([exe, "--version"], capture_output=True, text=True, check=True).stdout
    assert out.startswith("ebglayout ")


def test_dxf_written_by_a_forked_process_is_the_same_file(tmp_path, monkeypatch):
    """A large filter's DXF written by a forked child equals the one written in-process; when the child fails,
    the parent writes it itself, and no staged or partial file is left either way."""
    import ebglayout.export.dxf as dxf_module
    import ebglayout.pipeline as pipeline
    from ebglayout.pipeline import build_to_folder

    spec = load_spec(SAMPLE_SPECS[2])
    build_to_folder(spec, tmp_path / "serial", jobs=1)
    monkeypatch.setattr(pipeline, "PARALLEL_DXF_CELLS", 1)
    build_to_folder(spec, tmp_path / "forked", jobs=2)
    parent, write_dxf = os.getpid(), dxf_module.write_dxf

    def fails_in_a_child(*args, **kwargs):
        if os.getpid() != parent:
            raise OSError("disk full")
        return write_dxf(*args, **kwargs)

    monkeypatch.setattr(dxf_module, "write_dxf", fails_in_a_child)
    build_to_folder(spec, tmp_path / "fallback", jobs=2)
    names = sorted(p.name for p in (tmp_path / "serial").iterdir())
    for folder in ("forked", "fallback"):
        assert sorted(p.name for p in (tmp_path / folder).iterdir()) == names
        for name in names:
            assert (tmp_path / folder / name).read_bytes() == (tmp_path / "serial" / name).read_bytes(), name
