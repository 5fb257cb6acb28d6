"""``refine SPEC --result FILE.json``: the observed notch read from a result file (built here by response_json from a
synthetic scikit-rf network whose common-mode notch sits where a shunt series-LC resonates, f0 = 1 / (2 pi sqrt(LC))),
giving the same correction as ``--observed`` with that frequency, and one-line errors for files that cannot serve."""
from __future__ import annotations

import json

import pytest

from conftest import ROOT
from ebglayout.cli import main
from ebglayout.response import response_json, response_json_text
from ebglayout.sparams import mixed_mode
from test_response import common_mode_notch_network

SPEC = str(ROOT / "samples" / "hx2_l2_tx_bridged.toml")


def write_result(tmp_path, f0: float, name: str = "result.json", **grid) -> tuple:
    network, _, _ = common_mode_notch_network(f0, **grid)
    data = response_json(mixed_mode(network), source="model: test resonator network", target_hz=8e9)
    path = tmp_path / name
    path.write_text(response_json_text(data))
    return path, data


def test_refine_from_a_result_file_matches_refine_from_the_same_frequency(tmp_path, capsys):
    path, data = write_result(tmp_path, 7.4e9)
    notch = data["scc21"]["notch_hz"]
    assert notch == pytest.approx(7.4e9, abs=1e6)  # 50 MHz grid; the vertex of |S|^2 finds the resonance
    assert main(["refine", SPEC, "--result", str(path), "--json"]) == 0
    from_file = json.loads(capsys.readouterr().out)
    assert main(["refine", SPEC, "--observed", f"{notch / 1e9!r}GHz", "--json"]) == 0
    from_value = json.loads(capsys.readouterr().out)
    assert from_file["patches"] == from_value["patches"]
    assert from_file["observed_hz"] == pytest.approx(notch, abs=500)  # refine reports to 1 kHz
    assert from_file["observed_from"] == {"file": str(path), "source": "model: test resonator network"}
    assert from_file["factor"] == pytest.approx(8e9 / notch, rel=1e-9)
    assert main(["refine", SPEC, "--result", str(path)]) == 0
    text = capsys.readouterr().out
    assert text.startswith(f"observed notch from {path} (model: test resonator network)")
    assert "\npatches = [" in text


def test_result_files_that_cannot_serve_are_one_line_errors(tmp_path, capsys):
    path, data = write_result(tmp_path, 7.4e9)
    del data["scc21"]["notch_hz"]
    no_key = tmp_path / "no_key.json"
    no_key.write_text(json.dumps(data))
    edge, _ = write_result(tmp_path, 7.0e9, "edge.json", start_ghz=7.5, stop_ghz=10.0, points=51)
    bad = tmp_path / "bad.json"
    bad.write_text("{\"scc21\": ")
    cases = [(no_key, f"--result = {no_key}: has no key scc21.notch_hz"),
             (edge, f"--result = {edge}: scc21.notch_hz = 7.5 GHz lies on the edge of the sweep"),
             (bad, f"--result = {bad}: not JSON (line 1, column 11"),
             (tmp_path / "missing.json", f"--result = {tmp_path / 'missing.json'}: cannot be read")]
    for file, message in cases:
        assert main(["refine", SPEC, "--result", str(file)]) == 2
        captured = capsys.readouterr()
        assert captured.out == ""
        assert captured.err.startswith(f"ebglayout: error: {message}") and captured.err.count("\n") == 1
    with pytest.raises(SystemExit) as both:
        main(["refine", SPEC, "--result", str(path), "--observed", "7GHz"])
    assert both.value.code == 2


def test_a_shallow_notch_is_used_but_flagged(tmp_path, capsys):
    network, _, _ = common_mode_notch_network(7.4e9)
    data = response_json(mixed_mode(network), source="model: test resonator network", target_hz=8e9,
                         threshold_db=-60.0)  # deeper than this resonator's notch: no stopband
    assert data["scc21"]["stopband_hz"] is None
    path = tmp_path / "shallow.json"
    path.write_text(response_json_text(data))
    assert main(["refine", SPEC, "--result", str(path)]) == 0
    out = capsys.readouterr().out
    assert f"note: the notch is shallow ({data['scc21']['depth_db']:g} dB, never at the file's threshold)" in out
