"""Post-process a whole sweep: every case's forces, coefficients, balance and
convergence, joined with what the runner recorded, into one results table,
then the variant ranking, the mesh study and the aero maps — all as data
(:class:`SweepAnalysis`, ``results.json``) that the report then renders.

Inputs: a sweep folder written by ``caseprep write`` (``manifest.json``) and
run by ``caseprep run`` (``<case>/underfloor-run.json``, ``VTK/``).
Outputs (in the sweep folder unless told otherwise, atomic writes):

* ``results/<case_id>.json`` — the full forces report of each case, with
  the body's y+ statistics per patch and the case's flags;
* ``results.csv`` and ``results.json`` — one row per case (``results.json``
  also holds the ranking, the mesh study and the fitted aero maps);
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
30 % of the samples, at least 20): in coefficient counts when the case has
reference values (each coefficient and the balance against its own
tolerance; the reported coefficients are then the window means, with their
standard deviations as ``u_*``), else each total-force component against
max(|its mean|, the resultant force), as the runner judges it; ``diverging``
gives the ``forces-drifting`` flag.
"""
from __future__ import annotations

import contextlib
import csv
import io
import json
import math
import os
from dataclasses import asdict, dataclass, field, replace
from pathlib import Path
from typing import Any, Callable

import numpy as np

from caseprep.contract import walls
from caseprep.contract.atomicio import json_ready, write_json_atomic, write_text_atomic
from caseprep.contract.convergence import settle_window
from caseprep.contract.monitor import read_monitor
from caseprep.contract.errors import UserError
from caseprep.contract.locking import refuse_interrupted, sweep_lock
from caseprep.contract.manifest import CaseRecord, Manifest, read_manifest
from caseprep.contract.records import Flag, Status, as_flag, effective_status, flag_meaning, load_case_record, read_case_record
from postproc.io.exports import latest_export
from postproc.io.isolation import UnreadableFile, isolated, preload
from postproc.io.surfaces import read_surface
from postproc.kernels import wallchecks as wc
from postproc.kernels.aeromap import fit_response_surface, map_grid
from postproc.kernels.polygons import face_geometry
from postproc.kernels.meshstudy import grid_convergence, representative_cell_size
from postproc.kernels.ranking import CaseResult, VariantScore, rank_variants
from postproc.pipelines.case_flow import FlowOptions, analyse_case_flow
from postproc.io.analysis_config import read_analysis_config
from postproc.io.results_table import read_sweep_table
from postproc.pipelines.analysis import OUTPUT_NAME as ANALYSIS_NAME
from postproc.pipelines.analysis import analyse_table, default_config_path, resolve_options, write_analysis
from postproc.pipelines.analysis_points import level_cell_size
from postproc.pipelines.case_forces import ForcesReport, forces_report
from postproc.pipelines.case_scene import scene_difference
from postproc.pipelines.report_data import (ReportOptions, assemble, check_baseline, choose_picture_cases,
                                            history_from_monitor)

RESULTS_DIR = "results"
# the child processes that read the cases start with these loaded (postproc.io.isolation)
preload("pyvista", "postproc.pipelines.case_flow", "postproc.pipelines.case_forces")

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
    cell_size: float | None = None  # h = (V/N)^(1/3), m, from the real cell count

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


ALL_WALLS = "all body and wheel patches"


def case_yplus_band(case: CaseRecord) -> tuple[float, float]:
    """The y+ band a case is judged by: that of the wall treatment its
    manifest record names (:data:`caseprep.contract.walls.WALL_TREATMENTS`,
    the table the planner sized the first cell by); records without one get
    their turbulence model's default treatment."""
    try:
        return walls.wall_treatment(case.wall_treatment, case.turbulence_model).band
    except ValueError:
        return walls.wall_treatment(None, case.turbulence_model).band


