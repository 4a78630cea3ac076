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
from enum import StrEnum
from pathlib import Path
from typing import Any

from caseprep.contract.atomicio import json_ready
from caseprep.contract.errors import UserError
from caseprep.contract.untrusted import (expect_dict, expect_int, expect_list, expect_number, expect_str,
                                         read_json)

RECORD_NAME = "underfloor-run.json"
SUMMARY_NAME = "run_summary.json"
SUMMARY_SCHEMA = "underfloor-run-summary"


class Status(StrEnum):
    """What became of a case in a run (the record's ``status``)."""

    OK = "ok"
    MESH_FAILED = "mesh-failed"
    SOLVE_FAILED = "solve-failed"
    EXPORT_FAILED = "export-failed"
    SKIPPED = "skipped"          # all requested stages were done before
    INTERRUPTED = "interrupted"  # stopped by a signal (or Ctrl-C) before it finished
    RUNNING = "running"          # a stage has started and not finished (host and pid say where)
    NOT_READY = "not-ready"      # a requested stage needs an earlier one first
    NOT_RUN = "not-run"          # in the run summary: the case never ran


STATUSES: tuple[Status, ...] = tuple(s for s in Status if s is not Status.NOT_RUN)
FAILURE_STATUSES: tuple[Status, ...] = (Status.MESH_FAILED, Status.SOLVE_FAILED, Status.EXPORT_FAILED, Status.NOT_READY)


class Flag(StrEnum):
    """Every flag a case can carry (the runner's and the post-processing's);
    a flagged case is listed and never ranked. :attr:`meaning` says what it
    means in words."""

    MESH_FAILED = "mesh-failed"
    MESH_CHECKS_FAILED = "mesh-checks-failed"
    MESH_ILLEGAL_FACES = "mesh-illegal-faces"
    LAYERS_COLLAPSED = "layers-collapsed"
    SOLVER_CRASHED = "solver-crashed"
    NOT_CONVERGED = "not-converged"
    EXPORT_EMPTY = "export-empty"
    # set by the post-processing
    NOT_RUN = "not-run"
    FORCES_FAILED = "forces-failed"
    FORCES_DRIFTING = "forces-drifting"
    RESULTS_MISSING = "results-missing"
    # a run that stopped early carries its status as a flag in the results
    SOLVE_FAILED = "solve-failed"
    EXPORT_FAILED = "export-failed"
    NOT_READY = "not-ready"
    INTERRUPTED = "interrupted"
    RUNNING = "running"
    # files of the case that could not be read (the case's notes say why)
    RECORD_UNREADABLE = "record-unreadable"
    UNREADABLE = "unreadable"

    @property
    def meaning(self) -> str:
        return _MEANING[self]


_MEANING = {
    Flag.MESH_FAILED: "a meshing tool failed",
    Flag.MESH_CHECKS_FAILED: "the mesh checker reported failed checks",
    Flag.MESH_ILLEGAL_FACES: "the mesher finished with faces failing its quality checks",
    Flag.LAYERS_COLLAPSED: "prism layers collapsed (fewer than the minimum fraction of the target layers)",
    Flag.SOLVER_CRASHED: "the solver crashed (diverged or fatal error)",
    Flag.NOT_CONVERGED: ("the iteration budget ran out before convergence: residuals above the tolerance and "
                         "the force monitor not settled (or residuals not dropped by the required orders of magnitude)"),
    Flag.EXPORT_EMPTY: "the VTK export wrote no files",
    Flag.NOT_RUN: "the case has not been run (or not to the end): no results",
    Flag.FORCES_FAILED: "the forces could not be computed from the case's export",
    Flag.FORCES_DRIFTING: "the runtime force monitor was still drifting at the end of the run (not settled)",
    Flag.RESULTS_MISSING: ("no usable post-processing result for the case when the tables were merged (its shard "
                           "did not run or did not finish, or its result was stale or corrupt): rerun its shard"),
    Flag.SOLVE_FAILED: "the solve stage failed",
    Flag.EXPORT_FAILED: "the export stage failed",
    Flag.NOT_READY: "a requested stage needed an earlier stage that was not done",
    Flag.INTERRUPTED: "the run was interrupted",
    Flag.RUNNING: ("a stage was running when the results were read (or its runner ended without recording the "
                   "outcome: the record's host and pid say where it ran)"),
    Flag.RECORD_UNREADABLE: "the case's run record (underfloor-run.json) is unreadable or malformed: its run is unknown",
    Flag.UNREADABLE: "the case's VTK export could not be read (corrupt, truncated or absurd sizes); the notes say why",
}

