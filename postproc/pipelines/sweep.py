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

Besides the forces, each case with a volume result gets its flow columns
(:mod:`postproc.pipelines.case_flow`: diffuser recovery, main vortex pair,
ramp separation, floor suction — the numbers ``postproc flow`` gives), and
one case per variant (the same operating point for all) its picture scene.
The HTML report (``report.html``, :mod:`postproc.report`) is rendered from
the returned :class:`SweepAnalysis` (its ``report_data``).

Coefficients are in the wind axes of caseprep.contract.frames (C_L positive up,
downforce = −C_L; C_D along the relative wind; C_S along +y_W), on the
reference area and the dynamic pressure of the resultant air speed recorded
in the manifest. A case is **flagged** (never ranked) when the runner
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
import csv
import datetime as _dt
import io
import json
import math
import os
import time
from dataclasses import asdict, dataclass, field, replace
from pathlib import Path
from typing import Any, Callable

import numpy as np

from caseprep.contract import walls
from caseprep.contract.atomicio import json_ready, write_json_atomic, write_text_atomic
from caseprep.contract.convergence import settle_window
from caseprep.contract.monitor import read_monitor
from caseprep.contract.errors import UserError
from caseprep.contract.limits import MAX_ANALYSIS_SECONDS
from caseprep.contract.locking import refuse_interrupted, sweep_lock
from caseprep.contract.manifest import CaseRecord, Manifest, read_manifest
from caseprep.contract.records import Flag, Status, as_flag, effective_status, flag_meaning, load_case_record, read_case_record
from caseprep.contract.signals import StopRequested
from postproc.io.exports import latest_export
from postproc.io.isolation import UnreadableFile, isolated, physical_memory, preload
from postproc.io.surfaces import read_surface
from postproc.kernels import wallchecks as wc
from postproc.kernels.polygons import face_geometry
from postproc.kernels.meshstudy import grid_convergence, representative_cell_size
from postproc.pipelines.case_flow import FlowOptions, analyse_case_flow
from postproc.io.analysis_config import AnalysisConfig, read_analysis_config
from postproc.io.results_table import read_sweep_table, rows_table
from postproc.pipelines.analysis import OUTPUT_NAME as ANALYSIS_NAME
from postproc.pipelines.analysis import analyse_table, default_config_path, resolve_options, write_analysis
from postproc.pipelines.analysis_points import level_cell_size
from postproc.pipelines.case_forces import ForcesReport, forces_report
from postproc.pipelines.case_scene import scene_difference
from postproc.pipelines.report_data import (ReportOptions, assemble, check_baseline, choose_picture_cases,
                                            history_from_monitor)
from postproc.pipelines.caseresults import (RESULTS_DIR, Fingerprint, fingerprint, read_case_result,
                                            write_case_result)
from postproc.pipelines.sweep_rows import CaseResult
from postproc.pipelines.shards import ALL, Shard, manifest_digest, read_shard_states, run_cases, write_shard_state
# the child processes that read the cases start with these loaded (postproc.io.isolation)
preload("pyvista", "postproc.pipelines.case_flow", "postproc.pipelines.case_forces")
#: limits of a case's volume analysis (flow columns, pictures): the machine's memory, MAX_ANALYSIS_SECONDS
ANALYSIS_LIMITS = {"memory": physical_memory(), "timeout": float(MAX_ANALYSIS_SECONDS.value)}

