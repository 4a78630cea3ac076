"""Diffuser pressure recovery from cross-sections of the underbody flow.
Pure numpy.

Axes: body frame (x rearward, y right, z up, m). A station is the plane
x = const; the flow through it is counted along +x (rearward, the direction
the air moves under a forward-driving vehicle). Pressures in Pa (convert the
incompressible solver's kinematic pressure, m²/s², by multiplying by ρ),
velocities m/s, density kg/m³, areas m², mass flows kg/s.

One-dimensional diffuser theory (e.g. White, *Fluid Mechanics*, 7th ed.
2011, §6.11 "Diffuser performance"): with a uniform inviscid flow, continuity
u₁A₁ = u₂A₂ and Bernoulli p₂ − p₁ = ½ρ(u₁² − u₂²) give the ideal pressure
recovery coefficient

    C_pr = (p̄₂ − p̄₁) / (½ ρ ū₁²),      C_pr,ideal = 1 − (A₁/A₂)²,

and the diffuser effectiveness C_pr / C_pr,ideal (1 for a loss-free,
uniform flow; lower with total-pressure loss, separation or non-uniform
profiles). Valid for incompressible flow (Mach < 0.3) through a section
without reversed flow at the throat. The same ideal value and
effectiveness are the axes of the diffuser performance maps of Sovran &
Klomp (1967), "Experimentally determined optimum geometries for
rectilinear diffusers with rectangular, conical or annular cross-section",
in *Fluid Mechanics of Internal Flow*, ed. G. Sovran, Elsevier, pp. 270–319.

An underbody diffuser is no closed duct: it is open at the sides and runs
over a moving ground, so air enters between throat and exit and the area
ratio overstates the deceleration. Two further numbers describe it:

    C_pr,ideal,bulk = 1 − (ū_exit/ū_throat)²

(Bernoulli between the actual bulk velocities ū = ṁ/(ρA), the loss-free
recovery of the deceleration that really happens) and the side inflow
(ṁ_exit − ṁ_throat)/ṁ_throat (the mass entering through the open sides).
The throat pressure against the free stream, C_p,throat = (p̄_throat −
p_ref)/(½ρV²), is what the recovery buys: the lower it is, the more
downforce the floor makes.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from caseprep.contract.errors import UserError


@dataclass(frozen=True)
class StationAverage:
    """Averages over one cross-section (body frame, SI).

    ``area`` m²; ``mass_flow`` ρ Σ u_x A (kg/s, + rearward); ``p_area`` and
    ``p_mass`` the area- and mass-flow-weighted mean pressure (Pa);
    ``u_bulk`` = mass_flow/(ρ A) (m/s); ``u_area`` area-weighted mean u_x
    (m/s); ``u_mass`` mass-flow-weighted mean u_x (m/s); ``reversed_share``
    the share of the area with u_x < 0.
    """

    x: float
    area: float
    mass_flow: float
    p_area: float
    p_mass: float
    u_bulk: float
    u_area: float
    u_mass: float
    reversed_share: float
    n_cells: int

    def to_dict(self) -> dict:
        return dict(self.__dict__)


def station_average(x: float, areas: np.ndarray, p: np.ndarray, u: np.ndarray, rho: float, *,
                    axis: int = 0) -> StationAverage:
    """Area- and mass-flow-weighted averages of pressure ``p`` (Pa, (M,)) and
    velocity ``u`` (m/s, (M, 3)) over polygons of ``areas`` (m², (M,)) on
    the plane x_axis = ``x`` (m). ``rho`` in kg/m³. Mass-flow weights are
    ρ|u_x|A so that reversed-flow pockets count by the mass they carry.

    Raises :class:`UserError` for an empty cross-section and ValueError for
    NaN in the inputs. Inputs are not modified.
    """
    a = np.asarray(areas, dtype=np.float64)
    pp = np.asarray(p, dtype=np.float64)
    uu = np.asarray(u, dtype=np.float64).reshape(-1, 3)
    if a.size == 0 or a.sum() <= 0:
        raise UserError(expected=f"a fluid cross-section at x = {x:.6g} m", got="no fluid cells (empty section)",
                        key="station", fix="the floor may touch the ground there, or the station lies outside "
                                           "the chosen y range; move the station or widen the range")
    if not (np.isfinite(pp).all() and np.isfinite(uu).all()):
        raise ValueError(f"NaN or inf in pressure or velocity on the station x = {x:.6g} m")
    ux = uu[:, axis]
    A = a.sum()
    mdot = rho * float(np.dot(ux, a))
    wm = np.abs(ux) * a
    wms = wm.sum()
    return StationAverage(
        x=float(x), area=float(A), mass_flow=mdot,
        p_area=float(np.dot(pp, a) / A),
        p_mass=float(np.dot(pp, wm) / wms) if wms > 0 else float(np.dot(pp, a) / A),
        u_bulk=mdot / (rho * A),
        u_area=float(np.dot(ux, a) / A),
        u_mass=float(np.dot(ux, wm) / wms) if wms > 0 else 0.0,
        reversed_share=float(a[ux < 0].sum() / A),
        n_cells=int(a.size),
    )


@dataclass(frozen=True)
class DiffuserResult:
    """Pressure recovery between a throat and an exit station (SI).

    ``cpr`` = (p̄_exit − p̄_throat)/(½ρū_throat²) with area-weighted p̄ and the
    throat's bulk velocity; ``cpr_mass`` the same with mass-flow-weighted p̄;
    ``cpr_ideal`` = 1 − (A_throat/A_exit)²; ``effectiveness`` = cpr/cpr_ideal;
    ``area_ratio`` = A_exit/A_throat; ``mass_flow`` (throat, exit) kg/s;
    ``mass_imbalance`` = (ṁ_exit − ṁ_throat)/ṁ_throat (the side inflow);
    ``cpr_ideal_bulk`` = 1 − (ū_exit/ū_throat)² and ``effectiveness_bulk``
    = cpr/cpr_ideal_bulk; ``cp_throat`` and ``cp_exit`` the area-weighted
    station pressures as Cp against the free stream (None without a
    reference speed).
    """

    throat: StationAverage
    exit: StationAverage
    cpr: float
    cpr_mass: float
    cpr_ideal: float
    effectiveness: float
    area_ratio: float
    mass_flow: tuple[float, float]
    mass_imbalance: float
    cpr_ideal_bulk: float = float("nan")
    effectiveness_bulk: float = float("nan")
    cp_throat: float | None = None
    cp_exit: float | None = None

    def to_dict(self) -> dict:
        return {
            "throat_x": self.throat.x, "exit_x": self.exit.x,
            "cpr": self.cpr, "cpr_mass": self.cpr_mass, "cpr_ideal": self.cpr_ideal,
            "effectiveness": self.effectiveness, "area_ratio": self.area_ratio,
            "cpr_ideal_bulk": self.cpr_ideal_bulk, "effectiveness_bulk": self.effectiveness_bulk,
            "side_inflow": self.mass_imbalance, "cp_throat": self.cp_throat, "cp_exit": self.cp_exit,
            "mass_flow": list(self.mass_flow), "mass_imbalance": self.mass_imbalance,
            "throat": self.throat.to_dict(), "exit": self.exit.to_dict(),
        }


def pressure_recovery(throat: StationAverage, exit: StationAverage, rho: float, *,
                      p_ref: float | None = None, speed: float | None = None) -> DiffuserResult:
    """Pressure recovery coefficient, its ideal values (area ratio and bulk
    velocities), the effectiveness and the side inflow (formulas and
    citations in the module docstring). ``rho`` kg/m³; with the free-stream
    reference pressure ``p_ref`` (Pa) and ``speed`` (m/s) also the station
    pressures as Cp."""
    q1 = 0.5 * rho * throat.u_bulk**2
    if not q1 > 0:
        raise UserError(expected="a positive flow through the throat section", got=f"bulk velocity {throat.u_bulk:.4g} m/s",
                        key="throat", fix="check the throat position and the flow direction (+x rearward)")
    ar = exit.area / throat.area
    ideal = 1.0 - (throat.area / exit.area) ** 2
    cpr = (exit.p_area - throat.p_area) / q1
    cpr_m = (exit.p_mass - throat.p_mass) / q1
    eff = cpr / ideal if ideal != 0 else float("nan")
    ideal_b = 1.0 - (exit.u_bulk / throat.u_bulk) ** 2
    eff_b = cpr / ideal_b if ideal_b != 0 else float("nan")
    cpt = cpe = None
    if p_ref is not None and speed:
        q_inf = 0.5 * rho * speed**2
        cpt, cpe = float((throat.p_area - p_ref) / q_inf), float((exit.p_area - p_ref) / q_inf)
    return DiffuserResult(throat=throat, exit=exit, cpr=float(cpr), cpr_mass=float(cpr_m), cpr_ideal=float(ideal),
                          effectiveness=float(eff), area_ratio=float(ar),
                          mass_flow=(throat.mass_flow, exit.mass_flow),
                          mass_imbalance=float((exit.mass_flow - throat.mass_flow) / throat.mass_flow),
                          cpr_ideal_bulk=float(ideal_b), effectiveness_bulk=float(eff_b), cp_throat=cpt, cp_exit=cpe)


def floor_heights(segments: np.ndarray, y: np.ndarray, ground_point: np.ndarray, ground_normal: np.ndarray,
                  chunk: int = 20000) -> np.ndarray:
    """Height above the ground (m) of the lowest body-surface segment above
    each spanwise position ``y`` (m) on one station.

    ``segments`` (S, 2, 3): the body surface cut by the station plane (body
    frame, m). Heights are measured along ``ground_normal`` (unit, body axes)
    from ``ground_point``. NaN where no segment spans y.
    """
    seg = np.asarray(segments, dtype=np.float64)
    yq = np.asarray(y, dtype=np.float64)
    out = np.full(yq.size, np.inf)
    if seg.shape[0] == 0:
        return np.full(yq.size, np.nan)
    n = np.asarray(ground_normal, dtype=float)
    g0 = np.asarray(ground_point, dtype=float)
    h = (seg - g0) @ n  # (S, 2)
    y0, y1 = seg[:, 0, 1], seg[:, 1, 1]
    lo, hi = np.minimum(y0, y1), np.maximum(y0, y1)
    for s in range(0, yq.size, chunk):
        q = yq[s:s + chunk, None]
        inside = (q >= lo[None]) & (q <= hi[None])
        with np.errstate(invalid="ignore", divide="ignore"):
            t = np.where(hi - lo > 0, (q - y0[None]) / (y1 - y0)[None], 0.5)
        hq = h[None, :, 0] + t * (h[None, :, 1] - h[None, :, 0])
        out[s:s + chunk] = np.where(inside, hq, np.inf).min(axis=1)
    out[~np.isfinite(out)] = np.nan
    return out


def underfloor_mask(centroids: np.ndarray, ground_point: np.ndarray, ground_normal: np.ndarray,
                    floor_h: np.ndarray | None = None, y_range: tuple[float, float] | None = None) -> np.ndarray:
    """Polygons of a station that belong to the underbody channel: above the
    ground, below the floor (``floor_h``: height of the floor above each
    polygon, m, from :func:`floor_heights`; None: no roof), within
    ``y_range`` (m, body y) when given."""
    c = np.asarray(centroids, dtype=np.float64)
    h = (c - np.asarray(ground_point, float)) @ np.asarray(ground_normal, float)
    m = h > 0
    if floor_h is not None:
        fh = np.asarray(floor_h)
        m &= np.isfinite(fh) & (h < np.where(np.isfinite(fh), fh, -np.inf))
    if y_range is not None:
        m &= (c[:, 1] >= y_range[0]) & (c[:, 1] <= y_range[1])
    return m


def underside_profile(points: np.ndarray, ground_point: np.ndarray, ground_normal: np.ndarray, *,
                      y_band: tuple[float, float] | None = None, n_bins: int = 100,
                      n_span_bins: int = 16) -> tuple[np.ndarray, np.ndarray]:
    """The floor's side profile: height (m) of the underside above the plane
    through ``ground_point`` with unit normal ``ground_normal`` per x bin
    (body frame, x rearward). Returns (x bin centres, heights); empty bins
    are NaN.

    The points are binned in x and in y (``n_span_bins`` spanwise bins); the
    lowest point of each (x, y) bin is the underside there, and the profile
    is the median over the spanwise bins. Thin appendages reaching lower
    than the floor (strakes, fences, a plank) cover few spanwise bins and
    leave the profile alone. Common practice, no source.
    """
    p = np.asarray(points, dtype=np.float64)
    if y_band is not None:
        p = p[(p[:, 1] >= y_band[0]) & (p[:, 1] <= y_band[1])]
    if p.shape[0] == 0:
        return np.zeros(0), np.zeros(0)
    h = (p - np.asarray(ground_point, float)) @ np.asarray(ground_normal, float)
    edges = np.linspace(p[:, 0].min(), p[:, 0].max(), n_bins + 1)
    b = np.clip(np.searchsorted(edges, p[:, 0], side="right") - 1, 0, n_bins - 1)
    yedges = np.linspace(p[:, 1].min(), p[:, 1].max(), n_span_bins + 1)
    by = np.clip(np.searchsorted(yedges, p[:, 1], side="right") - 1, 0, n_span_bins - 1)
    hmin = np.full((n_bins, n_span_bins), np.inf)
    np.minimum.at(hmin, (b, by), h)
    hmin[~np.isfinite(hmin)] = np.nan
    with np.errstate(all="ignore"):
        import warnings

        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN x bins stay NaN
            prof = np.nanmedian(hmin, axis=1)
    return 0.5 * (edges[1:] + edges[:-1]), prof


def find_diffuser(x: np.ndarray, h: np.ndarray, *, search_from: float = 0.25, tol: float = 0.01,
                  min_rise: float = 0.1, clearance: np.ndarray | None = None) -> tuple[float, float]:
    """Throat and exit stations (m) from the floor's side profile h(x) (m,
    x rearward; NaN bins ignored).

    ``h`` is best the underside height in the body frame (z up, the flat
    floor level): then a raked floor, whose clearance above the ground grows
    steadily towards the tail, does not move the throat to the front of the
    floor. ``clearance`` (optional, same bins): the height above the ground,
    the reference for ``min_rise``; without it ``h`` is taken as the
    clearance.

    The throat is the rearmost point of minimum height (within ``tol`` × the
    height range) behind the first ``search_from`` fraction of the profile
    (skipping a low splitter or plank at the nose); the exit is the last
    profile point (the floor's trailing edge). The rise from throat to exit
    must be at least ``min_rise`` × the throat clearance, else
    :class:`UserError` (no diffuser). Common practice, no source.
    """
    ok = np.isfinite(h)
    if clearance is not None:
        ok &= np.isfinite(clearance)
        clearance = np.asarray(clearance)[ok]
    x, h = np.asarray(x)[ok], np.asarray(h)[ok]
    if x.size < 3:
        raise UserError(expected="a body surface with an underside profile", got=f"{x.size} profile points",
                        key="--throat/--exit", fix="give the throat and exit stations explicitly")
    start = x[0] + search_from * (x[-1] - x[0])
    rear = x >= start
    xr, hr = x[rear], h[rear]
    cr = clearance[rear] if clearance is not None else hr
    span = float(hr.max() - hr.min())
    i = int(np.flatnonzero(hr <= hr.min() + tol * span)[-1])
    throat, exit_ = float(xr[i]), float(xr[-1])
    if i >= xr.size - 1 or hr[-1] - hr[i] < min_rise * max(cr[i], 1e-9):
        raise UserError(expected="an underside that rises towards the tail (a diffuser)",
                        got=f"heights {hr[i]:.4g} m at x = {throat:.4g} m to {hr[-1]:.4g} m at x = {exit_:.4g} m",
                        key="--throat/--exit", fix="give the throat and exit stations explicitly")
    return throat, exit_
