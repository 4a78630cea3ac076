"""Post-process a whole sweep: every case's forces, coefficients, balance and
convergence, joined with what the runner recorded, into one results table,
then the mesh study and the analysis of the table (maps, peaks, platform,
ranking: :mod:`postproc.pipelines.analysis`) — all as data
(:class:`SweepAnalysis`, ``results.json``, ``analysis.json``) that the
report then renders.

Inputs: a sweep folder written by ``caseprep write`` (``manifest.json``) and
run by ``caseprep run`` (``<case>/underfloor-run.json``, ``VTK/``).
Outputs (in the sweep folder unless told otherwise, atomic writes):

* ``results/<case_id>.json`` — each case's result: its row, the full
  forces report, the body's y+ statistics per patch, its flow columns and
  flags, with the fingerprint of its inputs (reused while they are
  unchanged, :mod:`postproc.pipelines.caseresults`);
* ``shards/<I>-of-<N>.json`` — the state of each run over a shard
  (:mod:`postproc.pipelines.shards`);
* ``results.csv`` and ``results.json`` — one row per case (``results.json``
  also holds the flags' meanings, the notes and the mesh study);
* ``analysis.json`` — the analysis of the results table
  (:mod:`postproc.pipelines.analysis`, the same as ``postproc analyse``):
  maps with error bars, peak and stall, the platform, the honest ranking.

The work is split: one case (:mod:`postproc.pipelines.sweep_case`), the
rows (:mod:`postproc.pipelines.sweep_rows`), the tables and the report data
(:mod:`postproc.pipelines.sweep_tables`); this module runs them over the
cases — in worker processes, per shard, reusing stored results — and
merges shards.

Besides the forces, each case with a volume result gets its flow columns
(:mod:`postproc.pipelines.flow_columns`: diffuser recovery, main vortex pair,
ramp separation, floor suction — the numbers ``postproc flow`` gives), and
one case per variant (the same operating point for all) its picture scene.
The HTML report (``report.html``, :mod:`postproc.report`) is rendered from
the returned :class:`SweepAnalysis` (its ``report_data``).

Coefficients are in the wind axes of caseprep.contract.frames (C_L positive up,
downforce = −C_L; C_D along the relative wind; C_S along +y_W), on the
reference area and the dynamic pressure of the resultant air speed recorded
in the manifest. A case is **flagged** (never compared) when the runner
flagged it, when it did not finish, when its forces could not be computed,
or when the runtime force monitor is still drifting at the end of the run.
The monitor is judged by the one convergence rule
(:mod:`caseprep.contract.convergence`) over the settling window (the last
30 % of the samples, at least 20) in coefficient counts, as the runner
judges it: each coefficient and the balance against its own tolerance; the
reported coefficients are the window means, with their standard deviations
as ``u_*``; ``diverging`` gives the ``forces-drifting`` flag.
"""
from __future__ import annotations

import contextlib
import datetime as _dt
import math
import os
import time
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any, Callable

from caseprep.contract.errors import UserError
from caseprep.contract.locking import refuse_interrupted, sweep_lock
from caseprep.contract.manifest import CaseRecord, Manifest, read_manifest
from caseprep.contract.records import Flag, read_case_record
from caseprep.contract.signals import StopRequested
from postproc.io.analysis_config import read_analysis_config
from postproc.pipelines.analysis import default_config_path, resolve_options
from postproc.pipelines.flow_columns import FlowOptions
from postproc.pipelines.caseresults import Fingerprint, fingerprint, read_case_result, write_case_result
from postproc.pipelines.report_data import choose_picture_cases
from postproc.pipelines.shards import ALL, Shard, manifest_digest, read_shard_states, run_cases, write_shard_state
from postproc.pipelines.sweep_case import missing_outcome, process_case
from postproc.pipelines.sweep_rows import CaseOutcome, CaseResult
from postproc.pipelines.sweep_tables import (SweepAnalysis, SweepOptions, analyse_results, complete_report_options,
                                             inputs_digest, refuse_existing_tables, table_paths, unchanged_outcomes,
                                             write_tables)