@dataclass(frozen=True)
class CaseOutcome:
    """One row of the sweep's results: the case's ranking row (``result``),
    its run status, cell and iteration counts, the monitor's verdict, the
    prism-layer coverage, notes, the full forces report and the y+
    statistics per patch. :meth:`row` is its flat form in the tables."""

    result: CaseResult
    status: str
    cells: int | None
    iterations: int | None
    convergence: str | None
    layers: str | None = None  # e.g. "body 85 %, strake_left 38 %" (share of the target layer thickness)
    notes: tuple[str, ...] = ()
    report: ForcesReport | None = field(default=None, repr=False)
    yplus: dict[str, dict] = field(default_factory=dict)
    flow: dict[str, Any] = field(default_factory=dict)
    scene: Any = field(default=None, repr=False)
    history: Any = field(default=None, repr=False)
    seconds: dict[str, float] = field(default_factory=dict)
    #: the forces report's JSON form when the outcome was read back from a
    #: stored result (``report`` is then None)
    stored_forces: dict[str, Any] | None = field(default=None, repr=False)
    #: h = (V/N)^(1/3), m, from the real cell count
    cell_size: float | None = None

    def row(self) -> dict[str, Any]:
        """The case as one flat row of the results tables (CSV and JSON)."""
        r = asdict(self.result)
        r["flags"] = " ".join(self.result.flags)
        r["downforce_coefficient"] = -self.result.cl if math.isfinite(self.result.cl) else None
        r.update(status=self.status, cells=self.cells, cell_size_h=self.cell_size, iterations=self.iterations,
                 convergence=self.convergence, layers=self.layers)
        if self.yplus:
            a = self.yplus[ALL_WALLS]  # all body and wheel faces together
            r.update(yplus_median=a["median"], yplus_p95=a["p95"], yplus_max=a["max"],
                     yplus_share_in_range=a["share_in_target"], yplus_range="{:g}-{:g}".format(*a["target"]))
        r.update(self.flow)
        r["notes"] = "; ".join(self.notes)
        return r

    def forces_dict(self) -> dict[str, Any] | None:
        """The forces report's JSON form (None without one)."""
        return self.report.to_dict() if self.report is not None else self.stored_forces

    def to_json(self) -> dict[str, Any]:
        """The JSON form stored as the case's result (``results/<case>.json``):
        the ranking row (``result``), run facts, notes, the full forces report
        (``forces``, None without an export), y+ per patch, the flow columns
        and the flags. The picture scene and the force history are not
        stored (rebuilt from the case's files when the report needs them)."""
        return json_ready({"result": asdict(self.result), "status": self.status, "cells": self.cells,
                           "iterations": self.iterations, "convergence": self.convergence, "layers": self.layers,
                           "notes": list(self.notes), "forces": self.forces_dict(), "yplus": self.yplus,
                           "flow": self.flow, "flags": list(self.result.flags), "seconds": self.seconds,
                           "cell_size": self.cell_size})

    @classmethod
    def from_json(cls, d: dict[str, Any]) -> "CaseOutcome":
        """Inverse of :meth:`to_json` (None → NaN for the number fields that
        are NaN when unknown). Raises ValueError/TypeError/KeyError for
        content of the wrong shape."""
        import dataclasses

        r = dict(d["result"])
        for f in dataclasses.fields(CaseResult):
            if r.get(f.name) is None and (f.type == "float" or isinstance(f.default, float)):
                r[f.name] = math.nan
        r["flags"] = tuple(as_flag(str(x)) for x in r.get("flags") or ())
        result = CaseResult(**r)
        notes, yplus, flow = d.get("notes") or [], d.get("yplus") or {}, d.get("flow") or {}
        forces = d.get("forces")
        if (not isinstance(notes, list) or not isinstance(yplus, dict) or not isinstance(flow, dict)
                or not (forces is None or isinstance(forces, dict))):
            raise TypeError("per-case result of the wrong shape")
        return cls(result=result, status=str(d["status"]), cells=d.get("cells"), iterations=d.get("iterations"),
                   convergence=d.get("convergence"), layers=d.get("layers"), notes=tuple(str(x) for x in notes),
                   yplus=yplus, flow=flow, seconds=dict(d.get("seconds") or {}), stored_forces=forces,
                   cell_size=_finite_or_none(d.get("cell_size")))


def _finite_or_none(x: Any) -> float | None:
    """A stored number that must be finite and positive (a cell size), else None."""
    try:
        v = float(x)
    except (TypeError, ValueError):
        return None
    return v if math.isfinite(v) and v > 0 else None


ALL_WALLS = "all body and wheel patches"


#: The face arrays of the body patches the sweep uses (forces: pressure and
#: wall shear; wall checks: y+), read together, once per case.
SURFACE_ARRAYS = ("p", "wallShearStress", "yPlus")


def wall_patches(case: CaseRecord) -> list[str]:
    """The body and wheel patches of a case (from the manifest)."""
    return list(case.patches.get("body") or []) + list(case.patches.get("wheels") or [])


def case_yplus_band(case: CaseRecord) -> tuple[float, float]:
    """The y+ band a case is judged by: that of the wall treatment its
    manifest record names (:data:`caseprep.contract.walls.WALL_TREATMENTS`,
    the table the planner sized the first cell by); records without one get
    their turbulence model's default treatment."""
    try:
        return walls.wall_treatment(case.wall_treatment, case.turbulence_model).band
    except ValueError:
        return walls.wall_treatment(None, case.turbulence_model).band


