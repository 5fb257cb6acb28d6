"""Shared fixtures: the bundled samples, their layouts, and KiCad's pcbnew module when it can be had."""
from __future__ import annotations

import os
import sys
from pathlib import Path

import pytest

from ebglayout.layout import build_layout
from ebglayout.spec import load_spec

ROOT = Path(__file__).resolve().parent.parent
SAMPLES = ROOT / "samples"
SAMPLE_SPECS = sorted(SAMPLES.glob("*.toml"))
DEBIAN_DIST_PACKAGES = "/usr/lib/python3/dist-packages"


def pytest_configure(config):
    config.addinivalue_line(
        "markers", "kicad: KiCad-backed (uses the pcbnew fixture or lives in test_kicad_*.py); "
        "tools/kicad9-root.sh runs these again under Debian 13's KiCad with -m kicad")


def pytest_collection_modifyitems(items):
    """Mark every KiCad-backed test, so another KiCad can run exactly that set."""
    for item in items:
        if "pcbnew" in getattr(item, "fixturenames", ()) or item.path.name.startswith("test_kicad_"):
            item.add_marker(pytest.mark.kicad)


@pytest.fixture(scope="session")
def sample_layouts():
    """name -> Layout for every bundled sample spec."""
    return {p.stem: build_layout(load_spec(p)) for p in SAMPLE_SPECS}


def load_pcbnew():
    """Import KiCad's pcbnew, adding Debian's dist-packages when the Python minor version matches.

    Returns (module, None) or (None, reason).  Debian builds pcbnew for its own
    python3, so another interpreter can load it only at the same minor version.
    """
    try:
        import pcbnew  # noqa: F401
        return sys.modules["pcbnew"], None
    except ImportError:
        pass
    if Path(DEBIAN_DIST_PACKAGES, "pcbnew.py").exists() and DEBIAN_DIST_PACKAGES not in sys.path:
        sys.path.append(DEBIAN_DIST_PACKAGES)
        try:
            import pcbnew  # noqa: F401
            return sys.modules["pcbnew"], None
        except ImportError as err:
            sys.path.remove(DEBIAN_DIST_PACKAGES)
            return None, f"KiCad's pcbnew is installed but does not load in Python {sys.version.split()[0]} ({err})"
    return None, "KiCad's pcbnew module is not installed (Debian package 'kicad')"


@pytest.fixture(scope="session")
def pcbnew():
    """KiCad's pcbnew module; skips with the reason, or fails when the test runner promised KiCad."""
    module, reason = load_pcbnew()
    if module is None:
        if os.environ.get("EBGLAYOUT_REQUIRE_KICAD") == "1":
            pytest.fail(f"KiCad was installed for this run but cannot be used: {reason}")
        pytest.skip(reason)
    return module


@pytest.fixture(scope="session")
def openems():
    """The openEMS executable; skips with the reason, or fails when the test runner promised openEMS."""
    from ebglayout.fullwave.openems import EngineMissing, find_engine

    try:
        return find_engine()
    except EngineMissing as err:
        if os.environ.get("EBGLAYOUT_REQUIRE_OPENEMS") == "1":
            pytest.fail(f"openEMS was installed for this run but cannot be used: {err}")
        pytest.skip(str(err))
