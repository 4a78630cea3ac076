"""The convergence rule: whether a steady run has converged, judged from its
runtime force monitor and its residuals. The one rule of the project, used by
the runner (the ``not-converged`` flag), ``postproc forces``, ``postproc
sweep`` (the ``forces-drifting`` flag) and the report; its thresholds live in
one frozen object, :class:`ConvergenceOptions`, with one set of defaults.

**The monitor, in coefficient counts** (:func:`judge_coefficients`). The
monitor's loads are reduced sample by sample to coefficients
(:func:`caseprep.contract.monitor.coefficient_series`: C_L, C_D, C_S, C_N,
the axle lift coefficients C_LF, C_LR and the per-sample balance
C_LF/(C_LF + C_LR)). Over the settling window — the last
``settle_fraction`` (30 %) of the samples, at least ``settle_min_samples``
(20) — each coefficient is judged in its own units against its own
tolerance (``count_tol_*``: 0.005 lift-type, 0.002 drag, side and yawing
moment, 0.003 balance; common practice, no source): mean m, standard
deviation s, drift d = least-squares slope × (N − 1) (the change of the
fitted line across the window);

* **converged** when |d| ≤ tol and s ≤ tol;
* otherwise **diverging** when a series is non-finite or the trend
  dominates: |d| > tol and the line explains at least ``trend_r2`` of the
  variance (R² ≥ 0.5) — a steady run-away or a still-settling drift;
* otherwise **oscillating** (bounded, not settled: the window mean is the
  best estimate, with s as its spread).

The monitor's verdict is the worst of its coefficients (diverging >
oscillating > converged). A tolerance in counts, rather than relative to
the resultant force, keeps the small components honest: on a diffuser floor
(−C_L 1.6, C_D 0.26, C_S 0.05) 1 % of the resultant would be ±6 % of the
drag and ±30 % of the side force, and moments would not be judged at all.
Reported coefficients are the window means, with s as their iterative
spread. :func:`judge_case_monitor` is this verdict for a case folder of a
sweep (reference values and frames from its manifest record), the one the
runner records (``force_settling``) and the post-processing reports.

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
2. the monitor's verdict is ``converged`` and every field above
   ``residual_tol`` is at most ``residual_ceiling`` (1e-2) and at least
   ``min_residual_drop`` (2) orders of magnitude below its largest value in
   the first ``residual_start_iterations`` (5) iterations.

Either way a monitor whose verdict is ``diverging`` makes the run not
converged: low residuals with loads still moving are not a converged
result. Otherwise a run is not converged for high residuals, a monitor still
oscillating beyond its tolerances, residuals that did not fall, or no
monitor to judge by (then only rule 1 can pass). All thresholds are common
practice, no source; they are fields of :class:`ConvergenceOptions`.
Residuals are the solver's dimensionless normalised initial residuals.
"""
from __future__ import annotations

import math
import os
from dataclasses import dataclass, replace
from typing import Any, Mapping, Sequence

import numpy as np

from caseprep.contract.errors import UserError
from caseprep.contract.frames import axes_rotations, axle_axes
from caseprep.contract.manifest import CaseRecord, find_case_manifest
from caseprep.contract.monitor import case_monitor, coefficient_series

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
    trend_r2: float = 0.5                     # R² above which a drift is a trend (diverging)
    stop_min_iterations: int = 40             # earliest iteration a run may stop as settled (two smallest windows)
    stop_margin: float = 0.5                  # a stop needs every coefficient within this share of its tolerance
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


def settle_window(n_samples: int | None, options: ConvergenceOptions = DEFAULT_OPTIONS) -> int:
    """Number of samples at the end of a run over which settling is judged:
    ``ceil(settle_fraction × n_samples)``, at least ``settle_min_samples``,
    at most ``n_samples`` (``settle_min_samples`` when ``n_samples`` is
    unknown). Dimensionless."""
    minimum = options.settle_min_samples
    if n_samples is None or n_samples <= 0:
        return minimum
    return int(min(n_samples, max(minimum, int(np.ceil(options.settle_fraction * n_samples)))))


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


def unsettled(settling: Mapping[str, Any]) -> str:
    """The coefficients of a monitor verdict (:func:`judge_coefficients`)
    that are not converged, with their drift and spread against their
    tolerance (coefficient counts), for messages; "" when all are."""
    parts = []
    for name, st in (settling.get("series") or {}).items():
        if isinstance(st, Mapping) and st.get("verdict") != "converged":
            parts.append(f"{name} drift {st.get('drift', math.nan):+.2g}, std {st.get('std', math.nan):.2g} "
                         f"(tolerance {st.get('tolerance', math.nan):g})")
    return "; ".join(parts)