def wall_yplus(case_dir: Path, case: CaseRecord) -> tuple[dict[str, dict], str | None]:
    """y+ statistics of the body and wheel patches from the case's VTK export
    (the solver's ``yPlus`` face field): per patch min/median/p95/max and the
    area share inside the y+ band of the case's wall treatment (the one the
    planner sized the first cell for: :func:`case_yplus_band`).
    Returns (stats by patch, None) or ({}, why not)."""
    names = list(case.patches.get("body") or []) + list(case.patches.get("wheels") or [])
    if not names:
        return {}, "no body patches in the manifest"
    try:
        surf = read_surface(latest_export(case_dir), names)
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
    counts = report.coefficient_convergence
    if counts is not None:
        # the rule in coefficient counts; the reported coefficients are its window means
        verdict = counts["verdict"]
        v.update({k: float(x) for k, x in counts["means"].items()
                  if k in ("cl", "cd", "cs", "cl_front", "cl_rear", "balance") and x is not None and math.isfinite(x)})
        v.update({f"u_{k}": float(x) for k, x in counts["stds"].items()
                  if k in ("cl", "cd", "cs", "cl_front", "cl_rear") and x is not None})
        notes.append(f"coefficients: means over the last {counts['window']} iterations of the monitor")
    elif report.convergence is not None:
        verdict = report.convergence.verdict
    else:
        notes.append("no runtime force monitor found: convergence not assessed")
    if verdict == "diverging":
        flags.append(Flag.FORCES_DRIFTING)
    if report.reference is not None:
        v.update(reference_area=float(report.reference.area), air_density=float(report.reference.rho))
    return v, verdict


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
    p = case.params
    base = dict(
        case_id=case.case_id,
        variant=case.variant,
        ride_height_front=float(p.get("ride_height_front", math.nan)),
        ride_height_rear=float(p.get("ride_height_rear", math.nan)),
        pitch_deg=float(p.get("pitch_deg", 0.0)),
        yaw_deg=float(p.get("yaw_deg", 0.0)),
        speed=float(p.get("speed", math.nan)),
        mesh_level=int(p.get("mesh_level", 0)),
    )
    exported = (case_dir / "logs" / "export.done").is_file()
    report = None
    verdict = None
    if not exported:
        if Flag.NOT_RUN not in flags and status in (Status.OK, Status.NOT_RUN, Status.SKIPPED):
            flags.append(Flag.NOT_RUN)
        elif status not in (Status.OK, Status.SKIPPED) and status not in flags:
            flags.append(as_flag(status))
    else:
        try:
            report = forces_report(str(case_dir))  # the monitor judged by the one convergence rule
        except UnreadableFile as exc:  # corrupt, absurd sizes or it crashed the reader: this case only
            flags.append(Flag.UNREADABLE)
            notes.append(f"unreadable: {exc}".replace("\n", " "))
        except UserError as exc:
            flags.append(Flag.FORCES_FAILED)
            notes.append(f"forces: {exc}".replace("\n", " "))
    values, verdict = _report_values(report, base["yaw_deg"], flags, notes)
    yplus: dict[str, dict] = {}
    if report is not None:
        yplus, why = wall_yplus(case_dir, case)
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
            cf = isolated(analyse_case_flow, case_dir, flow, label=case.case_id, what=str(case_dir / "VTK"))
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


def outcome_row(o: CaseOutcome) -> dict[str, Any]:
    """A flat dict of one case for the CSV/JSON tables."""
    r = asdict(o.result)
    r["flags"] = " ".join(o.result.flags)
    r["downforce_coefficient"] = -o.result.cl if math.isfinite(o.result.cl) else None
    r.update(status=o.status, cells=o.cells, iterations=o.iterations, convergence=o.convergence, layers=o.layers)
    if o.yplus:
        a = o.yplus[ALL_WALLS]  # all body and wheel faces together
        r.update(yplus_median=a["median"], yplus_p95=a["p95"], yplus_max=a["max"],
                 yplus_share_in_range=a["share_in_target"], yplus_range="{:g}-{:g}".format(*a["target"]))
    r["notes"] = "; ".join(o.notes)
    return r




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
MAP_GRID_POINTS = 24


