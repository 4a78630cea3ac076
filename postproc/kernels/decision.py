"""Honest ranking of geometry variants: compared on the same operating
points, with uncertainties, ties, completeness, constraints and the
winner's sensitivity to the weights.

Rules (a judgement of ours where no source is named: common practice, no
source):

* **Common points.** The envelope is every operating point (h_f, h_r, yaw,
  speed) any variant was run at. Variants are scored only on the points where
  *all* compared variants have usable results, so no variant is scored on
  its easy points alone. A variant with flagged or missing points in the
  envelope is ``complete: false`` (the points are listed) and is never
  reported as a clean winner. A variant without any usable point is not
  compared.
* **Basis.** When the reference areas differ, downforce and drag are
  compared as −C_L·A and C_D·A (m²); otherwise as coefficients.
* **Metrics** (:data:`METRICS`): mean downforce, mean drag, efficiency
  (−ΣC_L/ΣC_D), balance range (max − min of the front share of downforce
  C_LF/(C_LF + C_LR) over the common points), yaw retention (mean downforce
  at the largest |yaw| over that at the smallest, on the ride heights run at
  both) and downforce spread
  ((max − min)/mean). Each carries a standard uncertainty propagated to
  first order (GUM, JCGM 100:2008, §5.1) from the per-point uncertainties,
  taking the errors of one variant's points as fully correlated (the mesh
  and model error of a floor does not average out over ride heights) — so
  the uncertainty of a mean is the mean of the uncertainties.
* **Score** = Σ w_m · sense_m · (x_m − x̄_m)/scale_m / Σ w_m, with x̄_m the
  mean over the compared variants and scale_m = |x̄_m| for ratio-scale
  metrics (a 1 % downforce gain counts 0.01·w) or 1 for metrics that are
  already fractions; no min–max stretching, so differences inside the noise
  stay small. u_score = √Σ(w_m u_m/scale_m)² / Σ w_m.
* **Tie**: |s_a − s_b| ≤ k·√(u_a² + u_b²) (k = ``coverage``, default 1).
* **Decision**: the best-scored variant that meets the constraints is a
  clear winner only when it is complete and ties with nobody.
* **Weight stability**: each weight is scaled by 1 ± ``perturbation``
  (default 0.25) in turn and the winner recomputed.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import Mapping

import numpy as np

from .terms import ConstraintStatus, DecisionStatus, PointState

Point = tuple[float, float, float, float]   # (h_f m, h_r m, yaw deg, speed m/s)


@dataclass(frozen=True)
class Metric:
    sense: int          # +1 larger is better, −1 smaller is better
    relative: bool      # scale by |mean| (ratio-scale) or 1 (already a fraction)
    unit: str           # "coef" → dimensionless or m² on the area basis
    meaning: str


METRICS: Mapping[str, Metric] = MappingProxyType({
    "downforce": Metric(+1, True, "coef", "mean downforce −C_L (−C_L·A in m² when the areas differ)"),
    "drag": Metric(-1, True, "coef", "mean drag C_D (C_D·A in m² when the areas differ)"),
    "efficiency": Metric(+1, True, "—", "lift-to-drag ratio −ΣC_L/ΣC_D"),
    "balance_range": Metric(-1, False, "—", "max − min of the aero balance (front share of downforce)"),
    "yaw_retention": Metric(+1, False, "—", "downforce at the largest |yaw| / at the smallest (same ride heights)"),
    "downforce_spread": Metric(-1, False, "—", "(max − min)/mean of downforce over the common points"),
})
DEFAULT_WEIGHTS: Mapping[str, float] = MappingProxyType({
    "efficiency": 0.30, "downforce": 0.30, "balance_range": 0.20, "yaw_retention": 0.10, "downforce_spread": 0.10})
#: constraint → (metric or fact it limits, "min" | "max", unit)
CONSTRAINTS: Mapping[str, tuple[str, str, str]] = MappingProxyType({
    "balance_min": ("balance", "min", "fraction"),
    "balance_max": ("balance", "max", "fraction"),
    "max_cd": ("cd", "max", "—"),
    "max_cd_area": ("cd_area", "max", "m²"),
    "min_clearance": ("min_clearance", "min", "m"),
    "min_peak_margin": ("peak_margin", "min", "m"),
})


@dataclass(frozen=True)
class PointData:
    """One variant at one operating point: coefficients (wind axes, C_L up),
    reference area (m², NaN unknown), flags (empty = usable) and combined
    standard uncertainties of the coefficients (0 when unknown)."""

    point: Point
    flags: tuple[str, ...]
    cl: float
    cd: float
    cl_front: float = math.nan
    cl_rear: float = math.nan
    area: float = math.nan
    u_cl: float = 0.0
    u_cd: float = 0.0
    u_cl_front: float = 0.0
    u_cl_rear: float = 0.0

    @property
    def usable(self) -> bool:
        return not self.flags and math.isfinite(self.cl) and math.isfinite(self.cd)


@dataclass(frozen=True)
class DecisionOptions:
    """Weights by metric name (:data:`METRICS`), constraint limits by name
    (:data:`CONSTRAINTS`), tie coverage factor and weight perturbation."""

    weights: Mapping[str, float] = field(default_factory=lambda: dict(DEFAULT_WEIGHTS))
    constraints: Mapping[str, float] = field(default_factory=dict)
    coverage: float = 1.0
    perturbation: float = 0.25


def point_key(h_f: float, h_r: float, yaw: float, speed: float) -> Point:
    """Operating point rounded for matching (1 µm, 0.001 deg, 0.001 m/s)."""
    return (round(float(h_f), 6), round(float(h_r), 6), round(float(yaw), 3), round(float(speed), 3))


def _balance(f: np.ndarray, r: np.ndarray, uf: np.ndarray, ur: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """b = C_LF/(C_LF + C_LR) and u_b = √((C_LR u_F)² + (C_LF u_R)²)/(C_LF + C_LR)² (first order)."""
    tot = f + r
    with np.errstate(divide="ignore", invalid="ignore"):
        b = np.where(np.abs(tot) > 1e-9, f / tot, np.nan)
        ub = np.sqrt((r * uf) ** 2 + (f * ur) ** 2) / tot**2
    return b, ub


def _ratio(a: float, ua: float, b: float, ub: float) -> tuple[float | None, float | None]:
    """a/b with u = |a/b|·√((u_a/a)² + (u_b/b)²)."""
    if abs(b) < 1e-12 or abs(a) < 1e-15:
        return None, None
    r = a / b
    return r, abs(r) * math.hypot(ua / a, ub / b)


def _yaw_retention(pts: list[PointData], L: np.ndarray, uL: np.ndarray) -> tuple[float | None, float | None]:
    """Downforce at the largest |yaw| over that at the smallest, on the ride
    heights and speeds tested at both (matched pairs, so the ride-height mix
    cannot masquerade as a yaw effect)."""
    yaw = np.abs(np.array([p.point[2] for p in pts]))
    if not yaw.max() > yaw.min():
        return None, None
    base = {(p.point[0], p.point[1], p.point[3]): i for i, p in enumerate(pts) if np.isclose(yaw[i], yaw.min())}
    pairs = [(i, base[(p.point[0], p.point[1], p.point[3])]) for i, p in enumerate(pts)
             if np.isclose(yaw[i], yaw.max()) and (p.point[0], p.point[1], p.point[3]) in base]
    if not pairs:
        return None, None
    hi, lo = np.array([a for a, _ in pairs]), np.array([b for _, b in pairs])
    return _ratio(float(L[hi].mean()), float(uL[hi].mean()), float(L[lo].mean()), float(uL[lo].mean()))


def variant_metrics(pts: list[PointData], factor: float) -> dict[str, tuple[float | None, float | None]]:
    """Metric → (value, standard uncertainty) of one variant on its common
    points; ``factor`` multiplies C_L and C_D (the reference area on the area
    basis, else 1)."""
    L = np.array([-p.cl for p in pts]) * factor
    D = np.array([p.cd for p in pts]) * factor
    uL = np.array([p.u_cl for p in pts]) * factor
    uD = np.array([p.u_cd for p in pts]) * factor
    out: dict[str, tuple[float | None, float | None]] = {k: (None, None) for k in METRICS}
    out["downforce"] = (float(L.mean()), float(uL.mean()))
    out["drag"] = (float(D.mean()), float(uD.mean()))
    out["efficiency"] = _ratio(float(L.mean()), float(uL.mean()), float(D.mean()), float(uD.mean()))
    f = np.array([p.cl_front for p in pts])
    r = np.array([p.cl_rear for p in pts])
    b, ub = _balance(f, r, np.array([p.u_cl_front for p in pts]), np.array([p.u_cl_rear for p in pts]))
    if np.all(np.isfinite(b)):
        i, j = int(np.argmax(b)), int(np.argmin(b))
        out["balance_range"] = (float(b[i] - b[j]), float(math.hypot(ub[i], ub[j])) if i != j else 0.0)
    out["yaw_retention"] = _yaw_retention(pts, L, uL)
    m = float(L.mean())
    if abs(m) > 1e-12:
        i, j = int(np.argmax(L)), int(np.argmin(L))
        out["downforce_spread"] = (float((L[i] - L[j]) / abs(m)), float(math.hypot(uL[i], uL[j]) / abs(m)))
    return out


def _scores(metrics: dict[str, dict], weights: Mapping[str, float]) -> tuple[dict, dict, list[str], list[str]]:
    """Scores and their uncertainties of the compared variants; also the
    metrics used and notes on the ones dropped (module docstring)."""
    names = list(metrics)
    used, notes = [], []
    for m, w in weights.items():
        if w == 0:
            continue
        if any(metrics[v][m][0] is None for v in names):
            notes.append(f"{m} undefined for " + ", ".join(v for v in names if metrics[v][m][0] is None)
                         + ": left out of the score for every variant")
            continue
        used.append(m)
    wsum = sum(weights[m] for m in used) or 1.0
    score = {v: 0.0 for v in names}
    var = {v: 0.0 for v in names}
    for m in used:
        vals = [metrics[v][m][0] for v in names]
        mean = float(np.mean(vals))
        scale = abs(mean) if METRICS[m].relative else 1.0
        scale = scale if scale > 1e-15 else 1.0
        for v in names:
            x, u = metrics[v][m]
            score[v] += weights[m] * METRICS[m].sense * (x - mean) / scale / wsum
            var[v] += (weights[m] * (u or 0.0) / scale / wsum) ** 2
    return score, {v: math.sqrt(var[v]) for v in names}, used, notes


def _constraints(pts: list[PointData], facts: Mapping[str, float | None], limits: Mapping[str, float]) -> dict:
    """Status of each constraint of ``limits`` for one variant on its common
    points: the balance band on every point's balance, the drag caps on the
    mean C_D (and C_D·A with the variant's mean area), clearance and peak
    margin on the ``facts`` given by the caller (m)."""
    bal, _ = _balance(np.array([p.cl_front for p in pts]), np.array([p.cl_rear for p in pts]),
                      np.zeros(len(pts)), np.zeros(len(pts)))
    cd = float(np.mean([p.cd for p in pts]))
    areas = [p.area for p in pts if math.isfinite(p.area)]
    values = {
        "balance": (float(np.min(bal)), float(np.max(bal))) if np.all(np.isfinite(bal)) else None,
        "cd": cd,
        "cd_area": cd * float(np.mean(areas)) if areas else None,
        "min_clearance": facts.get("min_clearance"),
        "peak_margin": facts.get("peak_margin"),
    }
    out = {}
    for name, limit in limits.items():
        what, kind, unit = CONSTRAINTS[name]
        v = values.get(what)
        if v is None or (isinstance(v, float) and not math.isfinite(v)):
            out[name] = {"status": str(ConstraintStatus.NOT_ASSESSED), "limit": limit, "value": None, "unit": unit}
            continue
        x = (v[0] if kind == "min" else v[1]) if isinstance(v, tuple) else v
        ok = x >= limit if kind == "min" else x <= limit
        out[name] = {"status": str(ConstraintStatus.MET if ok else ConstraintStatus.VIOLATED), "limit": limit,
                     "value": x, "unit": unit}
    return out


def _pareto(metrics: dict[str, dict]) -> set[str]:
    """Variants not dominated in (downforce ↑, efficiency ↑, balance range ↓), where defined."""
    keys = [("downforce", 1), ("efficiency", 1), ("balance_range", -1)]
    keys = [(k, s) for k, s in keys if all(metrics[v][k][0] is not None for v in metrics)]
    pts = {v: [s * metrics[v][k][0] for k, s in keys] for v in metrics}
    front = set()
    for v, a in pts.items():
        if not any(all(x >= y for x, y in zip(b, a)) and any(x > y for x, y in zip(b, a))
                   for o, b in pts.items() if o != v):
            front.add(v)
    return front


def _top(score: dict[str, float], eligible: set[str]) -> str | None:
    cand = sorted((v for v in score if v in eligible), key=lambda v: (-score[v], v))
    return cand[0] if cand else None


def _stability(metrics: dict, weights: Mapping[str, float], eligible: set[str], p: float) -> dict:
    """Winner under each weight scaled by 1 ± p (the others fixed)."""
    base = _top(_scores(metrics, weights)[0], eligible)
    checks = []
    for m, w in weights.items():
        if w == 0:
            continue
        for f in (1 - p, 1 + p):
            top = _top(_scores(metrics, {**weights, m: w * f})[0], eligible)
            checks.append({"metric": m, "factor": f, "top": top, "changed": top != base})
    return {"perturbation": p, "top": base, "stable": not any(c["changed"] for c in checks), "checks": checks}


def _envelope(data: Mapping[str, list[PointData]]) -> tuple[list[Point], dict[str, dict[Point, PointData]]]:
    by = {v: {p.point: p for p in pts} for v, pts in data.items()}
    env = sorted({k for pts in by.values() for k in pts})
    return env, by


def _basis(compared: list[str], by: dict, common: list[Point]) -> tuple[dict[str, float], str, list[str]]:
    """Factor per variant (area or 1), basis name and notes."""
    areas = {v: [by[v][k].area for k in common if math.isfinite(by[v][k].area)] for v in compared}
    known = {v: float(np.mean(a)) for v, a in areas.items() if a}
    notes = []
    if len(known) == len(compared) and known and max(known.values()) - min(known.values()) > 1e-9 * max(known.values()):
        return known, "area", ["reference areas differ: downforce and drag compared as −C_L·A and C_D·A (m²)"]
    if known and len(known) < len(compared):
        notes.append("reference area unknown for " + ", ".join(v for v in compared if v not in known)
                     + ": coefficients compared as they are (wrong if the areas differ)")
    return {v: 1.0 for v in compared}, "coefficient", notes


def _point_dict(k: Point) -> dict:
    return {"ride_height_front": k[0], "ride_height_rear": k[1], "yaw_deg": k[2], "speed": k[3]}


def _coverage(env: list[Point], by: dict) -> tuple[dict[str, dict], list[str], list[Point]]:
    """Per-variant point states, the compared variants and the common points."""
    cover = {}
    for v, pts in by.items():
        missing = [k for k in env if k not in pts]
        flagged = [k for k in env if k in pts and not pts[k].usable]
        cover[v] = {"missing": missing, "flagged": flagged, "usable": [k for k in env if k in pts and pts[k].usable]}
    compared = sorted(v for v in by if cover[v]["usable"])
    common = [k for k in env if all(k in by[v] and by[v][k].usable for v in compared)]
    return cover, compared, common


def _decide(score, unc, complete, eligible, ties, ranked) -> dict:
    """The decision record (module docstring)."""
    if not ranked:
        return {"status": str(DecisionStatus.NO_COMMON_POINTS), "winner": None, "best_complete": None, "tied": [],
                "message": "no operating point where every compared variant has a usable result"}
    top = _top(score, eligible)
    best_complete = _top(score, {v for v in eligible if complete[v]})
    if top is None:
        return {"status": str(DecisionStatus.NONE_ELIGIBLE), "winner": None, "best_complete": None, "tied": [],
                "message": "every variant violates a constraint"}
    if not complete[top]:
        return {"status": str(DecisionStatus.INCOMPLETE), "winner": None, "best_complete": best_complete,
                "tied": sorted(ties[top]), "message": f"the best score on the common points is {top}'s, but {top} "
                f"has flagged or missing points in the envelope: resolve them before choosing"}
    if ties[top]:
        return {"status": str(DecisionStatus.TIE), "winner": None, "best_complete": best_complete,
                "tied": sorted([top, *ties[top]]), "message": f"{top} ties with {', '.join(sorted(ties[top]))}: "
                "the score difference is within the combined uncertainty"}
    return {"status": str(DecisionStatus.CLEAR), "winner": top, "best_complete": top, "tied": [],
            "message": f"{top}: best score on the common points, complete, no tie"}


def decide(data: Mapping[str, list[PointData]], options: DecisionOptions = DecisionOptions(),
           facts: Mapping[str, Mapping[str, float | None]] | None = None) -> dict:
    """Compare the variants of ``data`` (variant → its points at the
    comparison mesh level) and return the ranking as JSON-ready data (module
    docstring). ``facts``: per variant extra values for the constraints
    (``min_clearance``, ``peak_margin`` in m). Unknown weight or constraint
    names raise KeyError (the caller validates them against :data:`METRICS`
    and :data:`CONSTRAINTS` with the file's name)."""
    for m in options.weights:
        METRICS[m]
    for c in options.constraints:
        CONSTRAINTS[c]
    facts = facts or {}
    env, by = _envelope(data)
    cover, compared, common = _coverage(env, by)
    notes = [f"{v}: no usable point, not compared" for v in sorted(by) if v not in compared]
    if not common:
        compared_ok: list[str] = []
    else:
        compared_ok = compared
    factor, basis, basis_notes = _basis(compared_ok, by, common) if common else ({}, "coefficient", [])
    metrics = {v: variant_metrics([by[v][k] for k in common], factor[v]) for v in compared_ok}
    score, unc, used, score_notes = _scores(metrics, options.weights) if metrics else ({}, {}, [], [])
    complete = {v: not cover[v]["missing"] and not cover[v]["flagged"] for v in by}
    cons = {v: _constraints([by[v][k] for k in common], facts.get(v, {}), options.constraints) for v in compared_ok}
    eligible = {v for v in compared_ok if all(c["status"] != str(ConstraintStatus.VIOLATED) for c in cons[v].values())}
    k = options.coverage
    ties = {v: [o for o in compared_ok if o != v and abs(score[v] - score[o]) <= k * math.hypot(unc[v], unc[o])]
            for v in compared_ok}
    if compared_ok and all(u == 0 for u in unc.values()):
        notes.append("no uncertainty information (no GCI, iterative spread or map-fit error): ties cannot be judged")
    ranked = sorted(compared_ok, key=lambda v: (-score[v], v))
    front = _pareto(metrics) if metrics else set()
    variants = []
    for v in ranked + sorted(v for v in by if v not in compared_ok):
        c = cover[v]
        variants.append({
            "variant": v, "rank": ranked.index(v) + 1 if v in ranked else None,
            "score": score.get(v), "score_uncertainty": unc.get(v), "compared": v in compared_ok,
            "complete": complete[v], "n_usable": len(c["usable"]),
            "missing_points": [_point_dict(p) for p in c["missing"]],
            "flagged_points": [{**_point_dict(p), "flags": list(by[v][p].flags)} for p in c["flagged"]],
            "metrics": {m: {"value": x, "uncertainty": u, "unit": ("m²" if basis == "area" else "—")
                            if METRICS[m].unit == "coef" else METRICS[m].unit}
                        for m, (x, u) in metrics.get(v, {}).items()},
            "constraints": cons.get(v, {}), "eligible": v in eligible, "tie_with": sorted(ties.get(v, [])),
            "pareto": v in front,
        })
    decision = _decide(score, unc, complete, eligible, ties, ranked)
    return {
        "basis": basis, "weights": dict(options.weights), "metrics_used": used, "coverage": k,
        "constraints": dict(options.constraints),
        "envelope": [_point_dict(p) for p in env], "common_points": [_point_dict(p) for p in common],
        "variants": variants, "decision": decision,
        "weight_stability": _stability(metrics, options.weights, eligible, options.perturbation) if metrics else None,
        "notes": notes + basis_notes + score_notes,
    }
