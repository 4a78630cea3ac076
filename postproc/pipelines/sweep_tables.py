"""The tables of a sweep and what the report shows, from its case
outcomes: ``results.csv`` and ``results.json`` (one row per case, the flags'
meanings, the notes, the mesh study), ``analysis.json`` (the analysis of
that table, as ``postproc analyse``) and the report data
(:mod:`postproc.pipelines.report_data`), written atomically under the
output folder's lock; with the options of a sweep's post-processing
(:class:`SweepOptions`) and what it returns (:class:`SweepAnalysis`). The
tables are left alone when nothing they are made from changed
(:func:`inputs_digest`).
"""
from __future__ import annotations

import json
import os
from dataclasses import asdict, dataclass, field, replace
from pathlib import Path
from typing import Any

from caseprep.contract.atomicio import json_ready, write_json_atomic, write_text_atomic
from caseprep.contract.convergence import settle_window
from caseprep.contract.errors import UserError
from caseprep.contract.manifest import Manifest
from caseprep.contract.monitor import read_monitor
from caseprep.contract.cost import cost_summary
from caseprep.contract.records import flag_meaning, read_case_record
from postproc.io.analysis_config import AnalysisConfig
from postproc.io.isolation import isolated
from postproc.io.results_table import read_sweep_table, rows_table
from postproc.pipelines.analysis import OUTPUT_NAME as ANALYSIS_NAME
from postproc.pipelines.analysis import analyse_table, write_analysis
from postproc.pipelines.flow_columns import FlowOptions, analyse_case_flow
from postproc.pipelines.case_scene import scene_difference
from postproc.pipelines.caseresults import RESULTS_DIR, fingerprint, read_case_result
from postproc.pipelines.report_data import (ReportOptions, assemble, check_baseline, choose_picture_cases,
                                            history_from_monitor)
from postproc.pipelines.shards import ALL, Shard
from postproc.pipelines.sweep_case import ANALYSIS_LIMITS
from postproc.pipelines.sweep_rows import CaseOutcome, CaseResult, mesh_study, rows_csv

REPORT_NAME = "report.html"


TABLE_NAMES = ("results.csv", "results.json", REPORT_NAME, ANALYSIS_NAME)


@dataclass(frozen=True)
class SweepOptions:
    """How to post-process a sweep (the options of ``postproc sweep`` and
    ``postproc merge``).

    ``out_dir``: where the tables, ``results/`` and ``shards/`` go (default the
    sweep folder); ``force``: replace earlier tables; ``jobs``: worker
    processes (each case read and reduced in one of them); ``shard``: the
    part of the cases to process (:class:`Shard`; all by default);
    ``recompute``: ignore reusable per-case results; ``wait``: s a merge
    waits for another command holding the folder before giving up; ``expected_shards``: for a
    merge, the number of shards the cases were split into (names the missing
    ones; default from the shard states); ``report``: the report's options
    (title, baseline and pictured point, pictures or not); ``flow``: the
    per-case flow pass (default :class:`FlowOptions`); ``analysis_config``:
    the settings of ``analysis.json`` (default: ANALYSIS.toml in the sweep
    folder, else the sweep config's [analysis] table, else built-in).
    """

    out_dir: str | os.PathLike | None = None
    force: bool = False
    jobs: int = 1
    shard: Shard = ALL
    recompute: bool = False
    wait: float = 300.0
    expected_shards: int | None = None
    report: ReportOptions = ReportOptions()
    flow: FlowOptions | None = None
    analysis_config: str | os.PathLike | None = None


@dataclass(frozen=True)
class SweepAnalysis:
    """A sweep's results as data, what the report renders: the rows
    (``results``), the mesh study (:func:`mesh_study`), notes on the flags,
    the per-case run and mesh checks, the analysis of the table
    (``analysis``: maps, peaks, platform, ranking; what ``analysis.json``
    holds) and — after :func:`postprocess_sweep` — the per-case outcomes and
    the written paths (keys ``csv``, ``json``, ``analysis``, ``report``,
    ``cases``)."""

    title: str
    study: str
    results: tuple[CaseResult, ...]
    mesh_study: tuple[dict[str, Any], ...]
    notes: tuple[str, ...] = ()
    checks: tuple[dict[str, Any], ...] = ()
    outcomes: tuple[CaseOutcome, ...] = ()
    paths: dict[str, Path] = field(default_factory=dict)
    report_data: Any = field(default=None, repr=False)
    analysis: dict[str, Any] | None = None   # analysis.json (postproc.pipelines.analysis), when written
    #: True when nothing had changed since the tables and the report were
    #: written (they were left as they are; no analysis or report data here)
    up_to_date: bool = False