__all__ = ["SweepOptions", "SweepAnalysis", "CaseProgress", "ShardRun", "MergeGap", "analyse_results",
           "postprocess_shard", "postprocess_sweep", "merge_results", "process_case"]


def _planned_rows(manifest: Manifest) -> list[CaseResult]:
    """The sweep's points with the runner's flags, before any forces (to
    choose the pictured cases while the cases are read the first time)."""
    rows = []
    for c in manifest.cases:
        rec = read_case_record(manifest.case_dir(c))
        p = c.params
        rows.append(CaseResult(case_id=c.case_id, variant=c.variant,
                               ride_height_front=float(p.get("ride_height_front", math.nan)),
                               ride_height_rear=float(p.get("ride_height_rear", math.nan)),
                               pitch_deg=float(p.get("pitch_deg", 0.0)), yaw_deg=float(p.get("yaw_deg", 0.0)),
                               cl=0.0, cd=0.0, mesh_level=int(p.get("mesh_level", 0)),
                               flags=tuple(rec.flags) if rec is not None else (Flag.NOT_RUN,)))
    return rows


@dataclass(frozen=True)
class CaseProgress:
    """One case done: ``done`` of ``total`` in this run, the outcome,
    whether it was ``reused`` (inputs unchanged) and the run's ``elapsed`` s."""

    done: int
    total: int
    outcome: CaseOutcome
    reused: bool
    elapsed: float


@dataclass(frozen=True)
class ShardRun:
    """What one run over a shard did: the outcomes by case id (manifest
    order), which cases were computed and which reused, and why each
    computed case could not be reused (``missing``, ``stale: …``, ``corrupt: …``)."""

    shard: Shard
    outcomes: dict[str, CaseOutcome]
    computed: tuple[str, ...]
    reused: tuple[str, ...]
    reasons: dict[str, str]
    state_file: Path


@dataclass(frozen=True)
class MergeGap:
    """Cases without a usable result at a merge: ``cases`` {id: why},
    ``shards`` the shards they belong to (when the split is known)."""

    cases: dict[str, str]
    shards: tuple[Shard, ...]

    def message(self) -> str:
        what = ", ".join(f"{k} ({v})" for k, v in list(self.cases.items())[:6]) + (
            " …" if len(self.cases) > 6 else "")
        head = (f"shard(s) {', '.join(map(str, self.shards))} missing or unfinished: " if self.shards else "")
        return f"{head}{len(self.cases)} case(s) without a post-processing result: {what}"


def _out_folder(manifest: Manifest, sweep_dir, options: SweepOptions) -> Path:
    return Path(options.out_dir) if options.out_dir is not None else Path(manifest.root or sweep_dir)


def _check_jobs(options: SweepOptions) -> None:
    if options.jobs < 1:
        raise UserError(expected="a number of worker processes ≥ 1", got=options.jobs, key="-j",
                        fix="use -j 1 or more")


_WORKER: dict[str, Any] = {}


def _worker_setup(manifest: Manifest, flow: FlowOptions, scenes: frozenset[str]) -> None:
    _WORKER.update(manifest=manifest, flow=flow, scenes=scenes)


def _worker_case(case_id: str) -> tuple[dict[str, Any], Any]:
    """Post-process one case in a worker: its JSON form and its picture scene
    (None unless it is a pictured case) go back to the parent."""
    m: Manifest = _WORKER["manifest"]
    o = process_case(m, m.case(case_id), replace(_WORKER["flow"], scene=case_id in _WORKER["scenes"]))
    return o.to_json(), o.scene


