"""Post-process a whole sweep: every case's forces, coefficients, balance and
convergence, joined with what the runner recorded, into one results table,
then the variant ranking and the HTML report.

Inputs: a sweep folder written by ``caseprep write`` (``manifest.json``) and
run by ``caseprep run`` (``<case>/underfloor-run.json``, ``VTK/``).
Outputs (in the sweep folder unless told otherwise, atomic writes):

* ``results/<case_id>.json`` — the full forces report of each case, with
  the body's y+ statistics per patch and the case's flags;
* ``results.csv`` and ``results.json`` — one row per case;
* the report's data (:class:`postproc.reportdata.ReportData`), which
  :func:`postproc.report.write_report` renders to ``report.html``.

Besides the forces, each case with a volume result gets its flow columns
(:mod:`postproc.caseflow`: diffuser recovery, main vortex pair, ramp
separation, floor suction — the numbers ``postproc flow`` gives), and one
case per variant (the same operating point for all) its picture scene.

Coefficients are in the wind axes of caseprep.frames (C_L positive up,
downforce = −C_L; C_D along the relative wind; C_S along +y_W), on the
reference area and the dynamic pressure of the resultant air speed recorded
in the manifest. A case is **flagged** (never ranked) when the runner
flagged it, when it did not finish, when its forces could not be computed,
or when the runtime force monitor is still drifting at the end of the run.
The monitor is judged as the runner judges it (see
:class:`caseprep.runner.RunOptions`): over the last 30 % of the iterations
(at least 20), each total-force component against max(|its mean|, the
resultant force), drift and std tolerance 1 %; ``diverging`` there gives
the ``forces-drifting`` flag.
"""
from __future__ import annotations

import csv
import io
import json
import math
import os
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Any, Callable

from caseprep import runner
from caseprep.errors import UserError
from caseprep.manifest import CaseRecord, Manifest, read_manifest
from caseprep.safeio import json_ready, write_json_atomic, write_text_atomic

from . import wallchecks as wc
from .caseflow import FlowOptions
from .caseforces import forces_report
from .convergence import settle_window
from .forces import face_geometry
from .meshstudy import grid_convergence
from .readers import latest_export, read_surface
from .ranking import CaseResult, rank_variants
from .reportdata import ReportData, ReportOptions, assemble, check_baseline, choose_picture_cases, history_from_monitor

RESULTS_DIR = "results"

#: Flags added by the post-processing (the runner's are in caseprep.runner.FLAG_TEXT).
POST_FLAG_TEXT = {
    "not-run": "the case has not been run (or not to the end): no results",
    "forces-failed": "the forces could not be computed from the case's export",
    "forces-drifting": "the runtime force monitor was still drifting at the end of the run (not settled)",
}


@dataclass(frozen=True)
class CaseOutcome:
    """One case of the sweep after post-processing: the ranking row, the run
    status, the flags' explanations and any note."""

    result: CaseResult
    status: str
    cells: int | None
    iterations: int | None
    convergence: str | None
    layers: str | None = None  # e.g. "body 85 %, strake_left 38 %" (share of the target layer thickness)
    notes: tuple[str, ...] = ()
    report: dict[str, Any] | None = field(default=None, repr=False)
    yplus: dict[str, dict] = field(default_factory=dict)
    flow: dict[str, Any] = field(default_factory=dict)
    scene: Any = field(default=None, repr=False)
    history: Any = field(default=None, repr=False)
    seconds: dict[str, float] = field(default_factory=dict)


#: Intended y+ ranges of the wall treatments (common practice, no source):
#: wall functions want the first cell in the log layer, a resolved laminar or
#: low-Re wall wants it inside the viscous sublayer.
YPLUS_RANGES = {"kOmegaSST": (30.0, 300.0), "laminar": (0.0, 5.0)}
ALL_WALLS = "all body and wheel patches"


def wall_yplus(case_dir: Path, case: CaseRecord) -> tuple[dict[str, dict], str | None]:
    """y+ statistics of the body and wheel patches from the case's VTK export
    (the solver's ``yPlus`` face field): per patch min/median/p95/max and the
    area share inside the wall treatment's intended range
    (:data:`YPLUS_RANGES`, chosen from the manifest's turbulence model).
    Returns (stats by patch, None) or ({}, why not)."""
    names = list(case.patches.get("body") or []) + list(case.patches.get("wheels") or [])
    if not names:
        return {}, "no body patches in the manifest"
    try:
        surf = read_surface(latest_export(case_dir), names)
        yp = surf.array("yPlus")
    except UserError as exc:
        return {}, f"y+ not assessed: {exc}".splitlines()[0]
    model = str(case.extra.get("turbulence_model", "kOmegaSST"))
    target = YPLUS_RANGES.get(model, YPLUS_RANGES["kOmegaSST"])
    S, _ = face_geometry(surf.points, (surf.offsets, surf.connectivity))
    import numpy as np

    areas = np.linalg.norm(S, axis=1)
    out = {}
    for i, name in enumerate(surf.part_names):
        sel = surf.part_ids == i
        out[name] = wc.yplus_stats(name, yp[sel], areas[sel], target).to_dict()
    out[ALL_WALLS] = wc.yplus_stats(ALL_WALLS, yp, areas, target).to_dict()
    return out, None