def analyse_results(results: list[CaseResult], title: str = "Sweep report", study: str = "",
                    notes: list[str] | None = None, checks: list[dict] | None = None,
                    mesh: list[dict] | None = None, cell_sizes: dict[str, float | None] | None = None,
                    analysis_config: AnalysisConfig | None = None) -> SweepAnalysis:
    """The analysis of ``results`` rows held in memory (the same as
    ``postproc analyse`` on their table, with ``analysis_config`` or the
    defaults) and, unless ``mesh`` is given, the mesh study
    (``cell_sizes``: case id → h, m); returns the :class:`SweepAnalysis`
    with its report data (no flow numbers, pictures or histories: those need
    the cases' files, :func:`postprocess_sweep`). A table the analysis
    refuses leaves a note and a report without a standing."""
    study_rows = tuple(mesh_study(results, cell_sizes) if mesh is None else mesh)
    notes = list(notes or ())
    doc = None
    try:
        doc = analyse_table(rows_table([asdict(r) for r in results], "the sweep's results"),
                            analysis_config or AnalysisConfig())
    except UserError as exc:
        notes.append(f"no analysis: {exc}".replace("\n", " "))
    data = assemble(results, title=title, study=study, notes=notes, checks=checks or (),
                    mesh_study=list(study_rows), analysis=doc, options=ReportOptions(pictures=False))
    return SweepAnalysis(title=title, study=study, results=tuple(results), mesh_study=study_rows,
                         notes=tuple(notes), checks=tuple(checks or ()), report_data=data, analysis=doc)


def refuse_existing_tables(out: Path, force: bool) -> None:
    existing = [out / n for n in TABLE_NAMES if (out / n).exists()]
    if existing and not force:
        raise UserError(expected="no earlier results in the output folder", got=", ".join(str(p) for p in existing),
                        fix="pass --force to replace them, or -o to write somewhere else")


def complete_report_options(manifest: Manifest, options: ReportOptions) -> tuple[ReportOptions, str | None]:
    """The report options completed from the config's [report] settings
    (carried by the manifest records) where not given; the checked baseline."""
    variants = list(dict.fromkeys(c.variant for c in manifest.cases))
    cfg = next((dict(c.info["report"]) for c in manifest.cases if isinstance(c.info.get("report"), dict)), {})
    options = replace(
        options,
        baseline=options.baseline if options.baseline is not None else cfg.get("baseline"),
        reference_ride_height=(options.reference_ride_height if options.reference_ride_height is not None
                               else cfg.get("picture_ride_height")),
        reference_yaw_deg=options.reference_yaw_deg if options.reference_yaw_deg is not None else cfg.get("picture_yaw_deg"))
    baseline = check_baseline(options.baseline, variants,
                              "--baseline" if options.baseline is None or "baseline" not in cfg
                              else "report.baseline (config, in the manifest)")
    return options, baseline


def table_paths(out: Path) -> dict[str, Path]:
    return {"csv": out / "results.csv", "json": out / "results.json", "report": out / REPORT_NAME,
            "cases": out / RESULTS_DIR}


def inputs_digest(manifest: Manifest, out: Path, options: SweepOptions, ropts: ReportOptions,
                   analysis_cfg) -> str:
    """SHA-256 of everything the tables and the report are made from: each
    case's fingerprint (:mod:`postproc.pipelines.caseresults`), the report,
    flow and analysis settings, the version."""
    import hashlib

    from caseprep.contract import __version__

    doc = {"cases": [[c.case_id, fingerprint(manifest.case_dir(c), c).digest] for c in manifest.cases],
           "report": asdict(ropts), "flow": asdict(options.flow or FlowOptions()),
           "analysis": repr(analysis_cfg), "version": __version__}
    return "sha256:" + hashlib.sha256(json.dumps(json_ready(doc), sort_keys=True).encode()).hexdigest()


def unchanged_outcomes(manifest: Manifest, out: Path, digest: str) -> list[CaseOutcome] | None:
    """The stored outcomes when the tables and the report exist and were
    made from exactly these inputs (``digest``) with every case's result
    stored and usable; None otherwise."""
    paths = table_paths(out)
    if not all(paths[k].is_file() for k in ("csv", "json", "report")):
        return None
    try:
        if json.loads(paths["json"].read_text(encoding="utf-8")).get("inputs") != digest:
            return None
    except (OSError, ValueError, AttributeError):
        return None
    outcomes = []
    for c in manifest.cases:
        st = read_case_result(out, c.case_id, manifest.study, fingerprint(manifest.case_dir(c), c))
        if not st.usable:
            return None
        try:
            outcomes.append(CaseOutcome.from_json(st.payload))
        except (KeyError, TypeError, ValueError):
            return None
    return outcomes


def with_history(manifest: Manifest, o: CaseOutcome) -> CaseOutcome:
    """The outcome with its force history (read from the case's runtime
    monitor when the outcome came back from a stored result)."""
    if o.history is not None or not (o.report is not None or o.stored_forces):
        return o
    try:
        mon = read_monitor(manifest.case_dir(manifest.case(o.result.case_id)))
    except UserError:
        return o
    n = len(mon.get("Time", ()))
    hist = history_from_monitor(o.result.case_id, mon, settle_window(n), o.convergence or "", bool(o.result.flags))
    return replace(o, history=hist)


