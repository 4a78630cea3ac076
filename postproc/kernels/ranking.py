"""Rank geometry variants on performance *and* robustness over the sweep envelope.

Input is the sweep's results table: one :class:`CaseResult` per case (built by
the post-processing of each case). When a variant was solved on several mesh
levels, only its finest level is ranked (the others form the mesh study,
:mod:`postproc.kernels.meshstudy`). Cases that carry a flag (mesh failed,
layers collapsed, not converged, …) are **never ranked**: they are counted
and listed, and a variant with flagged cases says so.

Metrics per variant (all dimensionless unless stated; lift positive up, so
downforce coefficient = −C_L; balance = front share of downforce)

performance
    ``downforce``  mean −C_L over the unflagged cases
    ``efficiency`` mean of −C_L / C_D over the unflagged cases
robustness
    ``balance_range``    max − min of the aero balance over the envelope
                         (fraction; how far the balance migrates with ride
                         height, pitch and yaw)
    ``yaw_retention``    mean −C_L at the largest |yaw| divided by mean −C_L
                         at the smallest |yaw| (1 = no loss in crosswind)
    ``min_stability_margin``  smallest directional stability margin (fraction
                         of the wheelbase, side-force centre of pressure behind the CG is
                         positive = stabilising) over the yawed cases
    ``downforce_spread`` (max − min)/mean of −C_L over the envelope

Score: each metric is normalised across the variants to [0, 1] (best = 1;
all equal → 1) and the composite is the weighted sum with
:data:`DEFAULT_WEIGHTS` (a judgement of ours: common practice, no source;
pass other weights to suit the vehicle). Variants are also marked when they
are on the Pareto front of (downforce ↑, efficiency ↑, balance range ↓).
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

#: metric → (weight, sense) with sense +1 = larger is better, −1 = smaller is better
DEFAULT_WEIGHTS: dict[str, tuple[float, int]] = {
    "efficiency": (0.30, +1),
    "downforce": (0.25, +1),
    "balance_range": (0.20, -1),
    "yaw_retention": (0.10, +1),
    "min_stability_margin": (0.10, +1),
    "downforce_spread": (0.05, -1),
}


@dataclass(frozen=True)
class CaseResult:
    """One row of the results table (one case).

    Ride heights in m, angles in degrees, speed in m/s; coefficients in the
    wind axes of caseprep.contract.frames (C_L positive up, C_D along the relative
    wind, C_S along +y_W); ``balance`` front share of downforce (fraction,
    None when undefined); ``stability_margin`` as a fraction of the wheelbase (None when undefined or
    no CG given); ``flags`` non-empty means the case must not be ranked.
    ``u_*``: the iterative spread (standard deviation over the settling
    window, coefficient units; NaN unknown) of each coefficient, whose window
    mean is the value; ``reference_area`` (m²) and ``air_density`` (kg/m³)
    of the coefficients. With them a results.csv is a complete input of
    ``postproc analyse``.
    """

    case_id: str
    variant: str
    ride_height_front: float
    ride_height_rear: float
    pitch_deg: float
    yaw_deg: float
    cl: float
    cd: float
    cs: float = 0.0
    cl_front: float | None = None
    cl_rear: float | None = None
    balance: float | None = None
    stability_margin: float | None = None
    flags: tuple[str, ...] = ()
    speed: float = float("nan")
    mesh_level: int = 0
    reference_area: float = float("nan")
    air_density: float = float("nan")
    u_cl: float = float("nan")
    u_cd: float = float("nan")
    u_cs: float = float("nan")
    u_cl_front: float = float("nan")
    u_cl_rear: float = float("nan")


@dataclass(frozen=True)
class VariantScore:
    """Metrics, normalised scores and rank of one variant."""

    variant: str
    n_cases: int
    n_flagged: int
    flagged_cases: tuple[str, ...]
    metrics: dict[str, float | None]
    normalised: dict[str, float]
    score: float
    rank: int
    pareto: bool
    notes: tuple[str, ...] = field(default_factory=tuple)


def _finite(values) -> np.ndarray:
    a = np.array([v for v in values if v is not None], dtype=float)
    return a[np.isfinite(a)]


def variant_metrics(rows: list[CaseResult]) -> tuple[dict[str, float | None], list[str]]:
    """Metrics of one variant's unflagged rows (see the module docstring)."""
    notes: list[str] = []
    ok = [r for r in rows if not r.flags]
    m: dict[str, float | None] = {k: None for k in DEFAULT_WEIGHTS}
    if not ok:
        notes.append("no unflagged case: nothing to rank")
        return m, notes
    dfc = np.array([-r.cl for r in ok], dtype=float)
    cd = np.array([r.cd for r in ok], dtype=float)
    m["downforce"] = float(dfc.mean())
    with np.errstate(divide="ignore", invalid="ignore"):
        eff = np.where(cd > 0, dfc / cd, np.nan)
    eff = eff[np.isfinite(eff)]
    m["efficiency"] = float(eff.mean()) if eff.size else None
    bal = _finite(r.balance for r in ok)
    m["balance_range"] = float(bal.max() - bal.min()) if bal.size else None
    if bal.size < len(ok):
        notes.append(f"balance undefined in {len(ok) - bal.size} case(s) (downforce ≈ 0)")
    yaws = np.array([abs(r.yaw_deg) for r in ok])
    if yaws.max() > yaws.min():
        lo = dfc[np.isclose(yaws, yaws.min())].mean()
        hi = dfc[np.isclose(yaws, yaws.max())].mean()
        m["yaw_retention"] = float(hi / lo) if abs(lo) > 1e-12 else None
    else:
        notes.append("no yaw variation in the sweep: yaw retention not assessed")
    sm = _finite(r.stability_margin for r in ok if abs(r.yaw_deg) > 0)
    m["min_stability_margin"] = float(sm.min()) if sm.size else None
    mean = dfc.mean()
    m["downforce_spread"] = float((dfc.max() - dfc.min()) / abs(mean)) if abs(mean) > 1e-12 else None
    return m, notes


