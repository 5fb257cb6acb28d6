"""Where the bundled sample files are: installed with the package, or beside it in a source checkout."""
from __future__ import annotations

from pathlib import Path


def samples_folder() -> Path:
    """The samples folder: ``ebglayout.samples`` when installed (pyproject maps samples/ there), else the checkout's."""
    installed = Path(__file__).resolve().parent / "samples"
    if installed.is_dir():
        return installed
    return Path(__file__).resolve().parent.parent / "samples"


def sample_specs() -> list[Path]:
    """Every bundled spec, sorted by name."""
    return sorted(samples_folder().glob("*.toml"))
