"""The convergence rule: whether a steady run has converged, judged from its
runtime force monitor and its residuals. The one rule of the project, used by
the runner (the ``not-converged`` flag), ``postproc forces``, ``postproc
sweep`` (the ``forces-drifting`` flag) and the report; its thresholds live in
one frozen object, :class:`ConvergenceOptions`, with one set of defaults.

**Monitor series** (:func:`assess_series`, per series over a window of the
last N samples; units of the series):

* scale s = max(|mean|, floor) (the floor keeps near-zero series such as the
  side force of a symmetric body from reading as huge relative changes);
* relative std σ_r = std / s;
* drift d = slope of the least-squares line × (N − 1) / s, i.e. the change of
  the fitted line across the window relative to the scale;
* **converged** when |d| ≤ ``settle_tol`` and σ_r ≤ ``settle_tol``;
* otherwise **diverging** when the series is non-finite or when the trend
  dominates: |d| > ``settle_tol`` and the line explains at least
  ``trend_r2`` of the variance (R² ≥ 0.5) — a steady run-away or a
  still-settling drift;
* otherwise **oscillating** (bounded, not settled: the mean over the window
  is the best estimate, with σ_r as its spread).

The overall verdict is the worst of the series (diverging > oscillating >
converged).

**Force monitor of a case** (:func:`assess_force_monitor`): the total-force
components (``force.total_x/y/z``, N, the monitor's axes) over the settling
window — the last ``settle_fraction`` (30 %) of the samples, at least
``settle_min_samples`` (20) — each judged against the floor
``settle_floor`` × the magnitude of the last total force (1 × = the
resultant: a component near zero, such as the side force at zero yaw, may
wander by ``settle_tol`` = 1 % of the total load, not of itself).

**A run that used its whole iteration budget** (:func:`judge_convergence`; a
run the solver ended by its own residual criterion is converged, a crash is
``solver-crashed``). A steady RANS run of a bluff body rarely brings every
residual below 1e-3: separated wakes keep some components (the cross-flow
velocity of a symmetric body, whose normalising magnitude is small) at a
plateau while the integrated loads no longer change. What an aerodynamicist
checks is that the loads have settled and the residuals have fallen by
orders of magnitude (common practice, no source). So the run counts as
converged when

1. every final initial residual is ≤ ``residual_tol`` (1e-3: three orders
   below the first iteration's normalised residual), **or**
2. the force monitor's verdict is ``converged`` and every field above
   ``residual_tol`` is at most ``residual_ceiling`` (1e-2) and at least
   ``min_residual_drop`` (2) orders of magnitude below its largest value in
   the first ``residual_start_iterations`` (5) iterations.

Either way a monitor whose verdict is ``diverging`` makes the run not
converged: low residuals with loads still moving are not a converged
result. Otherwise a run is not converged for high residuals, a monitor still
oscillating by more than 1 %, residuals that did not fall, or no monitor to
judge by (then only rule 1 can pass). All thresholds are common practice, no
source; they are fields of :class:`ConvergenceOptions`. Residuals are the
solver's dimensionless normalised initial residuals.

**The rule in coefficient counts** (:func:`judge_coefficients`; used for
the coefficients a case reports). A tolerance relative to the resultant
lets the small components wander: on a diffuser floor (−C_L 1.6, C_D 0.26,
C_S 0.05) 1 % of the resultant is ±6 % of the drag and ±30 % of the side
force, and moments are not judged at all. So each coefficient series over
the settling window — C_L, C_D, C_S, C_LF, C_LR, the per-sample balance
C_LF/(C_LF + C_LR) and C_N — is judged in its own units against its own
tolerance (``count_tol_*``: 0.005 lift-type, 0.002 drag, side and yawing
moment, 0.003 balance; common practice, no source): mean m, standard
deviation s, drift d = least-squares slope × (N − 1) (absolute), converged
when |d| ≤ tol and s ≤ tol, diverging when |d| > tol with R² ≥
``trend_r2``, else oscillating. Reported coefficients are the window means
m, with s as their iterative spread.
"""
from __future__ import annotations

import math
import os
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Mapping, Sequence

import numpy as np

from caseprep.contract.errors import UserError
from caseprep.contract.monitor import FORCES_NAME, read_monitor

VERDICTS = ("converged", "oscillating", "diverging")