def _flag_text(flag: str) -> str:
    return POST_FLAG_TEXT.get(flag) or runner.FLAG_TEXT.get(flag, flag)


def process_case(manifest: Manifest, case: CaseRecord, flow: FlowOptions | None = None) -> CaseOutcome:
    """Post-process one case of ``manifest``: its run record, its forces
    report (when its export exists), its :class:`CaseResult` row and, with
    ``flow`` (:class:`postproc.caseflow.FlowOptions`), its flow columns
    (and its picture scene when ``flow.scene``)."""
    import time

    t_start = time.perf_counter()
    case_dir = manifest.case_dir(case)
    rec = runner.read_case_record(case_dir)
    flags: list[str] = list(rec.flags) if rec is not None else []
    status = runner.effective_status(rec) if rec is not None else "not-run"
    notes: list[str] = []
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
        if "not-run" not in flags and status in ("ok", "not-run", "skipped"):
            flags.append("not-run")
        elif status not in ("ok", "skipped") and status not in flags:
            flags.append(status)
    else:
        try:
            # the monitor judged as the runner judges settling (caseprep.runner.RunOptions)
            opts = runner.RunOptions()
            report = forces_report(
                str(case_dir),
                window=None if rec is None or not rec.iterations else
                settle_window(rec.iterations, opts.settle_fraction, opts.settle_min_samples),
                monitor_options={"drift_tol": opts.settle_tol, "std_tol": opts.settle_tol,
                                 "floor_fraction": opts.settle_floor})
        except UserError as exc:
            flags.append("forces-failed")
            notes.append(f"forces: {exc}")
    nan = math.nan
    cl = cd = cs = nan
    clf = clr = bal = margin = None
    if report is not None:
        c = report.get("coefficients")
        if c:
            cl, cd, cs = float(c["lift"]), float(c["drag"]), float(c["side"])
        else:
            flags.append("forces-failed")
            notes.append("no reference values in the manifest: coefficients not computed")
        b = report.get("balance")
        if b:
            clf, clr = b.get("c_lift_front"), b.get("c_lift_rear")
            bal, margin = b.get("balance_front"), b.get("stability_margin")
            if abs(base["yaw_deg"]) < 1e-9 and margin is not None:
                # at zero yaw the side force is numerical noise about zero and its
                # centre of pressure is meaningless: report no margin
                margin = None
                notes.append("zero yaw: no side force to place, stability margin not reported")
            notes.extend(b.get("notes", []))
        conv = report.get("convergence")
        if conv is not None:
            verdict = conv["verdict"]
            if verdict == "diverging":
                flags.append("forces-drifting")
        else:
            notes.append("no runtime force monitor found: convergence not assessed")
    yplus: dict[str, dict] = {}
    if report is not None:
        yplus, why = wall_yplus(case_dir, case)
        if why:
            notes.append(why)
    result = CaseResult(**base, cl=cl, cd=cd, cs=cs, cl_front=clf, cl_rear=clr, balance=bal,
                        stability_margin=margin, flags=tuple(dict.fromkeys(flags)))
    layers = None
    if rec is not None and rec.layers:
        layers = ", ".join(f"{d.get('patch')} {d.get('thickness_percent'):.0f} %" for d in rec.layers
                           if d.get("thickness_percent") is not None) or None
    t_forces = time.perf_counter()
    flow_cols: dict[str, Any] = {}
    scene = None
    if flow is not None and exported:
        from .caseflow import analyse_case_flow

        try:
            cf = analyse_case_flow(case_dir, flow, label=case.case_id)
            flow_cols = cf.metrics.to_dict()
            scene = cf.scene
        except UserError as exc:
            notes.append("flow: " + str(exc).splitlines()[0])
    history = None
    if report is not None:
        try:
            from .convergence import read_monitor

            mon = read_monitor(case_dir)
            n = len(mon.get("Time", ()))
            history = history_from_monitor(case.case_id, mon, settle_window(n), verdict or "", bool(result.flags))
        except UserError:
            pass
    t_end = time.perf_counter()
    return CaseOutcome(result=result, status=status, cells=rec.cells if rec else None,
                       iterations=rec.iterations if rec else None, convergence=verdict,
                       notes=tuple(notes), report=report, yplus=yplus, layers=layers, flow=flow_cols, scene=scene,
                       history=history, seconds={"forces": t_forces - t_start, "flow": t_end - t_forces})


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
    r.update(o.flow)
    r["notes"] = "; ".join(o.notes)
    return r


