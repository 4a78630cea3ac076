"""What the sweep report shows, as plain data: the hand-over from the sweep
pipeline to the report renderer (:mod:`postproc.report`), which only draws
and phrases it.

The variants' standing, the recommendation, the maps, the Pareto points
and the platform come from the analysis of the results table
(``analysis.json``, :mod:`postproc.pipelines.analysis`); from the results
rows themselves come the choice of the reference case of each variant for
the pictures, the curves of the plots and the cautions about missing and
flagged cases. Units: SI (ride heights m, angles degrees);
coefficients in wind axes, downforce = −C_L.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Sequence

import numpy as np

from caseprep.contract.errors import UserError

@dataclass(frozen=True)
class Curve:
    """One line: ``x`` and ``y`` (same length; NaN values are skipped),
    optional symmetric error bars ``yerr``; ``variant`` picks the colour,
    ``style`` (e.g. "yaw 4°") the line style and marker; ``flagged`` marks
    points drawn hollow (not ranked)."""

    variant: str
    style: str
    x: Sequence[float]
    y: Sequence[float]
    yerr: Sequence[float] | None = None
    flagged: Sequence[bool] | None = None


@dataclass(frozen=True)
class Panel:
    """One axes of a row of plots."""

    ylabel: str
    curves: Sequence[Curve]
    title: str = ""


@dataclass(frozen=True)
class MapData:
    """A fitted aero map of one variant, evaluated elsewhere.

    ``front``, ``rear`` (m) the axes of the evaluation grid; ``value``
    (len(rear), len(front)) the predicted quantity; ``points_front``,
    ``points_rear`` (m) the measured points, ``points_value`` their measured
    values and ``points_error`` the prediction error there (prediction −
    measured; None: not given); ``quantity`` the label.
    """

    variant: str
    quantity: str
    front: Sequence[float]
    rear: Sequence[float]
    value: np.ndarray
    points_front: Sequence[float]
    points_rear: Sequence[float]
    points_value: Sequence[float]
    points_error: Sequence[float] | None = None
    note: str = ""


@dataclass(frozen=True)
class ParetoPoint:
    """One variant (or case) in the downforce–drag plane: values and their
    uncertainty half-widths (None: unknown), whether it is on the Pareto
    front, and its tie group (variants whose scores are not distinguishable
    share a group; None: no tie)."""

    label: str
    variant: str
    drag: float
    downforce: float
    drag_err: float | None = None
    downforce_err: float | None = None
    on_front: bool = False
    tie_group: int | None = None


@dataclass(frozen=True)
class History:
    """A case's force history: ``iterations`` and named series (e.g.
    C_L, C_D), the first iteration of the settling window (None: unknown)
    and a verdict word shown in the panel title."""

    label: str
    iterations: Sequence[float]
    series: dict[str, Sequence[float]]
    window_start: float | None = None
    verdict: str = ""
    flagged: bool = False


@dataclass(frozen=True)
class PlatformCurve:
    """Ride height (or any platform quantity) against speed under load,
    computed elsewhere: ``speed`` (m/s), ``value`` (m or the quantity's
    unit), a variant and an axle/style name; ``limit`` an optional
    horizontal line (e.g. the bottoming height) with its label."""

    variant: str
    style: str
    speed: Sequence[float]
    value: Sequence[float]

#: What a caution is about (one vocabulary; the report phrases each kind).
CAUTION_KINDS = (
    "flagged-points",        # cases that ran but carry a flag (never ranked)
    "missing-points",        # cases without results (not run, failed)
    "incomplete-winner",     # the recommended variant lacks points others have
    "tie",                   # the top scores are not distinguishable
    "stall-in-envelope",     # downforce falls again below its peak inside the envelope
    "bottoming",             # the floor reaches the ground below the top speed
    "mesh-uncertainty",      # grid uncertainty larger than the differences between variants
    "ramp-separation",       # the diffuser ramp flow separates
    "pictures-missing",      # some pictures could not be drawn
    "weights",               # the winner changes when one ranking weight moves
    "decision",              # the analysis could not name a winner (its own words)
)


@dataclass(frozen=True)
class Caution:
    """One thing to be careful about: ``kind`` from :data:`CAUTION_KINDS`,
    the variant it concerns (None: the sweep), the cases, a number (its
    meaning depends on the kind) and a detail already in words."""

    kind: str
    variant: str | None = None
    cases: tuple[str, ...] = ()
    value: float | None = None
    detail: str = ""

    def __post_init__(self):
        if self.kind not in CAUTION_KINDS:
            raise ValueError(f"expected a caution kind among {CAUTION_KINDS}, got {self.kind!r}")


@dataclass(frozen=True)
class VariantFacts:
    """A variant's standing: rank and score (None: not ranked), Pareto
    membership, counts, the ranking metrics, completeness (all points of
    the envelope usable) and the variants it ties with."""

    variant: str
    rank: int | None
    score: float | None
    pareto: bool
    n_cases: int
    n_flagged: int
    metrics: dict
    complete: bool
    tie_with: tuple[str, ...] = ()
    notes: tuple[str, ...] = ()
    score_uncertainty: float | None = None


@dataclass(frozen=True)
class PictureCase:
    """The case pictured for a variant and why that one."""

    variant: str
    case_id: str
    ride_height_front: float
    ride_height_rear: float
    yaw_deg: float
    note: str = ""


@dataclass(frozen=True)
class ReportOptions:
    """How the report is made. ``baseline``: variant the pressure
    differences are taken against (default: the first variant of the
    sweep); ``reference_ride_height`` (m, front) and ``reference_yaw_deg``:
    the point pictured for every variant (default: the median front ride
    height of the sweep at the smallest |yaw|); ``pictures``: draw the flow
    pictures; ``max_bytes``: size the report should stay under (a caution
    in the report when it does not)."""

    title: str | None = None
    baseline: str | None = None
    reference_ride_height: float | None = None
    reference_yaw_deg: float | None = None
    pictures: bool = True
    max_bytes: int = 5_000_000


@dataclass(frozen=True, eq=False)
class ReportData:
    """Everything the report shows (see the module docstring)."""

    title: str
    study: str
    created: str
    version: str
    n_cases: int
    n_usable: int
    recommended: str | None
    variants: tuple[VariantFacts, ...]
    cautions: tuple[Caution, ...]
    ride_height_panels: tuple[Panel, ...]
    yaw_panels: tuple[Panel, ...]
    maps: tuple[MapData, ...]
    map_note: str
    pareto: tuple[ParetoPoint, ...]
    platform: tuple[PlatformCurve, ...]
    histories: tuple[History, ...]
    picture_cases: tuple[PictureCase, ...]
    scenes: tuple = ()
    baseline: str | None = None
    pictures_skipped: tuple[tuple[str, str], ...] = ()
    cases: tuple[dict, ...] = ()
    checks: tuple[dict, ...] = ()
    mesh_study: tuple[dict, ...] = ()
    flow_rows: tuple[dict, ...] = ()
    notes: tuple[str, ...] = ()
    analysis: bool = False
    options: ReportOptions = field(default_factory=ReportOptions)
    decision: dict | None = None  # analysis.json ranking.decision (status, winner, best_complete, tied, message)
    cost: tuple[dict, ...] = ()  # the solver's core time per variant and in total (cost_rows), text cells


# --------------------------------------------------------------------------- choices

def _mean_h(r) -> float:
    return 0.5 * (r.ride_height_front + r.ride_height_rear)


def choose_picture_cases(results, variants: Sequence[str], options: ReportOptions = ReportOptions()) -> list[PictureCase]:
    """The case pictured for each variant: the same operating point for
    all of them — front ride height ``options.reference_ride_height`` (default
    the median of the sweep's front ride heights, the lower one of the two
    middle values) at yaw ``options.reference_yaw_deg`` (default the smallest
    |yaw|), on each variant's finest mesh level, unflagged. A variant without
    that point gets its nearest unflagged point, with a note. ``results``:
    :class:`postproc.pipelines.sweep_rows.CaseResult` rows."""
    usable = [r for r in results if not r.flags and math.isfinite(r.ride_height_front)]
    if not usable:
        return []
    hs = sorted({round(r.ride_height_front, 9) for r in usable})
    h_ref = options.reference_ride_height if options.reference_ride_height is not None else hs[(len(hs) - 1) // 2]
    yaws = sorted({round(abs(r.yaw_deg), 9) for r in usable})
    y_ref = options.reference_yaw_deg if options.reference_yaw_deg is not None else yaws[0]
    out = []
    for v in variants:
        rows = [r for r in usable if r.variant == v]
        if not rows:
            continue
        finest = max(r.mesh_level for r in rows)
        rows = [r for r in rows if r.mesh_level == finest]

        def dist(r):
            return (abs(r.ride_height_front - h_ref) / max(h_ref, 1e-9) + abs(abs(r.yaw_deg) - abs(y_ref)) / 10.0,
                    abs(r.pitch_deg), r.case_id)

        best = min(rows, key=dist)
        exact = abs(best.ride_height_front - h_ref) < 1e-6 and abs(abs(best.yaw_deg) - abs(y_ref)) < 1e-6
        note = "" if exact else (f"no usable case at {1000 * h_ref:.1f} mm, yaw {y_ref:g}°: nearest usable point shown")
        out.append(PictureCase(v, best.case_id, best.ride_height_front, best.ride_height_rear, best.yaw_deg, note))
    return out


def check_baseline(baseline: str | None, variants: Sequence[str], where: str = "--baseline") -> str | None:
    """The baseline variant, or a UserError naming the available ones."""
    if baseline is None:
        return variants[0] if variants else None
    if baseline not in variants:
        raise UserError(expected="a baseline variant of the sweep", got=baseline, key=where,
                        fix="choose one of: " + ", ".join(variants))
    return baseline


# --------------------------------------------------------------------------- curves

def ride_height_panels(results) -> tuple[Panel, ...]:
    """−C_L, C_D and balance against mean ride height (m → the plot shows
    mm), one curve per variant and yaw, flagged cases hollow."""
    variants = list(dict.fromkeys(r.variant for r in results))
    yaws = sorted({round(r.yaw_deg, 6) for r in results})
    finest = {v: max(r.mesh_level for r in results if r.variant == v) for v in variants}
    panels = []
    for ylabel, get in (("downforce coefficient −C_L", lambda r: -r.cl), ("drag coefficient C_D", lambda r: r.cd),
                        ("aero balance (front share)", lambda r: r.balance if r.balance is not None else math.nan)):
        curves = []
        for v in variants:
            for y in yaws:
                rows = [r for r in results if r.variant == v and round(r.yaw_deg, 6) == y and r.mesh_level == finest[v]]
                if not rows:
                    continue
                curves.append(Curve(variant=v, style=f"yaw {y:g}°", x=[1000 * _mean_h(r) for r in rows],
                                    y=[get(r) for r in rows], flagged=[bool(r.flags) for r in rows]))
        panels.append(Panel(ylabel=ylabel, curves=tuple(curves)))
    return tuple(panels)


def yaw_panels(results) -> tuple[Panel, ...]:
    """−C_L and C_S against yaw, one curve per variant and front ride height."""
    yaws = {round(r.yaw_deg, 6) for r in results}
    if len(yaws) < 2:
        return ()
    variants = list(dict.fromkeys(r.variant for r in results))
    hs = sorted({round(r.ride_height_front, 9) for r in results})
    panels = []
    for ylabel, get in (("downforce coefficient −C_L", lambda r: -r.cl), ("side-force coefficient C_S", lambda r: r.cs)):
        curves = []
        for v in variants:
            fin = max(r.mesh_level for r in results if r.variant == v)
            for h in hs:
                rows = [r for r in results if r.variant == v and round(r.ride_height_front, 9) == h
                        and r.mesh_level == fin]
                if rows:
                    curves.append(Curve(variant=v, style=f"front {1000 * h:g} mm", x=[r.yaw_deg for r in rows],
                                        y=[get(r) for r in rows], flagged=[bool(r.flags) for r in rows]))
        panels.append(Panel(ylabel=ylabel, curves=tuple(curves)))
    return tuple(panels)


#: flags meaning that a case has no result at all (the others: a result that is not trusted)
MISSING_FLAGS = ("not-run", "mesh-failed", "solver-crashed", "solve-failed", "export-failed", "export-empty",
                 "forces-failed", "interrupted")


def table_cautions(results, facts: Sequence[VariantFacts] = (), *, mesh_study=(),
                   flow_rows: dict | None = None) -> tuple[Caution, ...]:
    """The cautions the results table itself supports: per variant, its
    cases without a result and its flagged cases (by name); the grid
    uncertainty of −C_L against the downforce difference of the analysis's
    two best-ranked variants (``facts``); ramp separation from the flow
    columns."""
    cautions = []
    for v in dict.fromkeys(r.variant for r in results):
        rows = [r for r in results if r.variant == v]
        missing = [r.case_id for r in rows if any(f in MISSING_FLAGS for f in r.flags)]
        flagged = [r.case_id for r in rows if r.flags and r.case_id not in missing]
        if missing:
            cautions.append(Caution("missing-points", v, tuple(missing), float(len(missing))))
        if flagged:
            cautions.append(Caution("flagged-points", v, tuple(flagged), float(len(flagged)),
                                    "; ".join(sorted({f for r in rows for f in r.flags if r.case_id in flagged}))))
    ranked = sorted((f for f in facts if f.rank is not None), key=lambda f: f.rank)
    # grid uncertainty against the difference between the two best variants
    if len(ranked) >= 2 and mesh_study:
        gci = [m for m in mesh_study if m.get("coefficient") == "cl" and m.get("gci_fine") is not None
               and math.isfinite(m["gci_fine"])]
        d = abs((ranked[0].metrics.get("downforce") or 0.0) - (ranked[1].metrics.get("downforce") or 0.0))
        if gci:
            worst = max(gci, key=lambda m: m["gci_fine"] * abs(m["extrapolated"] if math.isfinite(m["extrapolated"])
                                                                else m["phi"][0]))
            u = worst["gci_fine"] * abs(worst["phi"][0])
            if u > d:
                cautions.append(Caution("mesh-uncertainty", None, tuple(worst.get("cases", ())), u,
                                        f"grid uncertainty of −C_L up to {u:.3f} against a difference of {d:.3f} "
                                        f"between {ranked[0].variant} and {ranked[1].variant}"))
    # ramp separation from the flow columns
    sep = [(cid, row) for cid, row in (flow_rows or {}).items() if row.get("separation_fraction") is not None]
    by_v: dict[str, list] = {}
    for cid, row in sep:
        by_v.setdefault(row.get("variant", ""), []).append((cid, row["separation_fraction"]))
    for v, items in by_v.items():
        fr = min(f for _, f in items)
        cautions.append(Caution("ramp-separation", v or None, tuple(c for c, _ in items), float(fr)))
    return tuple(cautions)


def _analysis_list(analysis: dict, key: str) -> list[dict]:
    v = analysis.get(key)
    return [x for x in v if isinstance(x, dict)] if isinstance(v, list) else []


def _maps_from_analysis(analysis: dict) -> tuple[list[MapData], list[str]]:
    """The analysis's fitted −C_L maps that span both ride heights, as plot
    data with the usable points behind them, and why each other map is not
    drawn."""
    maps, why = [], []
    for m in _analysis_list(analysis, "maps"):
        g = m.get("grid")
        name = str(m.get("variant"))
        coef = (m.get("coefficients") or {}).get("cl") or {}
        if not isinstance(g, dict) or "cl" not in g or (m.get("design") or {}).get("dim") != 2:
            why.append(f"{name} (yaw {m.get('yaw_deg')}°): " + (coef.get("reason") or "its points span one line "
                                                                 "of ride heights"))
            continue
        F = np.asarray(g["ride_height_front"], dtype=float)
        R = np.asarray(g["ride_height_rear"], dtype=float)
        mine = [q for q in _analysis_list(analysis, "points") if q.get("variant") == name and q.get("usable")
                and q.get("yaw_deg") == m.get("yaw_deg") and q.get("speed") == m.get("speed")
                and q.get("mesh_level") == m.get("mesh_level")]
        maps.append(MapData(variant=f"{name} (yaw {m.get('yaw_deg')}°)", quantity="downforce coefficient −C_L",
                            front=F[0], rear=R[:, 0], value=-np.asarray(g["cl"], dtype=float),
                            points_front=[q["ride_height_front"] for q in mine],
                            points_rear=[q["ride_height_rear"] for q in mine],
                            points_value=[-q["cl"] for q in mine if "cl" in q], points_error=None,
                            note=f"{coef.get('model')}, leave-one-out rms {coef.get('loo_rms'):.3g}"
                            if coef.get("loo_rms") is not None else str(coef.get("model") or "")))
    return maps, why


def from_analysis(analysis: dict, results) -> dict:
    """What the report takes from ``analysis.json`` (postproc.pipelines.analysis):
    the variants' standing (rank, score ± uncertainty, completeness, ties,
    Pareto), the decision, the cautions it supports (incomplete winner, ties,
    stall inside the envelope, bottoming below the top speed, a winner that
    changes with the weights), the downforce–drag points with their
    uncertainties, the fitted maps that span both ride heights and the
    platform curves. Keys: ``facts``, ``cautions``, ``recommended``,
    ``decision``, ``pareto``, ``maps``, ``map_notes``, ``platform``."""
    rk = analysis.get("ranking") if isinstance(analysis.get("ranking"), dict) else {}
    dec = rk.get("decision") if isinstance(rk.get("decision"), dict) else None
    rows = {r.variant: r for r in results}
    facts, pts, cautions = [], [], []
    for v in _analysis_list(rk, "variants"):
        name = str(v.get("variant", ""))
        m = v.get("metrics") if isinstance(v.get("metrics"), dict) else {}
        vals = {k: _f(x.get("value")) for k, x in m.items() if isinstance(x, dict)}
        unc = {k: _f(x.get("uncertainty")) for k, x in m.items() if isinstance(x, dict)}
        rank = v.get("rank") if isinstance(v.get("rank"), int) else None
        facts.append(VariantFacts(
            variant=name, rank=rank, score=_f(v.get("score")), pareto=bool(v.get("pareto")),
            n_cases=sum(1 for r in results if r.variant == name),
            n_flagged=sum(1 for r in results if r.variant == name and r.flags), metrics=vals,
            complete=bool(v.get("complete")), tie_with=tuple(str(t) for t in v.get("tie_with") or ()),
            score_uncertainty=_f(v.get("score_uncertainty"))))
        if vals.get("downforce") is not None and vals.get("drag") is not None:
            pts.append([name, vals["drag"], vals["downforce"], unc.get("drag"), unc.get("downforce"),
                        bool(v.get("pareto")), tuple(v.get("tie_with") or ())])
    # tie groups: variants linked by tie_with share a group number
    group: dict[str, int] = {}
    for name, *_rest, ties in pts:
        if ties:
            g = next((group[t] for t in ties if t in group), None) or (max(group.values(), default=0) + 1)
            for x in (name, *ties):
                group[x] = g
    pareto = tuple(ParetoPoint(label=n, variant=n, drag=cd, downforce=df, drag_err=ucd, downforce_err=udf,
                               on_front=front, tie_group=group.get(n)) for n, cd, df, ucd, udf, front, _ in pts)
    recommended = None
    if dec is not None:
        recommended = dec.get("winner") or None
        status = str(dec.get("status", ""))
        if status == "incomplete" and facts:
            top = next((f.variant for f in facts if f.rank == 1), None)
            cautions.append(Caution("incomplete-winner", top, detail=str(dec.get("message", ""))))
        elif status == "tie":
            cautions.append(Caution("tie", None, detail=", ".join(str(t) for t in dec.get("tied") or ())))
        elif status and status != "clear":
            cautions.append(Caution("decision", None, detail=str(dec.get("message", status))))
    ws = rk.get("weight_stability") if isinstance(rk.get("weight_stability"), dict) else None
    if ws is not None and ws.get("stable") is False:
        changed = [c for c in ws.get("checks", []) if isinstance(c, dict) and c.get("changed")]
        cautions.append(Caution("weights", ws.get("top"), detail="; ".join(
            f"{c.get('metric')} × {c.get('factor')} → {c.get('top')}" for c in changed)))
    for p in _analysis_list(analysis, "peaks"):
        if p.get("stall"):
            cautions.append(Caution("stall-in-envelope", p.get("variant"), value=_f(p.get("peak_h")),
                                    detail=f"yaw {p.get('yaw_deg')}°, {p.get('speed')} m/s"
                                           + (f"; {p['note']}" if p.get("note") else "")))
    curves = []
    for p in _analysis_list(analysis, "platform"):
        if p.get("status") != "ok":
            continue
        states = [s for s in p.get("states", []) if isinstance(s, dict)]
        sp = [_f(s.get("speed")) for s in states]
        for axle in ("front", "rear"):
            curves.append(PlatformCurve(variant=str(p.get("variant")), style=axle, speed=sp,
                                        value=[_f(s.get(f"ride_height_{axle}")) for s in states]))
        b = _f(p.get("bottoming_speed"))
        if b is not None:
            cautions.append(Caution("bottoming", p.get("variant"), value=b,
                                    detail=str(p.get("bottoming_mode") or "")))
    maps, why = _maps_from_analysis(analysis)
    del rows
    return {"facts": tuple(facts), "cautions": tuple(cautions), "recommended": recommended, "decision": dec,
            "pareto": pareto, "maps": tuple(maps), "map_notes": why, "platform": tuple(curves)}


def _f(x):
    try:
        x = float(x)
    except (TypeError, ValueError):
        return None
    return x if math.isfinite(x) else None


def history_from_monitor(label: str, monitor: dict, window: int | None, verdict: str = "",
                         flagged: bool = False) -> History | None:
    """A force history for the small multiples from a runtime monitor
    (:func:`caseprep.contract.monitor.read_monitor`): the total force components
    along body x and z (N) and the first iteration of the settling window
    (the last ``window`` samples)."""
    it = monitor.get("Time")
    if it is None or len(it) < 2:
        return None
    series = {k: np.asarray(monitor[c], dtype=float) for k, c in (("F_x", "force.total_x"), ("F_z", "force.total_z"))
              if c in monitor}
    if not series:
        return None
    start = float(it[max(0, len(it) - window)]) if window else None
    return History(label=label, iterations=np.asarray(it, dtype=float), series=series, window_start=start,
                   verdict=verdict, flagged=flagged)


def _mesh_rows(mesh_study) -> tuple[dict, ...]:
    def f(x, nd):
        return "—" if x is None or (isinstance(x, float) and not math.isfinite(x)) else f"{x:.{nd}f}"
    return tuple({
        "variant": m["variant"], "coefficient": {"cl": "C_L", "cd": "C_D"}.get(m["coefficient"], m["coefficient"]),
        "point": f"{f(1000 * m['ride_height_front'], 1)}/{f(1000 * m['ride_height_rear'], 1)} mm, "
                 f"pitch {f(m['pitch_deg'], 2)}°, yaw {f(m['yaw_deg'], 1)}°",
        "levels": ", ".join(str(x) for x in m["levels"]),
        "values": ", ".join(f(x, 4) for x in m["phi"]),
        "order": f(m["order"], 2), "extrapolated": f(m["extrapolated"], 4),
        "gci": f(100 * m["gci_fine"], 2) if m["gci_fine"] == m["gci_fine"] else "—",
        "note": m["note"] or ("" if m["converged"] else "not in the asymptotic range"),
    } for m in mesh_study)


def cost_rows(cost: dict | None) -> tuple[dict, ...]:
    """The report's cost table from the runner's cost block
    (:func:`caseprep.contract.cost.cost_summary`): one row per variant, then
    the total; text cells (core-seconds, core-hours, per converged point)."""
    if not cost:
        return ()
    def f(x, nd):
        return "—" if not isinstance(x, (int, float)) or not math.isfinite(x) else f"{x:.{nd}f}"
    out = []
    for name, g in list((cost.get("variants") or {}).items()) + [("all variants", cost.get("total") or {})]:
        stages = g.get("core_seconds_by_stage") or {}
        out.append({"group": name, "cases": str(g.get("cases", 0)), "converged": str(g.get("converged_points", 0)),
                    "core_seconds": f(g.get("core_seconds"), 0), "core_hours": f(g.get("core_hours"), 3),
                    "mesh": f(stages.get("mesh"), 0), "solve": f(stages.get("solve"), 0),
                    "export": f(stages.get("export"), 0),
                    "per_point_seconds": f(g.get("core_seconds_per_converged_point"), 0),
                    "per_point_hours": f(g.get("core_hours_per_converged_point"), 4)})
    return tuple(out)


def _case_rows(results) -> tuple[dict, ...]:
    def f(x, nd):
        return "—" if x is None or (isinstance(x, float) and not math.isfinite(x)) else f"{x:.{nd}f}"
    return tuple({
        "case_id": r.case_id, "variant": r.variant, "ride_height_front": f(1000 * r.ride_height_front, 1),
        "ride_height_rear": f(1000 * r.ride_height_rear, 1), "pitch_deg": f(r.pitch_deg, 2), "yaw_deg": f(r.yaw_deg, 1),
        "cl": f(r.cl, 4), "cd": f(r.cd, 4), "cs": f(r.cs, 4), "cl_front": f(r.cl_front, 4), "cl_rear": f(r.cl_rear, 4),
        "balance": f(r.balance, 4), "stability_margin": f(r.stability_margin, 4), "flags": ", ".join(r.flags),
    } for r in results)


def assemble(results, *, title: str, study: str = "", notes: Sequence[str] = (), checks: Sequence[dict] = (),
             mesh_study: Sequence[dict] = (), flow_rows: dict | None = None, scenes: Sequence = (),
             picture_cases: Sequence[PictureCase] = (), pictures_skipped: Sequence[tuple[str, str]] = (),
             histories: Sequence[History] = (), analysis: dict | None = None,
             options: ReportOptions = ReportOptions(), cost: dict | None = None) -> ReportData:
    """Everything the report shows, from the sweep's results table
    (:class:`postproc.pipelines.sweep_rows.CaseResult` rows), the analysis
    of that table (``analysis``: what ``analysis.json`` holds — the
    variants' standing, the decision, maps, Pareto points, platform) and
    what the sweep computed beside it (flow columns by case id, picture
    scenes, force histories; ``cost``: the runner's cost block,
    :func:`caseprep.contract.cost.cost_summary`). Without an analysis the
    report shows the table and its cautions, no standing and no
    recommendation."""
    import datetime as _dt

    from caseprep.contract import __version__

    variants = list(dict.fromkeys(r.variant for r in results))
    a = from_analysis(analysis, results) if isinstance(analysis, dict) else None
    facts, cautions, rec, decision = (), (), None, None
    pareto: tuple = ()
    platform: tuple = ()
    maps: tuple = ()
    map_note = "no map: the analysis of the results table is missing (see the notes)"
    if a is not None:
        facts, rec, decision = a["facts"], a["recommended"], a["decision"]
        cautions, pareto, platform, maps = a["cautions"], a["pareto"], a["platform"], a["maps"]
        map_note = ("no map for " + "; ".join(a["map_notes"])) if a["map_notes"] else ""
    else:
        cautions = (Caution("decision", None, detail="no analysis of the results table: no variant is "
                                                     "recommended"),)
    cautions = table_cautions(results, facts, mesh_study=mesh_study, flow_rows=flow_rows) + tuple(cautions)
    rows = []
    by_id = {r.case_id: r for r in results}
    for cid, row in (flow_rows or {}).items():
        r = by_id.get(cid)
        rows.append({"case_id": cid, "variant": r.variant if r else row.get("variant", ""), **row})
    return ReportData(
        title=title, study=study, created=_dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%d %H:%M UTC"),
        version=__version__, n_cases=len(results), n_usable=sum(1 for r in results if not r.flags),
        recommended=rec, variants=tuple(facts), cautions=cautions, ride_height_panels=ride_height_panels(results),
        yaw_panels=yaw_panels(results), maps=tuple(maps), map_note=map_note,
        pareto=tuple(pareto), platform=tuple(platform), histories=tuple(histories),
        picture_cases=tuple(picture_cases), scenes=tuple(scenes),
        baseline=check_baseline(options.baseline, variants) if scenes else options.baseline,
        pictures_skipped=tuple(pictures_skipped), cases=_case_rows(results), checks=tuple(checks),
        mesh_study=_mesh_rows(mesh_study), flow_rows=tuple(rows), notes=tuple(notes), analysis=bool(analysis),
        options=options, decision=decision, cost=cost_rows(cost))
