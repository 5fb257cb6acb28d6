"""report.json: the stable, documented summary that outside checks read.

Keys (all lengths mm, frequencies Hz, whatever the spec's units; ``units`` says so): ``filter``, ``units``
({"length": "mm", "area": "mm2", "frequency": "Hz", "spec": the spec's own unit}), ``spec`` (the spec as given),
``stackup`` (per cut plane the pair's and the cavity's dielectric, and where each value came from),
``cells`` ([{index, centre, size, rotation_deg}]), ``crossings`` ({"P", "N"} on the
first plane layer), ``crossings_by_layer``, ``min_slot_width``, ``min_copper_width``,
``gds_layers`` ({"<layer>/<role>": [layer, datatype]}), ``route`` (centre-line
points, and for a generated fold its U-turns), ``checks`` (per-rule summary),
``findings`` ([{rule, severity, message, at, value, limit, layer}]),
``estimate`` (see ebglayout.estimate), ``caution``.
"""
from __future__ import annotations

import json

from . import CAUTION


def report_data(layout, checks, estimate=None) -> dict:
    """Assemble report.json's content from the layout, the check report and the estimate."""
    from .export.gds import gds_layers

    check_json = checks.to_json()
    data = {
        "filter": layout.spec.name,
        "units": {**check_json["units"], "frequency": "Hz"},
        "spec": layout.spec.echo,
        "stackup": layout.stackup.to_json(),
        "cells": [{"index": c.index, "centre": [round(c.centre[0], 6), round(c.centre[1], 6)],
                   "size": [round(c.size[0], 6), round(c.size[1], 6)], "rotation_deg": round(c.rotation_deg, 6)}
                  for c in layout.cells],
        "crossings": check_json["crossings"],
        "crossings_by_layer": check_json["crossings_by_layer"],
        "min_slot_width": check_json["min_slot_width"],
        "min_copper_width": check_json["min_copper_width"],
        "gds_layers": {name: list(pair) for name, pair in sorted(gds_layers(layout.spec).items())},
        "route": {
            "generated": layout.route_generated,
            "centreline": [[round(x, 6), round(y, 6)] for x, y in layout.centreline.coords],
            "turns": [{"at": [round(t.at[0], 6), round(t.at[1], 6)], "p_minus_n_mm": round(t.p_minus_n, 6)}
                      for t in layout.turns],
        },
        "checks": {"summary": check_json["summary"], "rules": check_json["rules"]},
        "findings": check_json["findings"],
        "estimate": estimate.to_json() if estimate is not None else None,
        "caution": CAUTION,
    }
    return data


def to_json_text(data: dict) -> str:
    """Stable text: fixed key order as built, two-space indent, trailing newline."""
    return json.dumps(data, indent=2, ensure_ascii=False, default=str) + "\n"
