"""The underside seen from below, as plain arrays: a regular grid in the
body x–y plane, the lowest body surface above each grid point with its face
values, streak lines of a surface vector field in plan, and area integrals.
Pure numpy.

Axes: body frame (x rearward, y right, z up, m). "Lowest" means smallest
body z: the surface a viewer below the floor sees first, so on a raked or
yawed car the raster still shows the floor, ramp and strakes seen from
below in the body frame.

Grids are aligned to whole multiples of their spacing from the body-frame
origin, so two rasters with the same spacing (two variants, two cases)
share their grid points where they overlap and can be subtracted without
interpolation — the common grid of the pressure-difference pictures.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np


@dataclass(frozen=True)
class PlanGrid:
    """Cells [i·d, (i+1)·d) × [j·d, (j+1)·d) for i0 ≤ i < i1, j0 ≤ j < j1
    (m, body x and y); values belong to the cell centres."""

    spacing: float
    i0: int
    i1: int
    j0: int
    j1: int

    @classmethod
    def covering(cls, x0: float, x1: float, y0: float, y1: float, spacing: float) -> "PlanGrid":
        """The aligned grid covering the rectangle [x0, x1] × [y0, y1] (m)."""
        if not spacing > 0 or not (x1 > x0 and y1 > y0):
            raise ValueError(f"expected a positive spacing and a non-empty rectangle, got {spacing}, "
                             f"{(x0, x1, y0, y1)}")
        d = float(spacing)
        return cls(d, math.floor(x0 / d), math.ceil(x1 / d), math.floor(y0 / d), math.ceil(y1 / d))

    @property
    def shape(self) -> tuple[int, int]:
        return self.i1 - self.i0, self.j1 - self.j0

    @property
    def x(self) -> np.ndarray:
        """Cell-centre x (m)."""
        return (np.arange(self.i0, self.i1) + 0.5) * self.spacing

    @property
    def y(self) -> np.ndarray:
        """Cell-centre y (m)."""
        return (np.arange(self.j0, self.j1) + 0.5) * self.spacing

    @property
    def bounds(self) -> tuple[float, float, float, float]:
        d = self.spacing
        return self.i0 * d, self.i1 * d, self.j0 * d, self.j1 * d

    def union(self, other: "PlanGrid") -> "PlanGrid":
        if not math.isclose(self.spacing, other.spacing, rel_tol=1e-12):
            raise ValueError(f"grids of different spacing: {self.spacing} and {other.spacing}")
        return PlanGrid(self.spacing, min(self.i0, other.i0), max(self.i1, other.i1),
                        min(self.j0, other.j0), max(self.j1, other.j1))


@dataclass(frozen=True, eq=False)
class PlanRaster:
    """The lowest surface above each cell of ``grid``.

    ``height`` (nx, ny) its body z (m), NaN where no surface lies above the
    cell centre; ``face`` (nx, ny) the index of that face (−1: none);
    ``values`` name → (nx, ny) or (nx, ny, k) face values taken over (NaN
    where no face).
    """

    grid: PlanGrid
    height: np.ndarray
    face: np.ndarray
    values: dict[str, np.ndarray] = field(default_factory=dict)

    @property
    def covered(self) -> np.ndarray:
        return self.face >= 0

    def on(self, grid: PlanGrid) -> "PlanRaster":
        """The same raster on another aligned grid of the same spacing (NaN /
        −1 outside this raster)."""
        if not math.isclose(grid.spacing, self.grid.spacing, rel_tol=1e-12):
            raise ValueError("expected a grid of the same spacing")
        nx, ny = grid.shape
        si = slice(max(self.grid.i0, grid.i0), min(self.grid.i1, grid.i1))
        sj = slice(max(self.grid.j0, grid.j0), min(self.grid.j1, grid.j1))

        def move(a, fill):
            out = np.full((nx, ny) + a.shape[2:], fill, dtype=a.dtype if fill == -1 else float)
            if si.stop > si.start and sj.stop > sj.start:
                out[si.start - grid.i0:si.stop - grid.i0, sj.start - grid.j0:sj.stop - grid.j0] = \
                    a[si.start - self.grid.i0:si.stop - self.grid.i0, sj.start - self.grid.j0:sj.stop - self.grid.j0]
            return out

        return PlanRaster(grid, move(self.height, np.nan), move(self.face, -1),
                          {k: move(v, np.nan) for k, v in self.values.items()})

    def area_integral(self, name: str, fn=None) -> float:
        """∫ f dA over the covered cells (m² × unit of the values), the plan
        area of each cell being spacing² (midpoint rule)."""
        v = self.values[name]
        if fn is not None:
            v = fn(v)
        ok = np.isfinite(v)
        return float(v[ok].sum() * self.grid.spacing**2)

    @property
    def covered_area(self) -> float:
        return float(np.count_nonzero(self.covered) * self.grid.spacing**2)


def _triangles(offsets: np.ndarray, conn: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Fan triangulation of polygons: (T, 3) vertex ids and (T,) source
    polygon ids."""
    off = np.asarray(offsets, dtype=np.int64)
    conn = np.asarray(conn, dtype=np.int64)
    counts = np.diff(off)
    tris, src = [], []
    for c in np.unique(counts):
        if c < 3:
            continue
        rows = np.flatnonzero(counts == c)
        base = off[rows]
        for s in range(1, c - 1):
            tris.append(np.stack([conn[base], conn[base + s], conn[base + s + 1]], axis=1))
            src.append(rows)
    if not tris:
        return np.zeros((0, 3), dtype=np.int64), np.zeros(0, dtype=np.int64)
    return np.concatenate(tris), np.concatenate(src)