def aero_maps(results: list[CaseResult]) -> list[dict[str, Any]]:
    """The fitted downforce maps, one per variant with at least three
    unflagged points at the smallest |yaw|: a least-squares quadratic
    response surface of −C_L over the front and rear ride heights
    (:func:`postproc.kernels.aeromap.fit_response_surface`), its fit quality,
    its gradient at the mean ride heights (per mm) and, when both ride
    heights vary, its values on a ``MAP_GRID_POINTS``² grid over the
    rectangle of the points (ride heights m)."""
    ok = [r for r in results if not r.flags]
    variants = list(dict.fromkeys(r.variant for r in results))
    ymin = min((abs(r.yaw_deg) for r in ok), default=0.0)
    base = [r for r in ok if abs(abs(r.yaw_deg) - ymin) < 1e-9]
    out = []
    for v in variants:
        rows = [r for r in base if r.variant == v
                and math.isfinite(r.ride_height_front) and math.isfinite(r.ride_height_rear) and math.isfinite(r.cl)]
        if len(rows) < 3:
            continue
        hf = [r.ride_height_front for r in rows]
        hr = [r.ride_height_rear for r in rows]
        fit = fit_response_surface(hf, hr, [-r.cl for r in rows], degree=2)
        g = fit.gradient(np.mean(hf), np.mean(hr))
        grid = None
        if len(set(hf)) > 1 and len(set(hr)) > 1:
            front, rear, values = map_grid(fit, hf, hr, MAP_GRID_POINTS)
            grid = {"front": front, "rear": rear, "values": values}
        measured = [-r.cl for r in rows]
        out.append({"variant": v, "coefficient": "downforce", "label": "−C_L", "degree": fit.degree,
                    "n_points": fit.n_points, "r2": fit.r2, "rms": fit.rms,
                    "d_front_per_mm": float(g[0]) / 1000.0, "d_rear_per_mm": float(g[1]) / 1000.0,
                    "points": {"front": hf, "rear": hr, "value": measured,
                               "error": [float(fit(a, b)) - m for a, b, m in zip(hf, hr, measured)]},
                    "grid": grid})
    return out


@dataclass(frozen=True)
class SweepAnalysis:
    """A sweep's results as data, what the report renders: the rows
    (``results``), the variant ranking, the fitted aero maps
    (:func:`aero_maps`), the mesh study (:func:`mesh_study`), notes on the
    flags, the per-case run and mesh checks, and — after
    :func:`postprocess_sweep` — the per-case outcomes and the written paths
    (keys ``csv``, ``json``, ``report``, ``cases``)."""

    title: str
    study: str
    results: tuple[CaseResult, ...]
    ranking: tuple[VariantScore, ...]
    aero_maps: tuple[dict[str, Any], ...]
    mesh_study: tuple[dict[str, Any], ...]
    notes: tuple[str, ...] = ()
    checks: tuple[dict[str, Any], ...] = ()
    outcomes: tuple[CaseOutcome, ...] = ()
    paths: dict[str, Path] = field(default_factory=dict)
    report_data: Any = field(default=None, repr=False)
    analysis: dict[str, Any] | None = None   # analysis.json (postproc.pipelines.analysis), when written


def analyse_results(results: list[CaseResult], title: str = "Sweep report", study: str = "",
                    notes: list[str] | None = None, checks: list[dict] | None = None,
                    mesh: list[dict] | None = None, cell_sizes: dict[str, float | None] | None = None) -> SweepAnalysis:
    """Rank the variants, fit the aero maps and (unless ``mesh`` is given)
    run the mesh study over ``results`` (``cell_sizes``: case id → h, m);
    returns the :class:`SweepAnalysis` with its report data (no flow
    numbers, pictures or histories: those need the cases' files,
    :func:`postprocess_sweep`)."""
    ranking = tuple(rank_variants(results))
    maps = tuple(aero_maps(results))
    study_rows = tuple(mesh_study(results, cell_sizes) if mesh is None else mesh)
    data = assemble(results, title=title, study=study, notes=notes or (), checks=checks or (),
                    mesh_study=list(study_rows), aero_maps=list(maps), ranking=list(ranking),
                    options=ReportOptions(pictures=False))
    return SweepAnalysis(title=title, study=study, results=tuple(results), ranking=ranking, aero_maps=maps,
                         mesh_study=study_rows, notes=tuple(notes or ()), checks=tuple(checks or ()),
                         report_data=data)


REPORT_NAME = "report.html"


