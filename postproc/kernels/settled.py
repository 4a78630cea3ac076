"""The convergence rule in coefficient counts: each aerodynamic coefficient
over the settled window against its own absolute tolerance.

A tolerance relative to the resultant force lets the small components
wander: on a diffuser floor (−C_L 1.6, C_D 0.26, C_S 0.05) 1 % of the
resultant is ±6 % of the drag and ±30 % of the side force. Here every series
is judged in its own units (coefficient "counts"):

* window: the last samples of the run (the settling window of the caller);
* mean m, standard deviation s (population), drift d = b·(n − 1), b the
  least-squares slope per sample (the change of the fitted line across the
  window), R² of that line;
* **converged** when |d| ≤ tol and s ≤ tol; **diverging** when |d| > tol and
  R² ≥ 0.5 (a trend); else **oscillating** (bounded, not settled);
* the overall verdict is the worst series (diverging > oscillating >
  converged); reported coefficients are the window means m with s as their
  iterative spread.

Default tolerances (:data:`DEFAULT_TOLERANCES`, common practice, no source;
all configurable): 0.005 for lift-type coefficients (C_L, C_LF, C_LR), 0.002
for drag, side force and yawing moment (C_D, C_S, C_N), 0.003 for the aero
balance C_LF/(C_LF + C_LR) (fraction), computed per sample so that its own
scatter is judged.
"""
from __future__ import annotations

from dataclasses import asdict, dataclass
from types import MappingProxyType
from typing import Mapping

import numpy as np

VERDICTS = ("converged", "oscillating", "diverging")
DEFAULT_TOLERANCES: Mapping[str, float] = MappingProxyType({
    "cl": 0.005, "cl_front": 0.005, "cl_rear": 0.005, "cd": 0.002, "cs": 0.002, "cn": 0.002, "balance": 0.003})


@dataclass(frozen=True)
class WindowStats:
    """One coefficient over the window: mean, std and drift in its own units."""

    name: str
    n: int
    mean: float
    std: float
    drift: float
    r2: float
    tolerance: float
    verdict: str

    def to_dict(self) -> dict:
        return asdict(self)


def window_stats(name: str, values, tolerance: float) -> WindowStats:
    """Statistics and verdict of one series (module docstring); ``values``
    the samples of the window (≥ 3), ``tolerance`` > 0 in the series' units."""
    v = np.asarray(values, dtype=np.float64).ravel()
    n = v.size
    if n < 3:
        raise ValueError(f"expected at least 3 samples in the window, got {n} for {name}")
    if not tolerance > 0:
        raise ValueError(f"expected a positive tolerance, got {tolerance} for {name}")
    if not np.all(np.isfinite(v)):
        nan = float("nan")
        return WindowStats(name, n, nan, nan, nan, 0.0, tolerance, "diverging")
    mean = float(v.mean())
    x = np.arange(n, dtype=np.float64) - 0.5 * (n - 1)
    dev = v - mean
    slope = float(np.sum(x * dev) / np.sum(x * x))
    ss = float(np.sum(dev * dev))
    r2 = float(slope**2 * np.sum(x * x) / ss) if ss > 0 else 0.0
    drift = slope * (n - 1)
    std = float(np.sqrt(ss / n))
    if abs(drift) <= tolerance and std <= tolerance:
        verdict = "converged"
    elif abs(drift) > tolerance and r2 >= 0.5:
        verdict = "diverging"
    else:
        verdict = "oscillating"
    return WindowStats(name, n, mean, std, drift, r2, float(tolerance), verdict)


def balance_series(cl_front, cl_rear) -> np.ndarray:
    """Per-sample aero balance C_LF/(C_LF + C_LR) (NaN where the total is ≈ 0)."""
    f = np.asarray(cl_front, dtype=float)
    r = np.asarray(cl_rear, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(np.abs(f + r) > 1e-9, f / (f + r), np.nan)


def judge_coefficients(series: Mapping[str, np.ndarray],
                       tolerances: Mapping[str, float] = DEFAULT_TOLERANCES) -> dict:
    """Judge every coefficient series given (names as in
    :data:`DEFAULT_TOLERANCES`; others need a tolerance in ``tolerances``).
    Adds the balance when both axle series are present. Returns
    ``{"verdict", "window", "series": {name: WindowStats dict}, "means":
    {name: window mean}, "stds": {name: std}}``."""
    s = dict(series)
    if "cl_front" in s and "cl_rear" in s and "balance" not in s:
        s["balance"] = balance_series(s["cl_front"], s["cl_rear"])
    tol = {**DEFAULT_TOLERANCES, **dict(tolerances)}
    missing = [k for k in s if k not in tol]
    if missing:
        raise KeyError(f"no tolerance for {', '.join(missing)}")
    stats = {k: window_stats(k, v, tol[k]) for k, v in s.items()}
    if not stats:
        raise ValueError("expected at least one coefficient series")
    worst = max((x.verdict for x in stats.values()), key=VERDICTS.index)
    return {"verdict": worst, "window": min(x.n for x in stats.values()),
            "series": {k: x.to_dict() for k, x in stats.items()},
            "means": {k: x.mean for k, x in stats.items()}, "stds": {k: x.std for k, x in stats.items()}}