#: representative cell size of mesh level m relative to level 0: each level
#: divides the base cell by √2 (caseprep.domain), so h_m = 2^(−m/2)
def level_cell_size(level: int) -> float:
    return 2.0 ** (-0.5 * level)


def mesh_study(results: list[CaseResult]) -> list[dict[str, Any]]:
    """Grid convergence (Celik et al. 2008, postproc.meshstudy) of C_L and C_D
    for every operating point solved on three or more mesh levels (unflagged
    cases only; the three finest levels are used). One dict per point and
    coefficient: the point's parameters, the values per level, the apparent
    order, the extrapolated value and the fine-mesh GCI (fraction)."""
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
        for name, get in (("cl", lambda r: r.cl), ("cd", lambda r: r.cd)):
            g = grid_convergence(*(get(r) for r in rows), *(level_cell_size(m) for m in lv))
            out.append({"variant": key[0], "ride_height_front": key[1], "ride_height_rear": key[2],
                        "pitch_deg": key[3], "yaw_deg": key[4], "speed": key[5], "coefficient": name,
                        "levels": lv, "cases": [r.case_id for r in rows], **g.to_dict()})
    return out


def _csv(rows: list[dict[str, Any]]) -> str:
    cols: list[str] = []
    for r in rows:
        cols += [k for k in r if k not in cols]
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(cols)
    for r in rows:
        w.writerow(["" if r.get(k) is None or (isinstance(r.get(k), float) and not math.isfinite(r[k]))
                    else (f"{r[k]:.6g}" if isinstance(r.get(k), float) else r[k]) for k in cols])
    return buf.getvalue()


def _iterative_spread(outcomes: list[CaseOutcome]) -> dict[str, tuple[float, float]]:
    """Per variant: the RMS over its unflagged cases of the runtime force
    monitor's standard deviation over the settling window, as coefficient
    half-widths (−C_L, C_D) — std of the body-axes force over qA (body and
    wind axes differ by the pitch and yaw angles, a few degrees: cos 4° =
    0.998). None-free: variants without monitor statistics are left out."""
    import numpy as np

    acc: dict[str, list[tuple[float, float]]] = {}
    for o in outcomes:
        rep = o.report or {}
        conv, ref = rep.get("convergence"), rep.get("reference")
        if o.result.flags or not conv or not ref:
            continue
        stats = {s.get("name"): s for s in conv.get("series", [])} if isinstance(conv.get("series"), list) else \
            conv.get("series", {})
        fz, fx = stats.get("force.total_z"), stats.get("force.total_x")
        qa = float(ref["q"]) * float(ref["area"])
        if fz and fx and qa > 0 and fz.get("std") is not None and fx.get("std") is not None:
            acc.setdefault(o.result.variant, []).append((float(fz["std"]) / qa, float(fx["std"]) / qa))
    return {v: (float(np.sqrt(np.mean([a * a for a, _ in xs]))), float(np.sqrt(np.mean([b * b for _, b in xs]))))
            for v, xs in acc.items()}