def _iterative_spread(outcomes: list[CaseOutcome]) -> dict[str, tuple[float, float]]:
    """Per variant: the RMS over its unflagged cases of the runtime force
    monitor's standard deviation over the settling window, as coefficient
    half-widths (−C_L, C_D): the std of the body-axes force over qA (body
    and wind axes differ by the pitch and yaw angles, a few degrees: cos 4°
    = 0.998). Variants without monitor statistics are left out."""
    acc: dict[str, list[tuple[float, float]]] = {}
    for o in outcomes:
        rep = o.report
        if o.result.flags or rep is None or rep.convergence is None or rep.reference is None:
            continue
        stats = rep.convergence.series
        fz, fx = stats.get("force.total_z"), stats.get("force.total_x")
        qa = float(rep.reference.q) * float(rep.reference.area)
        if fz is not None and fx is not None and qa > 0 and math.isfinite(fz.std) and math.isfinite(fx.std):
            acc.setdefault(o.result.variant, []).append((float(fz.std) / qa, float(fx.std) / qa))
    return {v: (float(np.sqrt(np.mean([a * a for a, _ in xs]))), float(np.sqrt(np.mean([b * b for _, b in xs]))))
            for v, xs in acc.items()}


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


def postprocess_sweep(
    sweep_dir: str | os.PathLike,
    out_dir: str | os.PathLike | None = None,
    title: str | None = None,
    progress: Callable[[int, int, CaseOutcome], None] | None = None,
    force: bool = False,
    options: ReportOptions = ReportOptions(),
    flow: FlowOptions | None = None,
    analysis_config: str | os.PathLike | None = None,
) -> SweepAnalysis:
    """Post-process every case of a sweep and write the tables.

    ``out_dir`` defaults to the sweep folder. ``progress(i, n, outcome)`` is
    called after each case. Existing results (tables or report) are not
    replaced unless ``force`` (UserError naming the file). ``options``
    choose the pictured operating point and the baseline of the difference
    pictures (a baseline that is not a variant of the sweep is a UserError
    naming the available ones) and whether pictures are wanted; ``flow``
    the per-case flow pass (default :class:`FlowOptions`). Returns the
    :class:`SweepAnalysis` with the outcomes, the paths (keys ``csv``,
    ``json``, ``cases`` written; ``report`` where the report belongs) and
    ``report_data`` (:class:`postproc.pipelines.report_data.ReportData`),
    what the report renders. Raises UserError for a folder that is not a
    sweep.
    """
    flow = flow or FlowOptions()
    manifest = read_manifest(sweep_dir)  # not a sweep: refused before anything is created
    root = Path(manifest.root or sweep_dir)
    out = Path(out_dir) if out_dir is not None else root
    cfg_path = analysis_config if analysis_config is not None else default_config_path(root, manifest.config_file)
    analysis_cfg = read_analysis_config(cfg_path)
    resolve_options(analysis_cfg)   # settings errors before anything is created or any case is processed
    with contextlib.ExitStack() as locks:  # one command at a time in the sweep (and the output) folder
        locks.enter_context(sweep_lock(root, "postproc sweep"))
        if out.resolve() != root.resolve():
            locks.enter_context(sweep_lock(out, "postproc sweep"))
        refuse_interrupted(root, "postproc sweep")
        return _postprocess_locked(read_manifest(root), out, title, progress, force, options, flow,
                                   analysis_cfg)


