"""Seeded fuzz campaign: mutated specs and boards through the CLI, judged by the bad-input promises.

Every case runs in a forked child with a time limit.  A case fails when a command
exits 3 (internal error) or dies, runs out of time, prints anything but one error
line on exit 2 (or anything at all on stderr otherwise), leaves a partial output
after an error, changes its input, or when ``check`` and ``build`` disagree on
whether a spec is acceptable.

    python tools/fuzz.py --specs 2000 --boards 700 [--seed 1] [--timeout 20]

``tests/test_fuzz.py`` runs a few hundred seeded cases of the same campaign.
"""
from __future__ import annotations

import argparse
import hashlib
import os
import random
import re
import select
import shutil
import signal
import sys
import tempfile
import time
from dataclasses import dataclass, field
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
SPEC_SOURCES = sorted((ROOT / "samples").glob("*.toml"))
BOARD_SOURCES = [ROOT / "samples" / "hx2_hub.kicad_pcb", *sorted((ROOT / "tests" / "boards").glob("*.kicad_pcb"))]
PLACE_SPEC = ROOT / "samples" / "hx2_l0_tx_straight.toml"
PLACE_PAIR = ("HX2_L0_TX_P", "HX2_L0_TX_N")
PAIR_OF_BOARD = {"hx2_stripline6.kicad_pcb": ("HX2_L3_RX_DP", "HX2_L3_RX_DN"),
                 **{f"hx2_v{v}.kicad_pcb": ("HX2_L1_RX_P", "HX2_L1_RX_N") for v in (8, 9, 10)}}
"""The pair `place` puts a filter under on each source board (the sample hub: PLACE_PAIR)."""

_NUMBER = re.compile(rb"(?<![\w.])-?\d+(?:\.\d+)?(?:[eE][-+]?\d+)?(?![\w.])")
_STRING = re.compile(rb'"(?:[^"\\\n]|\\.)*"')

NUMBERS = [b"0", b"-1", b"1e-9", b"1e-7", b"0.0004", b"1e308", b"-1e308", b"1e15", b"nan", b"inf", b"-inf",
           b"0.000001", b"999999", b"2.5", b"7", b"1000", b"1001", b"abc", b"1.6.2", b"-0", b"1e-320",
           b"3", b"12", b"0.01"]
SPEC_VALUES = [b'"6mil"', b'"1nm"', b'"0.5 um"', b'"1THz"', b'"2THz"', b'"16Gbps"', b'"1e-9mm"', b'"furlong"',
               b'""', b'" "', b"true", b"[]", b"{}", b"[1, 2]", b"[[1, 2], [3, 4]]", b'"In1.Cu"', b'"in1.cu"',
               b'"*.Cu"', b'"In1/Cu"', b'"B.Cu"', b'"In31.Cu"', b'"F.Cu"', b'"a\\u0000b"', b'"a\\nb"',
               b'"x\\ty"', b'"\xc3\xa9t\xc3\xa9"', b'"' + b"n" * 300 + b'"', b'["In1.Cu", "in1.cu"]',
               b'["In1.Cu", "In1.Cu"]', b'["*.Cu"]', b'["In2.Cu"]', b'"bridged"', b'"folded"', b'"straight"',
               b"1979-05-27", b'"mm"', b'"mil"', b'"nm"', b'"in"']
BOARD_VALUES = [b"nan", b"inf", b"-inf", b"1e308", b"1e15", b"0", b"-0.2", b"abc", b"1.6.2", b"", b"()",
                b'"In1.Cu"', b'"*.Cu"', b'"a\\nb"', b"1e-9"]