#: The flags the runner sets (the rest are set by the post-processing).
RUN_FLAGS: tuple[Flag, ...] = (Flag.MESH_FAILED, Flag.MESH_CHECKS_FAILED, Flag.MESH_ILLEGAL_FACES,
                               Flag.LAYERS_COLLAPSED, Flag.SOLVER_CRASHED, Flag.NOT_CONVERGED, Flag.EXPORT_EMPTY)


def flag_meaning(flag: str) -> str:
    """What ``flag`` means in words (the flag itself when it is not one of :class:`Flag`)."""
    try:
        return Flag(flag).meaning
    except ValueError:
        return str(flag)


def as_flag(value: str) -> Flag | str:
    """``value`` as a :class:`Flag` (a value read from disk that is not one stays a string)."""
    try:
        return Flag(value)
    except ValueError:
        return str(value)


@dataclass(frozen=True)
class StageRun:
    """One stage of one case: ``status`` ``ok``, ``failed``, ``done-before``
    (marker present, not run again), ``running`` (started, not finished),
    ``interrupted`` or ``not-run``;
    ``wall_time`` s (for ``done-before``, the time recorded then, if any);
    ``cores`` the cores the runner held for the case during the stage (its
    ranks); ``core_seconds`` = wall_time × cores; ``cpu_seconds`` user +
    system time of the stage's whole process tree (None: not measured). See
    :mod:`caseprep.contract.cost`."""

    stage: str
    status: str
    wall_time: float | None = None
    returncode: int | None = None
    cores: int | None = None
    core_seconds: float | None = None
    cpu_seconds: float | None = None