def _postprocess_locked(manifest: Manifest, out: Path, title, progress, force: bool, options: ReportOptions,
                        flow: FlowOptions, analysis_cfg) -> SweepAnalysis:
    """:func:`postprocess_sweep` holding the locks."""
    sweep_dir = manifest.root
    existing = [p for p in (out / "results.csv", out / "results.json", out / REPORT_NAME, out / ANALYSIS_NAME)
                if p.exists()]
    if existing and not force:
        raise UserError(expected="no earlier results in the output folder", got=", ".join(str(p) for p in existing),
                        fix="pass --force to replace them, or -o to write somewhere else")
    variants = list(dict.fromkeys(c.variant for c in manifest.cases))
    # the config's [report] settings (carried by the manifest records) unless given here
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
    # the pictured cases, from the plan and the runner's flags (forces may add flags: checked below)
    want_scene = ({pc.case_id for pc in choose_picture_cases(_planned_rows(manifest), variants, options)}
                  if options.pictures else set())
    outcomes = []
    n = len(manifest.cases)
    for i, case in enumerate(manifest.cases):
        o = process_case(manifest, case, replace(flow, scene=case.case_id in want_scene))
        outcomes.append(o)
        if o.report is not None:
            write_json_atomic(out / RESULTS_DIR / f"{case.case_id}.json",  # case ids are checked names
                              json_ready({**o.report.to_dict(), "yplus": o.yplus, "flow": o.flow,
                                          "flags": list(o.result.flags)}),
                              root=out)
        if progress is not None:
            progress(i + 1, n, o)
    rows = [o.row() for o in outcomes]
    paths = {
        "csv": out / "results.csv",
        "json": out / "results.json",
        "report": out / REPORT_NAME,
        "cases": out / RESULTS_DIR,
    }
    write_text_atomic(paths["csv"], _csv(rows), root=out)
    notes = []
    flags = sorted({f for o in outcomes for f in o.result.flags})
    for f in flags:
        k = sum(f in o.result.flags for o in outcomes)
        notes.append(f"{k} case(s) flagged '{f}': {flag_meaning(f)}")
    check_keys = ("case_id", "status", "cells", "layers", "iterations", "convergence", "yplus_median", "yplus_p95",
                  "yplus_share_in_range", "yplus_range")
    checks = [{k: r.get(k) for k in check_keys} for r in rows]
    title = title or options.title or f"Sweep report — {manifest.study or Path(sweep_dir).name}"
    analysis = analyse_results([o.result for o in outcomes], title=title, study=manifest.study, notes=notes,
                               checks=checks, cell_sizes={o.result.case_id: o.cell_size for o in outcomes})
    write_json_atomic(paths["json"], root=out, obj=json_ready({
        "study": manifest.study,
        "axes": "wind axes of caseprep.contract.frames: C_L positive up (downforce = -C_L), C_D along the relative wind, "
                "C_S along +y_W; balance = front share of downforce; ride heights m; angles deg",
        "flags": {f: flag_meaning(f) for f in flags},
        "cases": rows,
        "ranking": [asdict(s) for s in analysis.ranking],
        "mesh_study": list(analysis.mesh_study),
        "aero_maps": list(analysis.aero_maps),
    }))
    analysis_doc = None
    try:   # the same analysis as `postproc analyse` on this folder
        analysis_doc = analyse_table(read_sweep_table(out), analysis_cfg)
        paths["analysis"] = write_analysis(analysis_doc, out / ANALYSIS_NAME)
    except UserError as exc:
        analysis = replace(analysis, notes=analysis.notes + (f"analysis.json not written: {exc}",))
    # the pictured cases again, now with every flag known; a scene still missing is built now
    results = [o.result for o in outcomes]
    skipped: list[tuple[str, str]] = []
    pcs = choose_picture_cases(results, variants, options) if options.pictures else []
    by_id = {o.result.case_id: o for o in outcomes}
    scenes = []
    for pc in pcs:
        sc = by_id[pc.case_id].scene
        tried = next((n for n in by_id[pc.case_id].notes if n.startswith(("picture: ", "flow: "))), None)
        if sc is None and pc.case_id in want_scene and tried:
            skipped.append((pc.case_id, tried.split(": ", 1)[1]))
        elif sc is None:
            try:
                cdir = manifest.case_dir(manifest.case(pc.case_id))
                cf = isolated(analyse_case_flow, cdir, replace(flow, scene=True), label=pc.case_id,
                              what=str(cdir / "VTK"))
                sc = cf.scene
                if sc is None:
                    skipped.append((pc.case_id, cf.scene_error or "no picture scene"))
            except UserError as exc:
                skipped.append((pc.case_id, str(exc).splitlines()[0]))
        if sc is not None:
            scenes.append(sc)
    if options.pictures:
        for v in variants:
            if v not in {pc.variant for pc in pcs}:
                skipped.append((v, "no usable case with a volume result to picture"))
    base = next((sc for sc in scenes if sc.variant == baseline), None)
    scenes = [scene_difference(sc, base) for sc in scenes]
    flow_rows = {o.result.case_id: {"variant": o.result.variant, **o.flow} for o in outcomes if o.flow}
    extra_notes: list[str] = []
    data = assemble(results, title=title, study=manifest.study, notes=notes + extra_notes, checks=checks,
                    mesh_study=list(analysis.mesh_study), aero_maps=list(analysis.aero_maps), flow_rows=flow_rows,
                    scenes=scenes, picture_cases=pcs, pictures_skipped=skipped,
                    histories=[o.history for o in outcomes if o.history is not None],
                    spread=_iterative_spread(outcomes), options=replace(options, baseline=baseline),
                    ranking=list(analysis.ranking), analysis=analysis_doc)
    return replace(analysis, outcomes=tuple(outcomes), paths=paths, report_data=data, analysis=analysis_doc)
