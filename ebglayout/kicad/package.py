"""Build the Plugin and Content Manager (PCM) zip for KiCad: metadata.json, plugins/ (the action plugin plus ebglayout).

Layout and fields follow KiCad's PCM package schema (v1): the zip root holds
metadata.json, plugins/ and resources/ only.  Byte-stable: fixed file order and
timestamps, so the same source gives the same zip and the same SHA-256.
"""
from __future__ import annotations

import hashlib
import json
import zipfile
from pathlib import Path

from .. import CAUTION, __version__
from ..outputs import StagedOutputs

IDENTIFIER = "io.github.ebglayout.planecut"
FIXED_TIME = (2000, 1, 1, 0, 0, 0)
ROOT = Path(__file__).resolve().parent.parent.parent


def metadata(version: str = __version__) -> dict:
    return {
        "$schema": "https://go.kicad.org/pcm/schemas/v1",
        "name": "ebglayout plane-cut filters",
        "description": "Places etched plane-cut (EBG) common-mode filters under differential pairs and checks them.",
        "description_full": (
            "Select a differential pair's track, run the action and pick an ebglayout spec: the filter's patches, "
            "slots and rule areas appear under the pair in its reference plane(s), with a custom rule that makes "
            "KiCad's zone fill reproduce the cut exactly, and the checks' findings. A second action re-checks every "
            "filter on the board. Needs numpy, shapely, ezdxf, gdstk, scipy and Pillow in KiCad's Python. "
            f"{CAUTION}."),
        "identifier": IDENTIFIER,
        "type": "plugin",
        "author": {"name": "ebglayout developers", "contact": {}},
        "license": "MIT",
        "resources": {},
        "tags": ["emc", "signal-integrity", "differential-pair", "plane"],
        "versions": [{"version": version, "status": "testing", "kicad_version": "6.0"}],
    }


def package_files() -> list[tuple[str, Path]]:
    """(name in zip, source path) for every file the package carries, sorted."""
    files: list[tuple[str, Path]] = []
    sources = ((ROOT / "kicad_plugin", "plugins"), (ROOT / "ebglayout", "plugins/ebglayout"),
               (ROOT / "samples", "plugins/ebglayout/samples"))
    for folder, prefix in sources:
        for path in sorted(folder.rglob("*")):
            if path.is_file() and "__pycache__" not in path.parts and path.suffix in (".py", ".png", ".toml", ".kicad_pcb"):
                files.append((f"{prefix}/{path.relative_to(folder).as_posix()}", path))
    return sorted(files)


def build_package(out_dir: str | Path, force: bool = False) -> tuple[Path, str]:
    """Write ebglayout-<version>-pcm.zip into ``out_dir``; return its path and SHA-256."""
    name = f"ebglayout-{__version__}-pcm.zip"
    with StagedOutputs(out_dir, force=force, inputs=[src for _, src in package_files()]) as staged:
        staged.require_free([name, "repository-entry.json"])
        with staged.writing(name) as zip_path, \
                zipfile.ZipFile(zip_path, "w", compression=zipfile.ZIP_DEFLATED) as archive:
            entries = [("metadata.json", json.dumps(metadata(), indent=2).encode() + b"\n")]
            entries += [(arc, src.read_bytes()) for arc, src in package_files()]
            for arc, data in entries:
                info = zipfile.ZipInfo(arc, date_time=FIXED_TIME)
                info.external_attr = 0o644 << 16
                info.compress_type = zipfile.ZIP_DEFLATED
                archive.writestr(info, data)
        data = zip_path.read_bytes()
        digest = hashlib.sha256(data).hexdigest()
        entry = metadata()
        entry["versions"][0].update({"download_sha256": digest, "download_size": len(data),
                                     "install_size": sum(src.stat().st_size for _, src in package_files())})
        staged.write_text("repository-entry.json", json.dumps(entry, indent=2) + "\n")
    return Path(out_dir) / name, digest
