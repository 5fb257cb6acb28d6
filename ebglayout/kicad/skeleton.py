"""The small board texts a board's filters share: a big board cut down to what the insert module reads.

The insert module's readers walk every parenthesis of the text they are given;
on a board of 10^5 tracks that costs seconds per filter.  ``board_skeleton``
cuts the board (from the reader's spans, byte for byte) down to the items they
read, ``BoardTexts`` cuts each such text once per board for every filter, and
``with_items`` inserts the filters' items into the full text without reading it.
"""
from __future__ import annotations

import bisect

import numpy as np

from .board import Board
from .insert import board_version, plane_net


def board_skeleton(board: Board, nets: bool = False, footprints: bool = False) -> str:
    """The board text cut down to what the insert module reads, for its per-filter calls.

    Kept: every byte up to the end of the first item (the version stamp), the layer
    table and the top-level zones without their fills; with ``nets`` the net
    declarations, with ``footprints`` the footprints that hold zones.  Those readers
    walk every parenthesis in Python: seconds per call on a board of 10^5 tracks,
    milliseconds on this text.  Items keep their bytes, so they read the same values.
    """
    data = board.data
    if not len(board.items):
        return data[:board.root[1] - 1].decode("utf-8") + "\n)\n"
    first_end = int(board.items[0][1])
    heads = ["layers", "zone"] + (["net"] if nets else [])
    spans = [board.spans(h) for h in heads]
    if footprints:
        spans.append(np.array([(a, b) for a, b in board.spans("footprint").tolist() if b"(zone" in data[a:b]],
                              dtype=np.int64).reshape(-1, 2))
    spans = np.concatenate(spans)
    spans = spans[np.argsort(spans[:, 0])]
    fills = sorted(span for zone in board.zones for span in zone.fill_spans)
    starts = [a for a, _ in fills]
    parts = [data[:first_end]]
    for a, b in spans[spans[:, 0] >= first_end].tolist():
        k, pos = bisect.bisect_left(starts, a), a
        parts.append(b"\n  ")
        while k < len(fills) and fills[k][0] < b:
            parts.append(data[pos:fills[k][0]])
            pos = fills[k][1]
            k += 1
        parts.append(data[pos:b])
    parts.append(b"\n)\n")
    return b"".join(parts).decode("utf-8")


class BoardTexts:
    """The small board texts one board's filters share (see ``board_skeleton``), each cut once on first use."""

    def __init__(self, board: Board):
        self.board = board
        self._texts: dict[tuple[bool, bool], str] = {}
        self._plane_nets: dict[str, tuple[int, str]] = {}
        self._version: int | None = None

    def text(self, nets: bool = False, footprints: bool = False) -> str:
        key = (nets, footprints)
        if key not in self._texts:
            self._texts[key] = board_skeleton(self.board, nets=nets, footprints=footprints)
        return self._texts[key]

    @property
    def version(self) -> int:
        """``insert.board_version`` of the board."""
        if self._version is None:
            self._version = board_version(self.text(), self.board.name)
        return self._version

    def plane_net(self, name: str) -> tuple[int, str]:
        """``insert.plane_net`` of the board, per net name."""
        if name not in self._plane_nets:
            self._plane_nets[name] = plane_net(self.text(nets=True), name, self.board.name)
        return self._plane_nets[name]


def with_items(board: Board, items: list[str]) -> str:
    """``insert_footprints(board.text, items)`` from the reader's spans: the root's closing parenthesis is known."""
    close = board.insert_offset
    inserted = "".join(item if item.endswith("\n") else item + "\n" for item in items)
    if inserted and board.data[close - 1:close] != b"\n":
        inserted = "\n" + inserted
    return board.splice(close, close, inserted).decode("utf-8")
