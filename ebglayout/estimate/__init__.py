"""Notch estimates of the as-drawn cut: cavity modes, the bridged cells' LC resonance, the tolerance band, sizing.

These are estimates for placement and review; a field solve or a measurement
decides.  ``estimate_layout`` reads a built Layout and re-derives nothing.
"""
from __future__ import annotations

from .band import CAUTION, CellEstimate, Corner, Estimate, Mode, estimate_cell, estimate_layout, format_table
from .cavity import C0, neumann_eigenvalues, polygon_modes, rect_modes
from .lumped import lc_notch, plate_capacitance, strip_inductance
from .refinement import refine
from .sizing import size_for_target

__all__ = [
    "C0", "CAUTION", "CellEstimate", "Corner", "Estimate", "Mode", "estimate_cell", "estimate_layout",
    "format_table", "lc_notch", "neumann_eigenvalues", "plate_capacitance", "polygon_modes", "rect_modes",
    "refine", "size_for_target", "strip_inductance",
]
