"""The two actions: place a filter under the selected pair, and re-check every filter on the board.

The work happens in functions that take a pcbnew BOARD (``place_under_selection``,
``recheck``) so tests can run them headless; the ActionPlugin classes only add
the file dialog and the message boxes.  They call the same ebglayout functions
as the command line, on a copy of the board saved to a temporary file.
"""
from __future__ import annotations

import os
import tempfile
from pathlib import Path

import pcbnew

from . import compat


def _ebglayout():
    """Import ebglayout's KiCad modules, or explain how to install it into KiCad's Python."""
    try:
        import ebglayout.kicad.board
        import ebglayout.kicad.footprint
        import ebglayout.kicad.insert
        import ebglayout.kicad.pairs
        import ebglayout.kicad.place
        import ebglayout.kicad.plan
        import ebglayout.kicad.recheck
    except ImportError as err:
        raise RuntimeError(
            f"ebglayout cannot be imported in KiCad's Python ({err}). Install it and its dependencies into the "
            "Python KiCad uses (see the ebglayout README, section 'KiCad')") from None
    return ebglayout.kicad


def _saved_copy(board, folder: str) -> Path:
    path = Path(folder) / "board.kicad_pcb"
    pcbnew.SaveBoard(str(path), board)
    return path


def place_under_selection(board, spec_path: str, tracks=None) -> dict:
    """Place the filter of ``spec_path`` under the pair one of whose tracks is selected; return a summary.

    The footprint is loaded through KiCad's own footprint loader from a
    temporary library, so KiCad builds every item; the rule file beside the
    board gets our rule (merged); zones are refilled.  All or nothing: every
    check and the rule file's new text come first, the rule file is swapped
    in only once the footprint sits on the board, and a failure on the board
    takes the footprint out again.
    """
    kicad = _ebglayout()
    rules_path = _rules_path(board)
    if rules_path is None:
        raise RuntimeError("save the board once first: the fill rule is written beside it as <board>.kicad_dru")
    tracks = tracks if tracks is not None else compat.selected_tracks(board)
    nets = sorted({t.GetNetname() for t in tracks})
    if not nets:
        raise RuntimeError("select one track of the differential pair first")
    with tempfile.TemporaryDirectory(prefix="ebglayout-") as tmp:
        copy = kicad.board.read_board(_saved_copy(board, tmp))
        pairs = kicad.pairs.find_pairs(copy)
        chosen = [bp for bp in pairs if bp.net_p in nets or bp.net_n in nets]
        if not chosen:
            raise RuntimeError(f"no differential pair found for the selected net(s) {', '.join(nets)}")
        pair = max(chosen, key=lambda bp: bp.length)
        request = kicad.plan.Request(kicad.plan.load_spec_dict(spec_path), spec_path, pair=(pair.net_p, pair.net_n))
        placement = kicad.place.plan_placement(copy, [request], _existing_rules(board))
        placed = placement.filters[0]
        layout = placed.result.layout
        library = Path(tmp) / "ebglayout.pretty"
        library.mkdir()
        name = layout.spec.name
        text = kicad.footprint.footprint_text(layout, design=placed.design)
        (library / f"{name}.kicad_mod").write_text(text, encoding="utf-8")
        fp = pcbnew.FootprintLoad(str(library), name)
        if fp is None:
            raise RuntimeError("KiCad could not load the generated footprint")
    priority = kicad.insert.zone_priority_for(placement.board_text, layout, layout.spec.plane_net)
    from ebglayout.outputs import atomic_path

    with atomic_path(rules_path) as staged:  # the rules file changes only if the footprint was added
        staged.write_text(placement.rules_text, encoding="utf-8")
        board.Add(fp)
        try:
            _set_up(board, fp, placed.reference, layout, kicad.footprint.footprint_origin(layout), priority)
        except Exception:
            board.Remove(fp)
            # Remove hands the footprint to Python; its destructor then left the board's footprint list
            # unreadable from Python (seen with 6.0.11), so the removed footprint is left unfreed instead.
            fp.thisown = 0
            raise
    compat.fill_all_zones(board)
    compat.refresh()
    checks = placed.result.checks
    return {"reference": placed.reference, "filter": name, "pair": pair.base, "errors": len(checks.errors),
            "warnings": len(checks.warnings), "table": checks.format_table(), "risks": placement.risks}