TOML_SPECIALS = [
    (b"slot = ", b"slot = 1e-9 #"), (b"slot = ", b"slot = 0.0004 #"), (b"[rules]", b"[rules]\nmin_slot = 0.0001"),
    (b"width = ", b"width = 1e-7 #"), (b"width = ", b"width = 1e-9 #"),
    (b"\nlayers = ", b'\nlayers = ["in1.cu", "In1.Cu"] #'),
    (b"\nname = ", b'\nname = "' + b"n" * 255 + b'" #'), (b"\nname = ", b'\nname = "a\\nb" #'),
    (b"\nname = ", b'\nname = "a\\u0000b" #'), (b'target = ', b'target = "1THz" #'),
    (b"[stackup]", b"[stackup]\n\"\" = 1"), (b"[plane]", b"[plane]\noutline = [[0, -5], [30, 5], [30, -5], [0, 5]]"),
    (b"per_side = 1", b"per_side = 1, width = 1e-9"),
]


@dataclass
class Case:
    kind: str  # "spec" or "board"
    index: int
    source: Path
    data: bytes
    mutations: list[str] = field(default_factory=list)


@dataclass
class Outcome:
    case: Case
    command: str
    code: int | None  # None: timed out; negative: killed by that signal
    seconds: float
    stderr: str
    problems: list[str]


def mutate_spec(rng: random.Random, data: bytes, notes: list[str]) -> bytes:
    """One random change to a spec file's bytes."""
    op = rng.choice(["number", "number", "value", "value", "delete", "duplicate", "nesting", "encoding",
                     "control", "special", "unit", "array"])
    notes.append(op)
    if op == "number":
        return _replace_match(rng, data, _NUMBER, NUMBERS)
    if op == "value":
        return _replace_value(rng, data, SPEC_VALUES)
    if op == "special":
        old, new = rng.choice(TOML_SPECIALS)
        return data.replace(old, new, 1) if old in data else data + b"\n" + new.lstrip(b"\n")
    if op == "unit":
        return _replace_match(rng, data, _NUMBER, [m + u for m in (b'"0.1', b'"3', b'"1e-9', b'"2')
                                                   for u in (b'mil"', b'nm"', b'um"', b'in"', b'cm"', b'mm"', b' mm"')])
    if op == "array":
        depth = rng.choice([2, 50, 200, 1000, 5000])
        return _replace_value(rng, data, [b"[" * depth + b"1" + b"]" * depth])
    return _common_mutation(rng, data, op)


def mutate_board(rng: random.Random, data: bytes, notes: list[str]) -> bytes:
    """One random change to a board file's bytes."""
    op = rng.choice(["number", "item", "item", "item", "value", "delete", "duplicate", "nesting", "encoding",
                     "control", "truncate"])
    notes.append(op)
    if op == "number":
        return _replace_match(rng, data, _NUMBER, NUMBERS)
    if op == "item":
        return _mutate_item(rng, data)
    if op == "value":
        return _replace_match(rng, data, rng.choice([_NUMBER, _STRING]), BOARD_VALUES)
    if op == "truncate":
        return data[: rng.randrange(len(data) + 1)]
    return _common_mutation(rng, data, op)


BOARD_ITEMS = (b"(segment", b"(arc", b"(via", b"(pad", b"(xy", b"(epsilon_r", b"(thickness", b"(at ",
               b"(gr_line", b"(gr_arc", b"(net ", b"(layer ", b"ebglayout_spec")


def _mutate_item(rng: random.Random, data: bytes) -> bytes:
    """A number or word inside one of the items the reader turns into geometry (the stored design included)."""
    lines = data.split(b"\n")
    head = rng.choice(BOARD_ITEMS)
    candidates = [i for i, line in enumerate(lines) if head in line]
    if not candidates:
        return data
    i = rng.choice(candidates)
    if head == b"ebglayout_spec":
        values = NUMBERS + [b'\\"\\"', b"[]", b"{}", b"true", b'\\"In1/Cu\\"', b"[" * 2000 + b"]" * 2000]
        lines[i] = _replace_match(rng, lines[i], re.compile(rb"-?\d+(?:\.\d+)?(?:[eE][-+]?\d+)?"), values)
    else:
        lines[i] = _replace_match(rng, lines[i], rng.choice([_NUMBER, _NUMBER, _STRING]), NUMBERS + BOARD_VALUES)
    return b"\n".join(lines)


