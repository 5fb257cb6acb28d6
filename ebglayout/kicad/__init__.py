"""KiCad boards without KiCad: a fast .kicad_pcb reader and differential-pair extraction.

Names are loaded on first use, so importing a sibling module (a writer, say)
does not pull in numpy, shapely and scipy for the reader.
"""
from __future__ import annotations

_EXPORTS = {
    "Board": "board", "BoardError": "board", "parse_board": "board", "read_board": "board",
    "BoardPair": "pairs", "find_pairs": "pairs", "obstacles": "context", "pair_spec_dict": "pair_spec",
    "reference_layers": "planes",
}
__all__ = sorted(_EXPORTS)


def __getattr__(name: str):
    if name in _EXPORTS:
        from importlib import import_module

        return getattr(import_module(f".{_EXPORTS[name]}", __name__), name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