def wall_yplus(case_dir: Path, case: CaseRecord, surface=None) -> tuple[dict[str, dict], str | None]:
    """y+ statistics of the body and wheel patches from the case's VTK export
    (the solver's ``yPlus`` face field): per patch min/median/p95/max and the
    area share inside the y+ band of the case's wall treatment (the one the
    planner sized the first cell for: :func:`case_yplus_band`).
    ``surface``: those patches already read (with ``yPlus``); None: read
    them here. Returns (stats by patch, None) or ({}, why not)."""
    names = wall_patches(case)
    if not names:
        return {}, "no body patches in the manifest"
    try:
        surf = surface if surface is not None else read_surface(latest_export(case_dir), names, arrays=["yPlus"])
        yp = surf.array("yPlus")
    except UserError as exc:
        return {}, f"y+ not assessed: {exc}".splitlines()[0]
    target = case_yplus_band(case)
    S, _ = face_geometry(surf.points, (surf.offsets, surf.connectivity))

    areas = np.linalg.norm(S, axis=1)
    out = {}
    for i, name in enumerate(surf.part_names):
        sel = surf.part_ids == i
        out[name] = wc.yplus_stats(name, yp[sel], areas[sel], target).to_dict()
    out[ALL_WALLS] = wc.yplus_stats(ALL_WALLS, yp, areas, target).to_dict()
    return out, None


def _report_values(report: ForcesReport | None, yaw_deg: float, flags: list, notes: list[str]) -> tuple[dict, str | None]:
    """The row's coefficients from a case's forces report (keyword arguments
    of :class:`CaseResult`) and the monitor's verdict. With the rule in
    coefficient counts the coefficients are its window means, with their
    spreads as ``u_*``. Appends to ``flags`` and ``notes``."""
    nan = math.nan
    if report is None:
        return {"cl": nan, "cd": nan, "cs": nan}, None
    v: dict[str, Any] = {"cl": nan, "cd": nan, "cs": nan}
    c = report.coefficients
    if c is not None:
        v.update(cl=float(c.lift), cd=float(c.drag), cs=float(c.side))
    else:
        flags.append(Flag.FORCES_FAILED)
        notes.append("no reference values in the manifest: coefficients not computed")
    b = report.balance
    if b is not None:
        v.update(cl_front=b.c_lift_front, cl_rear=b.c_lift_rear, balance=b.balance_front,
                 stability_margin=b.stability_margin)
        if abs(yaw_deg) < 1e-9 and b.stability_margin is not None:
            # at zero yaw the side force is numerical noise about zero and its
            # centre of pressure is meaningless: report no margin
            v["stability_margin"] = None
            notes.append("zero yaw: no side force to place, stability margin not reported")
        notes.extend(b.notes)
    verdict = None
    counts = report.convergence
    if counts is not None:
        # the rule in coefficient counts; the reported coefficients are its window means
        verdict = counts["verdict"]
        v.update({k: float(x) for k, x in counts["means"].items()
                  if k in ("cl", "cd", "cs", "cl_front", "cl_rear", "balance") and x is not None and math.isfinite(x)})
        v.update({f"u_{k}": float(x) for k, x in counts["stds"].items()
                  if k in ("cl", "cd", "cs", "cl_front", "cl_rear") and x is not None})
        notes.append(f"coefficients: means over the last {counts['window']} iterations of the monitor")
    else:
        notes.append("no runtime force monitor judged: convergence not assessed")
    if verdict == "diverging":
        flags.append(Flag.FORCES_DRIFTING)
    if report.reference is not None:
        v.update(reference_area=float(report.reference.area), air_density=float(report.reference.rho))
    return v, verdict


def _case_params(case: CaseRecord) -> dict[str, Any]:
    """The operating point of a case as :class:`CaseResult` fields."""
    p = case.params
    return dict(
        case_id=case.case_id,
        variant=case.variant,
        ride_height_front=float(p.get("ride_height_front", math.nan)),
        ride_height_rear=float(p.get("ride_height_rear", math.nan)),
        pitch_deg=float(p.get("pitch_deg", 0.0)),
        yaw_deg=float(p.get("yaw_deg", 0.0)),
        speed=float(p.get("speed", math.nan)),
        mesh_level=int(p.get("mesh_level", 0)),
    )


