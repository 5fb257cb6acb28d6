"""The README's generated sections match the code (regenerate with `python tools/gen_docs.py`)."""
from __future__ import annotations

import importlib.util
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent


def test_readme_generated_sections_are_current():
    spec = importlib.util.spec_from_file_location("gen_docs", ROOT / "tools" / "gen_docs.py")
    gen_docs = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(gen_docs)
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    assert gen_docs.render(text) == text, "README is stale: run python tools/gen_docs.py"


def test_readme_lists_every_command():
    from ebglayout.cli import COMMANDS

    text = (ROOT / "README.md").read_text(encoding="utf-8")
    for name in COMMANDS:
        assert f"`ebglayout {name}" in text, name