@dataclass(frozen=True)
class ConvergenceOptions:
    """Thresholds of the convergence rule (see the module doc); dimensionless
    fractions unless stated."""

    residual_tol: float = 1e-3
    residual_ceiling: float = 1e-2
    min_residual_drop: float = 2.0            # orders of magnitude
    residual_start_iterations: int = 5        # iterations whose largest residual the drop starts from
    settle_fraction: float = 0.3              # share of the samples in the settling window
    settle_min_samples: int = 20              # smallest settling window, samples
    settle_tol: float = 0.01                  # drift and relative std tolerance
    settle_floor: float = 1.0                 # floor of a component's scale, × the resultant force
    trend_r2: float = 0.5                     # R² above which a drift is a trend (diverging)
    stop_min_iterations: int = 40             # earliest iteration a run may stop as settled (two smallest windows)
    stop_margin: float = 0.5                  # a stop needs the loads within this share of count_tol_drag_side
    stop_window_fraction: float = 0.5         # share of the samples the stop rule looks back over
    # the rule in coefficient counts (absolute, each coefficient in its own units; see judge_coefficients)
    count_tol_lift: float = 0.005             # C_L, C_LF, C_LR
    count_tol_drag_side: float = 0.002        # C_D, C_S, C_N
    count_tol_balance: float = 0.003          # aero balance C_LF/(C_LF + C_LR), fraction

    def count_tolerances(self) -> dict[str, float]:
        """Tolerance (coefficient counts) of each coefficient judged by :func:`judge_coefficients`."""
        return {"cl": self.count_tol_lift, "cl_front": self.count_tol_lift, "cl_rear": self.count_tol_lift,
                "cd": self.count_tol_drag_side, "cs": self.count_tol_drag_side, "cn": self.count_tol_drag_side,
                "balance": self.count_tol_balance}


DEFAULT_OPTIONS = ConvergenceOptions()


@dataclass(frozen=True)
class SeriesStats:
    """Statistics of one series over the window (units of the series)."""

    name: str
    n: int
    mean: float
    std: float
    rel_std: float
    drift: float
    r2: float
    last: float
    verdict: str

    def to_dict(self) -> dict:
        return dict(self.__dict__)


@dataclass(frozen=True)
class Assessment:
    """Per-series statistics and the overall verdict."""

    window: int
    series: dict[str, SeriesStats]
    verdict: str

    def to_dict(self) -> dict:
        return {"window": self.window, "verdict": self.verdict, "series": {k: v.to_dict() for k, v in self.series.items()}}

    def settling(self) -> dict[str, Any]:
        """The summary the run record keeps: ``{"window", "verdict",
        "max_drift", "max_rel_std"}`` (largest |drift| and relative std over
        the series, fractions; +inf for a non-finite series)."""
        st = list(self.series.values())
        fin = (lambda v: abs(v) if math.isfinite(v) else math.inf)
        return {"window": self.window, "verdict": self.verdict,
                "max_drift": max((fin(s.drift) for s in st), default=math.inf),
                "max_rel_std": max((fin(s.rel_std) for s in st), default=math.inf)}


def settle_window(n_samples: int | None, options: ConvergenceOptions = DEFAULT_OPTIONS) -> int:
    """Number of samples at the end of a run over which settling is judged:
    ``ceil(settle_fraction × n_samples)``, at least ``settle_min_samples``,
    at most ``n_samples`` (``settle_min_samples`` when ``n_samples`` is
    unknown). Dimensionless."""
    minimum = options.settle_min_samples
    if n_samples is None or n_samples <= 0:
        return minimum
    return int(min(n_samples, max(minimum, int(np.ceil(options.settle_fraction * n_samples)))))


def assess_series(name: str, values: Sequence[float], *, floor: float, window: int | None = None,
                  options: ConvergenceOptions = DEFAULT_OPTIONS) -> SeriesStats:
    """Mean, std, drift and verdict of the last ``window`` samples of a series
    (default :func:`settle_window` of its length).

    ``floor`` is in the units of the series (for coefficients 1e-3 ≈ one
    "count" of drag). See the module doc for the formulas and thresholds."""
    v = np.asarray(values, dtype=np.float64)
    v = v[-(settle_window(v.size, options) if window is None else window):]
    n = v.size
    if n < 3:
        raise UserError(expected="at least 3 monitor samples in the window", got=n, key=name,
                        fix="run more iterations or shorten the window")
    if not np.isfinite(v).all():
        return SeriesStats(name, n, float("nan"), float("nan"), float("nan"), float("nan"), 0.0, float(v[-1]), "diverging")
    mean = float(v.mean())
    std = float(v.std())
    s = max(abs(mean), floor)
    x = np.arange(n, dtype=np.float64)
    x -= x.mean()
    slope = float(np.dot(x, v - mean) / np.dot(x, x))
    ss_tot = float(np.dot(v - mean, v - mean))
    r2 = float(slope**2 * np.dot(x, x) / ss_tot) if ss_tot > 0 else 0.0
    drift = slope * (n - 1) / s
    rel_std = std / s
    tol = options.settle_tol
    if abs(drift) <= tol and rel_std <= tol:
        verdict = "converged"
    elif abs(drift) > tol and r2 >= options.trend_r2:
        verdict = "diverging"
    else:
        verdict = "oscillating"
    return SeriesStats(name, n, mean, std, rel_std, drift, r2, float(v[-1]), verdict)


