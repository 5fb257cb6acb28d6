"""The Plugin and Content Manager package: validated against the PCM schema KiCad itself ships, zip layout per the PCM docs."""
from __future__ import annotations

import json
import zipfile
from pathlib import Path

import pytest

from ebglayout.cli import main

KICAD_SCHEMA = Path("/usr/share/kicad/schemas/pcm.v1.schema.json")


def test_package_zip_layout_metadata_and_stability(tmp_path, capsys):
    assert main(["kicad-package", "--out", str(tmp_path / "a")]) == 0
    assert main(["kicad-package", "--out", str(tmp_path / "b")]) == 0
    capsys.readouterr()
    (zip_a,) = (tmp_path / "a").glob("*.zip")
    (zip_b,) = (tmp_path / "b").glob("*.zip")
    assert zip_a.read_bytes() == zip_b.read_bytes()
    with zipfile.ZipFile(zip_a) as archive:
        names = archive.namelist()
        metadata = json.loads(archive.read("metadata.json"))
    # PCM docs: the zip root holds metadata.json, plugins/ and optionally resources/, nothing else
    assert {n.split("/")[0] for n in names} <= {"metadata.json", "plugins", "resources"}
    assert "plugins/__init__.py" in names and "plugins/plugin.py" in names and "plugins/icon.png" in names
    assert "plugins/ebglayout/layout.py" in names
    entry = json.loads((tmp_path / "a" / "repository-entry.json").read_text())
    assert entry["versions"][0]["download_size"] == zip_a.stat().st_size
    if not KICAD_SCHEMA.exists():
        pytest.skip("KiCad's PCM schema is not installed (Debian package 'kicad'); layout checked, schema not")
    jsonschema = pytest.importorskip("jsonschema")
    schema = json.loads(KICAD_SCHEMA.read_text())
    jsonschema.validate(metadata, schema)
    jsonschema.validate(entry, schema)
