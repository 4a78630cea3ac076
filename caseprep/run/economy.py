"""The run economy as a plan: which case uses whose mesh, which solved case
each warm-started case starts from, and the order that has every owner and
source finished first. Pure: manifest records in, a frozen plan out.

**Mesh owners** come from the manifest (``CaseRecord.mesh_owner``, assigned
by the writer to every case whose mesh dictionaries and surfaces are
byte-identical to an earlier case's).

**Distance between two cases** of the same variant, mesh level, yaw mode and
ground (the only pairs a warm start may join), in the sweep's parameters::

    d² = Σ_x ((x_a − x_b) / span_x)²  +  (w_V · ln(V_a / V_b) / span_lnV)²

over x = front ride height, rear ride height, yaw angle; ``span`` is the
axis's range among the group's cases (an axis without a range counts 0), so
one full span of any axis is 1. Speed enters through ln V with the weight
``w_V`` = :data:`SPEED_WEIGHT` = 0.5 (common practice, no source): the
initial field is scaled to the new speed by dynamic similarity (U ∝ V, p ∝ V²,
k ∝ V², ω ∝ V, ν_t ∝ V, see :mod:`caseprep.run.reuse`), after which only the
Reynolds number differs, which changes an attached flow less than a step in
ride height or yaw does. Ties go to the source that shares the case's mesh
(a plain copy, no interpolation), then to the earlier case in the manifest.

**Order** (per group, a nearest-neighbour tree, Prim's algorithm): the roots
start cold — already solved cases of the group first, else the group's
medoid (smallest summed distance: the middle of the sweep) and, while there
are more runner slots than groups, the cases farthest from the roots chosen
(so that ``-j N`` has independent chains); then, repeatedly, the case
nearest to any case already ordered joins, with that case as its source. A
case that shares a mesh joins only after its mesh owner. Every source and
owner therefore comes before the cases that need it.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Iterable, Mapping, Sequence

from caseprep.contract.manifest import CaseRecord

#: Weight of a speed step in the warm-start distance (see the module docstring).
SPEED_WEIGHT = 0.5
_AXES = ("ride_height_front", "ride_height_rear", "yaw_deg")


@dataclass(frozen=True)
class RunPlan:
    """``order``: the case ids to run, in order; ``mesh_owner``: case → the
    case whose mesh it uses (cases that mesh themselves are absent);
    ``source``: case → the case whose converged fields it starts from (cold
    cases absent); ``distance``: case → the distance to that source."""

    order: tuple[str, ...]
    mesh_owner: dict[str, str] = field(default_factory=dict)
    source: dict[str, str] = field(default_factory=dict)
    distance: dict[str, float] = field(default_factory=dict)


def group_key(c: CaseRecord) -> tuple:
    """Cases that may start from each other: same variant, mesh level, yaw mode and ground."""
    return (c.variant, int(c.params.get("mesh_level", 0) or 0), c.yaw_mode, c.ground)


def _value(c: CaseRecord, axis: str) -> float:
    v = c.params.get(axis)
    return float(v) if isinstance(v, (int, float)) and math.isfinite(v) else 0.0


def _speed(c: CaseRecord) -> float:
    v = c.params.get("speed")
    if isinstance(v, (int, float)) and v > 0:
        return float(v)
    return float(c.reference.speed)


@dataclass(frozen=True)
class Metric:
    """The distance of the module docstring for one group: its axis spans."""

    spans: dict[str, float]
    span_ln_speed: float

    @classmethod
    def of(cls, cases: Sequence[CaseRecord]) -> "Metric":
        spans = {}
        for a in _AXES:
            vals = [_value(c, a) for c in cases]
            spans[a] = (max(vals) - min(vals)) if vals else 0.0
        lv = [math.log(_speed(c)) for c in cases]
        return cls(spans, (max(lv) - min(lv)) if lv else 0.0)

    def distance(self, a: CaseRecord, b: CaseRecord) -> float:
        d2 = 0.0
        for ax, s in self.spans.items():
            if s > 0:
                d2 += ((_value(a, ax) - _value(b, ax)) / s) ** 2
        if self.span_ln_speed > 0:
            d2 += (SPEED_WEIGHT * math.log(_speed(a) / _speed(b)) / self.span_ln_speed) ** 2
        return math.sqrt(d2)


def case_distance(a: CaseRecord, b: CaseRecord, group: Sequence[CaseRecord]) -> float:
    """The distance of ``a`` and ``b`` with the spans of ``group`` (module docstring)."""
    return Metric.of(group).distance(a, b)


def plan_run(cases: Sequence[CaseRecord], to_run: Iterable[str], solved: Iterable[str] = (),
             slots: int = 1) -> RunPlan:
    """The plan for running ``to_run`` (case ids) among the manifest's
    ``cases``; ``solved``: ids already solved and usable as sources (not run
    again); ``slots``: cases the runner runs at once (sets the number of
    cold roots, see the module docstring). Cases whose manifest record asks
    for ``warm_start = "nearest"`` get a source; the others run cold but may
    serve as sources."""
    by_id = {c.case_id: c for c in cases}
    run = [cid for cid in dict.fromkeys(to_run) if cid in by_id]
    run_set = set(run)
    solved_set = {s for s in solved if s in by_id and s not in run_set}
    owner = {cid: by_id[cid].mesh_owner for cid in run
             if by_id[cid].shares_mesh and by_id[cid].mesh_owner in by_id}
    groups: dict[tuple, list[CaseRecord]] = {}
    for c in cases:
        if c.case_id in run_set or c.case_id in solved_set:
            groups.setdefault(group_key(c), []).append(c)
    n_groups = sum(1 for g in groups.values() if any(c.case_id in run_set for c in g))
    roots_wanted = max(1, math.ceil(max(1, slots) / max(1, n_groups)))
    position = {c.case_id: i for i, c in enumerate(cases)}
    order: list[str] = []
    source: dict[str, str] = {}
    distance: dict[str, float] = {}
    for members in groups.values():
        todo = [c for c in members if c.case_id in run_set]
        if not todo:
            continue
        metric = Metric.of(members)
        done = [c for c in members if c.case_id in solved_set]
        roots = _roots(todo, done, metric, roots_wanted, owner, position)
        placed = [c.case_id for c in done]
        for r in roots:
            order.append(r.case_id)
            placed.append(r.case_id)
        left = [c for c in todo if c.case_id not in set(placed)]
        while left:
            best = None
            for c in left:
                if c.case_id in owner and owner[c.case_id] in run_set and owner[c.case_id] not in placed:
                    continue  # after its mesh owner
                for p in placed:
                    pc = by_id[p]
                    key = (metric.distance(c, pc), 0 if (c.mesh_key and c.mesh_key == pc.mesh_key) else 1,
                           position[c.case_id], position[p])
                    if best is None or key < best[0]:
                        best = (key, c, p)
            if best is None:  # an owner outside this group (cannot happen: owners share the variant)
                best = ((math.inf, 1, 0, 0), left[0], None)
            (d, *_), c, p = best
            order.append(c.case_id)
            placed.append(c.case_id)
            left.remove(c)
            if p is not None and c.warm_start == "nearest":
                source[c.case_id] = p
                distance[c.case_id] = round(d, 6)
    # owners of other groups first (an owner is in the same group; kept for safety)
    return RunPlan(order=tuple(order), mesh_owner=owner, source=source, distance=distance)


def _roots(todo: list[CaseRecord], done: list[CaseRecord], metric: Metric, wanted: int,
           owner: Mapping[str, str], position: Mapping[str, int]) -> list[CaseRecord]:
    """The group's cold starts: none when solved cases exist (they are the
    roots), else the medoid, then the farthest cases while fewer than ``wanted``."""
    if done:
        return []
    cands = [c for c in todo if c.case_id not in owner]  # a root meshes itself
    if not cands:
        cands = list(todo)
    medoid = min(cands, key=lambda c: (sum(metric.distance(c, o) for o in todo), position[c.case_id]))
    roots = [medoid]
    while len(roots) < min(wanted, len(cands)):
        far = max((c for c in cands if c not in roots),
                  key=lambda c: (min(metric.distance(c, r) for r in roots), -position[c.case_id]))
        if min(metric.distance(far, r) for r in roots) <= 0:
            break
        roots.append(far)
    return roots