def recheck(board) -> list:
    """Re-check every ebglayout filter on the board as it is now; returns the check reports."""
    kicad = _ebglayout()
    with tempfile.TemporaryDirectory(prefix="ebglayout-") as tmp:
        path = _saved_copy(board, tmp)
        rules = _existing_rules(board)
        if rules is not None:
            path.with_suffix(".kicad_dru").write_text(rules, encoding="utf-8")
        return kicad.recheck.check_board(path)


def _rules_path(board) -> Path | None:
    name = board.GetFileName()
    return Path(name).with_suffix(".kicad_dru") if name else None


def _existing_rules(board) -> str | None:
    path = _rules_path(board)
    return path.read_text(encoding="utf-8") if path is not None and path.exists() else None


def _set_up(board, fp, reference: str, layout, origin, priority: int) -> None:
    """Name, place and lock the added footprint; its copper zones get the plane's net and the priority to win."""
    fp.SetReference(reference)
    compat.set_position_mm(fp, *origin)
    compat.set_locked(fp)
    net_code = board.GetNetcodeFromNetname(layout.spec.plane_net) if hasattr(board, "GetNetcodeFromNetname") else None
    for zone in compat.footprint_zones(fp):
        if not zone.GetIsRuleArea() and net_code is not None:
            zone.SetNetCode(net_code)
            compat.set_zone_priority(zone, priority)


def _message(text: str, title: str = "ebglayout") -> None:
    import wx

    wx.MessageBox(text, title, wx.OK)


class PlaceFilterAction(pcbnew.ActionPlugin):
    def defaults(self):
        self.name = "ebglayout: place plane-cut filter under selected pair"
        self.category = "EMC"
        self.description = "Cuts EBG filter patches into the reference plane(s) under the selected differential pair"
        self.show_toolbar_button = True
        self.icon_file_name = os.path.join(os.path.dirname(__file__), "icon.png")

    def Run(self):
        import wx

        board = pcbnew.GetBoard()
        dialog = wx.FileDialog(None, "ebglayout spec for this filter", wildcard="ebglayout spec (*.toml)|*.toml",
                               style=wx.FD_OPEN | wx.FD_FILE_MUST_EXIST)
        if dialog.ShowModal() != wx.ID_OK:
            return
        try:
            summary = place_under_selection(board, dialog.GetPath())
        except Exception as err:  # shown to the user instead of a traceback in KiCad's console
            _message(str(err), "ebglayout: nothing placed")
            return
        from ebglayout import CAUTION

        risks = "\n".join(summary["risks"]) or "none"
        _message(f"{summary['reference']} ({summary['filter']}) placed under {summary['pair']}: "
                 f"{summary['errors']} error(s), {summary['warnings']} warning(s).\n\n{summary['table']}\n\n"
                 f"KiCad fill risks: {risks}\n\n{CAUTION}.")


class RecheckAction(pcbnew.ActionPlugin):
    def defaults(self):
        self.name = "ebglayout: re-check all plane-cut filters"
        self.category = "EMC"
        self.description = "Re-checks every ebglayout filter against the board's copper as it is now"
        self.show_toolbar_button = False
        self.icon_file_name = os.path.join(os.path.dirname(__file__), "icon.png")

    def Run(self):
        try:
            reports = recheck(pcbnew.GetBoard())
        except Exception as err:  # shown to the user instead of a traceback in KiCad's console
            _message(str(err), "ebglayout: re-check failed")
            return
        if not reports:
            _message("No ebglayout filters on this board.")
            return
        _message("\n\n".join(r.format_table() for r in reports))


def register_all() -> None:
    PlaceFilterAction().register()
    RecheckAction().register()