def postprocess_shard(sweep_dir: str | os.PathLike, options: SweepOptions = SweepOptions(),
                      progress: Callable[[CaseProgress], None] | None = None) -> ShardRun:
    """Post-process the cases of ``options.shard`` (all by default): reuse
    each case's stored result while its inputs are unchanged
    (:mod:`postproc.pipelines.caseresults`), compute the others in
    ``options.jobs`` worker processes, write each result atomically as it
    comes, and the shard's state (:mod:`postproc.pipelines.shards`) when it
    starts and ends. Writes no tables.

    SIGTERM/SIGINT: the workers are stopped, the shard state records the
    unfinished cases ``interrupted``, :class:`StopRequested` propagates.
    """
    manifest = read_manifest(sweep_dir)  # not a sweep: refused before anything is created
    _check_jobs(options)
    out = _out_folder(manifest, sweep_dir, options)
    # shards of one sweep run side by side (each its own cases): a shared hold;
    # a whole-sweep command or a write holds the folder alone
    with _locks(manifest, sweep_dir, out, "postproc sweep --shard", shared=True, wait=None):
        return _process_shard(read_manifest(sweep_dir), out, options, progress, frozenset())


@contextlib.contextmanager
def _locks(manifest: Manifest, sweep_dir, out: Path, command: str, shared: bool, wait: float | None):
    """The sweep folder's lock (and the output folder's, when it is another
    one), then the refusal of a folder an interrupted write left behind."""
    root = Path(manifest.root or sweep_dir)
    with contextlib.ExitStack() as locks:
        locks.enter_context(sweep_lock(root, command, wait=wait, shared=shared))
        if out.resolve() != root.resolve():
            locks.enter_context(sweep_lock(out, command, wait=wait, shared=shared))
        refuse_interrupted(root, command)
        yield


def _process_shard(manifest: Manifest, out: Path, options: SweepOptions,
                   progress: Callable[[CaseProgress], None] | None, scenes: frozenset[str]) -> ShardRun:
    """The cases of ``options.shard``; ``scenes``: case ids whose picture
    scene is built while the case is read (reused cases get none)."""
    shard = options.shard
    flow = options.flow or FlowOptions()
    cases = shard.select(list(manifest.cases))
    t0 = time.monotonic()
    started = _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")
    state = {c.case_id: "pending" for c in cases}
    write_shard_state(out, manifest, shard, "running", state, started)
    outcomes: dict[str, CaseOutcome] = {}
    fps: dict[str, Fingerprint] = {}
    reasons: dict[str, str] = {}
    todo: list[CaseRecord] = []
    done = 0

    def report(o: CaseOutcome, reused: bool) -> None:
        nonlocal done
        done += 1
        if progress is not None:
            progress(CaseProgress(done, len(cases), o, reused, time.monotonic() - t0))

    for c in cases:
        fp = fingerprint(manifest.case_dir(c), c)
        fps[c.case_id] = fp
        if options.recompute:
            reasons[c.case_id] = "recompute asked"
        else:
            st = read_case_result(out, c.case_id, manifest.study, fp)
            if st.usable:
                try:
                    o = CaseOutcome.from_json(st.payload)
                except (KeyError, TypeError, ValueError) as exc:
                    reasons[c.case_id] = f"corrupt: {exc}"
                else:
                    outcomes[c.case_id] = o
                    state[c.case_id] = "reused"
                    report(o, True)
                    continue
            else:
                reasons[c.case_id] = st.why
        todo.append(c)

    def on_result(k: int, value: tuple[dict[str, Any], Any]) -> None:
        payload, scene = value
        cid = todo[k].case_id
        write_case_result(out, cid, manifest.study, fps[cid], payload)
        o = replace(CaseOutcome.from_json(payload), scene=scene)
        outcomes[cid] = o
        state[cid] = "computed"
        report(o, False)

    try:
        run_cases(_worker_case, [c.case_id for c in todo], options.jobs, on_result,
                  init=_worker_setup, init_args=(manifest, flow, scenes))
    except StopRequested:
        state = {k: ("interrupted" if v == "pending" else v) for k, v in state.items()}
        write_shard_state(out, manifest, shard, "interrupted", state, started)
        raise
    path = write_shard_state(out, manifest, shard, "done", state, started)
    order = [c.case_id for c in cases]
    return ShardRun(shard=shard, outcomes={k: outcomes[k] for k in order}, computed=tuple(c.case_id for c in todo),
                    reused=tuple(k for k in order if state[k] == "reused"),
                    reasons={c.case_id: reasons.get(c.case_id, "") for c in todo}, state_file=path)