def missing_outcome(manifest: Manifest, case: CaseRecord, why: str) -> CaseOutcome:
    """The row of a case whose post-processing result is missing (a merge
    with a gap): its operating point and run status, no coefficients, the
    ``results-missing`` flag and ``why`` as a note."""
    rec = read_case_record(manifest.case_dir(case))
    flags = list(rec.flags) if rec is not None else []
    status = effective_status(rec) if rec is not None else Status.NOT_RUN
    nan = math.nan
    result = CaseResult(**_case_params(case), cl=nan, cd=nan, cs=nan,
                        flags=tuple(dict.fromkeys([*flags, Flag.RESULTS_MISSING])))
    return CaseOutcome(result=result, status=status, cells=rec.cells if rec else None,
                       iterations=rec.iterations if rec else None, convergence=None,
                       notes=(f"no post-processing result: {why}",))


def process_case(manifest: Manifest, case: CaseRecord, flow: FlowOptions | None = None) -> CaseOutcome:
    """Post-process one case of ``manifest``: its run record, its forces
    report (when its export exists), its :class:`CaseResult` row, its force
    history and, with ``flow``, its flow columns (and its picture scene when
    ``flow.scene``)."""
    import time

    t_start = time.perf_counter()
    case_dir = manifest.case_dir(case)
    notes: list[str] = []
    try:
        rec = load_case_record(case_dir)
        unreadable_record = False
    except UserError as exc:
        rec, unreadable_record = None, True
        notes.append(f"run record: {exc}".replace("\n", " "))
    flags: list[str] = list(rec.flags) if rec is not None else []
    if unreadable_record:
        flags.append(Flag.RECORD_UNREADABLE)
    status = effective_status(rec) if rec is not None else Status.NOT_RUN
    base = _case_params(case)
    exported = (case_dir / "logs" / "export.done").is_file()
    report = None
    verdict = None
    if not exported:
        if Flag.NOT_RUN not in flags and status in (Status.OK, Status.NOT_RUN, Status.SKIPPED):
            flags.append(Flag.NOT_RUN)
        elif status not in (Status.OK, Status.SKIPPED) and status not in flags:
            flags.append(as_flag(status))
    else:
        surf = None
        try:
            names = wall_patches(case)
            if names:  # one read of the body's faces for the forces and the y+
                surf = read_surface(latest_export(case_dir), names, arrays=list(SURFACE_ARRAYS))
            # the monitor judged by the one convergence rule
            report = forces_report(str(case_dir), surface=surf)
        except UnreadableFile as exc:  # corrupt, absurd sizes or it crashed the reader: this case only
            flags.append(Flag.UNREADABLE)
            notes.append(f"unreadable: {exc}".replace("\n", " "))
        except UserError as exc:
            flags.append(Flag.FORCES_FAILED)
            notes.append(f"forces: {exc}".replace("\n", " "))
    values, verdict = _report_values(report, base["yaw_deg"], flags, notes)
    yplus: dict[str, dict] = {}
    if report is not None:
        yplus, why = wall_yplus(case_dir, case, surface=surf)
        if why:
            notes.append(why)
    result = CaseResult(**base, **values, flags=tuple(dict.fromkeys(flags)))
    layers = None
    if rec is not None and rec.layers:
        layers = ", ".join(f"{d.get('patch')} {d.get('thickness_percent'):.0f} %" for d in rec.layers
                           if d.get("thickness_percent") is not None) or None
    t_forces = time.perf_counter()
    flow_cols: dict[str, Any] = {}
    scene = None
    if flow is not None and exported:
        try:  # the volume is read and analysed in a child process: a bad file cannot end the sweep
            cf = isolated(analyse_case_flow, case_dir, flow, label=case.case_id, what=str(case_dir / "VTK"),
                          **ANALYSIS_LIMITS)
            flow_cols = cf.metrics.to_dict()
            scene = cf.scene
            if cf.scene_error:
                notes.append("picture: " + cf.scene_error)
        except UnreadableFile as exc:
            notes.append("unreadable: " + str(exc).replace("\n", " "))
            result = replace(result, flags=tuple(dict.fromkeys((*result.flags, Flag.UNREADABLE))))
        except UserError as exc:
            notes.append("flow: " + str(exc).splitlines()[0])
    history = None
    if report is not None:
        try:
            mon = read_monitor(case_dir)
            n = len(mon.get("Time", ()))
            history = history_from_monitor(case.case_id, mon, settle_window(n), verdict or "", bool(result.flags))
        except UserError:
            pass
    return CaseOutcome(result=result, status=status, cells=rec.cells if rec else None,
                       cell_size=case_cell_size(case, rec.cells if rec else None),
                       iterations=rec.iterations if rec else None, convergence=verdict,
                       notes=tuple(notes), report=report, yplus=yplus, layers=layers, flow=flow_cols, scene=scene,
                       history=history, seconds={"forces": t_forces - t_start,
                                                 "flow": time.perf_counter() - t_forces})




