"""Run the solver over a written sweep and record what happened.

Each case folder of a sweep (see the case folder contract in the README) has
an executable ``run.sh`` with three stages: ``mesh``, ``solve`` and
``export``. :func:`run_sweep` calls ``run.sh <stage>`` for each stage of each
case, ``jobs`` cases at a time, with ``UF_RANKS`` MPI ranks per case (by
default the throughput rule of :func:`choose_layout`: one serial case per
core while there are at least as many cases to run as cores), and
after each case reads the solver's logs (:mod:`caseprep.run.solverlogs`) into a
:class:`CaseRunRecord` written to ``<case>/underfloor-run.json``; the sweep's
``run_summary.json`` collects them.

Resuming: a stage whose ``logs/<stage>.done`` marker exists is not run again
(unless ``force``); running a stage removes the markers of the later stages,
whose results it makes stale. A case with all requested stages done is
``skipped``.

Failure handling: a stage fails when ``run.sh`` exits non-zero or does not
leave its marker; the case stops there, its record carries the failing
tool's log tail, and the other cases go on.

Records never claim a result that is being replaced: when a stage starts,
the case's record is rewritten with status ``running`` (the stage, the host
and the runner's pid) before ``run.sh`` starts, and the sweep summary with
it when the case starts.

Stopping: SIGTERM (what a batch scheduler sends) and SIGINT (Ctrl-C) are
handled alike, whatever the parent process ignored
(:mod:`caseprep.contract.signals`): no new case or stage starts, the running
cases' process groups get SIGTERM, then SIGKILL after
:attr:`RunOptions.kill_grace` seconds (at once on a second signal), each
unfinished case is recorded ``interrupted``, the summary is rewritten
(atomically, like every record) and :class:`SweepInterrupted` is raised
(exit code 143 or 130 in the command). Running again resumes: the stopped
stage has no marker and runs again.

Units: wall times in seconds; cell counts; residuals are the solver's
dimensionless normalised residuals. No axes are involved.
"""
from __future__ import annotations

import contextlib
import datetime as _dt
import json
import os
import shutil
import signal
import socket
import subprocess
import time
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any, Callable, Iterable, Sequence

from caseprep.run import reuse
from caseprep.run import solverlogs as sl
from caseprep.run import fields as initial_fields
from caseprep.run import warmstart
from caseprep.run.economy import RunPlan, case_distance, group_key, plan_run
from caseprep.contract.atomicio import open_folder, write_json_atomic
from caseprep.contract.cost import cost_lines, cost_summary, stage_core_seconds
from caseprep.contract.convergence import (DEFAULT_OPTIONS, ConvergenceOptions, judge_case_monitor, judge_convergence,
                                           judge_stop, stop_options, stop_window)
from caseprep.contract.errors import UserError, did_you_mean
from caseprep.contract.limits import MAX_RANKS
from caseprep.contract.locking import refuse_interrupted, sweep_lock
from caseprep.contract.manifest import MANIFEST_NAME, CaseRecord, read_manifest
from caseprep.contract.progress import format_duration
from caseprep.contract.signals import StopSignals, exit_code, signal_name
from caseprep.contract.records import (RECORD_NAME, RUN_FLAGS, SUMMARY_NAME, SUMMARY_SCHEMA, CaseRunRecord, Flag,
                                       StageRun, Status, effective_status, read_case_record)

STAGES: tuple[str, ...] = ("mesh", "solve", "export")
#: The stop file of the stop rule ``settled`` (the case's controlDict watches it; see casefiles.render.STOP_FILE).
STOP_FILE = "logs/settled.stop"
STAGE_TOOLS: dict[str, tuple[str, ...]] = {
    "mesh": ("blockMesh", "surfaceFeatureExtract", "snappyHexMesh", "checkMesh"),
    "solve": ("decomposePar", "simpleFoam", "reconstructPar"),
    "export": ("foamToVTK",),
}
FAILED_STATUS = {"mesh": Status.MESH_FAILED, "solve": Status.SOLVE_FAILED, "export": Status.EXPORT_FAILED}
SOLVER_BINARIES = ("blockMesh", "snappyHexMesh", "checkMesh", "simpleFoam", "foamToVTK", "decomposePar",
                   "redistributePar", "reconstructPar")
INSTALL_HINT = "sudo apt-get install -y --no-install-recommends openfoam"


def missing_solver_binaries(names: Iterable[str] = SOLVER_BINARIES) -> list[str]:
    """Names of the solver's programs not found on PATH."""
    return [n for n in names if shutil.which(n) is None]