def judge_convergence(residuals: Mapping[str, Sequence[float]], final: Mapping[str, float],
                      settling: Mapping[str, Any] | None,
                      options: ConvergenceOptions = DEFAULT_OPTIONS) -> tuple[bool, str, float | None]:
    """Whether a run that used its whole iteration budget counts as
    converged (module doc); returns (converged, reason, smallest residual
    drop in orders of magnitude or None). ``residuals``: per field, initial
    residual per iteration; ``final``: the final initial residual per field
    (dimensionless); ``settling``: the monitor's verdict in coefficient
    counts over the settling window (:func:`judge_case_monitor`) or None
    without a monitor to judge by. Pure function."""
    if not final:
        return False, "no residuals in the solver log", None
    drops = residual_drop(residuals, options)
    high = {f: v for f, v in final.items() if not (math.isfinite(v) and v <= options.residual_tol)}
    judged = [drops.get(f, math.nan) for f in high] or [d for d in drops.values()]
    finite = [d for d in judged if d == d]
    drop = min(finite) if finite else None
    if drop is not None and math.isinf(drop):
        drop = None
    window = settling.get("window") if settling is not None else None
    if settling is not None and settling.get("verdict") == "diverging":
        return False, (f"the force monitor is still drifting over the last {window} iterations "
                       f"({unsettled(settling)})"), drop
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
                       f"{settling.get('verdict')} over the last {window} iterations ({unsettled(settling)})"), drop
    return True, (f"force monitor settled over the last {window} iterations (every coefficient within its "
                  f"tolerance in counts) and residuals fell ≥ {options.min_residual_drop:g} orders "
                  f"(worst {worst})"), drop


def stop_window(n_samples: int, options: ConvergenceOptions = DEFAULT_OPTIONS) -> int:
    """Samples the stop rule looks back over: ``ceil(stop_window_fraction ×
    n_samples)``, at least ``stop_min_iterations``, at most ``n_samples`` —
    longer than the settling window, so that a slow drift shows."""
    return int(min(n_samples, max(options.stop_min_iterations,
                                  int(np.ceil(options.stop_window_fraction * n_samples)))))


def stop_options(options: ConvergenceOptions = DEFAULT_OPTIONS) -> ConvergenceOptions:
    """The options the stop rule judges the monitor with: every tolerance in
    coefficient counts × ``stop_margin``."""
    m = options.stop_margin
    return replace(options, count_tol_lift=m * options.count_tol_lift,
                   count_tol_drag_side=m * options.count_tol_drag_side,
                   count_tol_balance=m * options.count_tol_balance)


def judge_stop(residuals: Mapping[str, Sequence[float]], final: Mapping[str, float],
               settling: Mapping[str, Any] | None, iterations: int,
               options: ConvergenceOptions = DEFAULT_OPTIONS) -> tuple[bool, str]:
    """Whether a run still iterating may stop now (the stop rule ``settled``).

    ``settling``: the monitor's verdict in coefficient counts over the last
    :func:`stop_window` samples — the last half of the run, at least
    ``stop_min_iterations`` — judged with :func:`stop_options` (every
    tolerance × ``stop_margin``, a half), e.g. :func:`judge_case_monitor`
    with those. The run may stop when it has run at least
    ``stop_min_iterations`` iterations, that verdict is ``converged`` (also
    when every residual is below the tolerance: small residuals alone do not
    show that the loads stopped moving) and :func:`judge_convergence` counts
    it converged as if its budget ended here. The longer window and the
    halved tolerances leave room for what remains of a slow drift, so the
    judgement of the finished run and its window means stay within the
    rule's tolerances. Returns (stop, reason). Pure function; thresholds
    common practice, no source."""
    if iterations < options.stop_min_iterations:
        return False, f"{iterations} iterations, fewer than {options.stop_min_iterations}"
    if settling is None:
        return False, "no force monitor to judge the stop by"
    if settling.get("verdict") != "converged":
        return False, (f"the force monitor is not within half its tolerances over the last {settling.get('window')} "
                       f"iterations ({unsettled(settling)})")
    ok, why, _ = judge_convergence(residuals, final, settling, options)
    if not ok:
        return False, why
    return True, (f"settled at iteration {iterations}: every coefficient within half its tolerance in counts over "
                  f"the last {settling.get('window')} iterations; {why}")


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


def judge_monitor(monitor: Mapping[str, Sequence[float]], reference: Any,
                  rotations: Mapping[str, np.ndarray] | None = None, axle=None, window: int | None = None,
                  options: ConvergenceOptions = DEFAULT_OPTIONS) -> dict[str, Any]:
    """The verdict in coefficient counts of a monitor's last ``window``
    samples (default :func:`settle_window` of the run), with window means
    and spreads: :func:`caseprep.contract.monitor.coefficient_series`
    (``reference``, ``rotations``, ``axle`` as there) judged by
    :func:`judge_coefficients`. Raises KeyError without the total force,
    UserError for too few samples."""
    n = len(monitor["force.total_x"])
    w = settle_window(n, options) if window is None else window
    return judge_coefficients(coefficient_series(monitor, reference, rotations, axle, w), options)


def judge_case_monitor(case_dir: str | os.PathLike, options: ConvergenceOptions = DEFAULT_OPTIONS,
                       window: int | None = None, record: CaseRecord | None = None) -> dict[str, Any] | None:
    """The verdict in coefficient counts (:func:`judge_monitor`) of the force
    monitor of a case folder of a sweep, with the reference values, frames
    and axles of its manifest ``record`` (looked up from the sweep's manifest
    when None); None when the case has no manifest record or no readable
    monitor with enough samples (nothing to judge by). The verdict the
    runner records and the post-processing reports."""
    try:
        rec = record
        if rec is None:
            found = find_case_manifest(case_dir)
            if found is None:
                return None
            rec = found[1]
        axle = None if rec.ground == "none" else axle_axes(rec.placement)
        return judge_monitor(case_monitor(case_dir), rec.reference, axes_rotations(rec.placement,
                             rec.wind_direction_body), axle, window, options)
    except (UserError, KeyError, OSError, ValueError):
        return None