def postprocess_sweep(
    sweep_dir: str | os.PathLike,
    out_dir: str | os.PathLike | None = None,
    title: str | None = None,
    progress: Callable[[int, int, CaseOutcome], None] | None = None,
    force: bool = False,
    options: ReportOptions = ReportOptions(),
    flow: FlowOptions | None = None,
) -> tuple[list[CaseOutcome], dict[str, Path], ReportData]:
    """Post-process every case of a sweep, write the tables and return what
    the report shows.

    ``out_dir`` defaults to the sweep folder. ``progress(i, n, outcome)`` is
    called after each case. Existing results are not replaced unless
    ``force`` (UserError naming the file). ``options`` choose the pictured
    operating point and the baseline (a baseline that is not a variant of
    the sweep is a UserError naming the available ones); ``flow`` the flow
    pass (default :class:`postproc.caseflow.FlowOptions`). Returns the
    outcomes, the written paths (keys ``csv``, ``json``, ``cases``, and
    ``report`` where the report belongs) and the report data
    (:func:`postproc.report.write_report` renders it).
    """
    flow = flow or FlowOptions()
    manifest = read_manifest(sweep_dir)
    out = Path(out_dir) if out_dir is not None else Path(manifest.root or sweep_dir)
    existing = [p for p in (out / "results.csv", out / "results.json", out / "report.html") if p.exists()]
    if existing and not force:
        raise UserError(expected="no earlier results in the output folder", got=", ".join(str(p) for p in existing),
                        fix="pass --force to replace them, or -o to write somewhere else")
    variants = list(dict.fromkeys(c.variant for c in manifest.cases))
    baseline = check_baseline(options.baseline, variants)
    # the pictured cases, chosen from the plan and the runner's flags (forces may add flags: checked below)
    planned = []
    for c in manifest.cases:
        rec = runner.read_case_record(manifest.case_dir(c))
        p = c.params
        planned.append(CaseResult(case_id=c.case_id, variant=c.variant,
                                  ride_height_front=float(p.get("ride_height_front", math.nan)),
                                  ride_height_rear=float(p.get("ride_height_rear", math.nan)),
                                  pitch_deg=float(p.get("pitch_deg", 0.0)), yaw_deg=float(p.get("yaw_deg", 0.0)),
                                  cl=0.0, cd=0.0, mesh_level=int(p.get("mesh_level", 0)),
                                  flags=tuple(rec.flags) if rec is not None else ("not-run",)))
    want_scene = {pc.case_id for pc in choose_picture_cases(planned, variants, options)} if options.pictures else set()
    outcomes = []
    n = len(manifest.cases)
    for i, case in enumerate(manifest.cases):
        fo = FlowOptions(**{**flow.__dict__, "scene": case.case_id in want_scene})
        o = process_case(manifest, case, fo)
        outcomes.append(o)
        if o.report is not None:
            write_json_atomic(out / RESULTS_DIR / f"{case.case_id}.json",
                              json_ready({**o.report, "yplus": o.yplus, "flow": o.flow, "flags": list(o.result.flags)}))
        if progress is not None:
            progress(i + 1, n, o)
    rows = [outcome_row(o) for o in outcomes]
    paths = {
        "csv": out / "results.csv",
        "json": out / "results.json",
        "report": out / "report.html",
        "cases": out / RESULTS_DIR,
    }
    write_text_atomic(paths["csv"], _csv(rows))
    results = [o.result for o in outcomes]
    ranking = rank_variants(results)
    study = mesh_study(results)
    write_json_atomic(paths["json"], json_ready({
        "study": manifest.study,
        "axes": "wind axes of caseprep.frames: C_L positive up (downforce = -C_L), C_D along the relative wind, "
                "C_S along +y_W; balance = front share of downforce; ride heights m; angles deg",
        "flags": {f: _flag_text(f) for f in sorted({f for o in outcomes for f in o.result.flags})},
        "cases": rows,
        "ranking": [asdict(s) for s in ranking],
        "mesh_study": study,
    }))
    notes = []
    flags = sorted({f for o in outcomes for f in o.result.flags})
    for f in flags:
        k = sum(f in o.result.flags for o in outcomes)
        notes.append(f"{k} case(s) flagged '{f}': {_flag_text(f)}")
    check_keys = ("case_id", "status", "cells", "layers", "iterations", "convergence", "yplus_median", "yplus_p95",
                  "yplus_share_in_range", "yplus_range")
    checks = [{k: r.get(k) for k in check_keys} for r in rows]
    # the pictured cases again, now with every flag known; scenes still missing are built now
    skipped = []
    pcs = choose_picture_cases(results, variants, options) if options.pictures else []
    by_id = {o.result.case_id: o for o in outcomes}
    scenes = []
    if options.pictures:
        from .caseflow import analyse_case_flow

        for pc in pcs:
            o = by_id[pc.case_id]
            sc = o.scene
            if sc is None:
                try:
                    sc = analyse_case_flow(manifest.case_dir(manifest.case(pc.case_id)),
                                           FlowOptions(**{**flow.__dict__, "scene": True}), label=pc.case_id).scene
                except UserError as exc:
                    skipped.append((pc.case_id, str(exc).splitlines()[0]))
            if sc is not None:
                scenes.append(sc)
        for v in variants:
            if v not in {pc.variant for pc in pcs}:
                skipped.append((v, "no usable case with a volume result to picture"))
    flow_rows = {o.result.case_id: {"variant": o.result.variant, **o.flow} for o in outcomes if o.flow}
    data = assemble(results, title=title or f"Sweep report — {manifest.study or Path(sweep_dir).name}",
                    study=manifest.study, notes=notes, checks=checks, mesh_study=study, flow_rows=flow_rows,
                    scenes=scenes, picture_cases=pcs, pictures_skipped=skipped,
                    histories=[o.history for o in outcomes if o.history is not None],
                    spread=_iterative_spread(outcomes), options=ReportOptions(**{**options.__dict__,
                                                                                 "baseline": baseline}),
                    ranking=ranking)
    return outcomes, paths, data


def read_results(path: str | os.PathLike) -> dict[str, Any]:
    """Read a ``results.json`` written by :func:`postprocess_sweep`."""
    p = Path(path)
    if p.is_dir():
        p = p / "results.json"
    try:
        return json.loads(p.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise UserError(expected="a results.json written by `postproc sweep`", got=str(p),
                        fix="run `postproc sweep SWEEP_DIR` first") from None
