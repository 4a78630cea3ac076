"""Polygon geometry: the one routine for the area vectors and centroids of
polygonal faces (surface patches, cut sections, boundary faces), and how
open a surface is. Pure numpy.

Each face is a planar or non-planar polygon with vertices p_0 … p_{n−1}. Its
area vector is the exact vector area S = ½ Σ_i p_i × p_{i+1} (the sum of the
fan triangles (p_0, p_i, p_{i+1})), oriented by the vertex order (right-hand
rule); its centroid is the fan triangles' centroids weighted by their area
projected on S (exact for planar polygons, convex or not). Faces are grouped
by vertex count and processed in cache-sized chunks with component
arithmetic on contiguous float64 arrays. Lengths m, areas m².
"""
from __future__ import annotations

import numpy as np

from caseprep.contract.errors import UserError

CHUNK = 32_768  # faces per chunk: its temporaries (~50 arrays of CHUNK float64) stay in the CPU cache


class _Faces:
    """Faces grouped by vertex count.

    ``groups``: list of ``(k, n, index, block, starts)``: n faces of k
    vertices; ``index`` their positions in the input (None: all faces, in
    order); their vertex indices are the rows of ``block`` (n, k) or
    ``conn[starts + j]``, j = 0 … k−1.
    """

    def __init__(self, faces) -> None:
        self.conn: np.ndarray | None = None
        self.off: np.ndarray | None = None
        self.block: np.ndarray | None = None
        if isinstance(faces, tuple) and len(faces) == 2:
            off = np.asarray(faces[0])
            conn = np.asarray(faces[1])
            if off.ndim != 1 or off.size < 1:
                raise ValueError("expected offsets as a 1-D array of M+1 entries")
            self.off, self.conn = off, conn
            m = off.size - 1
            self.m = m
            self.groups: list[tuple] = []
            if m == 0:
                return
            sizes = np.diff(off)
            small = sizes < 3
            if small.any():
                bad = int(np.flatnonzero(small)[0])
                raise UserError(
                    expected="faces with at least 3 vertices",
                    got=f"{int(small.sum())} face(s) with fewer (first: face {bad})",
                    key="faces", fix="give a polygonal surface (lines and points carry no area)")
            k = int(sizes[0])
            if np.all(sizes == k):
                if off[0] == 0 and conn.size == m * k:
                    self.block = conn.reshape(m, k)
                    self.groups = [(k, m, None, self.block, None)]
                else:
                    self.groups = [(k, m, None, None, off[:-1])]
            else:
                for k in np.unique(sizes):
                    idx = np.flatnonzero(sizes == k)
                    self.groups.append((int(k), idx.size, idx, None, off[:-1][idx]))
            return
        arr = np.asarray(faces)
        if arr.ndim != 2:
            raise ValueError("expected faces as an (M, k) array or an (offsets, connectivity) pair")
        self.m = arr.shape[0]
        if arr.shape[1] < 3 and self.m:
            raise UserError(expected="faces with at least 3 vertices", got=f"{arr.shape[1]}-vertex faces",
                            key="faces", fix="give a polygonal surface (lines and points carry no area)")
        self.block = arr
        self.groups = [(arr.shape[1], self.m, None, arr, None)] if self.m else []

    def rows(self, group: tuple, lo: int, hi: int) -> np.ndarray:
        """Vertex indices (n, k) of faces lo…hi−1 of a group."""
        k, _, _, block, starts = group
        if block is not None:
            return block[lo:hi]
        return self.conn.take(starts[lo:hi, None] + np.arange(k))

    def face_rows(self, i: int) -> np.ndarray:
        """Vertex indices (1, k) of face i alone."""
        if self.block is not None:
            return self.block[i:i + 1]
        return self.conn[None, self.off[i]:self.off[i + 1]]


