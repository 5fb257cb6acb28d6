"""The few pcbnew calls whose names or types changed between KiCad 6 and 9, chosen by feature, not by version."""
from __future__ import annotations

import pcbnew


def set_position_mm(item, x: float, y: float) -> None:
    """Move an item to (x, y) mm: KiCad 7+ takes a VECTOR2I, KiCad 6 a wxPoint (6 also has VECTOR2I, unused here)."""
    nx, ny = pcbnew.FromMM(x), pcbnew.FromMM(y)
    for kind in ("VECTOR2I", "wxPoint"):
        make = getattr(pcbnew, kind, None)
        if make is None:
            continue
        try:
            item.SetPosition(make(nx, ny))
            return
        except TypeError:
            continue
    raise RuntimeError("this KiCad's pcbnew takes neither VECTOR2I nor wxPoint positions")


def selected_tracks(board) -> list:
    """Selected tracks and arcs (vias excluded)."""
    via_type = getattr(pcbnew, "PCB_VIA", None)
    return [t for t in board.GetTracks() if t.IsSelected() and not (via_type and isinstance(t, via_type))]


def set_locked(footprint) -> None:
    if hasattr(footprint, "SetLocked"):
        footprint.SetLocked(True)


def footprint_zones(footprint) -> list:
    return list(footprint.Zones()) if hasattr(footprint, "Zones") else []


def fill_all_zones(board) -> None:
    """Refill board zones and footprint zones (ZONE_FILLER only fills what it is given)."""
    zones = pcbnew.ZONES() if hasattr(pcbnew, "ZONES") else []
    for zone in board.Zones():
        zones.append(zone)
    for footprint in board.GetFootprints():
        for zone in footprint_zones(footprint):
            zones.append(zone)
    pcbnew.ZONE_FILLER(board).Fill(zones)


def refresh() -> None:
    if hasattr(pcbnew, "Refresh"):
        pcbnew.Refresh()


def set_zone_priority(zone, priority: int) -> None:
    """KiCad 6 and 7: SetPriority; later versions: SetAssignedPriority (from memory of the API changes)."""
    setter = getattr(zone, "SetAssignedPriority", None) or zone.SetPriority
    setter(priority)