def case_cell_size(case: CaseRecord, cells: int | None) -> float | None:
    """h = (V/N)^(1/3) (m) of a case: V the fluid volume its manifest record
    gives (``fluid_volume``, m³), N its real cell count from the run record;
    None when either is missing."""
    V = case.fluid_volume
    try:
        return representative_cell_size(float(V), int(cells)) if V is not None and cells else None
    except (TypeError, ValueError):
        return None


def mesh_study(results: list[CaseResult], cell_sizes: dict[str, float | None] | None = None) -> list[dict[str, Any]]:
    """Grid convergence (Celik et al. 2008, postproc.kernels.meshstudy) of C_L and C_D
    for every operating point solved on three or more mesh levels (unflagged
    cases only; the three finest levels are used). The representative cell
    size of each case is h = (V/N)^(1/3) from its real cell count
    (``cell_sizes``: case id → h in m) when every case of the point has one,
    else the nominal 2^(−m/2) of its mesh level (``h_source`` says which).
    One dict per point and coefficient: the point's parameters, the values
    per level, h, the apparent order, the extrapolated value and the
    fine-mesh GCI (fraction)."""
    cell_sizes = cell_sizes or {}
    groups: dict[tuple, dict[int, CaseResult]] = {}
    for r in results:
        if r.flags or not math.isfinite(r.cl):
            continue
        key = (r.variant, round(r.ride_height_front, 9), round(r.ride_height_rear, 9), round(r.pitch_deg, 9),
               round(r.yaw_deg, 9), round(r.speed, 9) if math.isfinite(r.speed) else None)
        groups.setdefault(key, {})[r.mesh_level] = r
    out = []
    for key, by_level in groups.items():
        if len(by_level) < 3:
            continue
        lv = sorted(by_level)[-3:][::-1]  # finest first
        rows = [by_level[m] for m in lv]
        hs = [cell_sizes.get(r.case_id) for r in rows]
        real = all(h is not None for h in hs) and hs[0] < hs[1] < hs[2]
        if not real:
            hs = [level_cell_size(m) for m in lv]
        for name, get in (("cl", lambda r: r.cl), ("cd", lambda r: r.cd)):
            g = grid_convergence(*(get(r) for r in rows), *hs)
            out.append({"variant": key[0], "ride_height_front": key[1], "ride_height_rear": key[2],
                        "pitch_deg": key[3], "yaw_deg": key[4], "speed": key[5], "coefficient": name,
                        "levels": lv, "cases": [r.case_id for r in rows],
                        "h_source": "cells" if real else "mesh level", **g.to_dict()})
    return out


#: First characters that make a spreadsheet evaluate a cell as a formula (or
#: a command) when a CSV file is opened: OWASP, "CSV Injection" (common
#: practice). A text cell starting with one of them gets a leading apostrophe.
FORMULA_START = ("=", "+", "-", "@", "\t", "\r")


def spreadsheet_safe(value: object) -> object:
    """``value`` for a CSV cell: text that a spreadsheet would evaluate
    (starting with one of :data:`FORMULA_START`) is prefixed with ``'`` so it
    stays text; numbers are left alone (they are written by us)."""
    if isinstance(value, str) and value.startswith(FORMULA_START):
        return "'" + value
    return value


def _csv(rows: list[dict[str, Any]]) -> str:
    """The rows as CSV: floats with 6 significant digits, NaN/inf and None
    empty, text cells neutralised for spreadsheets (:func:`spreadsheet_safe`)."""
    cols: list[str] = []
    for r in rows:
        cols += [k for k in r if k not in cols]
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow([spreadsheet_safe(c) for c in cols])
    for r in rows:
        w.writerow(["" if r.get(k) is None or (isinstance(r.get(k), float) and not math.isfinite(r[k]))
                    else (f"{r[k]:.6g}" if isinstance(r.get(k), float) else spreadsheet_safe(r[k])) for k in cols])
    return buf.getvalue()


