"""Surface checks of a triangulated body (pure numpy): welding, closedness,
orientation, degenerate faces, enclosed volume, plausible size.

Coordinates in the body frame, m (see :mod:`caseprep.contract.frames`);
inputs are never modified.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from caseprep.contract.errors import UserError
from caseprep.geometry.stl import LENGTH_UNITS

# Plausible body sizes (m): a largest extent outside this range almost
# certainly means a wrong length_unit (common practice, no source).
PLAUSIBLE_SIZE = (0.01, 60.0)


def weld(triangles: np.ndarray, rel_tol: float = 2.0**-20) -> tuple[np.ndarray, np.ndarray]:
    """Merge coincident vertices. Returns (points (N,3) m, faces (M,3) int).

    Coordinates are rounded to a grid of ``rel_tol`` × (largest bounding-box
    side), about 1e-6 of the body size, and vertices on the same grid point
    are one vertex. The three grid indices (21 bits each) are packed into one
    64-bit key so the merge is a 1-D sort.
    """
    t = np.asarray(triangles, dtype=float)
    v = t.reshape(-1, 3)
    lo = v.min(axis=0)
    size = float((v.max(axis=0) - lo).max()) or 1.0
    q = np.round((v - lo) / (size * rel_tol)).astype(np.int64)
    key = (q[:, 0] << 42) | (q[:, 1] << 21) | q[:, 2]
    _, first, inverse = np.unique(key, return_index=True, return_inverse=True)
    return v[first], inverse.reshape(-1, 3)


@dataclass(frozen=True)
class SurfaceReport:
    """Topology and size facts of a surface (m, m², m³, body frame)."""

    n_triangles: int
    n_points: int
    open_edges: int            # undirected edges used by one face only
    nonmanifold_edges: int     # undirected edges used by more than two faces
    misoriented_edges: int     # edges used twice in the same direction
    degenerate_faces: int      # zero-area faces (after welding)
    volume: float              # signed enclosed volume, m³ (> 0: outward normals)
    area: float                # surface area, m²
    bounds: tuple[tuple[float, float, float], tuple[float, float, float]]

    @property
    def closed(self) -> bool:
        return self.open_edges == 0 and self.nonmanifold_edges == 0

    @property
    def extent(self) -> np.ndarray:
        return np.asarray(self.bounds[1]) - np.asarray(self.bounds[0])


def inspect_surface(triangles: np.ndarray, welded: tuple[np.ndarray, np.ndarray] | None = None) -> SurfaceReport:
    """Topology checks of a triangulated surface (input untouched).

    Closed: every undirected edge shared by exactly two faces. Consistently
    oriented: each of those edges used once in each direction. Degenerate:
    faces whose area is below 1e-12 × (bbox diagonal)² or with repeated
    welded vertices. Volume by the divergence theorem, V = Σ v0·(v1×v2)/6.
    ``welded``: the result of :func:`weld` for these triangles, if already computed.
    """
    t = np.asarray(triangles, dtype=float)
    pts, faces = welded if welded is not None else weld(t)
    n = len(pts)
    cr = np.cross(t[:, 1] - t[:, 0], t[:, 2] - t[:, 0])
    area2 = np.linalg.norm(cr, axis=1)
    lo, hi = t.reshape(-1, 3).min(axis=0), t.reshape(-1, 3).max(axis=0)
    diag = float(np.linalg.norm(hi - lo)) or 1.0
    degenerate = (area2 < 2e-12 * diag**2) | (faces[:, 0] == faces[:, 1]) | (faces[:, 1] == faces[:, 2]) | (faces[:, 0] == faces[:, 2])
    f = faces[~degenerate]
    a = np.concatenate([f[:, 0], f[:, 1], f[:, 2]]).astype(np.int64)
    b = np.concatenate([f[:, 1], f[:, 2], f[:, 0]]).astype(np.int64)
    und = np.minimum(a, b) * n + np.maximum(a, b)
    _, ucount = np.unique(und, return_counts=True)
    _, dcount = np.unique(a * n + b, return_counts=True)
    volume = float(np.einsum("ij,ij->", t[:, 0], np.cross(t[:, 1], t[:, 2])) / 6.0)
    return SurfaceReport(
        n_triangles=int(t.shape[0]),
        n_points=int(n),
        open_edges=int(np.sum(ucount == 1)),
        nonmanifold_edges=int(np.sum(ucount > 2)),
        misoriented_edges=int(np.sum(dcount > 1)),
        degenerate_faces=int(np.sum(degenerate)),
        volume=volume,
        area=float(0.5 * area2.sum()),
        bounds=(tuple(float(x) for x in lo), tuple(float(x) for x in hi)),
    )


def surface_problems(report: SurfaceReport, file: str, key: str, length_unit: str) -> list[UserError]:
    """The user-facing problems of a :class:`SurfaceReport` (empty: fine)."""
    errs: list[UserError] = []
    if report.open_edges or report.nonmanifold_edges:
        errs.append(UserError(
            expected="a closed surface (every edge shared by exactly two triangles)",
            got=f"{report.open_edges} open edges and {report.nonmanifold_edges} edges shared by more than two triangles",
            file=file, key=key, fix="close the holes / remove duplicate or internal faces in the CAD export"))
    elif report.misoriented_edges:
        errs.append(UserError(
            expected="consistently oriented triangles (each edge used once in each direction)",
            got=f"{report.misoriented_edges} edges used twice in the same direction",
            file=file, key=key, fix="re-export with consistent normals (flip the inverted triangles)"))
    if report.degenerate_faces:
        errs.append(UserError(expected="triangles with non-zero area", got=f"{report.degenerate_faces} degenerate triangles",
                              file=file, key=key, fix="remove zero-area triangles in the CAD export"))
    if report.closed and not report.misoriented_edges and report.volume <= 0:
        errs.append(UserError(expected="outward-pointing normals (positive enclosed volume)",
                              got=f"volume {report.volume:.6g} m³", file=file, key=key,
                              fix="flip all triangles (reverse the vertex order) in the export"))
    size = float(report.extent.max())
    lo, hi = PLAUSIBLE_SIZE
    if size > hi:
        guess = [u for u, s in LENGTH_UNITS.items() if lo <= size * s / LENGTH_UNITS[length_unit] <= hi and s < LENGTH_UNITS[length_unit]]
        errs.append(UserError(expected=f"a body between {lo} m and {hi} m long", got=f"{size:.6g} m with length_unit = {length_unit!r}",
                              file=file, key=key,
                              fix=f"set length_unit = {guess[0]!r}" if guess else "check the length_unit"))
    elif size < lo:
        guess = [u for u, s in LENGTH_UNITS.items() if lo <= size * s / LENGTH_UNITS[length_unit] <= hi and s > LENGTH_UNITS[length_unit]]
        errs.append(UserError(expected=f"a body between {lo} m and {hi} m long", got=f"{size:.6g} m with length_unit = {length_unit!r}",
                              file=file, key=key,
                              fix=f"set length_unit = {guess[0]!r}" if guess else "check the length_unit"))
    return errs