def assess(series: Mapping[str, Sequence[float]], *, floor: float, window: int | None = None,
           options: ConvergenceOptions = DEFAULT_OPTIONS) -> Assessment:
    """:func:`assess_series` for each series and the worst verdict."""
    stats = {k: assess_series(k, v, floor=floor, window=window, options=options) for k, v in series.items()}
    if not stats:
        raise UserError(expected="at least one monitor series", got="none", key="monitor")
    worst = max((s.verdict for s in stats.values()), key=VERDICTS.index)
    n = min(s.n for s in stats.values())
    return Assessment(window=n, series=stats, verdict=worst)


def assess_force_monitor(case_dir: str | os.PathLike, name: str | None = None, *, window: int | None = None,
                         options: ConvergenceOptions = DEFAULT_OPTIONS) -> Assessment:
    """Verdict of the total force components (``force.total_x/y/z``, N, the
    monitor's axes) of a case's runtime monitor (``name``; every monitor of
    the case when None) over ``window`` samples (default
    :func:`settle_window` of the run). The floor of each series is
    ``options.settle_floor`` × the magnitude of the last total force (N).
    Raises UserError when no monitor is found."""
    mon = read_monitor(case_dir, name)
    series = {k: v for k, v in mon.items() if k.startswith("force.total_")}
    if not series:
        raise UserError(expected="force.total_x/y/z in the runtime force monitor", got=", ".join(sorted(mon)) or "none",
                        file=str(case_dir), fix="switch on the forces function object in system/controlDict")
    n = min(len(v) for v in series.values())
    w = settle_window(n, options) if window is None else window
    scale = max(float(np.linalg.norm([v[-1] for v in series.values()])), 1e-300)
    if not np.isfinite(scale):
        scale = 1.0
    return assess(series, window=w, floor=options.settle_floor * scale, options=options)


def force_settling(case_dir: str | os.PathLike, options: ConvergenceOptions = DEFAULT_OPTIONS) -> dict[str, Any] | None:
    """The summary (:meth:`Assessment.settling`) of the force monitor
    :data:`FORCES_NAME` of a case over its settling window, or None when the
    case has no readable monitor with at least 3 samples. Forces in N,
    monitor axes."""
    if not (Path(case_dir) / "postProcessing" / FORCES_NAME).is_dir():
        return None
    try:
        return assess_force_monitor(case_dir, FORCES_NAME, options=options).settling()
    except UserError:
        return None


def residual_drop(residuals: Mapping[str, Sequence[float]], options: ConvergenceOptions = DEFAULT_OPTIONS) -> dict[str, float]:
    """Per field, the drop of its initial residual over the run in orders of
    magnitude: log10(max of the first ``residual_start_iterations`` finite
    values / last finite value). Residuals dimensionless (the solver's
    normalised ones); +inf for a final residual of 0, NaN for a field without
    values or a non-finite final value."""
    out: dict[str, float] = {}
    for f, seq in residuals.items():
        vals = [float(v) for v in seq if v == v]  # drop NaN (iterations the field was not solved)
        if not vals or not all(math.isfinite(v) for v in vals[-1:]):
            out[f] = math.nan
            continue
        start = max(vals[:options.residual_start_iterations])
        last = vals[-1]
        out[f] = math.inf if last <= 0.0 else (math.log10(start / last) if start > 0.0 else 0.0)
    return out