def rasterise_lowest(points: np.ndarray, offsets: np.ndarray, connectivity: np.ndarray, grid: PlanGrid,
                     face_values: dict[str, np.ndarray] | None = None, *,
                     point_values: dict[str, np.ndarray] | None = None, chunk: int = 2_000_000) -> PlanRaster:
    """The lowest (smallest z) surface above every cell centre of ``grid``.

    ``points`` (N, 3) m (body frame); polygons as ``offsets`` (F+1,) and
    ``connectivity``; ``face_values`` name → (F,) or (F, k) per-face values
    carried over to the raster; ``point_values`` name → (N,) per-point
    values interpolated linearly over the hit triangle (smooth pictures).
    Each polygon is split into a fan of
    triangles; a cell centre inside a triangle's plan projection (edges
    included) gets the triangle's z there (linear interpolation) and the
    lowest one wins. Triangles seen edge-on from below (vertical walls)
    cover no cell centre. Cost O(faces + covered cells), in chunks of at
    most ``chunk`` candidate (triangle, cell) pairs.
    """
    P = np.asarray(points, dtype=np.float64)
    tri, src = _triangles(offsets, connectivity)
    nx, ny = grid.shape
    best_z = np.full(nx * ny, np.inf)
    best_f = np.full(nx * ny, -1, dtype=np.int64)
    best_t = np.full(nx * ny, -1, dtype=np.int64)
    best_l = np.zeros((nx * ny, 2))
    d = grid.spacing
    if tri.shape[0]:
        A, B, C = P[tri[:, 0]], P[tri[:, 1]], P[tri[:, 2]]
        xs = np.stack([A[:, 0], B[:, 0], C[:, 0]], axis=1)
        ys = np.stack([A[:, 1], B[:, 1], C[:, 1]], axis=1)
        # cell-centre index ranges inside each triangle's bounding box
        ia = np.maximum(np.ceil(xs.min(axis=1) / d - 0.5).astype(np.int64), grid.i0)
        ib = np.minimum(np.floor(xs.max(axis=1) / d - 0.5).astype(np.int64), grid.i1 - 1)
        ja = np.maximum(np.ceil(ys.min(axis=1) / d - 0.5).astype(np.int64), grid.j0)
        jb = np.minimum(np.floor(ys.max(axis=1) / d - 0.5).astype(np.int64), grid.j1 - 1)
        ni, nj = ib - ia + 1, jb - ja + 1
        det = (B[:, 0] - A[:, 0]) * (C[:, 1] - A[:, 1]) - (C[:, 0] - A[:, 0]) * (B[:, 1] - A[:, 1])
        scale = np.maximum(np.ptp(xs, axis=1), np.ptp(ys, axis=1)) ** 2
        keep = np.flatnonzero((ni > 0) & (nj > 0) & (np.abs(det) > 1e-12 * np.maximum(scale, 1e-300)))
        cnt = ni[keep] * nj[keep]
        csum = np.cumsum(cnt)
        start = 0
        while start < keep.size:
            stop = int(np.searchsorted(csum, (csum[start - 1] if start else 0) + chunk, side="right"))
            stop = max(stop, start + 1)
            t = keep[start:stop]
            c = cnt[start:stop]
            rep = np.repeat(np.arange(t.size), c)
            first = np.concatenate([[0], np.cumsum(c)[:-1]])
            k = np.arange(rep.size) - first[rep]
            tt = t[rep]
            i = ia[tt] + k // nj[tt]
            j = ja[tt] + k % nj[tt]
            px, py = (i + 0.5) * d, (j + 0.5) * d
            ax, ay = A[tt, 0], A[tt, 1]
            l1 = ((px - ax) * (C[tt, 1] - ay) - (C[tt, 0] - ax) * (py - ay)) / det[tt]
            l2 = ((B[tt, 0] - ax) * (py - ay) - (px - ax) * (B[tt, 1] - ay)) / det[tt]
            l0 = 1.0 - l1 - l2
            eps = -1e-9
            inside = (l0 >= eps) & (l1 >= eps) & (l2 >= eps)
            z = l0 * A[tt, 2] + l1 * B[tt, 2] + l2 * C[tt, 2]
            cell = (i - grid.i0) * ny + (j - grid.j0)
            cell, z, tr = cell[inside], z[inside], tt[inside]
            lb = np.stack([l1[inside], l2[inside]], axis=1)
            if cell.size:
                order = np.lexsort((z, cell))
                cell, z, tr, lb = cell[order], z[order], tr[order], lb[order]
                head = np.concatenate([[True], cell[1:] != cell[:-1]])
                cell, z, tr, lb = cell[head], z[head], tr[head], lb[head]
                better = z < best_z[cell]
                best_z[cell[better]] = z[better]
                best_f[cell[better]] = src[tr[better]]
                best_t[cell[better]] = tr[better]
                best_l[cell[better]] = lb[better]
            start = stop
    height = np.where(np.isfinite(best_z), best_z, np.nan).reshape(nx, ny)
    face = best_f.reshape(nx, ny)
    vals = {}
    for name, v in (face_values or {}).items():
        v = np.asarray(v, dtype=np.float64)
        out = np.full((nx * ny,) + v.shape[1:], np.nan)
        hit = best_f >= 0
        out[hit] = v[best_f[hit]]
        vals[name] = out.reshape((nx, ny) + v.shape[1:])
    hit = best_t >= 0
    for name, v in (point_values or {}).items():
        v = np.asarray(v, dtype=np.float64)
        out = np.full(nx * ny, np.nan)
        t = tri[best_t[hit]]
        l1, l2 = best_l[hit, 0], best_l[hit, 1]
        out[hit] = (1.0 - l1 - l2) * v[t[:, 0]] + l1 * v[t[:, 1]] + l2 * v[t[:, 2]]
        vals[name] = out.reshape(nx, ny)
    return PlanRaster(grid, height, face, vals)