def write_tables(manifest: Manifest, out: Path, outcomes: list[CaseOutcome], options: SweepOptions,
              extra_notes: list[str], render, analysis_cfg, digest: str | None = None) -> SweepAnalysis:
    """Tables, analysis and report data from the outcomes; results.csv,
    results.json (with ``digest``, what they were made from, see
    :func:`inputs_digest`) and the report (through ``render``) written
    under the output folder's lock. Builds the pictured cases' scenes not
    built while the cases were read."""
    ropts, baseline = complete_report_options(manifest, options.report)
    flow = options.flow or FlowOptions()
    outcomes = [with_history(manifest, o) for o in outcomes]
    variants = list(dict.fromkeys(c.variant for c in manifest.cases))
    rows = [o.row() for o in outcomes]
    paths = table_paths(out)
    notes = list(extra_notes)
    flags = sorted({f for o in outcomes for f in o.result.flags})
    for f in flags:
        k = sum(f in o.result.flags for o in outcomes)
        notes.append(f"{k} case(s) flagged '{f}': {flag_meaning(f)}")
    check_keys = ("case_id", "status", "cells", "layers", "iterations", "convergence", "yplus_median", "yplus_p95",
                  "yplus_share_in_range", "yplus_range")
    checks = [{k: r.get(k) for k in check_keys} for r in rows]
    title = ropts.title or f"Sweep report — {manifest.study or out.name}"
    results = [o.result for o in outcomes]
    study_rows = mesh_study(results, {o.result.case_id: o.cell_size for o in outcomes})
    # the pictured cases, now with every flag known; a scene not built while the case was read is built now
    skipped: list[tuple[str, str]] = []
    pcs = choose_picture_cases(results, variants, ropts) if ropts.pictures else []
    by_id = {o.result.case_id: o for o in outcomes}
    scenes = []
    for pc in pcs:
        o = by_id[pc.case_id]
        sc = o.scene
        tried = next((n for n in o.notes if n.startswith(("picture: ", "flow: "))), None)
        if sc is None and tried:
            skipped.append((pc.case_id, tried.split(": ", 1)[1]))
        elif sc is None:
            try:
                cdir = manifest.case_dir(manifest.case(pc.case_id))
                cf = isolated(analyse_case_flow, cdir, replace(flow, scene=True), label=pc.case_id,
                              what=str(cdir / "VTK"), **ANALYSIS_LIMITS)
                sc = cf.scene
                if sc is None:
                    skipped.append((pc.case_id, cf.scene_error or "no picture scene"))
            except UserError as exc:
                skipped.append((pc.case_id, str(exc).splitlines()[0]))
        if sc is not None:
            scenes.append(sc)
    if ropts.pictures:
        for v in variants:
            if v not in {pc.variant for pc in pcs}:
                skipped.append((v, "no usable case with a volume result to picture"))
    base = next((sc for sc in scenes if sc.variant == baseline), None)
    scenes = [scene_difference(sc, base) for sc in scenes]
    flow_rows = {o.result.case_id: {"variant": o.result.variant, **o.flow} for o in outcomes if o.flow}
    refuse_existing_tables(out, options.force)
    write_text_atomic(paths["csv"], rows_csv(rows), root=out)
    write_json_atomic(paths["json"], root=out, obj=json_ready({
        "study": manifest.study,
        "axes": "wind axes of caseprep.contract.frames: C_L positive up (downforce = -C_L), C_D along the "
                "relative wind, C_S along +y_W; balance = front share of downforce; ride heights m; angles deg",
        "flags": {f: flag_meaning(f) for f in flags},
        "notes": notes,
        "cases": rows,
        "mesh_study": list(study_rows),
        "inputs": digest,
    }))
    analysis_doc = None
    try:   # the same analysis as `postproc analyse` on this folder
        analysis_doc = analyse_table(read_sweep_table(out), analysis_cfg)
        paths["analysis"] = write_analysis(analysis_doc, out / ANALYSIS_NAME)
    except UserError as exc:
        notes.append(f"analysis.json not written: {exc}".replace("\n", " "))
    data = assemble(results, title=title, study=manifest.study, notes=notes, checks=checks,
                    mesh_study=study_rows, flow_rows=flow_rows, scenes=scenes, picture_cases=pcs,
                    pictures_skipped=skipped, histories=[o.history for o in outcomes if o.history is not None],
                    options=replace(ropts, baseline=baseline), analysis=analysis_doc, cost=run_cost(manifest))
    analysis = SweepAnalysis(title=title, study=manifest.study, results=tuple(results), mesh_study=tuple(study_rows),
                             notes=tuple(notes), checks=tuple(checks), outcomes=tuple(outcomes), paths=paths,
                             report_data=data, analysis=analysis_doc)
    if render is not None:
        render(analysis, paths["report"])
    return analysis


def run_cost(manifest: Manifest) -> dict | None:
    """The solver's core time per variant and in total, from the cases' run
    records (the runner's definition, :mod:`caseprep.contract.cost`); None
    when no case has a record."""
    rows = [rec.to_dict() for rec in (read_case_record(manifest.case_dir(c)) for c in manifest.cases) if rec is not None]
    if not rows:
        return None
    return cost_summary(rows, {c.case_id: c.variant for c in manifest.cases})