def judge_convergence(residuals: Mapping[str, Sequence[float]], final: Mapping[str, float],
                      settling: Mapping[str, Any] | None,
                      options: ConvergenceOptions = DEFAULT_OPTIONS) -> tuple[bool, str, float | None]:
    """Whether a run that used its whole iteration budget counts as
    converged (module doc); returns (converged, reason, smallest residual
    drop in orders of magnitude or None). ``residuals``: per field, initial
    residual per iteration; ``final``: the final initial residual per field
    (dimensionless); ``settling``: the force monitor's summary over the
    settling window (:func:`force_settling`) or None without a monitor.
    Pure function."""
    if not final:
        return False, "no residuals in the solver log", None
    drops = residual_drop(residuals, options)
    high = {f: v for f, v in final.items() if not (math.isfinite(v) and v <= options.residual_tol)}
    judged = [drops.get(f, math.nan) for f in high] or [d for d in drops.values()]
    finite = [d for d in judged if d == d]
    drop = min(finite) if finite else None
    if drop is not None and math.isinf(drop):
        drop = None
    if settling is not None and settling.get("verdict") == "diverging":
        return False, (f"the force monitor is still drifting over the last {settling.get('window')} iterations "
                       f"(drift {100 * settling.get('max_drift', math.nan):.2g} % of the load)"), drop
    if not high:
        return True, f"every final residual ≤ {options.residual_tol:g}", drop
    worst_f = max(high, key=lambda f: high[f] if math.isfinite(high[f]) else math.inf)
    worst = f"{worst_f} {high[worst_f]:.2g}"
    if any(not math.isfinite(v) or v > options.residual_ceiling for v in high.values()):
        return False, f"final residual above {options.residual_ceiling:g} ({worst})", drop
    low_drop = [f for f in high if not (drops.get(f, math.nan) >= options.min_residual_drop)]
    if low_drop:
        return False, (f"residuals above {options.residual_tol:g} ({worst}) fell less than "
                       f"{options.min_residual_drop:g} orders of magnitude ({', '.join(low_drop)})"), drop
    if settling is None:
        return False, f"residuals above {options.residual_tol:g} ({worst}) and no force monitor to judge by", drop
    if settling.get("verdict") != "converged":
        return False, (f"residuals above {options.residual_tol:g} ({worst}) and the force monitor "
                       f"{settling.get('verdict')} over the last {settling.get('window')} iterations "
                       f"(drift {100 * settling.get('max_drift', math.nan):.2g} %, "
                       f"std {100 * settling.get('max_rel_std', math.nan):.2g} %)"), drop
    return True, (f"force monitor settled over the last {settling.get('window')} iterations "
                  f"(drift {100 * settling['max_drift']:.2g} %, std {100 * settling['max_rel_std']:.2g} %) and "
                  f"residuals fell ≥ {options.min_residual_drop:g} orders (worst {worst})"), drop


def stop_window(n_samples: int, options: ConvergenceOptions = DEFAULT_OPTIONS) -> int:
    """Samples the stop rule looks back over: ``ceil(stop_window_fraction ×
    n_samples)``, at least ``stop_min_iterations``, at most ``n_samples`` —
    longer than the settling window, so that a slow drift shows."""
    return int(min(n_samples, max(options.stop_min_iterations,
                                  int(np.ceil(options.stop_window_fraction * n_samples)))))


def judge_stop(residuals: Mapping[str, Sequence[float]], final: Mapping[str, float],
               settling: Mapping[str, Any] | None, forces: Mapping[str, Sequence[float]], force_scale: float,
               iterations: int, options: ConvergenceOptions = DEFAULT_OPTIONS) -> tuple[bool, str]:
    """Whether a run still iterating may stop now (the stop rule ``settled``).

    All of: at least ``options.stop_min_iterations`` iterations; the run
    counts as converged by :func:`judge_convergence` as if its budget ended
    here, with its force monitor settled (verdict ``converged`` also when
    every residual is below the tolerance: small residuals alone do not show
    that the loads stopped moving); and, over the last :func:`stop_window`
    samples, every total-force component (``forces``: ``force.total_x/y/z``
    in N, body axes: z ≈ lift, x and y ≈ drag and side force at small pitch)
    drifted (change of the fitted line across the window) and scattered
    (standard deviation about that line) less than ``stop_margin`` × its
    tolerance in coefficient counts (``count_tol_lift`` for z,
    ``count_tol_drag_side`` for x and y), in coefficient units: divided by
    ``force_scale`` = q·A (N) — so that what is left of a slow drift stays
    inside the tolerance of the rule in coefficient counts. Returns (stop, reason). Pure function; thresholds
    common practice, no source."""
    if iterations < options.stop_min_iterations:
        return False, f"{iterations} iterations, fewer than {options.stop_min_iterations}"
    ok, why, _ = judge_convergence(residuals, final, settling, options)
    if not ok:
        return False, why
    if settling is None or settling.get("verdict") != "converged":
        return False, "the force monitor has not settled"
    if not (force_scale > 0 and math.isfinite(force_scale)) or not forces:
        return False, "no force scale (q·A) or no force monitor to judge the stop by"
    n = min(len(v) for v in forces.values())
    if n < options.stop_min_iterations:
        return False, f"{n} monitor samples, fewer than {options.stop_min_iterations}"
    w = stop_window(n, options)
    for name, values in sorted(forces.items()):
        v = np.asarray(values, dtype=np.float64)[-w:]
        if not np.isfinite(v).all():
            return False, f"{name} is not finite"
        tol = options.stop_margin * (options.count_tol_lift if name.endswith("_z") else options.count_tol_drag_side)
        x = np.arange(v.size, dtype=np.float64)
        x -= x.mean()
        slope = float(np.dot(x, v - v.mean()) / np.dot(x, x))
        drift = abs(slope) * (v.size - 1) / force_scale
        scatter = float(np.std(v - v.mean() - slope * x)) / force_scale
        if drift > tol or scatter > tol:
            return False, (f"{name} still moves over the last {w} iterations: drift {drift:.4f}, scatter "
                           f"{scatter:.4f} in coefficient units (stop below {tol:g})")
    return True, (f"settled at iteration {iterations}: every force component within half its coefficient "
                  f"tolerance over the last {w} iterations; {why}")


