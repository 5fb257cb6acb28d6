"""A bounded run of the fuzz campaign (tools/fuzz.py): seeded spec and board mutants through the CLI.

Each mutant runs in a forked child with a time limit.  Every run must end with exit 0, 1 or 2 (never an internal
error, a crash or a hang), an exit 2 with exactly one printable error line (naming the board file for boards),
no partial output, an unchanged input, and `check` and `build` must agree on whether a spec is acceptable.
`python tools/fuzz.py --specs 2000 --boards 700` is the long campaign.
"""
from __future__ import annotations

import importlib.util
import sys

import pytest

from conftest import ROOT

pytestmark = pytest.mark.skipif(not sys.platform.startswith("linux"), reason="the campaign forks a child per case")


def _fuzz_module():
    spec = importlib.util.spec_from_file_location("ebglayout_fuzz", ROOT / "tools" / "fuzz.py")
    module = importlib.util.module_from_spec(spec)
    sys.modules[spec.name] = module  # dataclasses look their module up there
    spec.loader.exec_module(module)
    return module


def test_seeded_mutants_keep_every_bad_input_promise(tmp_path):
    fuzz = _fuzz_module()
    outcomes = fuzz.campaign(specs=200, boards=80, seed=20261205, timeout=30.0, work=tmp_path)
    failures = [f"{o.case.kind} {o.case.index} {o.command} ({'+'.join(o.case.mutations)} of {o.case.source.name}): "
                f"{'; '.join(o.problems)}: {o.stderr.strip()[-300:]}" for o in outcomes if o.problems]
    assert not failures, "\n".join(failures[:20]) + "\n" + fuzz.summary(outcomes)
    codes = {o.code for o in outcomes}
    assert 2 in codes and codes & {0, 1}, fuzz.summary(outcomes)  # the mutants reach both sides of validation


def test_mutants_are_seeded():
    fuzz = _fuzz_module()
    first = [c.data for c in fuzz.make_cases(30, 10, 7, None)]
    assert first == [c.data for c in fuzz.make_cases(30, 10, 7, None)]
    assert len(set(first)) > 30  # mutations do change the files
