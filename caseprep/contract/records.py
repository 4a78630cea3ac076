"""The run record of a case (``<case>/underfloor-run.json``), the sweep's
run summary (``run_summary.json``), and the one vocabulary of statuses and
flags that the runner writes and the post-processing reads and adds to.

Files read from disk are untrusted: unknown keys are dropped, a missing or
unreadable record reads as None. Units: wall times in seconds; residuals the
solver's dimensionless normalised residuals.
"""
from __future__ import annotations

import json
import os
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Any

from caseprep.contract.atomicio import json_ready

RECORD_NAME = "underfloor-run.json"
SUMMARY_NAME = "run_summary.json"
SUMMARY_SCHEMA = "underfloor-run-summary"

STATUSES = ("ok", "mesh-failed", "solve-failed", "export-failed", "skipped", "interrupted", "not-ready")
FAILURE_STATUSES = ("mesh-failed", "solve-failed", "export-failed", "not-ready")

#: Every flag a case can carry (runner and post-processing) and what it means.
FLAG_TEXT = {
    "mesh-failed": "a meshing tool failed",
    "mesh-checks-failed": "the mesh checker reported failed checks",
    "mesh-illegal-faces": "the mesher finished with faces failing its quality checks",
    "layers-collapsed": "prism layers collapsed (fewer than the minimum fraction of the target layers)",
    "solver-crashed": "the solver crashed (diverged or fatal error)",
    "not-converged": ("the iteration budget ran out before convergence: residuals above the tolerance and "
                      "the force monitor not settled (or residuals not dropped by the required orders of magnitude)"),
    "export-empty": "the VTK export wrote no files",
    # added by the post-processing
    "not-run": "the case has not been run (or not to the end): no results",
    "forces-failed": "the forces could not be computed from the case's export",
    "forces-drifting": "the runtime force monitor was still drifting at the end of the run (not settled)",
}

#: The flags the runner sets (the rest are set by the post-processing).
RUN_FLAGS = ("mesh-failed", "mesh-checks-failed", "mesh-illegal-faces", "layers-collapsed", "solver-crashed",
             "not-converged", "export-empty")


@dataclass(frozen=True)
class StageRun:
    """One stage of one case: ``status`` ``ok``, ``failed``, ``done-before``
    (marker present, not run again), ``interrupted`` or ``not-run``;
    ``wall_time`` s (for ``done-before``, the time recorded then, if any)."""

    stage: str
    status: str
    wall_time: float | None = None
    returncode: int | None = None


@dataclass(frozen=True)
class CaseRunRecord:
    """What happened to one case (written to ``<case>/underfloor-run.json``).

    ``status``: one of :data:`STATUSES`. ``flags``: keys of
    :data:`FLAG_TEXT` that apply. ``cells``: final cell count (checker, else
    mesher). ``iterations``: solver iterations run; ``end_reason`` as in
    :class:`caseprep.run.solverlogs.SolverLog`; ``final_residuals`` per field.
    ``mesh_ok``: the checker's verdict (None if it did not run).
    ``layers``: per patch ``{patch, target_layers, layers, coverage,
    thickness_percent}``; ``layer_coverage`` the face-weighted mean coverage.
    ``failed_tool`` and ``log_tail`` describe a failure. Times in s.
    ``convergence``: why the run counts as converged or not (see
    :mod:`caseprep.contract.convergence`); ``residual_drop``: the smallest drop of a field's
    initial residual over the run, in orders of magnitude (log10 of the
    largest of the first five iterations over the final); ``force_settling``:
    the force monitor over the settling window (``window`` samples,
    ``verdict``, largest |drift| and relative std, fractions).
    """

    case_id: str
    folder: str
    status: str
    message: str = ""
    ranks: int = 1
    stages: tuple[StageRun, ...] = ()
    wall_time: float = 0.0
    started_utc: str = ""
    finished_utc: str = ""
    cells: int | None = None
    background_cells: int | None = None
    mesh_ok: bool | None = None
    failed_checks: int | None = None
    max_non_orthogonality: float | None = None
    max_skewness: float | None = None
    layer_coverage: float | None = None
    layers: tuple[dict[str, Any], ...] = ()
    iterations: int | None = None
    end_reason: str | None = None
    final_residuals: dict[str, float] = field(default_factory=dict)
    continuity_cumulative: float | None = None
    export_files: int | None = None
    convergence: str | None = None
    residual_drop: float | None = None
    force_settling: dict[str, Any] | None = None
    flags: tuple[str, ...] = ()
    failed_tool: str | None = None
    log_tail: str = ""

    @property
    def failed(self) -> bool:
        return self.status in FAILURE_STATUSES

    def stage_time(self, stage: str) -> float | None:
        for s in self.stages:
            if s.stage == stage:
                return s.wall_time
        return None

    def to_dict(self) -> dict[str, Any]:
        return json_ready(asdict(self))

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> "CaseRunRecord":
        known = {f for f in cls.__dataclass_fields__}
        d = {k: v for k, v in d.items() if k in known}
        d["stages"] = tuple(StageRun(**s) for s in d.get("stages", ()))
        d["layers"] = tuple(d.get("layers", ()))
        d["flags"] = tuple(d.get("flags", ()))
        d["final_residuals"] = {k: (float("nan") if v is None else v) for k, v in (d.get("final_residuals") or {}).items()}
        return cls(**d)


def read_case_record(case_dir: str | os.PathLike) -> CaseRunRecord | None:
    """The last record of a case folder, or None."""
    p = Path(case_dir) / RECORD_NAME
    try:
        return CaseRunRecord.from_dict(json.loads(p.read_text()))
    except (OSError, ValueError, TypeError):
        return None


def read_summary(sweep_dir: str | os.PathLike) -> list[CaseRunRecord]:
    """The records of a sweep's ``run_summary.json`` (empty if it has none)."""
    p = Path(sweep_dir) / SUMMARY_NAME
    try:
        d = json.loads(p.read_text())
    except (OSError, ValueError):
        return []
    return [CaseRunRecord.from_dict(r) for r in d.get("cases", [])]


def effective_status(rec: CaseRunRecord) -> str:
    """``skipped`` records report the stages' state instead: ``ok`` when all
    three stages were done, else the record's own status."""
    if rec.status == "skipped" and all(s.status in ("ok", "done-before") for s in rec.stages):
        return "ok"
    return rec.status