def _pareto(points: dict[str, tuple[float, float, float]]) -> set[str]:
    """Names not dominated in (maximise a, maximise b, minimise c)."""
    front = set()
    for n, (a, b, c) in points.items():
        dominated = False
        for o, (a2, b2, c2) in points.items():
            if o == n:
                continue
            if a2 >= a and b2 >= b and c2 <= c and (a2 > a or b2 > b or c2 < c):
                dominated = True
                break
        if not dominated:
            front.add(n)
    return front


def rank_variants(
    results: list[CaseResult],
    weights: dict[str, tuple[float, int]] | None = None,
) -> list[VariantScore]:
    """Score and rank the variants of a sweep; best first.

    ``weights``: metric → (weight, sense), default :data:`DEFAULT_WEIGHTS`.
    A metric that is undefined for a variant scores 0 for it and is named in
    its notes; a variant with no unflagged case gets rank after all others.
    The input list is not modified.
    """
    weights = dict(DEFAULT_WEIGHTS if weights is None else weights)
    by_variant: dict[str, list[CaseResult]] = {}
    for r in results:
        by_variant.setdefault(r.variant, []).append(r)
    # a mesh-dependence sweep solves the same points on several mesh levels:
    # rank each variant on its finest level only (coarser levels are the study)
    for v, rows in by_variant.items():
        finest = max(r.mesh_level for r in rows)
        by_variant[v] = [r for r in rows if r.mesh_level == finest]
    metrics: dict[str, dict[str, float | None]] = {}
    notes: dict[str, list[str]] = {}
    for v, rows in by_variant.items():
        metrics[v], notes[v] = variant_metrics(rows)
    normalised: dict[str, dict[str, float]] = {v: {} for v in by_variant}
    for key, (_w, sense) in weights.items():
        vals = {v: metrics[v].get(key) for v in by_variant}
        finite = [x for x in vals.values() if x is not None and math.isfinite(x)]
        lo, hi = (min(finite), max(finite)) if finite else (0.0, 0.0)
        for v, x in vals.items():
            if x is None or not math.isfinite(x):
                normalised[v][key] = 0.0
                if any(not r.flags for r in by_variant[v]):
                    notes[v].append(f"{key} undefined: scored 0")
            elif hi == lo:
                normalised[v][key] = 1.0
            else:
                t = (x - lo) / (hi - lo)
                normalised[v][key] = t if sense > 0 else 1.0 - t
    wsum = sum(w for w, _ in weights.values()) or 1.0
    scores = {v: sum(weights[k][0] * normalised[v][k] for k in weights) / wsum for v in by_variant}
    rankable = [v for v in by_variant if metrics[v].get("downforce") is not None]
    pts = {
        v: (
            metrics[v]["downforce"] or -np.inf,
            metrics[v]["efficiency"] if metrics[v]["efficiency"] is not None else -np.inf,
            metrics[v]["balance_range"] if metrics[v]["balance_range"] is not None else np.inf,
        )
        for v in rankable
    }
    front = _pareto(pts)
    order = sorted(by_variant, key=lambda v: (v not in rankable, -scores[v], v))
    out = []
    for i, v in enumerate(order):
        rows = by_variant[v]
        flagged = tuple(r.case_id for r in rows if r.flags)
        out.append(
            VariantScore(
                variant=v,
                n_cases=len(rows),
                n_flagged=len(flagged),
                flagged_cases=flagged,
                metrics=metrics[v],
                normalised=normalised[v],
                score=float(scores[v]) if v in rankable else 0.0,
                rank=i + 1,
                pareto=v in front,
                notes=tuple(notes[v]),
            )
        )
    return out