def _common_mutation(rng: random.Random, data: bytes, op: str) -> bytes:
    lines = data.split(b"\n")
    i = rng.randrange(len(lines))
    if op == "delete":
        del lines[i]
    elif op == "duplicate":
        lines.insert(i, lines[i])
    elif op == "nesting":
        depth = rng.choice([10, 300, 1000, 3000])
        opener, closer = (b"(x ", b")") if data.lstrip().startswith(b"(") else (b"[", b"]")
        lines[i] = lines[i] + b" " + opener * depth + closer * depth
    elif op == "encoding":
        choice = rng.randrange(4)
        if choice == 0:
            return b"\xef\xbb\xbf" + data
        if choice == 1:
            return data.decode("utf-8", "replace").encode("utf-16")
        if choice == 2:
            return data.replace(b"e", b"\xe9", 1)
        return data.replace(b"\n", b"\r\n")
    elif op == "control":
        char = rng.choice([b"\x00", b"\x01", b"\x1b", b"\x7f", b"\r", b"\x0b", b"\x85"])
        pos = rng.randrange(len(lines[i]) + 1)
        lines[i] = lines[i][:pos] + char + lines[i][pos:]
    return b"\n".join(lines)


def _replace_match(rng: random.Random, data: bytes, pattern: re.Pattern, values: list[bytes]) -> bytes:
    matches = list(pattern.finditer(data))
    if not matches:
        return data
    m = rng.choice(matches)
    return data[: m.start()] + rng.choice(values) + data[m.end():]


def _replace_value(rng: random.Random, data: bytes, values: list[bytes]) -> bytes:
    """Replace what follows `key = ` on one line with one of ``values``."""
    lines = data.split(b"\n")
    candidates = [i for i, line in enumerate(lines) if b" = " in line and not line.lstrip().startswith(b"#")]
    if not candidates:
        return data
    i = rng.choice(candidates)
    key, _, _ = lines[i].partition(b" = ")
    lines[i] = key + b" = " + rng.choice(values)
    return b"\n".join(lines)


def make_cases(specs: int, boards: int, seed: int, placed_board: Path | None) -> list[Case]:
    rng = random.Random(seed)
    cases = []
    for index in range(specs):
        source = rng.choice(SPEC_SOURCES)
        case = Case("spec", index, source, source.read_bytes())
        for _ in range(rng.choice([1, 1, 1, 2, 3])):
            case.data = mutate_spec(rng, case.data, case.mutations)
        cases.append(case)
    pool = BOARD_SOURCES + ([placed_board] if placed_board else [])
    for index in range(boards):
        source = rng.choice(pool + ([placed_board] * 2 if placed_board else []))
        case = Case("board", index, source, source.read_bytes())
        for _ in range(rng.choice([1, 1, 2])):
            case.data = mutate_board(rng, case.data, case.mutations)
        cases.append(case)
    return cases


def run_cli(argv: list[str], timeout: float) -> tuple[int | None, float, str]:
    """Run ``ebglayout.cli.main(argv)`` in a forked child; return (exit code, seconds, stderr)."""
    read_end, write_end = os.pipe()
    started = time.perf_counter()
    pid = os.fork()
    if pid == 0:  # pragma: no cover - the child
        code = 70
        try:
            os.close(read_end)
            devnull = os.open(os.devnull, os.O_WRONLY)
            os.dup2(devnull, 1)
            os.dup2(write_end, 2)
            sys.stdout = open(1, "w", closefd=False)
            sys.stderr = open(2, "w", closefd=False)
            from ebglayout.cli import main

            code = main(argv)
            sys.stdout.flush()
            sys.stderr.flush()
        finally:
            os._exit(code if isinstance(code, int) else 70)
    os.close(write_end)
    chunks, deadline = [], started + timeout
    code: int | None = None
    while True:
        left = deadline - time.perf_counter()
        if left <= 0:
            os.kill(pid, signal.SIGKILL)
            os.waitpid(pid, 0)
            break
        ready, _, _ = select.select([read_end], [], [], min(left, 0.5))
        if ready:
            chunk = os.read(read_end, 65536)
            if chunk:
                chunks.append(chunk)
                continue
            _, status = os.waitpid(pid, 0)
            code = os.waitstatus_to_exitcode(status)
            break
    os.close(read_end)
    return code, time.perf_counter() - started, b"".join(chunks).decode("utf-8", "replace")