# --------------------------------------------------------------------------- the rule in coefficient counts

@dataclass(frozen=True)
class CountStats:
    """One coefficient over the window, in its own units: mean, std, drift
    (change of the least-squares line across the window), R², tolerance."""

    name: str
    n: int
    mean: float
    std: float
    drift: float
    r2: float
    tolerance: float
    verdict: str

    def to_dict(self) -> dict:
        return dict(self.__dict__)


def count_stats(name: str, values: Sequence[float], tolerance: float,
                options: ConvergenceOptions = DEFAULT_OPTIONS) -> CountStats:
    """Statistics and verdict of one coefficient series over its window (all
    samples given, ≥ 3; module doc, "the rule in coefficient counts")."""
    v = np.asarray(values, dtype=np.float64).ravel()
    n = v.size
    if n < 3:
        raise UserError(expected="at least 3 monitor samples in the window", got=n, key=name,
                        fix="run more iterations or shorten the window")
    if not tolerance > 0:
        raise UserError(expected="a positive tolerance (coefficient counts)", got=tolerance, key=name)
    if not np.all(np.isfinite(v)):
        nan = float("nan")
        return CountStats(name, n, nan, nan, nan, 0.0, float(tolerance), "diverging")
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
    elif abs(drift) > tolerance and r2 >= options.trend_r2:
        verdict = "diverging"
    else:
        verdict = "oscillating"
    return CountStats(name, n, mean, std, drift, r2, float(tolerance), verdict)


def balance_series(cl_front: Sequence[float], cl_rear: Sequence[float]) -> np.ndarray:
    """Per-sample aero balance C_LF/(C_LF + C_LR) (NaN where the total is ≈ 0)."""
    f = np.asarray(cl_front, dtype=float)
    r = np.asarray(cl_rear, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(np.abs(f + r) > 1e-9, f / (f + r), np.nan)


def judge_coefficients(series: Mapping[str, Sequence[float]], options: ConvergenceOptions = DEFAULT_OPTIONS,
                       tolerances: Mapping[str, float] | None = None) -> dict[str, Any]:
    """The rule in coefficient counts over the given window samples (module
    doc). ``series``: coefficient name (``cl``, ``cd``, ``cs``, ``cn``,
    ``cl_front``, ``cl_rear``; the balance is added when both axle series
    are given) → samples; ``tolerances`` override
    :meth:`ConvergenceOptions.count_tolerances` by name. Returns
    ``{"verdict", "window", "series": {name: CountStats dict}, "means",
    "stds"}``; raises UserError for a name without a tolerance."""
    s = dict(series)
    if "cl_front" in s and "cl_rear" in s and "balance" not in s:
        s["balance"] = balance_series(s["cl_front"], s["cl_rear"])
    tol = {**options.count_tolerances(), **dict(tolerances or {})}
    missing = [k for k in s if k not in tol]
    if missing:
        raise UserError(expected="coefficients with a tolerance (" + ", ".join(tol) + ")", got=", ".join(missing),
                        key="tolerances")
    if not s:
        raise UserError(expected="at least one coefficient series", got="none", key="monitor")
    stats = {k: count_stats(k, v, tol[k], options) for k, v in s.items()}
    worst = max((x.verdict for x in stats.values()), key=VERDICTS.index)
    return {"verdict": worst, "window": min(x.n for x in stats.values()),
            "series": {k: x.to_dict() for k, x in stats.items()},
            "means": {k: x.mean for k, x in stats.items()}, "stds": {k: x.std for k, x in stats.items()}}