@dataclass(frozen=True)
class CaseRunRecord:
    """What happened to one case (written to ``<case>/underfloor-run.json``).

    ``status``: one of :class:`Status`. ``flags``: the :class:`Flag` values
    that apply. ``cells``: final cell count (checker, else
    mesher). ``iterations``: solver iterations run; ``end_reason`` as in
    :class:`caseprep.run.solverlogs.SolverLog`; ``final_residuals`` per field.
    ``mesh_ok``: the checker's verdict (None if it did not run).
    ``layers``: per patch ``{patch, target_layers, layers, coverage,
    thickness_percent}``; ``layer_coverage`` the face-weighted mean coverage.
    ``failed_tool`` and ``log_tail`` describe a failure. Times in s.
    ``host`` and ``pid``: the machine and the process id of the runner that
    wrote the record (a ``running`` record names where the stage runs).
    ``mesh_source``: for a case whose manifest names another case as its
    mesh owner, ``{"owner", "shared", "how", "files"}`` when it used that
    mesh, or ``{"owner", "shared": false, "why"}`` when it meshed itself
    instead. ``initial_field``: where the solve started from
    (``{"kind": "uniform" | "copied" | "mapped", "source", "distance",
    "speed_ratio", "why"}``, see :mod:`caseprep.run.fields`). ``settled_stop``:
    with the stop rule ``settled``, the iteration at which the runner asked
    the solver to stop and why (``{"at_iteration", "reason"}``), None when
    the solve ran to its end.
    ``core_seconds`` and ``cpu_seconds``: the sums over the stages that have
    a figure (this run's and those done before); ``tool_times`` per tool whose
    log prints them, its last ``execution`` (CPU) and ``clock`` time (s; for
    a parallel solver the master rank's).
    ``faces_in_error``: the mesher's final list of faces failing its strict
    quality criteria (criterion → count; see
    :meth:`caseprep.run.solverlogs.SnappyLog.faces_failing_the_solve` for
    which of them flag the case).
    ``numerics``: what the mesh stage chose from the mesh's quality
    (``non_orthogonal_correctors``, ``momentum_relaxation``; from
    ``system/meshNumerics``), None before meshing.
    ``convergence``: why the run counts as converged or not (see
    :mod:`caseprep.contract.convergence`); ``residual_drop``: the smallest drop of a field's
    initial residual over the run, in orders of magnitude (log10 of the
    largest of the first five iterations over the final); ``force_settling``:
    the force monitor's verdict in coefficient counts over the settling
    window (:func:`caseprep.contract.convergence.judge_case_monitor`:
    ``verdict``, ``window`` samples, per coefficient ``series`` statistics,
    window ``means`` and ``stds``), None without a monitor to judge by.
    """

    case_id: str
    folder: str
    status: Status | str
    message: str = ""
    ranks: int = 1
    stages: tuple[StageRun, ...] = ()
    wall_time: float = 0.0
    core_seconds: float | None = None
    cpu_seconds: float | None = None
    tool_times: dict[str, dict[str, float]] = field(default_factory=dict)
    started_utc: str = ""
    finished_utc: str = ""
    cells: int | None = None
    background_cells: int | None = None
    mesh_ok: bool | None = None
    failed_checks: int | None = None
    max_non_orthogonality: float | None = None
    max_skewness: float | None = None
    faces_in_error: dict[str, int] = field(default_factory=dict)
    numerics: dict[str, Any] | None = None
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
    flags: tuple[Flag | str, ...] = ()
    failed_tool: str | None = None
    log_tail: str = ""
    host: str = ""
    pid: int | None = None
    mesh_source: dict[str, Any] | None = None
    initial_field: dict[str, Any] | None = None
    settled_stop: dict[str, Any] | None = None

    @property
    def failed(self) -> bool:
        return self.status in FAILURE_STATUSES

    def stage_time(self, stage: str) -> float | None:
        for s in self.stages:
            if s.stage == stage:
                return s.wall_time
        return None

    def stage_run(self, stage: str) -> StageRun | None:
        for s in self.stages:
            if s.stage == stage:
                return s
        return None

    def to_dict(self) -> dict[str, Any]:
        return json_ready(asdict(self))

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> "CaseRunRecord":
        known = {f for f in cls.__dataclass_fields__}
        d = {k: v for k, v in d.items() if k in known}
        d["stages"] = tuple(StageRun(**s) for s in d.get("stages", ()))
        d["layers"] = tuple(d.get("layers", ()))
        d["flags"] = tuple(as_flag(f) for f in d.get("flags", ()))
        if d.get("status") in set(Status):
            d["status"] = Status(d["status"])
        d["final_residuals"] = {k: (float("nan") if v is None else v) for k, v in (d.get("final_residuals") or {}).items()}
        return cls(**d)


_FIX = "the run record is written by `caseprep run`: run the case again (caseprep run --only ID --force)"
_TEXT = ("case_id", "folder", "status", "message", "started_utc", "finished_utc", "end_reason", "convergence",
         "failed_tool", "log_tail")
_WHOLE = ("ranks", "cells", "background_cells", "failed_checks", "iterations", "export_files")
_NUMBERS = ("wall_time", "core_seconds", "cpu_seconds", "max_non_orthogonality", "max_skewness", "layer_coverage", "continuity_cumulative",
            "residual_drop")


_STAGE_KEYS = ("stage", "status", "wall_time", "returncode", "cores", "core_seconds", "cpu_seconds")