#: Points of the fitted ride-height map along each side of its grid.
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


REPORT_NAME = "report.html"


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


def _refuse_existing_tables(out: Path, force: bool) -> None:
    existing = [out / n for n in TABLE_NAMES if (out / n).exists()]
    if existing and not force:
        raise UserError(expected="no earlier results in the output folder", got=", ".join(str(p) for p in existing),
                        fix="pass --force to replace them, or -o to write somewhere else")


def _check_jobs(options: SweepOptions) -> None:
    if options.jobs < 1:
        raise UserError(expected="a number of worker processes ≥ 1", got=options.jobs, key="-j",
                        fix="use -j 1 or more")


def _report_options(manifest: Manifest, options: ReportOptions) -> tuple[ReportOptions, str | None]:
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
    ropts, _ = _report_options(manifest, options.report)
    variants = list(dict.fromkeys(c.variant for c in manifest.cases))
    # the pictured cases, from the plan and the runner's flags (forces may add flags: checked at assembly)
    want_scene = (frozenset(pc.case_id for pc in choose_picture_cases(_planned_rows(manifest), variants, ropts))
                  if ropts.pictures else frozenset())
    digest = _inputs_digest(manifest, out, options, ropts, analysis_cfg)
    if not options.recompute:
        same = _unchanged(manifest, out, digest)
        if same is not None:  # nothing to compute and nothing to rewrite
            title = ropts.title or f"Sweep report — {manifest.study or out.name}"
            return SweepAnalysis(title=title, study=manifest.study, results=tuple(o.result for o in same),
                                 mesh_study=(), outcomes=tuple(same),
                                 paths=_table_paths(out), up_to_date=True)
    _refuse_existing_tables(out, options.force)
    run = _process_shard(manifest, out, options, progress, want_scene)
    outcomes = [run.outcomes[c.case_id] for c in manifest.cases]
    return _assemble(manifest, out, outcomes, options, [], render, analysis_cfg, digest)


def _table_paths(out: Path) -> dict[str, Path]:
    return {"csv": out / "results.csv", "json": out / "results.json", "report": out / REPORT_NAME,
            "cases": out / RESULTS_DIR}


def _inputs_digest(manifest: Manifest, out: Path, options: SweepOptions, ropts: ReportOptions,
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


def _unchanged(manifest: Manifest, out: Path, digest: str) -> list[CaseOutcome] | None:
    """The stored outcomes when the tables and the report exist and were
    made from exactly these inputs (``digest``) with every case's result
    stored and usable; None otherwise."""
    paths = _table_paths(out)
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
    _refuse_existing_tables(out, options.force)
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
    ropts, _ = _report_options(manifest, options.report)
    digest = None if gap else _inputs_digest(manifest, out, options, ropts, analysis_cfg)
    return _assemble(manifest, out, outcomes, options, notes, render, analysis_cfg, digest), gap


def _with_history(manifest: Manifest, o: CaseOutcome) -> CaseOutcome:
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


def _assemble(manifest: Manifest, out: Path, outcomes: list[CaseOutcome], options: SweepOptions,
              extra_notes: list[str], render, analysis_cfg, digest: str | None = None) -> SweepAnalysis:
    """Tables, analysis and report data from the outcomes; results.csv,
    results.json (with ``digest``, what they were made from, see
    :func:`_inputs_digest`) and the report (through ``render``) written
    under the output folder's lock. Builds the pictured cases' scenes not
    built while the cases were read."""
    ropts, baseline = _report_options(manifest, options.report)
    flow = options.flow or FlowOptions()
    outcomes = [_with_history(manifest, o) for o in outcomes]
    variants = list(dict.fromkeys(c.variant for c in manifest.cases))
    rows = [o.row() for o in outcomes]
    paths = _table_paths(out)
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
    _refuse_existing_tables(out, options.force)
    write_text_atomic(paths["csv"], _csv(rows), root=out)
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
                    options=replace(ropts, baseline=baseline), analysis=analysis_doc)
    analysis = SweepAnalysis(title=title, study=manifest.study, results=tuple(results), mesh_study=tuple(study_rows),
                             notes=tuple(notes), checks=tuple(checks), outcomes=tuple(outcomes), paths=paths,
                             report_data=data, analysis=analysis_doc)
    if render is not None:
        render(analysis, paths["report"])
    return analysis
