"""Compare the engine's own perfect-conductor map with the drawing before a long run.

``openEMS --debug-PEC`` writes every mesh edge it treats as perfect conductor to ``PEC_dump.vtp`` (VTK XML
poly-data, appended base64, zlib-compressed blocks).  A trace staircased into pieces, or a slot edge that landed
off its polygon, shows up here in seconds instead of as a wrong curve after an hour.
"""
from __future__ import annotations

import base64
import re
import struct
import zlib
from pathlib import Path

import numpy as np
import shapely
from shapely.ops import unary_union

from ..errors import EbgError
from .model import Model

_TYPES = {"Float32": np.float32, "Float64": np.float64, "Int32": np.int32, "Int64": np.int64, "UInt32": np.uint32,
          "UInt64": np.uint64}


class DrawnCheckFailed(EbgError):
    """The engine's conductor map differs from the drawing."""


def read_pec_edges(path: Path) -> tuple[np.ndarray, np.ndarray]:
    """(points in mm (n, 3), line segments as point-index pairs (m, 2)) from an openEMS PEC dump."""
    text = Path(path).read_text(encoding="ascii", errors="replace")
    head, _, tail = text.partition("<AppendedData")
    blob = tail[tail.index("_") + 1:].split("</AppendedData>")[0].strip()
    header_type = re.search(r'header_type="(\w+)"', text)
    htype = _TYPES[header_type.group(1)] if header_type else np.uint32
    compressed = "vtkZLibDataCompressor" in text

    def array(section: str, name: str) -> np.ndarray:
        found = re.search(rf"<{section}>.*?<DataArray type=\"(\w+)\" Name=\"{name}\"[^>]*offset=\"(\d+)\"", head,
                          re.S)
        if not found:
            raise EbgError(f"openEMS PEC dump {path}: no {section}/{name} array")
        return _decode(blob, int(found.group(2)), _TYPES[found.group(1)], htype, compressed)

    points = array("Points", "Points").reshape(-1, 3).astype(float) * 1e3
    conn = array("Lines", "connectivity")
    offsets = array("Lines", "offsets")
    starts = np.concatenate([[0], offsets[:-1]])
    if not np.all(offsets - starts == 2):
        raise EbgError(f"openEMS PEC dump {path}: lines are not single segments")
    return points, conn.reshape(-1, 2)


