"""One case of a sweep post-processed: its run record, its forces report
(coefficients as the monitor's window means, the verdict of the one
convergence rule), the y+ of its walls, its flow columns and picture scene
(read in a child process with limits), its force history → a
:class:`~postproc.pipelines.sweep_rows.CaseOutcome`.

Coefficients are in the wind axes of caseprep.contract.frames (C_L positive
up, downforce = −C_L; C_D along the relative wind; C_S along +y_W). A case
is **flagged** when the runner flagged it, when it did not finish, when its
forces could not be computed, or when the runtime force monitor is still
drifting at the end of the run (``forces-drifting``).
"""
from __future__ import annotations

import math
from dataclasses import replace
from pathlib import Path
from typing import Any

import numpy as np

from caseprep.contract import walls
from caseprep.contract.convergence import settle_window
from caseprep.contract.errors import UserError
from caseprep.contract.limits import MAX_ANALYSIS_SECONDS
from caseprep.contract.manifest import CaseRecord, Manifest
from caseprep.contract.monitor import read_monitor
from caseprep.contract.records import Flag, Status, as_flag, effective_status, load_case_record, read_case_record
from postproc.io.exports import latest_export
from postproc.io.isolation import UnreadableFile, isolated, physical_memory, preload
from postproc.io.surfaces import read_surface
from postproc.kernels import wallchecks as wc
from postproc.kernels.meshstudy import representative_cell_size
from postproc.kernels.polygons import face_geometry
from postproc.pipelines.flow_columns import FlowOptions, analyse_case_flow
from postproc.pipelines.case_forces import ForcesReport, forces_report
from postproc.pipelines.report_data import history_from_monitor
from postproc.pipelines.sweep_rows import ALL_WALLS, CaseOutcome, CaseResult

# the child processes that read the cases start with these loaded (postproc.io.isolation)
preload("pyvista", "postproc.pipelines.flow_columns", "postproc.pipelines.case_forces")
#: limits of a case's volume analysis (flow columns, pictures): the machine's memory, MAX_ANALYSIS_SECONDS
ANALYSIS_LIMITS = {"memory": physical_memory(), "timeout": float(MAX_ANALYSIS_SECONDS.value)}


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