def _coords(points: np.ndarray, shift: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """x, y, z of the points minus ``shift`` as contiguous float64 arrays (new arrays)."""
    P = np.asarray(points)
    if P.size == 0:
        return tuple(np.zeros(0) for _ in range(3))  # type: ignore[return-value]
    return tuple(np.subtract(P[:, i], shift[i], dtype=np.float64) for i in range(3))  # type: ignore[return-value]


def _polygons(X: np.ndarray, Y: np.ndarray, Z: np.ndarray, rows: np.ndarray) -> tuple[np.ndarray, ...]:
    """Area vectors, centroids and squared areas of polygons of k vertices.

    ``rows``: (n, k) vertex indices into the coordinate arrays X, Y, Z
    (float64, m). Returns (Sx, Sy, Sz, cx, cy, cz, W) as 1-D float64 arrays,
    W = |S|² (m⁴). Exact vector area S = ½ Σ p_i × p_{i+1}; centroid of the
    fan triangles (p_0, p_j, p_{j+1}) weighted by their area projected on S
    (exact for planar faces); a zero-area face gets its vertex average.
    Triangles: S = ½ (p1 − p0) × (p2 − p0), c = (p0 + p1 + p2)/3. Quads:
    S = ½ (p2 − p0) × (p3 − p1); triangles (p0 p1 p2), (p0 p2 p3).
    Component arithmetic on contiguous arrays (faster than N×3 cross products).
    """
    k = rows.shape[1]
    xb, yb, zb = X.take(rows), Y.take(rows), Z.take(rows)  # (n, k) each
    x = [xb[:, j] for j in range(k)]
    y = [yb[:, j] for j in range(k)]
    z = [zb[:, j] for j in range(k)]
    x0, y0, z0 = x[0], y[0], z[0]
    if k == 3:
        ax, ay, az = x[1] - x0, y[1] - y0, z[1] - z0
        bx, by, bz = x[2] - x0, y[2] - y0, z[2] - z0
        Sx = 0.5 * (ay * bz - az * by)
        Sy = 0.5 * (az * bx - ax * bz)
        Sz = 0.5 * (ax * by - ay * bx)
        W = Sx * Sx + Sy * Sy + Sz * Sz
        cx = (x0 + x[1] + x[2]) / 3.0
        cy = (y0 + y[1] + y[2]) / 3.0
        cz = (z0 + z[1] + z[2]) / 3.0
        return Sx, Sy, Sz, cx, cy, cz, W
    if k == 4:
        x1, y1, z1, x2, y2, z2, x3, y3, z3 = x[1], y[1], z[1], x[2], y[2], z[2], x[3], y[3], z[3]
        ax, ay, az = x2 - x0, y2 - y0, z2 - z0
        bx, by, bz = x3 - x1, y3 - y1, z3 - z1
        Sx = 0.5 * (ay * bz - az * by)
        Sy = 0.5 * (az * bx - ax * bz)
        Sz = 0.5 * (ax * by - ay * bx)
        W = Sx * Sx + Sy * Sy + Sz * Sz
        ex, ey, ez = x1 - x0, y1 - y0, z1 - z0  # A1 = ½ (p1 − p0) × (p2 − p0): triangle (p0 p1 p2)
        w1 = 0.5 * ((ey * az - ez * ay) * Sx + (ez * ax - ex * az) * Sy + (ex * ay - ey * ax) * Sz)
        with np.errstate(invalid="ignore", divide="ignore"):
            f1 = w1 / W  # share of triangle (p0 p1 p2); (p0 p2 p3) has 1 − f1
        bad = ~np.isfinite(f1)
        anybad = bool(bad.any())
        if anybad:
            f1[bad] = 0.5
        # c = [(p0 + p1 + p2) f1 + (p0 + p2 + p3)(1 − f1)] / 3
        cx = (x0 + x2 + x3 + f1 * (x1 - x3)) / 3.0
        cy = (y0 + y2 + y3 + f1 * (y1 - y3)) / 3.0
        cz = (z0 + z2 + z3 + f1 * (z1 - z3)) / 3.0
        if anybad:  # zero-area faces: vertex average
            for c, v in ((cx, x), (cy, y), (cz, z)):
                c[bad] = 0.25 * (v[0][bad] + v[1][bad] + v[2][bad] + v[3][bad])
        return Sx, Sy, Sz, cx, cy, cz, W
    Sx, Sy, Sz = np.zeros(x0.size), np.zeros(x0.size), np.zeros(x0.size)
    tris = []
    for j in range(1, k - 1):
        ax, ay, az = x[j] - x0, y[j] - y0, z[j] - z0
        bx, by, bz = x[j + 1] - x0, y[j + 1] - y0, z[j + 1] - z0
        tx = 0.5 * (ay * bz - az * by)
        ty = 0.5 * (az * bx - ax * bz)
        tz = 0.5 * (ax * by - ay * bx)
        Sx += tx
        Sy += ty
        Sz += tz
        tris.append((tx, ty, tz, j))
    W = Sx * Sx + Sy * Sy + Sz * Sz
    wsum = np.zeros(x0.size)
    cx, cy, cz = np.zeros(x0.size), np.zeros(x0.size), np.zeros(x0.size)
    for tx, ty, tz, j in tris:
        w = tx * Sx + ty * Sy + tz * Sz  # triangle area projected on S, times |S|
        wsum += w
        cx += w * (x0 + x[j] + x[j + 1])
        cy += w * (y0 + y[j] + y[j + 1])
        cz += w * (z0 + z[j] + z[j + 1])
    wsum *= 3.0
    with np.errstate(invalid="ignore", divide="ignore"):
        cx /= wsum
        cy /= wsum
        cz /= wsum
    bad = ~(np.isfinite(cx) & np.isfinite(cy) & np.isfinite(cz))
    if bad.any():  # zero-area faces: vertex average
        for c, v in ((cx, x), (cy, y), (cz, z)):
            c[bad] = sum(vv[bad] for vv in v) / k
    return Sx, Sy, Sz, cx, cy, cz, W


def face_geometry(points: np.ndarray, faces) -> tuple[np.ndarray, np.ndarray]:
    """Area vectors (M×3, m², orientation from the vertex order by the
    right-hand rule) and centroids (M×3, m) of polygonal faces, float64.

    ``faces``: (M, k) vertex indices or ``(offsets, connectivity)``.
    The area vector is exact for any polygon (½ Σ p_i × p_{i+1}); the centroid
    is exact for planar polygons.
    """
    fc = _Faces(faces)
    if fc.block is not None and fc.block.shape[1] < 3:
        raise UserError(expected="faces with at least 3 vertices", got=f"{fc.block.shape[1]}-vertex faces", key="faces",
                        fix="give a polygonal surface (lines and points carry no area)")
    X, Y, Z = _coords(points, np.zeros(3))
    S = np.empty((fc.m, 3))
    C = np.empty((fc.m, 3))
    for g in fc.groups:
        n, index = g[1], g[2]
        for lo in range(0, n, CHUNK):
            hi = min(lo + CHUNK, n)
            sel = slice(lo, hi) if index is None else index[lo:hi]
            Sx, Sy, Sz, cx, cy, cz, _ = _polygons(X, Y, Z, fc.rows(g, lo, hi))
            S[sel, 0], S[sel, 1], S[sel, 2] = Sx, Sy, Sz
            C[sel, 0], C[sel, 1], C[sel, 2] = cx, cy, cz
    return S, C


def closure(area_vectors: np.ndarray) -> float:
    """How open a surface is: |Σ S| / Σ |S| (dimensionless, 0 for a closed
    surface, up to 1 for a flat patch). A closed surface's integral of a
    uniform pressure vanishes (Gauss's divergence theorem)."""
    S = np.asarray(area_vectors, dtype=np.float64)
    tot = float(np.linalg.norm(S, axis=1).sum())
    return float(np.linalg.norm(S.sum(axis=0)) / tot) if tot > 0 else 1.0