def postprocess_sweep(
    sweep_dir: str | os.PathLike,
    options: SweepOptions = SweepOptions(),
    progress: Callable[[CaseProgress], None] | None = None,
    render: Callable[["SweepAnalysis", Path], Any] | None = None,
) -> SweepAnalysis:
    """Post-process every case of a sweep (reusing unchanged per-case
    results, see :func:`postprocess_shard`) and write the tables.

    ``options.out_dir`` defaults to the sweep folder. Existing tables
    (``results.csv``, ``results.json``, the report) are not replaced unless
    ``options.force`` (UserError naming the file, before any case is
    computed); when nothing changed since they were made (every case's
    result stored for its current inputs, the same options: the digest in
    ``results.json``) they are left as they are and the analysis comes back
    with ``up_to_date`` set. ``options.report``
    chooses the pictured operating point and the baseline of the difference
    pictures (a baseline that is not a variant of the sweep is a UserError
    naming the available ones) and whether pictures are wanted.
    ``render(analysis, path)`` writes the report while the tables' lock is
    held (so the three files come from one run). Returns the
    :class:`SweepAnalysis` with the outcomes, the paths (keys ``csv``,
    ``json``, ``cases`` written; ``report`` where the report belongs) and
    ``report_data``, what the report renders. Raises UserError for a
    folder that is not a sweep.
    """
    manifest = read_manifest(sweep_dir)  # not a sweep: refused before anything is created
    out = _out_folder(manifest, sweep_dir, options)
    if options.shard != ALL:
        raise UserError(expected="all cases for the tables", got=f"shard {options.shard}", key="--shard",
                        fix="process shards with postprocess_shard, then merge them")
    _check_jobs(options)
    analysis_cfg = _analysis_settings(manifest, sweep_dir, options)
    with _locks(manifest, sweep_dir, out, "postproc sweep", shared=False, wait=None):
        return _postprocess_locked(read_manifest(sweep_dir), out, options, progress, render, analysis_cfg)


def _analysis_settings(manifest: Manifest, sweep_dir, options: SweepOptions):
    """The settings of analysis.json, checked before anything is created."""
    root = Path(manifest.root or sweep_dir)
    path = (options.analysis_config if options.analysis_config is not None
            else default_config_path(root, manifest.config_file))
    cfg = read_analysis_config(path)
    resolve_options(cfg)
    return cfg


def _postprocess_locked(manifest: Manifest, out: Path, options: SweepOptions, progress, render,
                        analysis_cfg) -> SweepAnalysis:
    """:func:`postprocess_sweep` holding the locks."""
    ropts, _ = complete_report_options(manifest, options.report)
    variants = list(dict.fromkeys(c.variant for c in manifest.cases))
    # the pictured cases, from the plan and the runner's flags (forces may add flags: checked at assembly)
    want_scene = (frozenset(pc.case_id for pc in choose_picture_cases(_planned_rows(manifest), variants, ropts))
                  if ropts.pictures else frozenset())
    digest = inputs_digest(manifest, out, options, ropts, analysis_cfg)
    if not options.recompute:
        same = unchanged_outcomes(manifest, out, digest)
        if same is not None:  # nothing to compute and nothing to rewrite
            title = ropts.title or f"Sweep report — {manifest.study or out.name}"
            return SweepAnalysis(title=title, study=manifest.study, results=tuple(o.result for o in same),
                                 mesh_study=(), outcomes=tuple(same),
                                 paths=table_paths(out), up_to_date=True)
    refuse_existing_tables(out, options.force)
    run = _process_shard(manifest, out, options, progress, want_scene)
    outcomes = [run.outcomes[c.case_id] for c in manifest.cases]
    return write_tables(manifest, out, outcomes, options, [], render, analysis_cfg, digest)