def check_run_record_dict(d: object, source: str) -> None:
    """Refuse a run record read from disk whose values have the wrong type
    (UserError naming the key, e.g. ``iterations``). Unknown keys are ignored."""
    expect_dict(d, file=source, key="(top level)", fix=_FIX)
    for k in _TEXT:
        if d.get(k) is not None:
            expect_str(d[k], file=source, key=k, fix=_FIX, max_len=1_000_000)
    for k in _WHOLE:
        expect_int(d.get(k), file=source, key=k, fix=_FIX, none_ok=True, lo=0, hi=10**13)
    for k in _NUMBERS:
        expect_number(d.get(k), file=source, key=k, fix=_FIX, none_ok=True)
    if d.get("mesh_ok") is not None and not isinstance(d["mesh_ok"], bool):
        raise UserError(expected="true, false or null", got=d["mesh_ok"], file=source, key="mesh_ok", fix=_FIX)
    for i, st in enumerate(expect_list(d.get("stages", []), file=source, key="stages", fix=_FIX)):
        expect_dict(st, file=source, key=f"stages[{i}]", fix=_FIX)
        for k in ("stage", "status"):
            expect_str(st.get(k), file=source, key=f"stages[{i}].{k}", fix=_FIX, max_len=64)
        for k in ("wall_time", "core_seconds", "cpu_seconds"):
            expect_number(st.get(k), file=source, key=f"stages[{i}].{k}", fix=_FIX, none_ok=True)
        expect_int(st.get("returncode"), file=source, key=f"stages[{i}].returncode", fix=_FIX, none_ok=True,
                   lo=-(2**31), hi=2**31)
        expect_int(st.get("cores"), file=source, key=f"stages[{i}].cores", fix=_FIX, none_ok=True, lo=0, hi=10**7)
        extra = set(st) - set(_STAGE_KEYS)
        if extra:
            raise UserError(expected="stage keys " + ", ".join(_STAGE_KEYS), got=sorted(extra)[0],
                            file=source, key=f"stages[{i}]", fix=_FIX)
    for i, ly in enumerate(expect_list(d.get("layers", []), file=source, key="layers", fix=_FIX)):
        expect_dict(ly, file=source, key=f"layers[{i}]", fix=_FIX)
        if ly.get("patch") is not None:
            expect_str(ly["patch"], file=source, key=f"layers[{i}].patch", fix=_FIX, max_len=256)
        for k in ("target_layers", "layers", "coverage", "thickness_percent", "faces"):
            expect_number(ly.get(k), file=source, key=f"layers[{i}].{k}", fix=_FIX, none_ok=True)
    for k, v in expect_dict(d.get("final_residuals") or {}, file=source, key="final_residuals", fix=_FIX).items():
        expect_number(v, file=source, key=f"final_residuals.{k}", fix=_FIX, none_ok=True)
    for i, f in enumerate(expect_list(d.get("flags", []), file=source, key="flags", fix=_FIX)):
        expect_str(f, file=source, key=f"flags[{i}]", fix=_FIX, max_len=64)
    if d.get("force_settling") is not None:
        expect_dict(d["force_settling"], file=source, key="force_settling", fix=_FIX)
    for k in ("mesh_source", "initial_field", "settled_stop"):
        if d.get(k) is not None:
            expect_dict(d[k], file=source, key=k, fix=_FIX)
    for tool, t in expect_dict(d.get("tool_times") or {}, file=source, key="tool_times", fix=_FIX).items():
        for k, v in expect_dict(t, file=source, key=f"tool_times.{tool}", fix=_FIX).items():
            expect_number(v, file=source, key=f"tool_times.{tool}.{k}", fix=_FIX, none_ok=True)
    for k, v in expect_dict(d.get("faces_in_error") or {}, file=source, key="faces_in_error", fix=_FIX).items():
        expect_int(v, file=source, key=f"faces_in_error.{k}", fix=_FIX, lo=0, hi=10**13)


def load_case_record(case_dir: str | os.PathLike) -> CaseRunRecord | None:
    """The last record of a case folder; None when there is none. A record
    that exists but cannot be read or has wrong values is a UserError naming
    the file and the key."""
    p = Path(case_dir) / RECORD_NAME
    if not (p.exists() or p.is_symlink()):
        return None
    d = read_json(p, "run record", fix=_FIX)
    check_run_record_dict(d, str(p))
    try:
        return CaseRunRecord.from_dict(d)
    except (TypeError, ValueError) as exc:  # pragma: no cover - excluded by the checks above
        raise UserError(expected="a run record", got=str(exc)[:160], file=str(p), fix=_FIX) from None


def read_case_record(case_dir: str | os.PathLike) -> CaseRunRecord | None:
    """The last record of a case folder, or None (also when it is unreadable:
    the runner then runs the case as if it had no record)."""
    try:
        return load_case_record(case_dir)
    except UserError:
        return None


def effective_status(rec: CaseRunRecord) -> Status | str:
    """``skipped`` records report the stages' state instead: ``ok`` when all
    three stages were done, else the record's own status."""
    if rec.status == Status.SKIPPED and all(s.status in ("ok", "done-before") for s in rec.stages):
        return Status.OK
    return rec.status
