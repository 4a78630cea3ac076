"""Underbody and centreline pressure: Cp along lines on the floor, its
minimum and suction integral, and the ground-plane Cp footprint. Pure numpy.

Axes: body frame (x rearward, y right, z up, m). Heights are measured from
the ground plane along its normal (from the sweep manifest's placement).
Pressure coefficient Cp = (p − p_ref)/(½ ρ V²) = (p_k − p_ref/ρ)/(½ V²) with
p_k the incompressible solver's kinematic pressure (m²/s²), V the reference
air speed (m/s) — the standard definition (e.g. Katz, *Race Car
Aerodynamics*, 1995, ch. 3; Anderson, *Fundamentals of Aerodynamics*, §3.6).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np


def pressure_coefficient(p_kinematic: np.ndarray, speed: float, p_ref_kinematic: float = 0.0) -> np.ndarray:
    """Cp = (p_k − p_ref,k)/(½V²): kinematic pressures in m²/s², speed in m/s.
    Valid for incompressible flow. Input not modified."""
    if not speed > 0:
        raise ValueError(f"expected a positive reference speed (m/s), got {speed}")
    return (np.asarray(p_kinematic, dtype=np.float64) - p_ref_kinematic) / (0.5 * speed**2)


@dataclass(frozen=True)
class LineCp:
    """Cp along one line y = const on the body's underside (body frame).

    ``x`` (K,) m, ``cp`` (K,), ``height`` (K,) m above ground; ``cp_min`` and
    its position ``x_cp_min`` (m); ``cp_integral`` = ∫ Cp dx (m, negative
    for net suction); ``suction_integral`` = −∫ min(Cp, 0) dx (m, ≥ 0);
    ``length`` the x extent covered (m).
    """

    y: float
    x: np.ndarray
    cp: np.ndarray
    height: np.ndarray
    cp_min: float
    x_cp_min: float
    cp_integral: float
    suction_integral: float
    length: float

    def to_dict(self) -> dict:
        return {"y": self.y, "cp_min": self.cp_min, "x_cp_min": self.x_cp_min, "cp_integral": self.cp_integral,
                "suction_integral": self.suction_integral, "length": self.length,
                "x": self.x.tolist(), "cp": self.cp.tolist(), "height": self.height.tolist()}


def underside_line(y: float, segments: np.ndarray, cp: np.ndarray, ground_point: np.ndarray,
                   ground_normal: np.ndarray, *, bin_width: float | None = None) -> LineCp | None:
    """Cp along the underside from the body surface cut by the plane y = const.

    ``segments`` (S, 2, 3) m and ``cp`` (S,) the cut surface's segments and
    their faces' Cp. Of all segments at the same x (bins of ``bin_width`` m,
    default the median segment x-length), the one nearest the ground is the
    underside. Returns None when the plane misses the body.
    """
    seg = np.asarray(segments, dtype=np.float64)
    c = np.asarray(cp, dtype=np.float64)
    if seg.shape[0] == 0:
        return None
    mid = seg.mean(axis=1)
    h = (mid - np.asarray(ground_point, float)) @ np.asarray(ground_normal, float)
    dx = np.abs(seg[:, 1, 0] - seg[:, 0, 0])
    bw = bin_width or float(np.median(dx[dx > 0])) if np.any(dx > 0) else (bin_width or 1e-3)
    b = np.floor((mid[:, 0] - mid[:, 0].min()) / bw).astype(np.int64)
    order = np.lexsort((h, b))
    first = np.concatenate([[True], b[order][1:] != b[order][:-1]])
    pick = order[first]
    pick = pick[np.argsort(mid[pick, 0])]
    x, cpl, hl = mid[pick, 0], c[pick], h[pick]
    k = int(np.argmin(cpl))
    integ = float(np.trapezoid(cpl, x)) if x.size > 1 else 0.0
    suction = float(-np.trapezoid(np.minimum(cpl, 0.0), x)) if x.size > 1 else 0.0
    return LineCp(y=float(y), x=x, cp=cpl, height=hl, cp_min=float(cpl[k]), x_cp_min=float(x[k]),
                  cp_integral=integ, suction_integral=suction, length=float(x.max() - x.min()))


@dataclass(frozen=True)
class GroundFootprint:
    """Cp on the ground under the vehicle (body-frame x, y, m).

    ``cp_min`` and where (``at``, m); ``cp_area_integral`` = ∫ Cp dA (m²) over
    the window; ``suction_area`` the area with Cp < ``suction_level`` (m²);
    ``map`` a coarse area-weighted Cp grid (``x_edges``, ``y_edges``,
    ``cp`` [nx][ny], NaN where no ground face).
    """

    cp_min: float
    at: tuple[float, float, float]
    cp_area_integral: float
    suction_area: float
    suction_level: float
    window: tuple[float, float, float, float]
    x_edges: np.ndarray
    y_edges: np.ndarray
    cp_map: np.ndarray

    def to_dict(self) -> dict:
        return {"cp_min": self.cp_min, "at": list(self.at), "cp_area_integral": self.cp_area_integral,
                "suction_area": self.suction_area, "suction_level": self.suction_level, "window": list(self.window),
                "map": {"x_edges": self.x_edges.tolist(), "y_edges": self.y_edges.tolist(),
                        "cp": [[None if not np.isfinite(v) else float(v) for v in row] for row in self.cp_map]}}


def ground_footprint(centroids: np.ndarray, areas: np.ndarray, cp: np.ndarray,
                     window: tuple[float, float, float, float], *, nx: int = 40, ny: int = 20,
                     suction_level: float = -0.5) -> GroundFootprint:
    """Ground-plane Cp footprint in the window (x0, x1, y0, y1) (m, body
    frame) from the ground patch's face centroids (m), areas (m²) and Cp."""
    c = np.asarray(centroids, dtype=np.float64)
    a = np.asarray(areas, dtype=np.float64)
    p = np.asarray(cp, dtype=np.float64)
    x0, x1, y0, y1 = window
    m = (c[:, 0] >= x0) & (c[:, 0] <= x1) & (c[:, 1] >= y0) & (c[:, 1] <= y1) & np.isfinite(p)
    if not m.any():
        raise ValueError("no ground faces in the footprint window")
    c, a, p = c[m], a[m], p[m]
    k = int(np.argmin(p))
    xe, ye = np.linspace(x0, x1, nx + 1), np.linspace(y0, y1, ny + 1)
    ix = np.clip(np.searchsorted(xe, c[:, 0], side="right") - 1, 0, nx - 1)
    iy = np.clip(np.searchsorted(ye, c[:, 1], side="right") - 1, 0, ny - 1)
    flat = ix * ny + iy
    wa = np.bincount(flat, weights=a, minlength=nx * ny)
    wp = np.bincount(flat, weights=a * p, minlength=nx * ny)
    with np.errstate(invalid="ignore", divide="ignore"):
        cmap = np.where(wa > 0, wp / wa, np.nan).reshape(nx, ny)
    return GroundFootprint(cp_min=float(p[k]), at=tuple(float(v) for v in c[k]),
                           cp_area_integral=float(np.dot(a, p)), suction_area=float(a[p < suction_level].sum()),
                           suction_level=suction_level, window=(float(x0), float(x1), float(y0), float(y1)),
                           x_edges=xe, y_edges=ye, cp_map=cmap)