def merge_results(
    sweep_dir: str | os.PathLike,
    options: SweepOptions = SweepOptions(),
    render: Callable[["SweepAnalysis", Path], Any] | None = None,
) -> tuple[SweepAnalysis, MergeGap | None]:
    """Assemble the tables from the stored per-case results (after the
    shards ran): a case without a usable result (missing, stale, corrupt,
    of another study) gets the ``results-missing`` flag and a note, the
    shards holding such cases are named (:class:`MergeGap`), and everything
    else is written. Computes nothing per case but the pictured cases'
    scenes.

    UserError for shard states of another study in the output folder (the
    results folder of a different sweep) or existing tables without
    ``options.force``."""
    manifest = read_manifest(sweep_dir)  # not a sweep: refused before anything is created
    out = _out_folder(manifest, sweep_dir, options)
    analysis_cfg = _analysis_settings(manifest, sweep_dir, options)
    with _locks(manifest, sweep_dir, out, "postproc merge", shared=False, wait=options.wait):
        return _merge_locked(read_manifest(sweep_dir), out, options, render, analysis_cfg)


def _merge_locked(manifest: Manifest, out: Path, options: SweepOptions, render,
                  analysis_cfg) -> tuple[SweepAnalysis, MergeGap | None]:
    """:func:`merge_results` holding the locks."""
    refuse_existing_tables(out, options.force)
    states, notes = read_shard_states(out)
    foreign = [st for st in states if st.study != manifest.study]
    if foreign:
        raise UserError(expected=f"shard states of the study {manifest.study!r} (this sweep)",
                        got=f"study {foreign[0].study!r}", file=str(foreign[0].path), key="study",
                        fix="this output folder holds another sweep's post-processing: merge into another folder "
                            "with -o, or remove its shards/ and results/")
    digest = manifest_digest(manifest)
    current = [st for st in states if st.manifest == digest]
    for st in states:
        if st.manifest != digest:
            notes.append(f"shard state {st.path.name} is from an earlier manifest of this sweep: ignored")
    n = options.expected_shards
    if n is None:
        counts = {st.shard.count for st in current}
        n = counts.pop() if len(counts) == 1 else None
    outcomes, gaps = [], {}
    for c in manifest.cases:
        st = read_case_result(out, c.case_id, manifest.study, fingerprint(manifest.case_dir(c), c))
        o = None
        if st.usable:
            try:
                o = CaseOutcome.from_json(st.payload)
            except (KeyError, TypeError, ValueError) as exc:
                st = replace(st, why=f"corrupt: {exc}")
        if o is None:
            gaps[c.case_id] = st.why
            o = missing_outcome(manifest, c, st.why)
        outcomes.append(o)
    gap = None
    if gaps:
        pos = {c.case_id: k for k, c in enumerate(manifest.cases)}
        shards = sorted({Shard.of_position(pos[cid], n) for cid in gaps} if n else set(),
                        key=lambda sh: sh.index)
        shards += [st.shard for st in current if st.state != "done" and st.shard not in shards
                   and st.shard.count == n]
        gap = MergeGap(cases=gaps, shards=tuple(shards))
        notes.append(gap.message())
    ropts, _ = complete_report_options(manifest, options.report)
    digest = None if gap else inputs_digest(manifest, out, options, ropts, analysis_cfg)
    return write_tables(manifest, out, outcomes, options, notes, render, analysis_cfg, digest), gap
