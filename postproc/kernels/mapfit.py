"""Aero maps with error bars: one coefficient as a smooth function of front
and rear ride height (h_f, h_r in m), fitted only where the data can carry
the model.

Design geometry first: the tested points span a plane (``dim`` 2), a line
(``dim`` 1, e.g. a ride-height sweep at one rake, where h_r − h_f is
constant) or a point (``dim`` 0). A model is fitted in the coordinates the
design spans — (h_f, h_r) for a plane, the distance s along the line for a
line — so a single rake line never yields a front/rear split of the slope,
only the derivative along the line (labelled as such).

Candidates (each refused with its reason when the data cannot carry it):

* polynomial of total degree d = 1…``max_degree`` in the scaled spanned
  coordinates u ∈ [−1, 1] (ordinary least squares; response-surface
  methodology, Montgomery, *Design and Analysis of Experiments*, 8th ed.,
  Wiley 2013, ch. 11). Refused when the number of distinct points n is below
  terms + ``margin`` (default 3: at least three residual degrees of freedom,
  so the error can be estimated; common practice, no source) or when the
  design matrix is rank-deficient (too few levels along an axis for the
  degree).
* thin-plate spline with a linear tail (Duchon 1977, "Splines minimizing
  rotation-invariant semi-norms in Sobolev spaces", LNM 571; scipy's
  ``RBFInterpolator``) with its smoothing chosen by leave-one-out error,
  only when n ≥ ``smooth_min_points``.

The candidate with the smallest leave-one-out RMS error is chosen; a simpler
candidate within 5 % of the best (or within 1e-9 of the data scale) wins.
Leave-one-out residuals of a least-squares fit are e_i/(1 − h_ii) with h_ii
the leverages (the PRESS residuals; Allen 1974, "The relationship between
variable selection and data augmentation and a method for prediction",
Technometrics 16(1) 125–127; from memory).

Prediction interval of a polynomial fit at x0 (Montgomery, Peck & Vining,
*Introduction to Linear Regression Analysis*, 5th ed., Wiley 2012, §3.5):
ŷ(x0) ± t_{(1+c)/2, n−p} · s · √(1 + x0ᵀ(XᵀX)⁻¹x0), s² = SSR/(n − p),
c the confidence (default 0.95). For the spline: ± t · LOO-RMS (an
approximation: the leave-one-out error is the spline's honest out-of-sample
error). Valid inside the tested range; outside it the value is an
extrapolation and flagged.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
from scipy import stats
from scipy.interpolate import RBFInterpolator

from .terms import FitStatus, SensitivityKind

SIMPLER_TOLERANCE = 0.05   # relative LOO margin inside which the simpler model wins (common practice, no source)
SMOOTHING_GRID = (0.0, 1e-4, 1e-3, 1e-2, 1e-1, 1.0)  # thin-plate smoothing × n (scaled coordinates)


@dataclass(frozen=True)
class MapOptions:
    """How maps are fitted. ``margin``: points ≥ terms + margin;
    ``max_degree``: highest polynomial degree tried; ``smooth``: also try a
    thin-plate spline when there are ≥ ``smooth_min_points`` distinct points
    (2-D designs; half of it, at least 6, on a line) and no more than
    ``smooth_max_points``; ``confidence`` of the
    prediction intervals (fraction)."""

    margin: int = 3
    max_degree: int = 3
    smooth: bool = True
    smooth_min_points: int = 12
    smooth_max_points: int = 200   # the leave-one-out smoothing search costs O(n⁴)
    confidence: float = 0.95
    rank_tol: float = 1e-9


@dataclass(frozen=True)
class Design:
    """Geometry of the tested points: ``dim`` spanned directions (0, 1 or 2),
    ``centre`` (m), unit ``axes`` (dim × 2, in (h_f, h_r)), ``half_range``
    (m) along each axis, ``lo``/``hi`` (m) the range of each spanned
    coordinate, ``n`` distinct points."""

    dim: int
    centre: np.ndarray
    axes: np.ndarray
    half_range: np.ndarray
    n: int

    def coords(self, hf, hr) -> np.ndarray:
        """Scaled coordinates u (…, dim) of ride heights (m)."""
        d = np.stack([np.asarray(hf, float) - self.centre[0], np.asarray(hr, float) - self.centre[1]], axis=-1)
        return (d @ self.axes.T) / self.half_range

    def off_design(self, hf, hr) -> np.ndarray:
        """Distance (m) of points from the spanned line (0 for a plane)."""
        d = np.stack([np.asarray(hf, float) - self.centre[0], np.asarray(hr, float) - self.centre[1]], axis=-1)
        if self.dim == 2:
            return np.zeros(d.shape[:-1])
        along = d @ self.axes.T @ self.axes
        return np.linalg.norm(d - along, axis=-1)

    def to_dict(self) -> dict:
        out = {"dim": self.dim, "centre": self.centre.tolist(), "n_points": self.n}
        if self.dim == 1:
            out["direction"] = self.axes[0].tolist()
            out["s_range"] = [-float(self.half_range[0]), float(self.half_range[0])]
        return out


def design_of(hf, hr, tol: float = 1e-7) -> Design:
    """The :class:`Design` of points (m); ``tol`` (m) is the spread below
    which a direction counts as not spanned (0.1 µm: far below any ride-height
    step)."""
    pts = np.unique(np.round(np.stack([np.ravel(hf), np.ravel(hr)], axis=1).astype(float), 9), axis=0)
    centre = 0.5 * (pts.min(axis=0) + pts.max(axis=0))
    _, s, vt = np.linalg.svd(pts - centre, full_matrices=False) if len(pts) > 1 else (None, np.zeros(1), np.eye(2))
    dim = int(np.sum(s > tol)) if len(pts) > 1 else 0
    if dim == 2:
        axes = np.eye(2)
    elif dim == 1:
        a = vt[0] * (1.0 if (vt[0][0] > 1e-12 or (abs(vt[0][0]) <= 1e-12 and vt[0][1] > 0)) else -1.0)
        axes = a[None, :]
    else:
        axes = np.zeros((0, 2))
    proj = (pts - centre) @ axes.T
    half = 0.5 * (proj.max(axis=0) - proj.min(axis=0)) if dim else np.zeros(0)
    if dim:
        centre = centre + axes.T @ (0.5 * (proj.max(axis=0) + proj.min(axis=0)))
    return Design(dim, centre, axes, np.where(half > 0, half, 1.0), len(pts))


def _powers(dim: int, degree: int) -> list[tuple[int, ...]]:
    if dim == 1:
        return [(i,) for i in range(degree + 1)]
    return [(i, t - i) for t in range(degree + 1) for i in range(t, -1, -1)]


def _poly(u: np.ndarray, powers) -> np.ndarray:
    return np.stack([np.prod([u[..., k] ** p[k] for k in range(len(p))], axis=0) for p in powers], axis=-1)


def _poly_grad(u: np.ndarray, powers) -> np.ndarray:
    """∂(monomials)/∂u_k, shape (…, terms, dim)."""
    cols = []
    for p in powers:
        g = []
        for k in range(len(p)):
            if p[k] == 0:
                g.append(np.zeros(u.shape[:-1]))
                continue
            term = p[k] * u[..., k] ** (p[k] - 1)
            for j in range(len(p)):
                if j != k:
                    term = term * u[..., j] ** p[j]
            g.append(term)
        cols.append(np.stack(g, axis=-1))
    return np.stack(cols, axis=-2)


@dataclass(frozen=True)
class Candidate:
    """One model tried: ``model`` ("poly1"… or "tps"), ``terms``, status,
    reason when refused, leave-one-out RMS (units of the coefficient)."""

    model: str
    terms: int
    status: FitStatus
    reason: str = ""
    loo_rms: float = float("nan")
    detail: Any = field(default=None, repr=False, compare=False)

    def to_dict(self) -> dict:
        return {"model": self.model, "terms": self.terms, "status": str(self.status), "reason": self.reason,
                "loo_rms": self.loo_rms}


def _fit_poly(u: np.ndarray, y: np.ndarray, degree: int, opts: MapOptions) -> Candidate:
    dim = u.shape[1]
    powers = _powers(dim, degree)
    p, n = len(powers), len(y)
    name = f"poly{degree}"
    if n < p + opts.margin:
        return Candidate(name, p, FitStatus.REFUSED,
                         f"{n} points for {p} terms: {'saturated' if n <= p else 'too few residual degrees of freedom'}"
                         f" (needs at least {p + opts.margin} = terms + {opts.margin})")
    X = _poly(u, powers)
    U, s, Vt = np.linalg.svd(X, full_matrices=False)
    rank = int(np.sum(s > opts.rank_tol * s[0]))
    if rank < p:
        return Candidate(name, p, FitStatus.REFUSED,
                         f"rank-deficient design: {p} terms but rank {rank} (too few distinct levels along an axis "
                         f"for degree {degree})")
    coef = Vt.T @ ((U.T @ y) / s)
    res = y - X @ coef
    lev = np.sum(U**2, axis=1)
    if np.any(lev > 1 - 1e-10):
        return Candidate(name, p, FitStatus.REFUSED, "a point has leverage 1: its leave-one-out error is undefined")
    loo = res / (1.0 - lev)
    cov_unscaled = (Vt.T / s**2) @ Vt
    detail = {"powers": powers, "coef": coef, "cov": cov_unscaled, "ssr": float(res @ res), "dof": n - p}
    return Candidate(name, p, FitStatus.OK, "", float(np.sqrt(np.mean(loo**2))), detail)


def _fit_tps(u: np.ndarray, y: np.ndarray, opts: MapOptions) -> Candidate:
    n, dim = u.shape
    need = opts.smooth_min_points if dim == 2 else max(6, opts.smooth_min_points // 2)
    if not opts.smooth:
        return Candidate("tps", n, FitStatus.REFUSED, "smooth models switched off")
    if n < need:
        return Candidate("tps", n, FitStatus.REFUSED, f"{n} points: a spline needs at least {need}")
    if n > opts.smooth_max_points:
        return Candidate("tps", n, FitStatus.REFUSED, f"{n} points: above {opts.smooth_max_points}, the spline's "
                         "leave-one-out search is too slow (raise maps.smooth_max_points)")
    best = None
    for lam in SMOOTHING_GRID:
        err = np.empty(n)
        try:
            for i in range(n):
                keep = np.arange(n) != i
                f = RBFInterpolator(u[keep], y[keep], kernel="thin_plate_spline", smoothing=lam * n, degree=1)
                err[i] = y[i] - f(u[i:i + 1])[0]
        except (np.linalg.LinAlgError, ValueError):
            continue
        rms = float(np.sqrt(np.mean(err**2)))
        if best is None or rms < best[0]:
            best = (rms, lam)
    if best is None:
        return Candidate("tps", n, FitStatus.REFUSED, "spline system singular for every smoothing tried")
    f = RBFInterpolator(u, y, kernel="thin_plate_spline", smoothing=best[1] * n, degree=1)
    return Candidate("tps", n, FitStatus.OK, "", best[0], {"f": f, "smoothing": best[1]})


def _choose(cands: list[Candidate], yscale: float) -> Candidate | None:
    ok = [c for c in cands if c.status is FitStatus.OK and np.isfinite(c.loo_rms)]
    if not ok:
        return None
    best = min(c.loo_rms for c in ok)
    limit = best * (1 + SIMPLER_TOLERANCE) + 1e-9 * yscale
    # candidates are listed simplest first (polynomials by degree, then the spline)
    return next(c for c in ok if c.loo_rms <= limit)


@dataclass(frozen=True)
class MapFit:
    """A fitted map of one coefficient (or a refusal with its ``reason``).

    ``model`` the chosen candidate; ``loo_rms`` its leave-one-out RMS error,
    ``rms`` the residual RMS and ``r2`` the coefficient of determination of
    the fit to the data (units of the coefficient; r2 dimensionless);
    ``candidates`` every model tried, with why it was refused or its LOO."""

    status: FitStatus
    reason: str
    design: Design
    candidates: tuple[Candidate, ...]
    chosen: Candidate | None
    rms: float = float("nan")
    r2: float = float("nan")
    confidence: float = 0.95
    hull: Any = field(default=None, repr=False, compare=False)

    @property
    def ok(self) -> bool:
        return self.status is FitStatus.OK

    @property
    def model(self) -> str | None:
        return self.chosen.model if self.chosen else None

    @property
    def loo_rms(self) -> float:
        return self.chosen.loo_rms if self.chosen else float("nan")

    def _value_u(self, u: np.ndarray) -> np.ndarray:
        d = self.chosen.detail
        if self.chosen.model == "tps":
            return d["f"](u.reshape(-1, u.shape[-1])).reshape(u.shape[:-1])
        return _poly(u, d["powers"]) @ d["coef"]

    def __call__(self, hf, hr) -> np.ndarray:
        """Fitted value at ride heights (m; arrays broadcast)."""
        self._require()
        return self._value_u(self.design.coords(hf, hr))

    def _require(self) -> None:
        if not self.ok:
            raise ValueError(f"map refused: {self.reason}")

    def interval(self, hf, hr) -> np.ndarray:
        """Half-width of the prediction interval (units of the coefficient)."""
        self._require()
        u = self.design.coords(hf, hr)
        d = self.chosen.detail
        if self.chosen.model == "tps":
            t = stats.t.ppf(0.5 * (1 + self.confidence), max(self.design.n - self.design.dim - 1, 1))
            return np.full(u.shape[:-1], t * self.chosen.loo_rms)
        x = _poly(u, d["powers"])
        s2 = d["ssr"] / d["dof"]
        t = stats.t.ppf(0.5 * (1 + self.confidence), d["dof"])
        return t * np.sqrt(s2 * (1.0 + np.einsum("...i,ij,...j->...", x, d["cov"], x)))

    def extrapolated(self, hf, hr, tol: float = 1e-4) -> np.ndarray:
        """True outside the tested region: outside the convex hull of a
        plane design, off the line (by more than ``tol`` m) or beyond its
        ends for a line design."""
        self._require()
        u = self.design.coords(hf, hr)
        if self.design.dim == 1:
            return (np.abs(u[..., 0]) > 1 + 1e-9) | (self.design.off_design(hf, hr) > tol)
        if self.hull is not None:
            return self.hull.find_simplex(u.reshape(-1, 2), tol=1e-9).reshape(u.shape[:-1]) < 0
        return np.any(np.abs(u) > 1 + 1e-9, axis=-1)

    def gradient_u(self, u: np.ndarray) -> tuple[np.ndarray, np.ndarray | None]:
        """∂value/∂u (…, dim) and its standard error (polynomials only)."""
        d = self.chosen.detail
        if self.chosen.model == "tps":
            step = 1e-4
            g = []
            for k in range(u.shape[-1]):
                e = np.zeros(u.shape[-1])
                e[k] = step
                g.append((self._value_u(u + e) - self._value_u(u - e)) / (2 * step))
            return np.stack(g, axis=-1), None
        G = _poly_grad(u, d["powers"])                       # (…, p, dim)
        grad = np.einsum("...pk,p->...k", G, d["coef"])
        s2 = d["ssr"] / d["dof"]
        se = np.sqrt(np.maximum(s2 * np.einsum("...pk,pq,...qk->...k", G, d["cov"], G), 0.0))
        return grad, se

    def sensitivity(self, hf: float, hr: float) -> dict:
        """Derivatives at one point (1/m) along the directions the design spans:
        ``partial`` (∂/∂h_f, ∂/∂h_r) for a plane, ``along-line`` (d/ds along
        the unit ``direction`` in (h_f, h_r)) for a line; with standard
        errors for polynomial fits."""
        self._require()
        u = self.design.coords(np.array([hf]), np.array([hr]))
        g, se = self.gradient_u(u)
        g = g[0] / self.design.half_range
        se = None if se is None else se[0] / self.design.half_range
        if self.design.dim == 2:
            return {"kind": str(SensitivityKind.PARTIAL), "d_dh_front": float(g[0]), "d_dh_rear": float(g[1]),
                    "stderr": None if se is None else [float(se[0]), float(se[1])], "at": [hf, hr]}
        return {"kind": str(SensitivityKind.ALONG_LINE), "direction": self.design.axes[0].tolist(),
                "d_ds": float(g[0]), "stderr": None if se is None else float(se[0]), "at": [hf, hr],
                "label": "derivative along the tested line (h_f, h_r) = centre + s·direction; the design has one "
                         "direction, so front and rear sensitivities cannot be separated"}

    def to_dict(self) -> dict:
        out = {"status": str(self.status), "reason": self.reason, "model": self.model, "loo_rms": self.loo_rms,
               "rms": self.rms, "r2": self.r2, "confidence": self.confidence,
               "candidates": [c.to_dict() for c in self.candidates]}
        if self.chosen is not None and self.chosen.model != "tps":
            out["terms"] = self.chosen.terms
        return out


def fit_map(hf, hr, values, options: MapOptions = MapOptions()) -> MapFit:
    """Fit one coefficient over ride heights (module docstring). ``hf``,
    ``hr`` in m, ``values`` dimensionless; repeated points should be averaged
    before (they count once). Never raises for thin data: a :class:`MapFit`
    with ``status`` refused says why."""
    hf, hr, y = (np.asarray(a, dtype=float).ravel() for a in (hf, hr, values))
    if not (hf.size == hr.size == y.size):
        raise ValueError(f"expected equal lengths, got {hf.size}, {hr.size}, {y.size}")
    keep = np.isfinite(hf) & np.isfinite(hr) & np.isfinite(y)
    hf, hr, y = hf[keep], hr[keep], y[keep]
    design = design_of(hf, hr) if y.size else Design(0, np.zeros(2), np.zeros((0, 2)), np.zeros(0), 0)
    if design.n < len(y):
        raise ValueError("repeated points: average them before fitting")
    if design.dim == 0:
        why = "no finite point" if design.n == 0 else "a single operating point: a map needs ride heights that vary"
        return MapFit(FitStatus.REFUSED, why, design, (), None, confidence=options.confidence)
    u = design.coords(hf, hr)
    cands = [_fit_poly(u, y, d, options) for d in range(1, options.max_degree + 1)]
    cands.append(_fit_tps(u, y, options))
    chosen = _choose(cands, float(np.max(np.abs(y))) or 1.0)
    if chosen is None:
        return MapFit(FitStatus.REFUSED, f"no model the data can carry: {cands[0].model}: {cands[0].reason}",
                      design, tuple(cands), None,
                      confidence=options.confidence)
    hull = None
    if design.dim == 2:
        from scipy.spatial import Delaunay

        hull = Delaunay(u)
    fit = MapFit(FitStatus.OK, "", design, tuple(cands), chosen, confidence=options.confidence, hull=hull)
    res = y - fit._value_u(u)
    ss_tot = float(np.sum((y - y.mean()) ** 2))
    rms = float(np.sqrt(np.mean(res**2)))
    r2 = 1.0 - float(res @ res) / ss_tot if ss_tot > 0 else 1.0
    return MapFit(FitStatus.OK, "", design, tuple(cands), chosen, rms, r2, options.confidence, hull)