def _decode(blob: str, offset: int, dtype, htype, compressed: bool) -> np.ndarray:
    hsize = np.dtype(htype).itemsize
    if not compressed:
        first = base64.b64decode(blob[offset:offset + 8 * ((hsize + 2) // 3 + 1)])
        nbytes = struct.unpack("<" + ("I" if hsize == 4 else "Q"), first[:hsize])[0]
        raw = base64.b64decode(blob[offset:offset + 4 * ((hsize + nbytes + 2) // 3)])[hsize:hsize + nbytes]
        return np.frombuffer(raw, dtype=dtype)
    # compressed: a base64 header [blocks, block size, last block size, compressed sizes...], then the data
    chunk = 4 * ((3 * hsize + 2) // 3)
    start = base64.b64decode(blob[offset:offset + chunk])
    blocks = int(np.frombuffer(start[:hsize], dtype=htype)[0])
    if blocks == 0:
        return np.zeros(0, dtype=dtype)
    hlen = 4 * (((3 + blocks) * hsize + 2) // 3)
    header = np.frombuffer(base64.b64decode(blob[offset:offset + hlen]), dtype=htype)[:3 + blocks]
    sizes = header[3:].astype(int)
    data_len = 4 * ((int(sizes.sum()) + 2) // 3)
    data = base64.b64decode(blob[offset + hlen:offset + hlen + data_len])
    out, pos = [], 0
    for size in sizes:
        out.append(zlib.decompress(data[pos:pos + size]))
        pos += size
    return np.frombuffer(b"".join(out), dtype=dtype)


def check_pec_dump(model: Model, path: Path) -> dict:
    """Refuse unless (1) each trace's conductor at its height is one connected piece joining its ports and not
    touching the other trace, and (2) on every cut plane no conductor edge lies inside a slot, every slot keeps at
    least one mesh cell, and every mesh edge inside the drawn copper is conductor.  Returns counts."""
    points, segs = read_pec_edges(path)
    tol = 1e-4
    z = points[:, 2]
    counts = {"pec_edges": int(len(segs))}

    z_pair = next(s.z for s in model.sheets if s.name == "traces")
    at_pair = np.all(np.abs(z[segs] - z_pair) < tol, axis=1)
    comp = _components(len(points), segs[at_pair])
    pair_nodes = np.flatnonzero(np.abs(z - z_pair) < tol)
    seen = {}
    for port in model.ports:
        feed = port.feeds[0]
        pts = points[pair_nodes]
        across = (pts[:, 1] > feed.y0 - tol) & (pts[:, 1] < feed.y1 + tol)
        near = pair_nodes[(np.abs(pts[:, 0] - feed.x) < tol) & across]
        if not len(near):
            raise DrawnCheckFailed(f"fullwave check: port {port.number} ({port.polarity} {port.end} end) touches no "
                                   "trace copper in the engine's conductor map; nothing run")
        seen.setdefault(port.polarity, set()).update(comp[near].tolist())
    for polarity, groups in seen.items():
        if len(groups) != 1:
            raise DrawnCheckFailed(f"fullwave check: trace {polarity} is {len(groups)} separate pieces of copper in "
                                   "the engine's mesh (staircased); refine the mesh over its bends; nothing run")
    if len(seen) == 2 and seen["P"] == seen["N"]:
        raise DrawnCheckFailed("fullwave check: traces P and N touch in the engine's mesh; nothing run")

    for sheet in model.sheets:
        if sheet.name == "traces":
            continue
        at_plane = np.all(np.abs(z[segs] - sheet.z) < tol, axis=1)
        mids = points[segs[at_plane]].mean(axis=1)[:, :2]
        copper = unary_union(sheet.polygons)
        x0, x1, y0, y1 = model.domain[:4]
        gap = shapely.box(x0, y0, x1, y1).difference(copper)
        inside_gap = shapely.contains_xy(gap.buffer(-tol), mids[:, 0], mids[:, 1])
        if inside_gap.any():
            bad = mids[np.flatnonzero(inside_gap)[0]]
            raise DrawnCheckFailed(f"fullwave check: the engine put copper inside a slot of {sheet.name} near "
                                   f"({bad[0]:.4f}, {bad[1]:.4f}) mm (model frame); nothing run")
        for part in getattr(gap, "geoms", [gap]):
            if part.is_empty:
                continue
            if len(_edge_midpoints(model, part.buffer(-tol))) == 0:
                at = part.representative_point()
                raise DrawnCheckFailed(f"fullwave check: the slot of {sheet.name} near ({at.x:.4f}, {at.y:.4f}) mm "
                                       "(model frame) has no mesh cell in it, so the engine closed it; nothing run")
        _check_edges_on_lines(sheet.name, points, segs[at_plane], gap, tol, model.domain[:4])
        expected = _edge_midpoints(model, copper.buffer(-tol))
        if len(expected):
            from scipy.spatial import cKDTree

            distance, _ = cKDTree(mids).query(expected) if len(mids) else (np.full(len(expected), np.inf), None)
            missing = np.flatnonzero(distance > 1e-3)
            if len(missing):
                bad = expected[missing[0]]
                raise DrawnCheckFailed(f"fullwave check: {len(missing)} mesh edges inside the copper of {sheet.name} "
                                       f"are not conductor in the engine's map, first near ({bad[0]:.4f}, "
                                       f"{bad[1]:.4f}) mm (model frame); nothing run")
        counts[sheet.name] = int(at_plane.sum())
    return counts


def _check_edges_on_lines(name: str, points: np.ndarray, segs: np.ndarray, gap, tol: float, walls) -> None:
    """Every axis-aligned slot edge is lined, over at least 90 % of its length, by conductor edges of the dump
    lying exactly on it: the copper ends where the polygon says, not on a neighbouring mesh line."""
    a, b = points[segs[:, 0], :2], points[segs[:, 1], :2]
    for part in getattr(gap, "geoms", [gap]):
        if part.is_empty:
            continue
        for ring in (part.exterior, *part.interiors):
            xy = np.asarray(ring.coords)
            for (ax, ay), (bx, by) in zip(xy[:-1], xy[1:]):
                if abs(ax - bx) < tol:
                    axis, value, lo, hi = 0, ax, min(ay, by), max(ay, by)
                elif abs(ay - by) < tol:
                    axis, value, lo, hi = 1, ay, min(ax, bx), max(ax, bx)
                else:
                    continue
                if min(abs(value - w) for w in walls[2 * axis:2 * axis + 2]) < tol:
                    continue  # the domain's own wall (a half domain's symmetry plane), not a drawn edge
                other = 1 - axis
                on = (np.abs(a[:, axis] - value) < tol) & (np.abs(b[:, axis] - value) < tol)
                s0 = np.clip(np.minimum(a[on, other], b[on, other]), lo, hi)
                s1 = np.clip(np.maximum(a[on, other], b[on, other]), lo, hi)
                if (s1 - s0).sum() < 0.9 * (hi - lo):
                    where = ("x", "y")[axis]
                    raise DrawnCheckFailed(f"fullwave check: the slot edge {where} = {value:.4f} mm of {name} (model "
                                           "frame) did not land on a mesh line in the engine's map; nothing run")


def _edge_midpoints(model: Model, region) -> np.ndarray:
    """Midpoints (k, 2) of the mesh edges in an x-y plane whose midpoint lies strictly inside ``region``."""
    mx, my, _ = model.mesh
    xm = 0.5 * (mx[1:] + mx[:-1])
    ym = 0.5 * (my[1:] + my[:-1])
    found = []
    for xs, ys in ((xm, my), (mx, ym)):
        gx, gy = np.meshgrid(xs, ys, indexing="ij")
        pts = np.column_stack([gx.ravel(), gy.ravel()])
        found.append(pts[shapely.contains_xy(region, pts[:, 0], pts[:, 1])])
    return np.concatenate(found)


def _components(n: int, edges: np.ndarray) -> np.ndarray:
    """Connected-component label of each of n nodes under the given edges (scipy's sparse graph routine)."""
    from scipy.sparse import coo_matrix
    from scipy.sparse.csgraph import connected_components

    graph = coo_matrix((np.ones(len(edges)), (edges[:, 0], edges[:, 1])), shape=(n, n))
    return connected_components(graph, directed=False)[1]
