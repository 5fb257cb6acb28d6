"""Board reader, fifth part: the board edge, from Edge.Cuts drawings on the board and inside footprints."""
from __future__ import annotations

import math

import numpy as np
import shapely
from shapely.geometry import LineString, MultiPolygon, Polygon

from ..path import piece_points
from ..spec import Arc
from ..errors import show
from .board_model import MAX_COORD_MM, Footprint
from .board_tree import _child, _is_number, _ring, _xy


class OutlineReader:
    """Reads the board outline for the board reader (``board._Reader``)."""

    def _outline(self) -> Polygon | MultiPolygon | None:
        open_lines: list[np.ndarray] = []
        rings: list[np.ndarray] = []
        codes, names = self.s.head_kinds()
        graphic = np.isin(codes, [i for i, name in enumerate(names) if name.startswith(b"gr_")])
        for a, b in self.s.items[graphic].tolist():
            if self.data.find(b"Edge.Cuts", a, b) >= 0:
                node = self.s.parse(a, b)
                if _on_edge(node):
                    self._edge_item(node, None, a, open_lines, rings)
        self._footprint_edges(open_lines, rings)
        if not open_lines and not rings:
            self.warnings.append("no board outline on Edge.Cuts")
            return None
        if open_lines:
            merged = shapely.line_merge(shapely.set_precision(
                shapely.MultiLineString([LineString(p) for p in open_lines]), 1e-6))
            for part in getattr(merged, "geoms", [merged]):
                coords = np.asarray(part.coords)
                if len(coords) >= 4 and np.allclose(coords[0], coords[-1], atol=1e-6):
                    rings.append(coords)
                else:
                    self.warnings.append(f"Edge.Cuts outline is not closed: open end near "
                                         f"({coords[0][0]:g}, {coords[0][1]:g})")
        result = None
        for ring in rings:
            poly = shapely.make_valid(Polygon(ring))
            result = poly if result is None else result.symmetric_difference(poly)
        if result is None or result.is_empty:
            return None
        polys = [g for g in getattr(result, "geoms", [result]) if isinstance(g, Polygon)]
        return polys[0] if len(polys) == 1 else MultiPolygon(polys)

    def _footprint_edges(self, open_lines: list, rings: list) -> None:
        """Edge.Cuts drawings inside footprints: only footprints that mention Edge.Cuts are parsed."""
        rows = self.footprint_rows()
        if not len(rows):
            return
        items = self.s.items
        end = int(items[rows[-1], 1])
        hits, at = [], self.data.find(b"Edge.Cuts", int(items[rows[0], 0]), end)
        while at >= 0:
            hits.append(at)
            at = self.data.find(b"Edge.Cuts", at + 9, end)
        owners = np.searchsorted(items[:, 0], np.asarray(hits, dtype=np.int64), side="right") - 1 if hits else []
        for parent in sorted({int(o) for o in owners if o >= 0 and self.s.heads[int(o)] == b"footprint"}):
            a, b = (int(v) for v in items[parent])
            fp = self.footprint(a, b)
            node = self.s.parse(a, b, skip=("filled_polygon", "fill_segments", "model", "zone", "pad"))
            for item in node[1:]:
                if isinstance(item, list) and item and str(item[0]).startswith("fp_") and _on_edge(item):
                    self._edge_item(item, fp, a, open_lines, rings)

    def footprint_rows(self) -> np.ndarray:
        return np.flatnonzero(self.s.heads == b"footprint")

    def _edge_item(self, node: list, fp: Footprint | None, offset: int, open_lines: list, rings: list) -> None:
        kind = str(node[0])[3:]
        far = _far_point(node)
        if far is not None:
            raise self.fail(offset, f"{node[0]} on Edge.Cuts: ({' '.join(show(v) for v in far[:3])}) must lie "
                            f"within +-{MAX_COORD_MM} mm (KiCad's board range)")
        move = (lambda p: fp.to_board(*p)) if fp is not None else (lambda p: p)
        try:
            if kind == "line":
                open_lines.append(np.array([move(_xy(node, "start")), move(_xy(node, "end"))]))
            elif kind == "arc":
                if _child(node, "mid") is None:
                    raise ValueError("arc without (mid ...); KiCad 5 arcs are not read")
                arc = Arc(move(_xy(node, "start")), move(_xy(node, "mid")), move(_xy(node, "end")))
                open_lines.append(np.array(piece_points(arc)))
            elif kind == "rect":
                (x0, y0), (x1, y1) = _xy(node, "start"), _xy(node, "end")
                rings.append(np.array([move(p) for p in ((x0, y0), (x1, y0), (x1, y1), (x0, y1), (x0, y0))]))
            elif kind == "circle":
                (cx, cy), (ex, ey) = _xy(node, "center"), _xy(node, "end")
                r = math.hypot(ex - cx, ey - cy)
                n = max(16, math.ceil(math.pi / math.acos(max(-1.0, 1 - 0.25e-3 / r)))) if r > 1e-3 else 16
                t = np.linspace(0, 2 * math.pi, n + 1)
                pts = np.column_stack([cx + r * np.cos(t), cy + r * np.sin(t)])
                pts[-1] = pts[0]
                rings.append(np.array([move(p) for p in pts]))
            elif kind == "poly":
                ring = _ring(_child(node, "pts"))
                rings.append(np.array([move(p) for p in np.vstack([ring, ring[:1]])]))
            elif kind == "curve":
                p0, p1, p2, p3 = _ring(_child(node, "pts"))[:4]
                t = np.linspace(0, 1, 65)[:, None]
                pts = (1 - t) ** 3 * p0 + 3 * (1 - t) ** 2 * t * p1 + 3 * (1 - t) * t ** 2 * p2 + t ** 3 * p3
                open_lines.append(np.array([move(p) for p in pts]))
        except (TypeError, ValueError, IndexError) as err:
            raise self.fail(offset, f"bad {node[0]} on Edge.Cuts: {err}") from None


def _on_edge(node: list) -> bool:
    layer = _child(node, "layer")
    return layer is not None and len(layer) > 1 and layer[1] == "Edge.Cuts"


def _far_point(node: list) -> list | None:
    """The first (start|mid|end|center|xy X Y) under ``node`` with a finite coordinate outside KiCad's range."""
    for item in node[1:]:
        if not isinstance(item, list) or not item:
            continue
        if item[0] in ("start", "mid", "end", "center", "xy") and any(
                _is_number(v) and abs(float(v)) > MAX_COORD_MM for v in item[1:3]):
            return item
        found = _far_point(item) if item[0] in ("pts", "arc") else None
        if found is not None:
            return found
    return None