def usable_cores() -> int:
    """Cores this process may run on (its CPU affinity: a batch system's or
    taskset's limit), at least 1."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except (AttributeError, OSError):
        return max(1, os.cpu_count() or 1)


@dataclass(frozen=True)
class Layout:
    """How a sweep uses the machine: ``jobs`` cases at a time, ``ranks`` MPI
    ranks each, and why (``reason``, one line for the user)."""

    jobs: int
    ranks: int
    reason: str


def choose_layout(pending: int, cores: int, jobs: int | None = None, ranks: int | None = None) -> Layout:
    """The throughput rule: pack the machine with whole cases first.

    * neither given: with at least as many cases to run as ``cores``, one
      serial case per core (``jobs = cores``, ``ranks = 1``); with fewer, every
      case at once and the cores shared out as MPI ranks
      (``ranks = cores // pending``);
    * only ``ranks`` given: as many cases as fit, ``jobs = cores // ranks``
      (at least 1, at most the cases to run);
    * only ``jobs`` given: ``ranks = cores // min(jobs, pending)`` (at least 1);
    * both given: as given.

    Why serial cases first: parallel ranks of one case add decomposition and
    reconstruction, exchange data every iteration and, when another process
    wants a core, wait on each other; independent cases do none of that
    (measured in the README, "Throughput").
    """
    pending = max(1, int(pending))
    cores = max(1, int(cores))
    if jobs is not None and ranks is not None:
        return Layout(jobs, ranks, f"{jobs} at a time, {ranks} rank(s) each, as asked")
    if ranks is not None:
        j = max(1, min(pending, cores // ranks))
        return Layout(j, ranks, f"{ranks} rank(s) per case as asked: {j} case(s) at a time on {cores} core(s)")
    if jobs is not None:
        r = max(1, cores // min(jobs, pending))
        return Layout(jobs, r, f"{jobs} at a time as asked: {r} rank(s) each on {cores} core(s)")
    if pending >= cores:
        return Layout(cores, 1, f"{pending} case(s) to run on {cores} core(s): one serial case per core")
    r = max(1, cores // pending)
    return Layout(pending, r, f"{pending} case(s) to run on {cores} core(s): all at once, {r} MPI rank(s) each")


@dataclass(frozen=True)
class RunOptions:
    """Thresholds of the flags and the runner's timing.

    ``convergence``: the thresholds of the ``not-converged`` flag (the one
    convergence rule, :mod:`caseprep.contract.convergence`).
    ``min_layer_coverage``: achieved/target prism layers below which a patch
    counts as collapsed (fraction; 0.5 — common practice, no source).
    ``tail_lines``: lines of the failing log kept in the record.
    ``heartbeat``: seconds between ``running`` progress events.
    ``poll``: seconds between checks of the running processes.
    ``kill_grace``: seconds between SIGTERM and SIGKILL when stopped (keep it
    below the scheduler's own grace, e.g. SLURM's KillWait, 30 s by default).
    ``cold``: every case starts from the uniform free stream, whatever the
    manifest asks; ``warm_from``: every selected case starts from this
    case's solution (same variant, mesh level, yaw mode and ground only).
    ``settle_check``: seconds between two looks at a running solve whose
    case has the stop rule ``settled`` (:func:`caseprep.contract.convergence.judge_stop`).
    """

    convergence: ConvergenceOptions = DEFAULT_OPTIONS
    min_layer_coverage: float = 0.5
    tail_lines: int = 25
    heartbeat: float = 30.0
    poll: float = 0.2
    kill_grace: float = 10.0
    cold: bool = False
    warm_from: str | None = None
    settle_check: float = 1.0


@dataclass(frozen=True)
class Progress:
    """One progress event: ``event`` is ``layout`` (once, first: ``message``
    says how many cases at a time with how many ranks, and why),
    ``case-start``, ``stage-start``,
    ``stage-done``, ``stage-failed``, ``running`` (heartbeat), ``case-done``,
    ``skipped`` or ``interrupted``; ``elapsed`` s since the case started,
    ``stage_elapsed`` s since the stage started; ``index`` 1-based among
    ``total`` selected cases; ``record`` set on ``case-done``/``skipped``."""

    case_id: str
    index: int
    total: int
    event: str
    stage: str | None = None
    elapsed: float = 0.0
    stage_elapsed: float = 0.0
    message: str = ""
    record: "CaseRunRecord | None" = None


class SweepInterrupted(Exception):
    """A stop signal (SIGTERM, SIGINT/Ctrl-C) during :func:`run_sweep`, after
    the running cases were stopped and recorded ``interrupted``; ``records``
    holds what was recorded, ``signum`` the signal, ``exit_code`` 128 + it."""

    def __init__(self, records: list[CaseRunRecord], signum: int = signal.SIGINT):
        super().__init__(f"stopped by {signal_name(signum)}")
        self.records = records
        self.signum = int(signum)
        self.exit_code = exit_code(signum)


def _utc() -> str:
    return _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")


def _tail(path: Path, n: int) -> str:
    try:
        lines = path.read_text(errors="replace").splitlines()
    except OSError:
        return ""
    return "\n".join(lines[-n:])


def _read(path: Path) -> str | None:
    try:
        return path.read_text(errors="replace")
    except OSError:
        return None


def summarize_logs(case_dir: Path, valid_stages: Sequence[str], options: RunOptions = RunOptions(),
                   record: CaseRecord | None = None) -> dict[str, Any]:
    """Read the logs of ``valid_stages`` in ``case_dir/logs`` into record
    fields (cells, checker verdict, layers, solver outcome, export) and flags.
    ``record``: the case's manifest record (its reference values and frames
    for the monitor's verdict; looked up from the manifest when None)."""
    logs = case_dir / "logs"
    out: dict[str, Any] = {}
    flags: list[str] = []
    if "mesh" in valid_stages:
        bm = _read(logs / "blockMesh.log")
        sn = _read(logs / "snappyHexMesh.log")
        cm = _read(logs / "checkMesh.log")
        cells = None
        if bm is not None:
            b = sl.parse_blockmesh(bm)
            out["background_cells"] = b.cells
            cells = b.cells
        if sn is not None:
            s = sl.parse_snappy(sn)
            cells = s.cells if s.cells is not None else cells
            out["layer_coverage"] = s.layer_coverage
            out["layers"] = tuple({"patch": p.patch, "faces": p.faces, "target_layers": p.target_layers,
                                   "layers": p.layers, "coverage": p.coverage, "thickness_percent": p.thickness_percent}
                                  for p in s.layers)
            if s.collapsed_patches(options.min_layer_coverage):
                flags.append(Flag.LAYERS_COLLAPSED)
        c = sl.parse_checkmesh(cm) if cm is not None else None
        if sn is not None:
            out["faces_in_error"] = dict(s.faces_in_error)
            if s.faces_failing_the_solve(c.max_non_orthogonality if c is not None else None,
                                         c.max_skewness if c is not None else None):
                flags.append(Flag.MESH_ILLEGAL_FACES)
        if c is not None:
            cells = c.cells if c.cells is not None else cells
            out.update(mesh_ok=c.mesh_ok, failed_checks=c.failed_checks,
                       max_non_orthogonality=c.max_non_orthogonality, max_skewness=c.max_skewness)
            if c.mesh_ok is False:
                flags.append(Flag.MESH_CHECKS_FAILED)
        numerics = _read(case_dir / "system" / "meshNumerics")
        if numerics is not None:
            out["numerics"] = sl.parse_mesh_numerics(numerics)
        out["cells"] = cells
    if "solve" in valid_stages:
        so = _read(logs / "simpleFoam.log")
        if so is not None:
            r = sl.parse_solver(so)
            out.update(iterations=r.iterations, end_reason=r.end_reason, final_residuals=dict(r.final_residuals),
                       continuity_cumulative=r.continuity_cumulative)
            if r.end_reason == "crashed":
                flags.append(Flag.SOLVER_CRASHED)
            elif r.end_reason == "converged":
                out["convergence"] = "the solver's residual criterion was met"
            else:
                settling = judge_case_monitor(case_dir, options.convergence, record=record)
                ok, why, drop = judge_convergence(r.residuals, r.final_residuals, settling, options.convergence)
                out.update(convergence=why, residual_drop=drop, force_settling=settling)
                if not ok:
                    flags.append(Flag.NOT_CONVERGED)
    if "export" in valid_stages:
        ex = _read(logs / "foamToVTK.log")
        if ex is not None:
            e = sl.parse_export(ex)
            out["export_files"] = len(e.files)
            if not e.files and e.finished:
                flags.append(Flag.EXPORT_EMPTY)
    out["flags"] = tuple(flags)
    return out


def _failing_tool(case_dir: Path, stage: str, since: float) -> tuple[str | None, Path | None]:
    """The stage's tool log written last since ``since`` (epoch s): the tool that failed."""
    best: tuple[float, str, Path] | None = None
    logs = case_dir / "logs"
    names = list(STAGE_TOOLS[stage])
    if logs.is_dir():  # tools outside our list still follow logs/<tool>.log
        names += [p.stem for p in logs.glob("*.log") if p.stem not in names]
    for name in names:
        p = logs / f"{name}.log"
        try:
            m = p.stat().st_mtime
        except OSError:
            continue
        if m >= since - 1.0 and (best is None or m > best[0]):
            best = (m, name, p)
    return (best[1], best[2]) if best else (None, None)


class _Job:
    """A case being run: its remaining stages and its current process."""

    def __init__(self, index: int, rec: CaseRecord, case_dir: Path, to_run: list[str], plan: dict[str, str],
                 previous: CaseRunRecord | None):
        self.index = index
        self.rec = rec
        self.dir = case_dir
        self.to_run = to_run
        self.plan = plan  # stage -> "run" | "done-before" | "not-run"
        self.previous = previous
        self.results: dict[str, StageRun] = {}
        self.proc: subprocess.Popen | None = None
        self.out = None
        self.stage: str | None = None
        self.t0 = 0.0
        self.stage_t0 = 0.0
        self.stage_wall0 = 0.0
        self.last_beat = 0.0
        self.started_utc = ""
        self.cpu: float | None = None  # CPU s of the current stage's process tree, once it ended
        self.mesh_owner: str | None = None  # the case whose mesh this one uses (the run plan)
        self.source: str | None = None  # the case whose fields it starts from (the run plan)
        self.distance: float | None = None
        self.deps: list[tuple[str, str]] = []  # (case, stage) of this run that must end before this case starts
        self.mesh_source: dict[str, Any] | None = None
        self.initial_field: dict[str, Any] | None = None
        self.stop: dict[str, Any] | None = None  # the settled stop requested (iteration, reason)
        self.last_settle_check = 0.0


def _plan(case_dir: Path, stages: Sequence[str], force: bool) -> tuple[list[str], dict[str, str], str | None]:
    """Which requested stages to run; a reason when the case cannot start."""
    logs = case_dir / "logs"
    done = {s for s in STAGES if (logs / f"{s}.done").exists()}
    to_run = [s for s in stages if force or s not in done]
    plan = {s: ("run" if s in to_run else ("done-before" if s in done else "not-run")) for s in STAGES}
    if to_run:
        first = STAGES.index(to_run[0])
        missing = [s for s in STAGES[:first] if s not in done]
        if missing:
            return [], plan, (f"stage {to_run[0]!r} needs the {'/'.join(missing)} stage done first; "
                              f"run with --stage {missing[0]} (or without --stage)")
    return to_run, plan, None


def run_sweep(
    sweep_dir: str | os.PathLike,
    jobs: int | None = None,
    ranks: int | None = None,
    stages: Sequence[str] | None = None,
    only: Sequence[str] | None = None,
    force: bool = False,
    progress: Callable[[Progress], None] | None = None,
    options: RunOptions = RunOptions(),
) -> list[CaseRunRecord]:
    """Run the cases of the sweep in ``sweep_dir``; returns one record per selected case.

    ``jobs`` cases at a time, each with ``ranks`` MPI ranks (``UF_RANKS``);
    either left None is chosen by :func:`choose_layout` from the cases to
    run and :func:`usable_cores` (a ``layout`` progress event carries the
    reason before the first case starts);
    ``stages`` a subset of :data:`STAGES` (default all); ``only`` case ids
    to run (default all in the manifest); ``force`` re-runs stages already
    marked done. ``progress`` is called with :class:`Progress` events from
    the calling thread. Raises :class:`UserError` for a folder that is not a
    sweep, unknown ids or stages, or a case folder without an executable
    ``run.sh``; raises :class:`SweepInterrupted` on SIGTERM or SIGINT (from
    the main thread; elsewhere on KeyboardInterrupt) after stopping and
    recording the running cases.
    """
    # absolute: run.sh is started with the case folder as working directory
    root = Path(sweep_dir).resolve()
    if not (root / MANIFEST_NAME).is_file():
        read_manifest(root)  # not a sweep: refused before anything is created in the folder
    # One command at a time in a sweep folder; runs of named cases (`--only`, the
    # batch array's tasks) share the sweep and hold each of their cases alone.
    shared = bool(only)
    with sweep_lock(root, "caseprep run", shared=shared):
        refuse_interrupted(root, "caseprep run")
        manifest = read_manifest(root)
        with contextlib.ExitStack() as held:
            if shared:
                for c in _selected_cases(root, manifest, only):
                    held.enter_context(sweep_lock(manifest.case_dir(c), f"caseprep run --only {c.case_id}"))
            return _run_locked(root, manifest, jobs, ranks, stages, only, force, progress, options)


def _run_locked(root: Path, manifest, jobs: int | None, ranks: int | None, stages, only, force: bool, progress,
                options: RunOptions) -> list[CaseRunRecord]:
    """:func:`run_sweep` holding the sweep's lock."""
    for value, what, key in ((jobs, "parallel cases", "--jobs"), (ranks, "MPI ranks", "--ranks")):
        if value is not None and not 1 <= value <= MAX_RANKS.value:
            raise UserError(expected=f"a number of {what} from 1 to {int(MAX_RANKS.value)}", got=value, key=key,
                            fix=f"use {key} 1 or more, at most the number of cores")
    stages = _checked_stages(stages)
    selected = _selected_cases(root, manifest, only)
    if options.warm_from is not None:
        _forced_source(manifest, selected, options.warm_from)
    emit = progress or (lambda ev: None)
    plans = [_plan(manifest.case_dir(c), stages, force) for c in selected]
    n_pending = sum(1 for to_run, _plan_, why in plans if to_run and not why)
    layout = choose_layout(n_pending, usable_cores(), jobs, ranks)
    emit(Progress("", 0, len(selected), "layout", message=layout.reason))
    records: dict[str, CaseRunRecord] = {}
    pending = _pending_jobs(manifest, selected, stages, force, layout.ranks, options, records, emit)
    pending = _apply_plan(manifest, pending, layout.jobs, options)
    run = _Run(root, manifest, len(selected), layout.ranks, options, emit, _environment(layout.ranks),
               socket.gethostname(), os.getpid(), records)
    with StopSignals() as stop:
        run.loop(pending, layout.jobs, stop)
    return [records[c.case_id] for c in selected]


def _usable_source(case_dir: Path) -> bool:
    """Whether a case outside this run may be planned as a warm-start
    source: its solve stage is done and its last record carries no flag
    that forbids it (:data:`caseprep.run.warmstart.BLOCKING_FLAGS`)."""
    if not (case_dir / "logs" / "solve.done").is_file():
        return False
    rec = read_case_record(case_dir)
    return rec is not None and not any(f in warmstart.BLOCKING_FLAGS for f in rec.flags)


def _forced_source(manifest, selected: Sequence[CaseRecord], source: str) -> None:
    """Refuse ``--warm-from SOURCE`` for a case it cannot start: another
    variant, mesh level, yaw mode or ground, or the case itself."""
    src = manifest.case(source)
    for c in selected:
        if c.case_id == source:
            raise UserError(expected="a warm-start source other than the case itself", got=source, key="--warm-from",
                            fix="name another solved case, or leave --only without it")
        if group_key(c) != group_key(src):
            names = ("variant", "mesh level", "yaw mode", "ground")
            diff = next(n for n, a, b in zip(names, group_key(c), group_key(src)) if a != b)
            raise UserError(expected=f"a warm-start source of the same variant, mesh level, yaw mode and ground as "
                                     f"case {c.case_id} ({diff} {group_key(c)[names.index(diff)]})",
                            got=f"{source} ({diff} {group_key(src)[names.index(diff)]})", key="--warm-from",
                            fix="a field of another body or mesh is no starting point: pick a case of the same "
                                "variant and mesh level, or run cold")


def _apply_plan(manifest, pending: list[_Job], slots: int, options: RunOptions) -> list[_Job]:
    """The jobs in the order of the run plan (:func:`caseprep.run.economy.plan_run`),
    each with its mesh owner, warm-start source and the stages of this run
    it waits for (an owner's mesh stage, a source's solve stage)."""
    ids = [j.rec.case_id for j in pending]
    running = set(ids)
    solved = [c.case_id for c in manifest.cases if c.case_id not in running and _usable_source(manifest.case_dir(c))]
    plan: RunPlan = plan_run(manifest.cases, ids, solved, slots)
    by_id = {j.rec.case_id: j for j in pending}
    for job in pending:
        cid = job.rec.case_id
        if "mesh" in job.to_run and cid in plan.mesh_owner:
            job.mesh_owner = plan.mesh_owner[cid]
            if job.mesh_owner in by_id:
                job.deps.append((job.mesh_owner, "mesh"))
        if "solve" not in job.to_run or options.cold:
            continue
        if options.warm_from is not None:
            src = manifest.case(options.warm_from)
            group = [c for c in manifest.cases if group_key(c) == group_key(src)]
            job.source, job.distance = src.case_id, round(case_distance(job.rec, src, group), 6)
        elif cid in plan.source:
            job.source, job.distance = plan.source[cid], plan.distance.get(cid)
        if job.source in by_id:
            job.deps.append((job.source, "solve"))
    rank = {cid: i for i, cid in enumerate(plan.order)}
    return sorted(pending, key=lambda j: rank.get(j.rec.case_id, len(rank) + j.index))


def _checked_stages(stages: Sequence[str] | None) -> list[str]:
    """The requested stages in run order (all when none are given)."""
    stages = list(STAGES) if not stages else list(stages)
    for s in stages:
        if s not in STAGES:
            raise UserError(expected=f"a stage among {', '.join(STAGES)}", got=s, key="stage",
                            fix="pick one of those." + did_you_mean(s, STAGES))
    return [s for s in STAGES if s in stages]


def _selected_cases(root: Path, manifest, only: Sequence[str] | None) -> list[CaseRecord]:
    """The manifest's cases to run (``only`` those ids), each with an executable run.sh."""
    ids = [c.case_id for c in manifest.cases]
    if only:
        unknown = [i for i in only if i not in ids]
        if unknown:
            raise UserError(expected="case ids listed in the sweep's manifest", got=unknown[0],
                            file=str(root / "manifest.json"), key="cases",
                            fix=("known ids: " + ", ".join(ids[:12]) + (" …" if len(ids) > 12 else "")
                                 + "." + did_you_mean(unknown[0], ids)))
        selected = [c for c in manifest.cases if c.case_id in set(only)]
    else:
        selected = list(manifest.cases)
    if not selected:
        raise UserError(expected="a sweep with at least one case", got="none", file=str(root / "manifest.json"),
                        key="cases", fix="regenerate the sweep with `caseprep write`")
    bad = [c for c in selected if not os.access(manifest.case_dir(c) / "run.sh", os.X_OK)]
    if bad:
        raise UserError(expected="an executable run.sh in every case folder", got=str(manifest.case_dir(bad[0]) / "run.sh"),
                        key=f"cases[{bad[0].case_id}]",
                        fix=f"{len(bad)} case folder(s) lack it; rewrite the sweep with `caseprep write --force`")
    return selected


def _environment(ranks: int) -> dict[str, str]:
    """The environment of run.sh: ``UF_RANKS``, the solver's install folder
    when unset, and what the MPI launcher needs to run as root."""
    env = dict(os.environ)
    env["UF_RANKS"] = str(ranks)
    if "WM_PROJECT_DIR" not in env and Path("/usr/share/openfoam/etc").is_dir():
        env["WM_PROJECT_DIR"] = "/usr/share/openfoam"
    if hasattr(os, "geteuid") and os.geteuid() == 0:  # the MPI launcher refuses root without these
        env.setdefault("OMPI_ALLOW_RUN_AS_ROOT", "1")
        env.setdefault("OMPI_ALLOW_RUN_AS_ROOT_CONFIRM", "1")
    return env


def _pending_jobs(manifest, selected: list[CaseRecord], stages: list[str], force: bool, ranks: int,
                  options: RunOptions, records: dict[str, CaseRunRecord], emit) -> list[_Job]:
    """The jobs to run; cases that cannot start (``not-ready``) or have
    nothing to do (``skipped``) are recorded in ``records`` at once."""
    pending: list[_Job] = []
    total = len(selected)
    for i, c in enumerate(selected, 1):
        cdir = manifest.case_dir(c)
        prev = read_case_record(cdir)
        to_run, plan, why = _plan(cdir, stages, force)
        if why:
            rec = _finish_record(_Job(i, c, cdir, [], plan, prev), Status.NOT_READY, why, ranks, options)
            records[c.case_id] = rec
            _write_record(cdir, rec)
            emit(Progress(c.case_id, i, total, "case-done", message=why, record=rec))
        elif not to_run:
            rec = _finish_record(_Job(i, c, cdir, [], plan, prev), Status.SKIPPED, "all requested stages done before",
                                 prev.ranks if prev is not None else ranks, options)
            records[c.case_id] = rec
            emit(Progress(c.case_id, i, total, "skipped", message="done before; use --force to run again", record=rec))
        else:
            pending.append(_Job(i, c, cdir, to_run, plan, prev))
    return pending


class _Run:
    """The scheduling loop of one :func:`run_sweep` call and what it records."""

    def __init__(self, root: Path, manifest, total: int, ranks: int, options: RunOptions, emit, env: dict[str, str],
                 host: str, pid: int, records: dict[str, CaseRunRecord]):
        self.root, self.manifest, self.total, self.ranks = root, manifest, total, ranks
        self.options, self.emit, self.env, self.host, self.pid = options, emit, env, host, pid
        self.records = records
        self.running: list[_Job] = []

    def loop(self, pending: list[_Job], jobs: int, stop: StopSignals) -> None:
        """Start cases while fewer than ``jobs`` run, follow them to the end;
        on a stop signal (or Ctrl-C) stop them and raise SweepInterrupted."""
        try:
            while (pending or self.running) and not stop.requested:
                while pending and len(self.running) < jobs and not stop.requested:
                    job = self.next_ready(pending)
                    if job is None:
                        break  # every waiting case needs a running one to finish first
                    pending.remove(job)
                    job.t0 = time.monotonic()
                    job.started_utc = _utc()
                    self.running.append(job)  # before starting: a stop must find its process
                    self.emit(Progress(job.rec.case_id, job.index, self.total, "case-start",
                                       message=" ".join(job.to_run)))
                    self.start_stage(job, summary=True)
                time.sleep(self.options.poll)
                if stop.requested:  # what ended meanwhile may have ended by the same signal
                    break
                now = time.monotonic()
                for job in list(self.running):
                    if job.proc is None:
                        continue
                    rc = _poll(job)
                    if rc is None:
                        if (job.stage == "solve" and job.rec.stop_rule == "settled" and job.stop is None
                                and now - job.last_settle_check >= self.options.settle_check):
                            job.last_settle_check = now
                            _check_settled(job, self.options)
                        if now - job.last_beat >= self.options.heartbeat:
                            job.last_beat = now
                            self.emit(Progress(job.rec.case_id, job.index, self.total, "running", job.stage,
                                               now - job.t0, now - job.stage_t0))
                        continue
                    self.stage_ended(job, rc, now, stop)
        except KeyboardInterrupt:  # only outside the main thread, where no handler is installed
            stop.note_keyboard_interrupt()
        if stop.requested:
            self.interrupt(stop)

    def next_ready(self, pending: list[_Job]) -> _Job | None:
        """The first pending job whose owners and sources of this run have
        finished the stages it needs (None: all wait; with nothing running,
        the first job, which then falls back to meshing itself or a cold start)."""
        waiting = {j.rec.case_id: j for j in pending}
        active = {j.rec.case_id: j for j in self.running}

        def settled(cid: str, stage: str) -> bool:
            if cid in waiting:
                return False
            j = active.get(cid)
            if j is None:
                return True
            busy = j.stage == stage and stage not in j.results
            return not busy and stage not in j.to_run

        for job in pending:
            if all(settled(cid, st) for cid, st in job.deps):
                return job
        return pending[0] if not self.running else None

    def start_stage(self, job: _Job, summary: bool = False) -> None:
        """Mark the case ``running`` on disk (record, and the summary when
        ``summary``), then start its next stage (a shared mesh is linked
        here, at once, and the next stage started)."""
        if job.to_run[0] == "mesh" and job.mesh_owner is not None and self.share_mesh(job):
            if not job.to_run:
                rec = _finish_record(job, Status.OK, "", self.ranks, self.options)
                self.running.remove(job)
                self.finish(job, rec)
                self.emit(Progress(job.rec.case_id, job.index, self.total, "case-done", None, rec.wall_time, 0.0,
                                   rec.message, rec))
                return
        stage = job.to_run[0]
        prelude = self.initial_field(job) if stage == "solve" else None
        rec = self.running_record(job, stage)
        self.records[job.rec.case_id] = rec
        _write_record(job.dir, rec)
        if summary:
            _write_summary(self.root, self.manifest, self.records, self.ranks)
        _start_stage(job, self.env, self.emit, self.total, prelude)

    def initial_field(self, job: _Job) -> list[str] | None:
        """Decide the initial field of ``job``'s solve (:mod:`caseprep.run.warmstart`),
        note it in ``job.initial_field``; the command that prepares it (None: none needed)."""
        wants = (job.rec.warm_start == "nearest" or self.options.warm_from is not None) and not self.options.cold
        if not wants:
            choice = warmstart.InitialChoice("uniform")
        elif job.source is None:
            choice = warmstart.choose(job.rec, None, None, None, (), False,
                                      "no case of the same variant and mesh level solved before it (it is a root "
                                      "of the run plan)")
        else:
            src = self.manifest.case(job.source)
            sdir = self.manifest.case_dir(src)
            solved = (sdir / "logs" / "solve.done").is_file()
            flags = summarize_logs(sdir, ["mesh", "solve"], self.options, src)["flags"] if solved else ()
            choice = warmstart.choose(job.rec, src, sdir, job.distance, flags, solved)
        job.initial_field = choice.to_record()
        job.stop = None
        for stale in (initial_fields.RESULT_NAME, Path(STOP_FILE).name):
            with contextlib.suppress(FileNotFoundError):
                (job.dir / "logs" / stale).unlink()
        return choice.command(job.dir)

    def share_mesh(self, job: _Job) -> bool:
        """Give ``job`` its owner's finished mesh instead of meshing (True),
        or record why it meshes itself (False)."""
        owner = job.mesh_owner
        odir = self.manifest.case_dir(self.manifest.case(owner))
        rec = self.records.get(owner)
        why = None
        if rec is not None and rec.status == Status.MESH_FAILED:
            why = f"the mesh of case {owner} failed"
        why = why or reuse.mesh_ready(odir)
        if why is not None:
            why = why if why.startswith("the mesh") else f"case {owner}: {why}"
            job.mesh_source = {"owner": owner, "shared": False, "why": f"{why}; meshed itself"}
            return False
        case = job.rec.case_id
        t0, c0 = time.monotonic(), time.process_time()
        self.emit(Progress(case, job.index, self.total, "stage-start", "mesh", t0 - job.t0,
                           message=f"mesh of {owner}"))
        try:
            for later in STAGES:
                (job.dir / "logs").mkdir(exist_ok=True)
                with contextlib.suppress(FileNotFoundError):
                    (job.dir / "logs" / f"{later}.done").unlink()
                if job.plan.get(later) == "done-before":
                    job.plan[later] = "not-run"
            reuse.clear_results(job.dir)
            share = reuse.share_mesh(odir, job.dir)
            (job.dir / "logs" / "mesh.done").touch()
        except OSError as exc:
            job.mesh_source = {"owner": owner, "shared": False, "why": f"linking its mesh failed ({exc}); meshed itself"}
            return False
        job.to_run.pop(0)
        now = time.monotonic()
        job.results["mesh"] = _stage_run("mesh", "ok", now - t0, 0, self.ranks, round(time.process_time() - c0, 3))
        job.mesh_source = {"owner": owner, "shared": True, "how": share.how, "files": share.files,
                           "bytes": share.bytes}
        self.emit(Progress(case, job.index, self.total, "stage-done", "mesh", now - job.t0, now - t0,
                           message=f"mesh of {owner} ({share.how})"))
        return True

    def running_record(self, job: _Job, stage: str) -> CaseRunRecord:
        """The record while ``stage`` runs: no result of the stages being redone."""
        stages = []
        for s in STAGES:
            if s in job.results:
                stages.append(job.results[s])
            elif s == stage:
                stages.append(StageRun(s, "running"))
            elif job.plan.get(s) == "done-before" and STAGES.index(s) < STAGES.index(stage):
                stages.append(_done_before(job, s))
            else:
                stages.append(StageRun(s, "not-run"))
        return CaseRunRecord(case_id=job.rec.case_id, folder=job.rec.folder, status=Status.RUNNING,
                             message=f"{stage} running on {self.host} (runner pid {self.pid})", ranks=self.ranks,
                             stages=tuple(stages), started_utc=job.started_utc, host=self.host, pid=self.pid)

    def stage_ended(self, job: _Job, rc: int, now: float, stop: StopSignals) -> None:
        job.out.close()
        job.out = None
        stage = job.stage
        dt = now - job.stage_t0
        marker = job.dir / "logs" / f"{stage}.done"
        case, idx, total = job.rec.case_id, job.index, self.total
        if stage == "solve":
            _read_initial_result(job)
        if rc == 0 and marker.exists():
            job.results[stage] = _stage_run(stage, "ok", dt, rc, self.ranks, job.cpu)
            job.proc = None
            self.emit(Progress(case, idx, total, "stage-done", stage, now - job.t0, dt))
            if job.to_run:
                if not stop.requested:
                    self.start_stage(job)
                return  # on a stop, recorded as interrupted before its next stage
            rec = _finish_record(job, Status.OK, "", self.ranks, self.options)
        else:
            if not stop.requested and _killed_by_signal(rc):
                # a scheduler signals every process of the job at once: the
                # case's processes may end before our own handler has run
                _await_stop(stop, STOP_SIGNAL_WAIT)
            if stop.requested:
                return  # ended by the stop signal: recorded interrupted, not failed
            job.results[stage] = _stage_run(stage, "failed", dt, rc, self.ranks, job.cpu)
            tool, log = _failing_tool(job.dir, stage, job.stage_wall0)
            out_log = job.dir / "logs" / f"underfloor-{stage}.out"
            if rc == 0:
                why = f"run.sh {stage} exited 0 but did not leave logs/{stage}.done"
            else:
                err = sl.fatal_error(_read(log) or "") if log else None
                why = f"{tool or 'run.sh'} failed (exit {rc})" + (f": {err}" if err else "")
            tail = _tail(log, self.options.tail_lines) if log else ""
            out_tail = _tail(out_log, 8)
            if out_tail:
                tail = (tail + "\n--- run.sh output ---\n" if tail else "") + out_tail
            self.emit(Progress(case, idx, total, "stage-failed", stage, now - job.t0, dt, why))
            rec = _finish_record(job, FAILED_STATUS[stage], why, self.ranks, self.options, failed_tool=tool,
                                 log_tail=tail)
        self.running.remove(job)
        self.finish(job, rec)
        self.emit(Progress(case, idx, total, "case-done", None, rec.wall_time, 0.0, rec.message, rec))

    def finish(self, job: _Job, rec: CaseRunRecord, summary: bool = True) -> None:
        rec = replace(rec, host=self.host, pid=self.pid)
        self.records[job.rec.case_id] = rec
        _write_record(job.dir, rec)
        if summary:
            _write_summary(self.root, self.manifest, self.records, self.ranks)

    def interrupt(self, stop: StopSignals) -> None:
        """Stop the running cases, record each as ``interrupted``, write the
        summary, raise :class:`SweepInterrupted`."""
        _stop(self.running, self.options.kill_grace, stop)
        now = time.monotonic()
        why = f"stopped by {signal_name(stop.signum)}"
        for job in self.running:
            if job.stage is None:
                continue
            if job.stage in job.results:  # its last stage finished; the next one was not started
                nxt = job.to_run[0] if job.to_run else "the next stage"
                msg = f"{why} before {nxt}"
            else:
                job.results[job.stage] = _stage_run(job.stage, "interrupted", now - job.stage_t0, None, self.ranks,
                                                    job.cpu)
                msg = f"{why} during {job.stage}"
            rec = _finish_record(job, Status.INTERRUPTED, msg, self.ranks, self.options)
            self.finish(job, rec, summary=False)
            self.emit(Progress(job.rec.case_id, job.index, self.total, "interrupted", job.stage, now - job.t0,
                               message=msg))
        _write_summary(self.root, self.manifest, self.records, self.ranks)
        order = [c.case_id for c in self.manifest.cases]
        raise SweepInterrupted([self.records[c] for c in order if c in self.records], stop.signum)


def _start_stage(job: _Job, env: dict[str, str], emit, total: int, prelude: list[str] | None = None) -> None:
    stage = job.to_run.pop(0)
    dfd = open_folder(job.dir, ["logs"])  # no link followed below the case folder
    try:
        # This stage's results make the later stages' results stale.
        for later in STAGES[STAGES.index(stage):]:
            try:
                os.unlink(f"{later}.done", dir_fd=dfd)
            except FileNotFoundError:
                pass
            if job.plan.get(later) == "done-before":
                job.plan[later] = "not-run"
        fd = os.open(f"underfloor-{stage}.out", os.O_WRONLY | os.O_CREAT | os.O_TRUNC | os.O_NOFOLLOW, 0o644, dir_fd=dfd)
    finally:
        os.close(dfd)
    job.stage = stage
    job.cpu = None
    job.stage_t0 = time.monotonic()
    job.stage_wall0 = time.time()
    job.last_beat = job.stage_t0
    job.out = os.fdopen(fd, "w")
    cmd = [str(job.dir / "run.sh"), stage]
    if prelude:  # the initial field is prepared first, as part of the stage (its time and CPU count there)
        cmd = ["bash", "-c", 'set -e; "$@"; exec ./run.sh ' + stage, "initial-field", *prelude]
    job.proc = subprocess.Popen(cmd, cwd=job.dir, env=env, stdout=job.out,
                                stderr=subprocess.STDOUT, stdin=subprocess.DEVNULL, start_new_session=True)
    emit(Progress(job.rec.case_id, job.index, total, "stage-start", stage, job.stage_t0 - job.t0))


def _check_settled(job: _Job, options: RunOptions) -> None:
    """The stop rule ``settled``: when the running solve counts as converged
    with its force monitor settled (:func:`caseprep.contract.convergence.judge_stop`),
    create the stop file the solver watches; it then writes its fields and ends."""
    text = _read(job.dir / "logs" / "simpleFoam.log")
    if not text:
        return
    log = sl.parse_solver(text)
    if log.end_reason != "incomplete":
        return  # it is ending by itself
    n = log.iterations
    if n < options.convergence.stop_min_iterations:
        return
    settling = judge_case_monitor(job.dir, stop_options(options.convergence), window=stop_window(n, options.convergence),
                                  record=job.rec)
    stop, why = judge_stop(log.residuals, log.final_residuals, settling, n, options.convergence)
    if stop:
        (job.dir / STOP_FILE).touch()
        job.stop = {"at_iteration": log.iterations, "reason": why}


def _read_initial_result(job: _Job) -> None:
    """What the initial-field preparation did (logs/initialField.json),
    into ``job.initial_field``: a warm start that fell back says why."""
    if job.initial_field is None or job.initial_field.get("kind") == "uniform":
        return
    p = job.dir / "logs" / initial_fields.RESULT_NAME
    try:
        done = json.loads(p.read_text()) if p.is_file() and p.stat().st_size < 65536 else None
    except (OSError, ValueError):
        done = None
    if not isinstance(done, dict) or done.get("kind") not in initial_fields.KINDS:
        job.initial_field = {**job.initial_field, "kind": "unknown",
                             "why": f"no readable logs/{initial_fields.RESULT_NAME}: the preparation did not finish"}
        return
    job.initial_field = {**job.initial_field, "kind": done["kind"]}
    if done.get("why"):
        job.initial_field["why"] = str(done["why"])[:500]
    if done.get("source_time"):
        job.initial_field["source_time"] = str(done["source_time"])[:32]


def _poll(job: _Job) -> int | None:
    """The exit code of the job's stage process (None while it runs); on its
    end also its CPU time: user + system time of ``run.sh`` and of every
    process it waited for (the tools, mpirun and through it the ranks), from
    the kernel's resource usage of the reaped process."""
    proc = job.proc
    if proc.returncode is not None:
        return proc.returncode
    try:
        pid, status, usage = os.wait4(proc.pid, os.WNOHANG)
    except ChildProcessError:  # reaped elsewhere: no usage figures
        return proc.poll()
    if pid == 0:
        return None
    proc.returncode = os.waitstatus_to_exitcode(status)
    job.cpu = round(usage.ru_utime + usage.ru_stime, 3)
    return proc.returncode


def _stage_run(stage: str, status: str, wall: float, rc: int | None, cores: int, cpu: float | None) -> StageRun:
    """A stage's entry with its cost (:mod:`caseprep.contract.cost`)."""
    wall = round(wall, 3)
    return StageRun(stage, status, wall, rc, cores=cores, core_seconds=stage_core_seconds(wall, cores),
                    cpu_seconds=cpu)


def _done_before(job: _Job, stage: str) -> StageRun:
    """The entry of a stage done in an earlier run: its figures as recorded then."""
    prev = job.previous.stage_run(stage) if job.previous is not None else None
    if prev is None:
        return StageRun(stage, "done-before")
    return replace(prev, status="done-before", returncode=None)


#: Seconds a stage that ended by a stop signal waits for the runner's own
#: signal before it counts as failed.
STOP_SIGNAL_WAIT = 2.0
_STOP_SIGNALS = (signal.SIGTERM, signal.SIGINT, signal.SIGKILL, signal.SIGHUP)


def _killed_by_signal(rc: int | None) -> bool:
    """Whether an exit status says "ended by a stop signal": -N from Python
    for a direct child, 128 + N from a shell whose child was."""
    if rc is None:
        return False
    return (rc < 0 and -rc in _STOP_SIGNALS) or (rc > 128 and rc - 128 in _STOP_SIGNALS)


def _await_stop(stop: StopSignals, seconds: float) -> None:
    deadline = time.monotonic() + seconds
    while not stop.requested and time.monotonic() < deadline:
        time.sleep(0.05)


def _stop(running: list[_Job], grace: float, stop: StopSignals | None = None) -> None:
    """SIGTERM the running cases' process groups (run.sh, the tools, the MPI
    ranks), wait until every process of them has ended, SIGKILL what is left
    after ``grace`` s (at once on a second stop signal)."""
    live = [j for j in running if j.proc is not None and _group_alive(j.proc)]
    for job in live:
        _signal_group(job.proc, signal.SIGTERM)
    seen = stop.count if stop is not None else 0
    deadline = time.monotonic() + grace
    try:
        while live and time.monotonic() < deadline and (stop is None or stop.count == seen):
            time.sleep(0.05)
            live = [j for j in live if _group_alive(j.proc)]
    except KeyboardInterrupt:  # a second Ctrl-C outside the main thread: no more grace
        pass
    for job in live:
        _signal_group(job.proc, signal.SIGKILL)
    for job in running:
        if job.proc is not None:
            job.proc.wait()
        if job.out:
            job.out.close()
            job.out = None


def _group_alive(proc: subprocess.Popen) -> bool:
    """Whether any process of the group that ``proc`` leads still exists
    (the leader is reaped first, so a finished leader does not count)."""
    proc.poll()
    try:
        os.killpg(proc.pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def _signal_group(proc: subprocess.Popen, sig: int) -> None:
    try:
        os.killpg(proc.pid, sig)
    except (ProcessLookupError, PermissionError):
        pass


def _finish_record(job: _Job, status: str, message: str, ranks: int, options: RunOptions,
                   failed_tool: str | None = None, log_tail: str = "") -> CaseRunRecord:
    stages = []
    for s in STAGES:
        if s in job.results:
            stages.append(job.results[s])
        elif job.plan.get(s) == "done-before":
            stages.append(_done_before(job, s))
        else:
            stages.append(StageRun(s, "not-run"))
    valid = [s.stage for s in stages if s.status in ("ok", "failed", "done-before", "interrupted")]
    info = summarize_logs(job.dir, valid, options, job.rec)
    flags = list(info.pop("flags"))
    if status == "mesh-failed":
        flags.insert(0, "mesh-failed")
    if status == "solve-failed" and "solver-crashed" not in flags:
        flags.append(Flag.SOLVER_CRASHED)
    if status in ("solve-failed", "interrupted") or "solve" not in [s.stage for s in stages if s.status in ("ok", "done-before")]:
        flags = [f for f in flags if f != "not-converged"]
    wall = sum(s.wall_time or 0.0 for s in stages if s.status in ("ok", "failed", "interrupted"))
    core = [s.core_seconds for s in stages if s.core_seconds is not None]
    cpu = [s.cpu_seconds for s in stages if s.cpu_seconds is not None]
    return CaseRunRecord(
        case_id=job.rec.case_id, folder=job.rec.folder, status=status, message=message, ranks=ranks,
        stages=tuple(stages), wall_time=round(wall, 3), core_seconds=round(sum(core), 3) if core else None,
        cpu_seconds=round(sum(cpu), 3) if cpu else None, tool_times=_tool_times(job.dir, valid),
        started_utc=job.started_utc, finished_utc=_utc(),
        flags=tuple(dict.fromkeys(flags)), failed_tool=failed_tool, log_tail=log_tail,
        mesh_source=job.mesh_source if job.mesh_source is not None else _previous(job, "mesh_source", "mesh"),
        settled_stop=job.stop if job.stop is not None else _previous(job, "settled_stop", "solve"),
        initial_field=job.initial_field if job.initial_field is not None else _previous(job, "initial_field", "solve"),
        **info,
    )


def _previous(job: _Job, name: str, stage: str):
    """A fact of the previous record that still holds: the stage that made
    it was done before and not run again."""
    if job.previous is None or job.plan.get(stage) != "done-before" or stage in job.results:
        return None
    return getattr(job.previous, name, None)


def _tool_times(case_dir: Path, valid_stages: Sequence[str]) -> dict[str, dict[str, float]]:
    """Per tool of ``valid_stages`` whose log prints them, its last CPU and clock times (s)."""
    out = {}
    for stage in valid_stages:
        for tool in STAGE_TOOLS.get(stage, ()):
            text = _read(case_dir / "logs" / f"{tool}.log")
            t = sl.parse_times(text) if text is not None else None
            if t is not None:
                out[tool] = t
    return out


def _write_record(case_dir: Path, rec: CaseRunRecord) -> None:
    # the case folder was checked to lie inside the sweep; nothing below it is followed
    write_json_atomic(case_dir / RECORD_NAME, rec.to_dict(), root=case_dir)


def _write_summary(root: Path, manifest, records: dict[str, CaseRunRecord], ranks: int) -> None:
    """``run_summary.json``: this run's records, and the last record of every
    other case of the manifest (status ``not-run`` when it never ran)."""
    rows = []
    for c in manifest.cases:
        rec = records.get(c.case_id) or read_case_record(manifest.case_dir(c))
        if rec is None:
            rec = CaseRunRecord(case_id=c.case_id, folder=c.folder, status=Status.NOT_RUN)
        rows.append(rec.to_dict())
    counts: dict[str, int] = {}
    for r in rows:
        counts[r["status"]] = counts.get(r["status"], 0) + 1
    cost = cost_summary(rows, {c.case_id: c.variant for c in manifest.cases})
    write_json_atomic(root / SUMMARY_NAME, root=root, obj={
        "schema": SUMMARY_SCHEMA, "schema_version": 1, "written_utc": _utc(), "ranks": ranks,
        "counts": counts, "flag_meanings": {f: f.meaning for f in RUN_FLAGS}, "cost": cost, "cases": rows,
    })


def sweep_cost(sweep_dir: str | os.PathLike, records: Sequence[CaseRunRecord]) -> dict[str, Any]:
    """The cost block (:func:`caseprep.contract.cost.cost_summary`) of the
    manifest's cases: ``records`` where given, else each case's last record."""
    root = Path(sweep_dir)
    manifest = read_manifest(root)
    mine = {r.case_id: r for r in records}
    rows = []
    for c in manifest.cases:
        rec = mine.get(c.case_id) or read_case_record(manifest.case_dir(c))
        if rec is not None:
            rows.append(rec.to_dict())
    return cost_summary(rows, {c.case_id: c.variant for c in manifest.cases})


def format_cost(cost: dict[str, Any]) -> str:
    """The cost block as text lines (per variant, then the total)."""
    return "core time: " + "\n           ".join(cost_lines(cost))


def summary_row(rec: CaseRunRecord) -> dict[str, str]:
    """One table row of text cells for ``rec`` (see :func:`format_summary_table`)."""
    worst = max(rec.final_residuals.values()) if rec.final_residuals else None
    layers = "-" if rec.layer_coverage is None else f"{100 * rec.layer_coverage:.0f}%"
    mesh = {True: "OK", False: f"FAILED({rec.failed_checks})", None: "-"}[rec.mesh_ok]
    status = rec.status if rec.status != "skipped" else f"{effective_status(rec)} (done before)"
    return {
        "case": rec.case_id,
        "status": status,
        "cells": "-" if rec.cells is None else f"{rec.cells:,}",
        "check": mesh,
        "layers": layers,
        "iter": "-" if rec.iterations is None else str(rec.iterations),
        "end": ("settled" if rec.settled_stop and rec.end_reason == "end-time" else rec.end_reason) or "-",
        "max resid": "-" if worst is None else f"{worst:.1e}",
        "mesh t": format_duration(rec.stage_time("mesh")),
        "solve t": format_duration(rec.stage_time("solve")),
        "core-s": "-" if rec.core_seconds is None else f"{rec.core_seconds:.0f}",
        "flags": ", ".join(rec.flags) or "-",
    }


def format_summary_table(records: Sequence[CaseRunRecord]) -> str:
    """A plain-text table of the records: status, cells, checker verdict,
    layer coverage, iterations, end reason, worst final residual, stage
    times and flags; one line per case."""
    rows = [summary_row(r) for r in records]
    if not rows:
        return "(no cases)"
    cols = list(rows[0])
    width = {c: max(len(c), *(len(r[c]) for r in rows)) for c in cols}
    lines = ["  ".join(c.ljust(width[c]) for c in cols).rstrip(), "  ".join("-" * width[c] for c in cols)]
    lines += ["  ".join(r[c].ljust(width[c]) for c in cols).rstrip() for r in rows]
    return "\n".join(lines)


__all__ = [
    "STAGES", "RunOptions", "Progress", "SweepInterrupted", "run_sweep", "summarize_logs", "missing_solver_binaries",
    "INSTALL_HINT", "format_summary_table", "summary_row", "format_duration", "format_cost", "sweep_cost",
]
