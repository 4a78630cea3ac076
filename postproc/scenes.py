"""What a flow picture shows, as plain data: the hand-over from the case
pipeline (which computes it) to the report (which only draws it).

Axes: body frame (x rearward, y right, z up, m). Surfaces are polygons in
the VTK layout (``offsets`` (F+1,), ``connectivity``) with one value per
face. Pressure coefficients Cp = (p − p_ref)/(½ρV²) with V the case's
reference speed (see :mod:`postproc.underbody`).
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .planview import PlanRaster


@dataclass(frozen=True, eq=False)
class SurfaceData:
    """Polygons with one value per face (``values`` may be None: plain
    geometry)."""

    points: np.ndarray
    offsets: np.ndarray
    connectivity: np.ndarray
    values: np.ndarray | None = None
    name: str = ""

    @property
    def n_faces(self) -> int:
        return int(self.offsets.size - 1)

    @property
    def bounds(self) -> tuple[float, float, float, float, float, float]:
        p = np.asarray(self.points, dtype=float)
        if p.size == 0:
            return (0.0,) * 6
        lo, hi = p.min(axis=0), p.max(axis=0)
        return (float(lo[0]), float(hi[0]), float(lo[1]), float(hi[1]), float(lo[2]), float(hi[2]))

    @staticmethod
    def join(parts: list["SurfaceData"], name: str = "") -> "SurfaceData":
        """One surface from several (values kept when every part has them)."""
        pts, offs, conn, vals = [], [np.zeros(1, dtype=np.int64)], [], []
        base_p = base_c = 0
        for s in parts:
            pts.append(np.asarray(s.points, dtype=float))
            offs.append(np.asarray(s.offsets[1:], dtype=np.int64) + base_c)
            conn.append(np.asarray(s.connectivity, dtype=np.int64) + base_p)
            vals.append(s.values)
            base_p += pts[-1].shape[0]
            base_c += int(s.offsets[-1])
        v = None if any(x is None for x in vals) or not vals else np.concatenate([np.asarray(x, float) for x in vals])
        return SurfaceData(np.concatenate(pts) if pts else np.zeros((0, 3)), np.concatenate(offs),
                           np.concatenate(conn) if conn else np.zeros(0, dtype=np.int64), v, name)


@dataclass(frozen=True, eq=False)
class CoreTrack:
    """A vortex core followed along the stations: centres (K, 3) m and its
    rotation sense about +x (+1/−1, right-hand rule)."""

    centres: np.ndarray
    sense: int


@dataclass(frozen=True, eq=False)
class CaseScene:
    """Everything the pictures of one case show.

    ``body``: the body surface with Cp per face; ``ground``: the ground
    patch under the vehicle with Cp (None without a ground); ``underside``:
    the lowest body surface on a plan grid (values ``cp`` and ``shear`` (…,
    3), the wall shear stress, any unit) — the common grid of the difference
    pictures; ``q_surface``: iso-surface of Q/(V/h)² = ``q_level`` with the
    rotation sense (+1/−1) per face; ``tracks``: tracked core centres;
    ``streaks``: wall-shear streak lines (polylines (K, 3), m);
    ``attached_sign``: the sign of the streamwise wall shear of attached
    flow (reversed flow has the other sign); ``notes``: what could not be
    drawn and why.
    """

    case_id: str
    variant: str
    label: str
    body: SurfaceData
    ground: SurfaceData | None = None
    underside: PlanRaster | None = None
    q_surface: SurfaceData | None = None
    q_level: float | None = None
    tracks: tuple[CoreTrack, ...] = ()
    streaks: tuple[np.ndarray, ...] = ()
    attached_sign: int = 1
    ride_height: float | None = None
    notes: tuple[str, ...] = field(default_factory=tuple)
