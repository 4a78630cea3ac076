"""Aero maps: coefficients as smooth functions of front and rear ride height.

A ground-effect vehicle's downforce, drag and balance are usually drawn as
maps over front and rear ride height (or ride height and pitch). This module
fits a low-order polynomial response surface to the sweep results of one
variant (and one yaw angle) by linear least squares and evaluates it,
its gradient and its fit quality.

Axes and units: ride heights in m measured at the manifest's ride-height
reference points (caseprep.contract.frames); coefficients dimensionless.

Method: ordinary least squares on the monomials of total degree ≤ d in the
two variables, after centring and scaling each variable to [−1, 1] for
conditioning (e.g. Montgomery, *Design and Analysis of Experiments*, response
surface methodology). The degree is lowered automatically when there are
fewer distinct points than terms.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np


def _monomials(degree: int) -> list[tuple[int, int]]:
    return [(i, t - i) for t in range(degree + 1) for i in range(t, -1, -1)]


@dataclass(frozen=True)
class ResponseSurface:
    """A fitted polynomial c(h_f, h_r).

    ``powers`` are the exponent pairs of the scaled variables; ``coef`` the
    least-squares coefficients; ``centre`` and ``half_range`` (m) the scaling
    (u = (h − centre) / half_range); ``r2`` the coefficient of determination
    and ``rms`` the root-mean-square residual of the fit (units of the
    coefficient); ``n_points`` the number of points fitted.
    """

    degree: int
    powers: tuple[tuple[int, int], ...]
    coef: np.ndarray
    centre: np.ndarray
    half_range: np.ndarray
    r2: float
    rms: float
    n_points: int

    def _design(self, hf: np.ndarray, hr: np.ndarray) -> np.ndarray:
        u = (np.asarray(hf, dtype=float) - self.centre[0]) / self.half_range[0]
        v = (np.asarray(hr, dtype=float) - self.centre[1]) / self.half_range[1]
        return np.stack([u**i * v**j for i, j in self.powers], axis=-1)

    def __call__(self, hf, hr) -> np.ndarray:
        """Evaluate at front/rear ride heights (m, arrays broadcast)."""
        return self._design(hf, hr) @ self.coef

    def gradient(self, hf, hr) -> np.ndarray:
        """(∂c/∂h_f, ∂c/∂h_r) in 1/m at the given ride heights; shape (..., 2)."""
        u = (np.asarray(hf, dtype=float) - self.centre[0]) / self.half_range[0]
        v = (np.asarray(hr, dtype=float) - self.centre[1]) / self.half_range[1]
        du = sum(c * i * u ** max(i - 1, 0) * v**j for c, (i, j) in zip(self.coef, self.powers) if i > 0)
        dv = sum(c * j * u**i * v ** max(j - 1, 0) for c, (i, j) in zip(self.coef, self.powers) if j > 0)
        du = np.zeros_like(u) + du
        dv = np.zeros_like(v) + dv
        return np.stack([du / self.half_range[0], dv / self.half_range[1]], axis=-1)


def fit_response_surface(hf, hr, values, degree: int = 2) -> ResponseSurface:
    """Least-squares polynomial fit of ``values`` over (h_f, h_r).

    Parameters
    ----------
    hf, hr : front and rear ride heights (m), 1-D arrays of equal length.
    values : the coefficient at each point (dimensionless).
    degree : maximum total degree (default 2, the usual quadratic map);
        lowered until the number of terms does not exceed the number of
        distinct points; a variable that does not vary is dropped.

    Returns a :class:`ResponseSurface`. Inputs are not modified.
    """
    hf = np.asarray(hf, dtype=float).ravel()
    hr = np.asarray(hr, dtype=float).ravel()
    y = np.asarray(values, dtype=float).ravel()
    if not (hf.size == hr.size == y.size) or y.size == 0:
        raise ValueError(f"expected equal, non-zero lengths, got {hf.size}, {hr.size}, {y.size}")
    ok = np.isfinite(hf) & np.isfinite(hr) & np.isfinite(y)
    hf, hr, y = hf[ok], hr[ok], y[ok]
    if y.size == 0:
        raise ValueError("expected at least one finite point, got none")
    centre = np.array([0.5 * (hf.max() + hf.min()), 0.5 * (hr.max() + hr.min())])
    half = np.array([0.5 * (hf.max() - hf.min()), 0.5 * (hr.max() - hr.min())])
    varies = half > 1e-12 * np.maximum(1.0, np.abs(centre))
    half = np.where(varies, half, 1.0)
    n_distinct = len({(round(a, 12), round(b, 12)) for a, b in zip(hf, hr)})
    d = max(0, int(degree))
    while True:
        powers = [(i, j) for i, j in _monomials(d) if (i == 0 or varies[0]) and (j == 0 or varies[1])]
        if len(powers) <= n_distinct or d == 0:
            break
        d -= 1
    u = (hf - centre[0]) / half[0]
    v = (hr - centre[1]) / half[1]
    A = np.stack([u**i * v**j for i, j in powers], axis=-1)
    coef, *_ = np.linalg.lstsq(A, y, rcond=None)
    res = y - A @ coef
    ss_tot = float(np.sum((y - y.mean()) ** 2))
    ss_res = float(np.sum(res**2))
    r2 = 1.0 - ss_res / ss_tot if ss_tot > 0 else 1.0
    return ResponseSurface(
        degree=max(i + j for i, j in powers),
        powers=tuple(powers),
        coef=coef,
        centre=centre,
        half_range=half,
        r2=r2,
        rms=float(np.sqrt(ss_res / y.size)),
        n_points=int(y.size),
    )


def map_grid(fit: ResponseSurface, hf_points, hr_points, n: int = 24) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """A fitted map evaluated on an n × n grid over the rectangle of the
    points: (front ride heights (n,), rear ride heights (n,), values (n, n)
    with rows along the rear and columns along the front ride height), m and
    units of the coefficient. A side along which the points do not vary is
    widened to 1 mm so the grid is not degenerate."""
    hf = np.asarray(hf_points, dtype=float)
    hr = np.asarray(hr_points, dtype=float)
    f0, f1 = hf.min(), hf.max()
    r0, r1 = hr.min(), hr.max()
    f1 = f1 if f1 > f0 else f0 + 1e-3
    r1 = r1 if r1 > r0 else r0 + 1e-3
    front, rear = np.linspace(f0, f1, n), np.linspace(r0, r1, n)
    F, R = np.meshgrid(front, rear)
    return front, rear, fit(F, R)
