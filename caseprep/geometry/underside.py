"""The underside of a body: the lowest surface height over a plan-view grid.

Used to size the underbody refinement (the volume between floor, tunnels,
diffuser and ground) and to estimate its cell count. Body frame (x rearward,
y right, z up), metres. Pure numpy; nothing is read or written.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class Underside:
    """Lowest body-surface height on a regular plan-view grid (body frame, m).

    ``x`` (nx,) and ``y`` (ny,) cell-centre coordinates, ``dx``, ``dy`` the
    cell sizes (m), ``z`` (nx, ny) the lowest surface height above each cell
    centre (NaN where the body does not cover the centre)."""

    x: np.ndarray
    y: np.ndarray
    dx: float
    dy: float
    z: np.ndarray

    def points(self) -> np.ndarray:
        """(M, 3) body-frame points (x, y, z_lowest) of the covered cells."""
        X, Y = np.meshgrid(self.x, self.y, indexing="ij")
        ok = np.isfinite(self.z)
        return np.column_stack([X[ok], Y[ok], self.z[ok]])

    @property
    def cell_area(self) -> float:
        return float(self.dx * self.dy)


def underside_map(triangles: np.ndarray, cells_along: int = 120, chunk: int = 200_000) -> Underside:
    """Lowest surface height of ``triangles`` (M, 3, 3, body frame, m) over a
    plan-view grid of about ``cells_along`` cells along the body's length
    (square cells, the grid covering the body's x-y bounds).

    Each triangle's projection on the x-y plane is tested against the grid
    cell centres inside its bounding box (barycentric coordinates, vertical
    triangles skipped); the height at a covered centre is the triangle's
    plane interpolated there, and the map keeps the minimum over triangles.
    For a closed surface that is the underside: the first surface hit by a
    vertical ray from below. Exact for the piecewise-linear surface at the
    sampled centres.
    """
    T = np.asarray(triangles, dtype=float)
    if T.ndim != 3 or T.shape[1:] != (3, 3) or len(T) == 0:
        raise ValueError(f"expected (M, 3, 3) triangles, got shape {T.shape}")
    lo, hi = T.reshape(-1, 3).min(axis=0), T.reshape(-1, 3).max(axis=0)
    d = float(hi[0] - lo[0]) / max(1, int(cells_along))
    if not d > 0:
        raise ValueError("expected a body with a positive length along x")
    nx = max(1, int(np.ceil((hi[0] - lo[0]) / d - 1e-9)))
    ny = max(1, int(np.ceil((hi[1] - lo[1]) / d - 1e-9)))
    x = lo[0] + (np.arange(nx) + 0.5) * d
    y = lo[1] + (np.arange(ny) + 0.5) * d
    z = np.full(nx * ny, np.inf)
    a, b, c = T[:, 0], T[:, 1], T[:, 2]
    det = (b[:, 0] - a[:, 0]) * (c[:, 1] - a[:, 1]) - (c[:, 0] - a[:, 0]) * (b[:, 1] - a[:, 1])
    keep = np.abs(det) > 1e-300
    a, b, c, det = a[keep], b[keep], c[keep], det[keep]
    xmin = np.minimum(np.minimum(a[:, 0], b[:, 0]), c[:, 0])
    xmax = np.maximum(np.maximum(a[:, 0], b[:, 0]), c[:, 0])
    ymin = np.minimum(np.minimum(a[:, 1], b[:, 1]), c[:, 1])
    ymax = np.maximum(np.maximum(a[:, 1], b[:, 1]), c[:, 1])
    i0 = np.clip(np.ceil((xmin - lo[0]) / d - 0.5).astype(np.int64), 0, nx)
    i1 = np.clip(np.floor((xmax - lo[0]) / d - 0.5).astype(np.int64), -1, nx - 1)
    j0 = np.clip(np.ceil((ymin - lo[1]) / d - 0.5).astype(np.int64), 0, ny)
    j1 = np.clip(np.floor((ymax - lo[1]) / d - 0.5).astype(np.int64), -1, ny - 1)
    ni, nj = np.maximum(i1 - i0 + 1, 0), np.maximum(j1 - j0 + 1, 0)
    cnt = ni * nj
    has = np.nonzero(cnt)[0]
    # candidate (triangle, cell) pairs, in chunks of about `chunk` pairs
    starts = np.concatenate([[0], np.cumsum(cnt[has])])
    k = 0
    while k < len(has):
        stop = int(np.searchsorted(starts, starts[k] + chunk, side="right")) - 1
        stop = max(stop, k + 1)
        sel = has[k:stop]
        n = cnt[sel]
        tri = np.repeat(sel, n)
        off = np.arange(int(n.sum())) - np.repeat(np.cumsum(n) - n, n)
        ii = i0[tri] + off // nj[tri]
        jj = j0[tri] + off % nj[tri]
        px, py = lo[0] + (ii + 0.5) * d, lo[1] + (jj + 0.5) * d
        A, B, C, D = a[tri], b[tri], c[tri], det[tri]
        l1 = ((px - A[:, 0]) * (C[:, 1] - A[:, 1]) - (C[:, 0] - A[:, 0]) * (py - A[:, 1])) / D
        l2 = ((B[:, 0] - A[:, 0]) * (py - A[:, 1]) - (px - A[:, 0]) * (B[:, 1] - A[:, 1])) / D
        inside = (l1 >= -1e-12) & (l2 >= -1e-12) & (l1 + l2 <= 1.0 + 1e-12)
        h = A[:, 2] + l1 * (B[:, 2] - A[:, 2]) + l2 * (C[:, 2] - A[:, 2])
        np.minimum.at(z, (ii * ny + jj)[inside], h[inside])
        k = stop
    z = z.reshape(nx, ny)
    z[~np.isfinite(z)] = np.nan
    return Underside(x=x, y=y, dx=d, dy=d, z=z)
