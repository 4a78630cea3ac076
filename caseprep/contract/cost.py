"""What a sweep costs in core time: per case, per variant and in total.

The one definition of the cost figures, used by the runner (``run_summary.json``
and its final table) and by the post-processing (the report's cost table):

* **core-seconds of a stage** = its wall time × the cores the runner held for
  the case while the stage ran (the case's MPI ranks: the runner reserves
  them for the whole case, also while a serial tool meshes or exports);
* **CPU seconds of a stage**: user + system time of every process the stage
  started (``run.sh``, the tools and the MPI ranks), as the operating system
  reports it for the finished process tree; None where it was not measured;
* **a converged point**: a case whose three stages are done (status ``ok``, or
  ``skipped`` with every stage done before) and that carries no flag;
* **core-hours per converged point** = every core-second the group spent
  (its failed and flagged cases included: they were paid for) / 3600 / the
  group's converged points (None without one).

Units: seconds and hours of core time; no axes.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Iterable, Mapping


def stage_core_seconds(wall_time: float | None, cores: int | None) -> float | None:
    """Core-seconds of one stage: ``wall_time`` (s) × ``cores`` (None when
    either is unknown)."""
    if wall_time is None or cores is None:
        return None
    return round(float(wall_time) * int(cores), 3)


def converged_point(status: str, flags: Iterable[str], stages: Iterable[Mapping[str, Any]]) -> bool:
    """Whether a case counts as a converged point (see the module docstring):
    ``status`` the record's status, ``flags`` its flags, ``stages`` its
    stage entries (``{"stage", "status", …}``)."""
    if list(flags):
        return False
    states = {s.get("stage"): s.get("status") for s in stages}
    done = all(states.get(s) in ("ok", "done-before") for s in ("mesh", "solve", "export"))
    return status in ("ok", "skipped") and done


@dataclass(frozen=True)
class CostGroup:
    """The cost of one group of cases (one variant, or ``total``):
    ``cases`` counted, ``converged`` points, ``core_seconds`` and
    ``cpu_seconds`` summed over their stages (``cpu_seconds`` over the stages
    where it was measured), ``core_seconds_by_stage`` per stage name,
    ``iterations`` the solver iterations of the converged points (sum)."""

    name: str
    cases: int
    converged: int
    core_seconds: float
    cpu_seconds: float
    core_seconds_by_stage: dict[str, float]
    iterations: int

    @property
    def core_hours(self) -> float:
        return self.core_seconds / 3600.0

    @property
    def core_hours_per_point(self) -> float | None:
        return self.core_hours / self.converged if self.converged else None

    @property
    def core_seconds_per_point(self) -> float | None:
        return self.core_seconds / self.converged if self.converged else None

    def to_dict(self) -> dict[str, Any]:
        per = self.core_hours_per_point
        per_s = self.core_seconds_per_point
        return {"cases": self.cases, "converged_points": self.converged,
                "core_seconds": round(self.core_seconds, 3), "cpu_seconds": round(self.cpu_seconds, 3),
                "core_seconds_by_stage": {k: round(v, 3) for k, v in self.core_seconds_by_stage.items()},
                "core_hours": round(self.core_hours, 9),
                "core_hours_per_converged_point": None if per is None else round(per, 9),
                "core_seconds_per_converged_point": None if per_s is None else round(per_s, 3),
                "iterations_of_converged_points": self.iterations}


def case_cost(row: Mapping[str, Any]) -> tuple[float, float, dict[str, float]]:
    """(core-seconds, CPU seconds, core-seconds per stage) of one run record
    in its dictionary form; stages without a figure count 0."""
    core = cpu = 0.0
    by_stage: dict[str, float] = {}
    for s in row.get("stages") or ():
        c = s.get("core_seconds")
        if isinstance(c, (int, float)):
            core += float(c)
            by_stage[s.get("stage", "?")] = by_stage.get(s.get("stage", "?"), 0.0) + float(c)
        u = s.get("cpu_seconds")
        if isinstance(u, (int, float)):
            cpu += float(u)
    return core, cpu, by_stage


def cost_summary(rows: Iterable[Mapping[str, Any]], variants: Mapping[str, str]) -> dict[str, Any]:
    """The cost block of ``run_summary.json``: ``{"total": …, "variants":
    {name: …}}`` (each a :meth:`CostGroup.to_dict`). ``rows``: run records
    as dictionaries; ``variants``: case id → variant name."""
    groups: dict[str, list[Mapping[str, Any]]] = {}
    everything = list(rows)
    for r in everything:
        groups.setdefault(variants.get(str(r.get("case_id")), "?"), []).append(r)
    return {"total": _group("total", everything).to_dict(),
            "variants": {v: _group(v, rs).to_dict() for v, rs in groups.items()}}


def _group(name: str, rows: list[Mapping[str, Any]]) -> CostGroup:
    core = cpu = 0.0
    by_stage: dict[str, float] = {}
    converged = iterations = 0
    for r in rows:
        c, u, st = case_cost(r)
        core += c
        cpu += u
        for k, v in st.items():
            by_stage[k] = by_stage.get(k, 0.0) + v
        if converged_point(str(r.get("status")), r.get("flags") or (), r.get("stages") or ()):
            converged += 1
            it = r.get("iterations")
            iterations += int(it) if isinstance(it, int) else 0
    return CostGroup(name, len(rows), converged, core, cpu, by_stage, iterations)


def cost_lines(cost: Mapping[str, Any]) -> list[str]:
    """Plain-text lines of a cost block (:func:`cost_summary`): one per variant, then the total."""
    out = []
    items = list((cost.get("variants") or {}).items()) + [("total", cost.get("total") or {})]
    for name, g in items:
        per = g.get("core_hours_per_converged_point")
        per_s = "-" if per is None else f"{per * 3600:.0f} core-s ({per:.4f} core-h)"
        out.append(f"{name}: {g.get('converged_points', 0)}/{g.get('cases', 0)} converged, "
                   f"{g.get('core_seconds', 0.0):.0f} core-s ({g.get('core_hours', 0.0):.3f} core-h) spent, "
                   f"per converged point {per_s}")
    return out
