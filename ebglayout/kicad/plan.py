"""What a board job is asked to do: requests (a spec under named pairs) from the command line or a plan file.

Reads a plan's ``[[filter]]`` tables and the specs they name, and chooses the
pairs each request selects (by nets, or the pairs whose name matches a
pattern), by name before any geometry is read; ``board_files`` names the files
a board job reads, so `place` and `check --board` never write over them.
"""
from __future__ import annotations

import fnmatch
from dataclasses import dataclass
from pathlib import Path

from ..errors import SpecError
from ..spec import read_toml
from .board import Board
from .pairs import BoardPair, find_pairs, pair_nets


@dataclass(frozen=True)
class Request:
    """Place the filter of ``spec`` (raw spec dict, from ``source``) under the pair(s) selected by nets or pattern."""

    spec: dict
    source: str
    pair: tuple[str, str] | None = None
    match: str | None = None
    stackup_from_spec: bool = False
    """Keep the spec's stack-up values where they disagree with the board's (else that is an error)."""
    label: str = ""
    """Where the request came from, for error messages: e.g. 'plan.toml filter[1] (match "HX2_L*")'."""

    def where(self, pair: BoardPair | None = None) -> str:
        """The request (and the pair) an error belongs to."""
        parts = [self.label] if self.label else []
        return " ".join(parts + ([f"under pair {pair.base} ({pair.net_p}/{pair.net_n})"] if pair else []))


def load_spec_dict(path: str | Path) -> dict:
    return read_toml(path)


PLAN_KEYS = {"spec", "pair", "match", "stackup_from_spec"}
"""The keys a plan's [[filter]] table may hold."""


def load_plan(path: str | Path) -> list[Request]:
    """A plan: one ``[[filter]]`` table per rule, ``spec`` relative to the plan, and ``pair = [P, N]`` or ``match``."""
    path = Path(path)
    raw = load_spec_dict(path)
    if set(raw) - {"filter"} or not isinstance(raw.get("filter"), list) or not raw["filter"]:
        raise SpecError("plan", path.name, "must hold one or more [[filter]] tables and nothing else")
    requests = []
    for i, item in enumerate(raw["filter"]):
        key = f"filter[{i}]"
        if not isinstance(item, dict) or "spec" not in item or set(item) - PLAN_KEYS:
            raise SpecError(key, item, "must be {spec = \"path.toml\", pair = [\"P\", \"N\"]} or {spec = ..., match = "
                            "\"LANE*\"}, optionally with stackup_from_spec = true")
        if ("pair" in item) == ("match" in item):
            raise SpecError(key, item, "give exactly one of pair = [P, N] and match = \"pattern\"")
        pair = item.get("pair")
        if pair is not None and (not isinstance(pair, list) or len(pair) != 2 or not all(isinstance(n, str) for n in pair)):
            raise SpecError(f"{key}.pair", pair, "must be two net names [P, N]")
        if "match" in item and not isinstance(item["match"], str):
            raise SpecError(f"{key}.match", item["match"], "must be a shell-style pattern string")
        if not isinstance(item.get("stackup_from_spec", False), bool):
            raise SpecError(f"{key}.stackup_from_spec", item["stackup_from_spec"], "must be true or false")
        spec_path = (path.parent / str(item["spec"])).resolve()
        chosen = f"pair {pair}" if pair else f"match \"{item['match']}\""
        requests.append(Request(load_spec_dict(spec_path), str(spec_path), tuple(pair) if pair else None,
                                item.get("match"), item.get("stackup_from_spec", False),
                                label=f"{path.name} {key} ({chosen})"))
    return requests


def select_pairs(pairs: list[BoardPair], request: Request) -> list[BoardPair]:
    """The pair runs a request names: the longest run of the named pair, or of every pair matching the pattern."""
    longest: dict[str, BoardPair] = {}
    for bp in pairs:
        if bp.base not in longest or bp.length > longest[bp.base].length:
            longest[bp.base] = bp
    if request.pair is not None:
        wanted = set(request.pair)
        found = [bp for bp in longest.values() if {bp.net_p, bp.net_n} == wanted]
        if not found:
            known = ", ".join(f"{bp.net_p}/{bp.net_n}" for bp in sorted(longest.values(), key=lambda b: b.base)) or "none"
            raise SpecError("--pair", " ".join(request.pair), f"is not a routed differential pair on this board "
                            f"(pairs found: {known})")
        return found
    found = [bp for base, bp in sorted(longest.items()) if fnmatch.fnmatchcase(base, request.match)]
    if not found:
        raise SpecError("match", request.match, "matches no differential pair on this board")
    return found


def _pairs_for(board: Board, requests: list[Request]) -> list[BoardPair]:
    """The pairs the requests can select, chosen by name before any geometry is read."""
    wanted = {base for base, net_p, net_n in pair_nets(board.nets) for request in requests
              if (request.pair is not None and {net_p, net_n} == set(request.pair))
              or (request.match is not None and fnmatch.fnmatchcase(base, request.match))}
    return find_pairs(board, only=wanted) if wanted else []


def board_files(board_path: str | Path) -> tuple[Path, Path]:
    """The files a board job reads: the board and the rules file beside it (which need not exist)."""
    return Path(board_path), Path(board_path).with_suffix(".kicad_dru")
