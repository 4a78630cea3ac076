"""Whether a steady run that used its whole iteration budget converged:
the residual drop of each field and the settling of the runtime force
monitor, judged by the rule documented in :class:`caseprep.runner.RunOptions`
(whose fields hold the thresholds). Residuals are the solver's
dimensionless normalised initial residuals; forces in N in the monitor's
axes (the mesh/body frame). The monitor statistics come from
:mod:`postproc.convergence` (shipped in the same distribution).
"""
from __future__ import annotations

import math
from pathlib import Path
from typing import TYPE_CHECKING, Any, Sequence

from .errors import UserError

if TYPE_CHECKING:  # pragma: no cover
    from .runner import RunOptions


def _options(options: "RunOptions | None") -> "RunOptions":
    if options is None:
        from .runner import RunOptions  # runtime import: runner imports this module

        return RunOptions()
    return options


def residual_drop(residuals: dict[str, Sequence[float]], start_iterations: int = 5) -> dict[str, float]:
    """Per field, the drop of its initial residual over the run in orders of
    magnitude: log10(max of the first ``start_iterations`` finite values /
    last finite value). Residuals dimensionless (the solver's normalised
    ones); +inf for a final residual of 0, NaN for a field without values
    or a non-finite final value."""
    out: dict[str, float] = {}
    for f, seq in residuals.items():
        vals = [float(v) for v in seq if v == v]  # drop NaN (iterations the field was not solved)
        if not vals or not all(math.isfinite(v) for v in vals[-1:]):
            out[f] = math.nan
            continue
        start = max(vals[:start_iterations])
        last = vals[-1]
        out[f] = math.inf if last <= 0.0 else (math.log10(start / last) if start > 0.0 else 0.0)
    return out


def judge_convergence(residuals: dict[str, Sequence[float]], final: dict[str, float],
                      settling: dict[str, Any] | None, options: "RunOptions | None" = None) -> tuple[bool, str, float | None]:
    """Whether a run that used its whole iteration budget counts as
    converged, by the two rules of :class:`RunOptions`; returns (converged,
    reason, smallest residual drop in orders of magnitude or None).
    ``residuals``: per field, initial residual per iteration; ``final``: the
    final initial residual per field (dimensionless); ``settling``: the
    force monitor's verdict over the settling window (see
    :func:`force_settling`) or None without a monitor; ``options`` the
    thresholds (default :class:`~caseprep.runner.RunOptions`). Pure function."""
    options = _options(options)
    if not final:
        return False, "no residuals in the solver log", None
    drops = residual_drop(residuals)
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


def force_settling(case_dir: Path, options: "RunOptions | None" = None) -> dict[str, Any] | None:
    """The runtime force monitor of a case over its settling window (the last
    ``options.settle_fraction`` of the samples, at least
    ``options.settle_min_samples``): ``{"window", "verdict", "max_drift",
    "max_rel_std"}`` (drift and std as fractions of each component's scale,
    see :mod:`postproc.convergence`), or None when the case has no readable
    monitor. Forces in N, monitor axes."""
    from .render import FORCES_NAME

    options = _options(options)

    try:
        from postproc.convergence import assess_force_monitor, read_monitor, settle_window
    except ImportError:  # pragma: no cover - the two packages ship together
        return None
    if not (Path(case_dir) / "postProcessing" / FORCES_NAME).is_dir():
        return None
    try:
        mon = read_monitor(case_dir, FORCES_NAME)
        n = len(mon.get("Time", ()))
        if n < 3:
            return None
        w = settle_window(n, options.settle_fraction, options.settle_min_samples)
        a = assess_force_monitor(case_dir, FORCES_NAME, window=w, drift_tol=options.settle_tol,
                                 std_tol=options.settle_tol, floor_fraction=options.settle_floor)
    except UserError:
        return None
    st = list(a.series.values())
    fin = (lambda v: abs(v) if math.isfinite(v) else math.inf)
    return {"window": a.window, "verdict": a.verdict, "max_drift": max((fin(s.drift) for s in st), default=math.inf),
            "max_rel_std": max((fin(s.rel_std) for s in st), default=math.inf)}