@dataclass(frozen=True)
class UndersideIntegrals:
    """Cp over the underside seen from below (plan projection, body frame).

    ``plan_area`` the area covered (m²); ``cp_area_integral`` = ∫ Cp dA
    (m²); ``suction_area_integral`` = −∫ min(Cp, 0) dA (m², ≥ 0: the
    floor's suction integral); ``cp_mean`` = ∫ Cp dA / plan_area;
    ``spacing`` the plan grid's cell size (m).
    """

    plan_area: float
    cp_area_integral: float
    suction_area_integral: float
    cp_mean: float
    spacing: float

    def to_dict(self) -> dict:
        return dict(self.__dict__)


def underside_integrals(cp_plan: np.ndarray, spacing: float) -> UndersideIntegrals:
    """Area integrals of Cp on a plan grid of square cells of ``spacing`` m
    (NaN: no underside above the cell), midpoint rule: the error is of the
    order of the grid cell over the length of the Cp variations."""
    c = np.asarray(cp_plan, dtype=np.float64)
    ok = np.isfinite(c)
    a = spacing**2
    area = float(ok.sum() * a)
    integ = float(c[ok].sum() * a)
    suction = float(-np.minimum(c[ok], 0.0).sum() * a)
    return UndersideIntegrals(plan_area=area, cp_area_integral=integ, suction_area_integral=suction,
                              cp_mean=integ / area if area > 0 else float("nan"), spacing=float(spacing))