def judge(code: int | None, stderr: str, input_file: Path, digest: str, outputs: list[Path],
          board_file: str | None = None) -> list[str]:
    """What a run did wrong, as short notes (empty when it kept every promise)."""
    problems = []
    if code is None:
        problems.append("timeout")
    elif code < 0:
        problems.append(f"killed by signal {-code}")
    elif code not in (0, 1, 2):
        problems.append(f"exit {code}")
    if code == 2:
        lines = stderr.split("\n")
        if len(lines) != 2 or lines[1] or not lines[0].startswith("ebglayout: error: "):
            problems.append("exit 2 without exactly one error line")
        elif any(ord(c) < 32 or 0x7f <= ord(c) < 0xa0 for c in lines[0]):
            problems.append("control character in the error line")
        elif len(lines[0]) > 400:
            problems.append("error line longer than 400 characters")
        elif board_file is not None and board_file not in lines[0]:
            problems.append("board error does not name the board file")
        left = [p for p in outputs if p.exists() and (p.is_file() or any(p.iterdir()))]
        if left:
            problems.append(f"partial output {left[0].name}")
    elif code in (0, 1) and stderr:
        problems.append("stderr on success")
    if hashlib.sha256(input_file.read_bytes()).hexdigest() != digest:
        problems.append("input modified")
    return problems


def run_case(case: Case, work: Path, timeout: float) -> list[Outcome]:
    folder = work / f"{case.kind}{case.index}"
    folder.mkdir()
    if case.kind == "spec":
        input_file = folder / "mutant.toml"
    else:
        input_file = folder / "mutant.kicad_pcb"
    input_file.write_bytes(case.data)
    digest = hashlib.sha256(case.data).hexdigest()
    if case.kind == "spec":
        out = folder / "out"
        commands = [("check", ["check", str(input_file)], [], None),
                    ("build", ["build", str(input_file), "--out", str(out), "--jobs", "1"], [out], None)]
    else:
        new = folder / "new.kicad_pcb"
        commands = [("pairs", ["pairs", str(input_file)], [], input_file.name)]
        if b"ebglayout" in case.data:
            commands.append(("check-board", ["check", "--board", str(input_file), "--jobs", "1"], [],
                             input_file.name))
        else:
            pair = PAIR_OF_BOARD.get(case.source.name, PLACE_PAIR)
            commands.append(("place", ["place", str(input_file), "--pair", *pair, "--spec", str(PLACE_SPEC),
                                       "--out", str(new)], [new, new.with_suffix(".kicad_dru")], None))
    outcomes = []
    for name, argv, outputs, board_file in commands:
        code, seconds, stderr = run_cli(argv, timeout)
        outcomes.append(Outcome(case, name, code, seconds, stderr,
                                judge(code, stderr, input_file, digest, outputs, board_file)))
    if case.kind == "spec":
        check, build = outcomes
        if check.code in (0, 1, 2) and build.code in (0, 1, 2) and (check.code == 2) != (build.code == 2):
            build.problems.append(f"check exits {check.code} but build exits {build.code}")
    shutil.rmtree(folder, ignore_errors=True)
    return outcomes