def point_average(n_points: int, offsets: np.ndarray, connectivity: np.ndarray, face_values: np.ndarray,
                  weights: np.ndarray | None = None) -> np.ndarray:
    """Per-point values from per-face values: the (``weights``-weighted, e.g.
    area-weighted) mean over the faces sharing each point (NaN for points of
    no face)."""
    off = np.asarray(offsets, dtype=np.int64)
    conn = np.asarray(connectivity, dtype=np.int64)
    counts = np.diff(off)
    face = np.repeat(np.arange(counts.size), counts)
    w = np.ones(counts.size) if weights is None else np.asarray(weights, dtype=np.float64)
    v = np.asarray(face_values, dtype=np.float64)
    num = np.bincount(conn, weights=(w * v)[face], minlength=n_points)
    den = np.bincount(conn, weights=w[face], minlength=n_points)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(den > 0, num / den, np.nan)


def difference(a: PlanRaster, b: PlanRaster, name: str, grid: PlanGrid | None = None) -> PlanRaster:
    """a − b of the value ``name`` on the common grid (default: the union of
    both grids); NaN where either raster has no surface. The heights are a's."""
    g = grid or a.grid.union(b.grid)
    ra, rb = a.on(g), b.on(g)
    dv = ra.values[name] - rb.values[name]
    face = np.where(np.isfinite(dv), ra.face, -1)
    return PlanRaster(g, ra.height, face, {name: dv})


