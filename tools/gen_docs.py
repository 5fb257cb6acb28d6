"""Regenerate the README's generated sections (spec keys, rule list, model versus full-wave) from the code.

Run ``python tools/gen_docs.py`` after changing ebglayout/spec.py PARAMETERS or
ebglayout/checks/rules.py RULES, the rejection model or the stored full-wave references
(tests/reference/fullwave/); tests/test_docs.py fails while they differ.
"""
from __future__ import annotations

import re
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from ebglayout.checks.rules import RULES  # noqa: E402
from ebglayout.estimate import accuracy  # noqa: E402
from ebglayout.spec import PARAMETERS, REQUIRED  # noqa: E402

REFERENCES = ROOT / "tests" / "reference" / "fullwave"


def parameter_table() -> str:
    rows = ["| key | default | meaning |", "|---|---|---|"]
    for p in PARAMETERS:
        default = "required" if p.default is REQUIRED else ("-" if p.default in (None, ()) else str(p.default))
        rows.append(f"| `{p.key}` | {default} | {p.help} |")
    return "\n".join(rows)


def rule_table() -> str:
    rows = ["| rule id | what it checks | default limit | where the limit comes from |", "|---|---|---|---|"]
    for r in RULES:
        rows.append(f"| `{r.id}` | {r.title} | {r.limit} | {r.source} |")
    return "\n".join(rows)


def model_accuracy_table() -> str:
    table = accuracy.table([accuracy.compare(REFERENCES, name, accuracy.spec_for(REFERENCES, name, ROOT / "samples"))
                            for name in accuracy.stored_cases(REFERENCES)])
    left_out = accuracy.stored_cases(REFERENCES, settled=False)
    if left_out:
        table += ("\n\nLeft out (a run ended with the field energy above "
                  f"{accuracy.SETTLED_DB:g} dB of its peak, a truncated record): "
                  + ", ".join(f"`{name}`" for name in left_out) + ".")
    return table


def model_misses() -> str:
    stored = set(accuracy.stored_cases(REFERENCES))
    return "\n".join(f"- `{name}`, {metric}: {why}." for (name, metric), why in sorted(accuracy.KNOWN_MISSES.items())
                     if name in stored)


SECTIONS = {"parameters": parameter_table, "rules": rule_table, "model-accuracy": model_accuracy_table,
            "model-misses": model_misses}


def render(text: str) -> str:
    for name, make in SECTIONS.items():
        pattern = re.compile(rf"(<!-- generated:{name} -->\n).*?(<!-- end:{name} -->)", re.S)
        text = pattern.sub(lambda m: m.group(1) + make() + "\n" + m.group(2), text)
    return text


if __name__ == "__main__":
    readme = ROOT / "README.md"
    readme.write_text(render(readme.read_text(encoding="utf-8")), encoding="utf-8")