def placed_board(work: Path) -> Path:
    """A sample board with one placed filter, so board mutants also exercise ``check --board``."""
    out = work / "placed.kicad_pcb"
    code, _, stderr = run_cli(["place", str(BOARD_SOURCES[0]), "--pair", *PLACE_PAIR, "--spec", str(PLACE_SPEC),
                               "--out", str(out)], 120)
    if code not in (0, 1):
        raise SystemExit(f"could not place the base board: {stderr}")
    return out


def preload() -> None:
    """Import every module the commands use once, here, so each forked case starts warm."""
    import importlib

    for name in ("ebglayout.cli", "ebglayout.pipeline", "ebglayout.estimate.band", "ebglayout.export.dxf",
                 "ebglayout.export.gds", "ebglayout.export.preview", "ebglayout.kicad.place", "ebglayout.kicad.recheck",
                 "ebglayout.kicad.footprint", "ebglayout.kicad.rules", "ebglayout.checks.junit",
                 "ebglayout.checks.rules"):
        importlib.import_module(name)


def campaign(specs: int, boards: int, seed: int, timeout: float, work: Path, progress=None) -> list[Outcome]:
    preload()
    base = placed_board(work) if boards else None
    outcomes = []
    for n, case in enumerate(make_cases(specs, boards, seed, base)):
        outcomes.extend(run_case(case, work, timeout))
        if progress:
            progress(n, outcomes)
    return outcomes


def summary(outcomes: list[Outcome]) -> str:
    lines = []
    for command in sorted({o.command for o in outcomes}):
        runs = [o for o in outcomes if o.command == command]
        codes: dict[str, int] = {}
        for o in runs:
            key = "timeout" if o.code is None else str(o.code)
            codes[key] = codes.get(key, 0) + 1
        slowest = max(runs, key=lambda o: o.seconds)
        lines.append(f"{command:<12} runs {len(runs):>5}  exit codes "
                     + ", ".join(f"{k}: {v}" for k, v in sorted(codes.items()))
                     + f"  max {slowest.seconds:.2f} s ({slowest.case.kind} {slowest.case.index})")
    bad = [o for o in outcomes if o.problems]
    lines.append(f"cases {len({(o.case.kind, o.case.index) for o in outcomes})}, failures {len(bad)}")
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--specs", type=int, default=2000)
    parser.add_argument("--boards", type=int, default=700)
    parser.add_argument("--seed", type=int, default=1)
    parser.add_argument("--timeout", type=float, default=20.0, help="seconds per command")
    parser.add_argument("--keep", type=Path, help="write each failing mutant here")
    parser.add_argument("--messages", type=Path, help="write every distinct exit-2 error line here, for review")
    args = parser.parse_args(argv)
    sys.path.insert(0, str(ROOT))

    def progress(n, outcomes):
        if (n + 1) % 100 == 0:
            print(f"... {n + 1} cases, {sum(1 for o in outcomes if o.problems)} failures", file=sys.stderr)

    with tempfile.TemporaryDirectory(prefix="ebglayout-fuzz-") as tmp:
        outcomes = campaign(args.specs, args.boards, args.seed, args.timeout, Path(tmp), progress)
    for o in outcomes:
        if o.problems:
            first = o.stderr.strip().split("\n")[-1][:200]
            print(f"FAIL {o.case.kind} {o.case.index} {o.command} ({'+'.join(o.case.mutations)} of "
                  f"{o.case.source.name}): {'; '.join(o.problems)}: {first}")
            if args.keep:
                args.keep.mkdir(parents=True, exist_ok=True)
                suffix = ".toml" if o.case.kind == "spec" else ".kicad_pcb"
                (args.keep / f"{o.case.kind}{o.case.index}{suffix}").write_bytes(o.case.data)
    if args.messages:
        lines = sorted({o.stderr.strip() for o in outcomes if o.code == 2})
        args.messages.write_text("\n".join(f"{o}" for o in lines) + "\n", encoding="utf-8")
    print(summary(outcomes))
    return 1 if any(o.problems for o in outcomes) else 0


if __name__ == "__main__":
    sys.exit(main())