def plan_streaks(raster: PlanRaster, vector: str, *, spacing_cells: int = 8, rakes=(0.02, 0.3, 0.55, 0.75, 0.9),
                 step: float = 0.5, max_steps: int = 2000, min_length: int = 4) -> list[np.ndarray]:
    """Streak lines of the plan projection of a surface vector field (e.g.
    the wall shear stress): curves tangent to (v_x, v_y) in the x–y plane,
    lifted onto the raster's surface height. The plan projection of a curve
    on the surface z = f(x, y) that is tangent to a surface vector v is
    tangent to (v_x, v_y), so these are the projections of the surface
    streak lines.

    Seeds on spanwise rakes at the fractions ``rakes`` of the covered x
    extent, ``spacing_cells`` raster cells apart; the rakes are traced one
    after the other, front first, forward and backward with the midpoint
    rule (``step`` cells per step, along the unit direction, nearest-cell
    lookup: streak lines show direction, not magnitude). A line stops on
    leaving the covered cells, where the field vanishes or turns back on
    itself, after ``max_steps``, or where an earlier rake's line already
    passed (an occupancy grid of half the seed spacing), which keeps the
    lines roughly evenly spaced (a simplified form of evenly-spaced
    streamline placement; common practice, no source). Returns (K, 3)
    polylines (m, body frame) of at least ``min_length`` points.
    """
    v = raster.values[vector]
    g = raster.grid
    nx, ny = g.shape
    d = g.spacing
    vx, vy = v[..., 0], v[..., 1]
    mag = np.hypot(vx, vy)
    ok = raster.covered & np.isfinite(mag)
    if not ok.any():
        return []
    med = float(np.nanmedian(mag[ok]))
    ok &= mag > 1e-6 * med if med > 0 else mag > 0
    with np.errstate(invalid="ignore", divide="ignore"):
        ux, uy = np.where(ok, vx / mag, 0.0), np.where(ok, vy / mag, 0.0)
    occ_size = max(1, spacing_cells // 2)
    occ = np.zeros((nx // occ_size + 1, ny // occ_size + 1), dtype=bool)
    cols = np.flatnonzero(ok.any(axis=1))
    if cols.size == 0:
        return []
    c0, c1 = cols[0], cols[-1]

    def look(p):
        ii = np.floor(p[:, 0]).astype(int)
        jj = np.floor(p[:, 1]).astype(int)
        inb = (ii >= 0) & (ii < nx) & (jj >= 0) & (jj < ny)
        ii, jj = np.clip(ii, 0, nx - 1), np.clip(jj, 0, ny - 1)
        return np.stack([ux[ii, jj], uy[ii, jj]], axis=1), inb & ok[ii, jj], ii, jj

    out = []
    for frac in rakes:
        i = int(round(c0 + frac * (c1 - c0)))
        js = np.flatnonzero(ok[i])
        js = js[(js % spacing_cells) == spacing_cells // 2]
        js = js[~occ[i // occ_size, js // occ_size]]
        if js.size == 0:
            continue
        halves = []
        for sign in (+1.0, -1.0):
            pos = np.stack([np.full(js.size, i + 0.5), js + 0.5], axis=1)
            path = [pos.copy()]
            alive = np.ones(js.size, dtype=bool)
            start_cell = (np.full(js.size, i // occ_size), js // occ_size)
            for _ in range(max_steps):
                u0, g0, _, _ = look(pos)
                u1, g1, _, _ = look(pos + sign * 0.5 * step * u0)
                new = pos + sign * step * u1
                _, g2, ii, jj = look(new)
                oi, oj = ii // occ_size, jj // occ_size
                own = (oi == start_cell[0]) & (oj == start_cell[1])
                alive &= g0 & g1 & g2 & (np.einsum("ij,ij->i", u0, u1) > 0) & (~occ[oi, oj] | own)
                pos = np.where(alive[:, None], new, pos)
                path.append(np.where(alive[:, None], pos, np.nan))
                if not alive.any():
                    break
            halves.append(np.stack(path, axis=1))
        fwd, back = halves
        for s in range(js.size):
            a = fwd[s][np.isfinite(fwd[s, :, 0])]
            b = back[s][np.isfinite(back[s, :, 0])][::-1]
            q = np.concatenate([b[:-1], a]) if b.shape[0] > 1 else a
            if q.shape[0] < min_length:
                continue
            ii = np.clip(np.floor(q[:, 0]).astype(int), 0, nx - 1)
            jj = np.clip(np.floor(q[:, 1]).astype(int), 0, ny - 1)
            occ[ii // occ_size, jj // occ_size] = True
            x = (g.i0 + q[:, 0]) * d
            y = (g.j0 + q[:, 1]) * d
            out.append(np.stack([x, y, raster.height[ii, jj]], axis=1))
    return out
