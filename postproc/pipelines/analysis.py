"""The analysis of a results table: aero maps with error bars, peak and
stall per rake line, the platform under load and the honest ranking,
written as ``analysis.json`` (the data the report renders).

Source: a results CSV (``postproc.io.results_table``) or a sweep folder
post-processed by ``postproc sweep``. Settings: ``ANALYSIS.toml`` or the
``[analysis]`` table of a sweep config (``postproc.io.analysis_config``).
Everything here is orchestration; the numbers come from the kernels in
``postproc.kernels`` (maps, peaks, platform, decision).
"""
from __future__ import annotations

import datetime as _dt
import json
import math
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any

import numpy as np

from caseprep.contract import __version__
from caseprep.contract.errors import UserError, did_you_mean
from caseprep.contract.manifest import read_manifest
from caseprep.contract.atomicio import json_ready, write_json_atomic

from ..io.analysis_config import STANDARD_AIR_DENSITY, AnalysisConfig, read_analysis_config
from ..io.results_table import ResultsTable, read_results
from ..kernels.decision import CONSTRAINTS, DEFAULT_WEIGHTS, METRICS, DecisionOptions, PointData, decide, point_key
from ..kernels.mapfit import MapFit, MapOptions, fit_map
from ..kernels.peakstall import find_peak
from ..kernels.platform import AxleLoads, Platform, platform_response
from ..kernels.terms import FitStatus, PlatformState
from .analysis_points import (OpPoint, comparison_levels, mesh_study, operating_points, with_mesh_uncertainty)

SCHEMA = "underfloor.analysis"
SCHEMA_VERSION = 1
OUTPUT_NAME = "analysis.json"
MAPPED = ("cl_front", "cl_rear", "cd", "cl")
CAUTION = ("CFD is an approximation and so is every fit of it: validate by physical test (wind tunnel, track) "
           "before relying on a decision; run vehicles only where permitted and safe; defer to local rules and "
           "qualified engineers.")


@dataclass(frozen=True)
class AnalysisOptions:
    """Resolved settings of one analysis (kernel defaults where the config is silent)."""

    maps: MapOptions
    decision: DecisionOptions
    mesh_levels: str
    queries: tuple[tuple[float, float], ...]
    grid: int
    design_front: float | None
    design_rear: float | None
    config: AnalysisConfig


def resolve_options(cfg: AnalysisConfig) -> AnalysisOptions:
    """Kernel options from the config; unknown metric or constraint names
    raise a did-you-mean UserError listing the available ones."""
    file = cfg.file or "the analysis settings"
    for m in (cfg.weights or {}):
        if m not in METRICS:
            raise UserError(expected="a ranking metric (" + ", ".join(METRICS) + ")", got=m, file=file,
                            key=f"ranking.weights.{m}", fix="use one of the listed metrics." + did_you_mean(m, METRICS))
    for c in cfg.constraints:
        if c not in CONSTRAINTS:
            raise UserError(expected="a constraint (" + ", ".join(CONSTRAINTS) + ")", got=c, file=file,
                            key=f"constraints.{c}", fix="use one of the listed names." + did_you_mean(c, CONSTRAINTS))
    lo, hi = cfg.constraints.get("balance_min"), cfg.constraints.get("balance_max")
    if lo is not None and hi is not None and lo >= hi:
        raise UserError(expected="balance_min < balance_max", got=f"{lo} ≥ {hi}", file=file, key="constraints")
    mo = {k: v for k, v in cfg.maps.items() if k != "mesh_levels"}
    d = DecisionOptions()
    dec = DecisionOptions(weights=dict(cfg.weights) if cfg.weights else dict(DEFAULT_WEIGHTS),
                          constraints=dict(cfg.constraints),
                          coverage=d.coverage if cfg.coverage is None else cfg.coverage,
                          perturbation=d.perturbation if cfg.perturbation is None else cfg.perturbation)
    return AnalysisOptions(MapOptions(**mo), dec, cfg.maps.get("mesh_levels", "finest"), cfg.queries, cfg.grid,
                           cfg.design_front, cfg.design_rear, cfg)


# --------------------------------------------------------------------------- maps

def _groups(points: list[OpPoint], levels: dict[str, int], each: bool) -> dict[tuple, list[OpPoint]]:
    """Usable points by (variant, yaw, speed, level): never mixing mesh levels."""
    g: dict[tuple, list[OpPoint]] = {}
    for p in points:
        if p.usable and (each or p.level == levels[p.variant]):
            g.setdefault((p.variant, round(p.yaw, 3), round(p.speed, 3), p.level), []).append(p)
    return g


def _grid(fits: dict[str, MapFit], n: int) -> dict | None:
    """Fitted values on a grid over the tested region (for plotting)."""
    ref = next((f for f in fits.values() if f.ok), None)
    if ref is None:
        return None
    d = ref.design
    if d.dim == 2:
        lo = d.centre - d.half_range
        hi = d.centre + d.half_range
        F, R = np.meshgrid(np.linspace(lo[0], hi[0], n), np.linspace(lo[1], hi[1], n))
    else:
        s = np.linspace(-d.half_range[0], d.half_range[0], n)
        F, R = d.centre[0] + s * d.axes[0][0], d.centre[1] + s * d.axes[0][1]
    out: dict[str, Any] = {"ride_height_front": F.tolist(), "ride_height_rear": R.tolist(),
                           "extrapolated": ref.extrapolated(F, R).tolist()}
    for c, f in fits.items():
        if f.ok:
            out[c] = f(F, R).tolist()
    if fits["cl_front"].ok and fits["cl_rear"].ok:
        out["balance"] = _balance(fits["cl_front"](F, R), fits["cl_rear"](F, R)).tolist()
    return out


def _balance(f, r):
    """Front share of downforce C_LF/(C_LF + C_LR) from the fitted axle loads (NaN where the total ≈ 0)."""
    f, r = np.asarray(f, float), np.asarray(r, float)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(np.abs(f + r) > 1e-9, f / (f + r), np.nan)


def _query(fits: dict[str, MapFit], hf: float, hr: float) -> dict:
    out: dict[str, Any] = {"ride_height_front": hf, "ride_height_rear": hr}
    ok = [f for f in fits.values() if f.ok]
    out["extrapolated"] = bool(ok[0].extrapolated(hf, hr)) if ok else None
    for c, f in fits.items():
        out[c] = {"value": float(f(hf, hr)), "interval": float(f.interval(hf, hr))} if f.ok else None
    if fits["cl_front"].ok and fits["cl_rear"].ok:
        out["balance"] = float(_balance(fits["cl_front"](hf, hr), fits["cl_rear"](hf, hr)))
    return out


def fit_maps(points: list[OpPoint], levels: dict[str, int], opts: AnalysisOptions) -> tuple[list[dict], dict]:
    """Maps of C_LF, C_LR, C_D and C_L per (variant, yaw, speed, level);
    returns their records and the fits by group key."""
    records, fits_by = [], {}
    for key, pts in sorted(_groups(points, levels, opts.mesh_levels == "each").items()):
        hf = np.array([p.h_f for p in pts])
        hr = np.array([p.h_r for p in pts])
        fits = {c: fit_map(hf, hr, [p.values[c] for p in pts], opts.maps) for c in MAPPED}
        fits_by[key] = fits
        ref = next((f for f in fits.values() if f.ok), fits["cl"])
        rec = {"variant": key[0], "yaw_deg": key[1], "speed": key[2], "mesh_level": key[3], "n_points": len(pts),
               "design": ref.design.to_dict(), "coefficients": {c: f.to_dict() for c, f in fits.items()}}
        centre = ref.design.centre
        rec["sensitivities"] = {c: f.sensitivity(float(centre[0]), float(centre[1])) for c, f in fits.items() if f.ok}
        rec["queries"] = [_query(fits, *q) for q in opts.queries]
        rec["grid"] = _grid(fits, opts.grid)
        records.append(rec)
    return records, fits_by


def with_fit_uncertainty(points: list[OpPoint], fits_by: dict) -> list[OpPoint]:
    """u_fit of each point: the LOO RMS of its group's map per coefficient."""
    out = []
    for p in points:
        fits = fits_by.get((p.variant, round(p.yaw, 3), round(p.speed, 3), p.level))
        if fits is None:
            out.append(p)
            continue
        uf = {c: fits[c].loo_rms for c in ("cl", "cd", "cl_front", "cl_rear") if fits[c].ok}
        out.append(replace(p, u_fit=uf))
    return out


# --------------------------------------------------------------------------- peaks

def _design_rake(opts: AnalysisOptions) -> float | None:
    if opts.design_front is None or opts.design_rear is None:
        return None
    return opts.design_rear - opts.design_front


def find_peaks(points: list[OpPoint], levels: dict[str, int], opts: AnalysisOptions) -> list[dict]:
    """Peak and stall per (variant, yaw, speed, level) and line of constant
    rake h_r − h_f (0.1 mm bins), with a significant drop larger than √2 × the
    largest iterative uncertainty on the line; the line nearest the design rake carries
    the design margin. Flagged points below the lowest usable ride height
    are listed: a floor often fails exactly where it stalls."""
    lines: dict[tuple, list[OpPoint]] = {}
    for p in points:
        if p.level == levels[p.variant] or opts.mesh_levels == "each":
            k = (p.variant, round(p.yaw, 3), round(p.speed, 3), p.level, round(p.h_r - p.h_f, 4))
            lines.setdefault(k, []).append(p)
    by_group: dict[tuple, list[tuple]] = {}
    for k in lines:
        by_group.setdefault(k[:4], []).append(k)
    rake_d = _design_rake(opts)
    out = []
    for g, keys in sorted(by_group.items()):
        nearest = min(keys, key=lambda k: abs(k[4] - rake_d)) if rake_d is not None else \
            (keys[0] if len(keys) == 1 else None)
        for k in sorted(keys):
            pts = sorted(lines[k], key=lambda p: p.h_f)
            ok = [p for p in pts if p.usable]
            # a drop between neighbours is significant beyond the points' random scatter (iterative spread,
            # repeats); mesh error is systematic along a line and the map-fit error is not the data's
            noise = math.sqrt(2) * max((p.u_iter.get("cl", 0.0) for p in ok), default=0.0)
            design = opts.design_front if k == nearest else None
            r = find_peak([p.h_f for p in ok], [-p.values["cl"] for p in ok], noise, design)
            low = min((p.h_f for p in ok), default=math.inf)
            below = [{"ride_height_front": p.h_f, "flags": list(p.flags)} for p in pts if not p.usable and p.h_f < low]
            rec = {"variant": k[0], "yaw_deg": k[1], "speed": k[2], "mesh_level": k[3], "rake": k[4],
                   "design_line": k == nearest and opts.design_front is not None, "noise": noise,
                   "ride_height_front": [p.h_f for p in ok], "downforce": [-p.values["cl"] for p in ok],
                   **r.to_dict(), "flagged_below": below}
            if below:
                rec["note"] += (f"; {len(below)} flagged point(s) below the lowest usable ride height: "
                                "a stall there would be hidden")
            out.append(rec)
    return out


def peak_margins(peaks: list[dict]) -> dict[str, float]:
    """Each variant's smallest design margin to the peak (m) over its design lines."""
    m: dict[str, float] = {}
    for r in peaks:
        if r["design_line"] and r["margin"] is not None:
            m[r["variant"]] = min(m.get(r["variant"], math.inf), r["margin"])
    return m


# --------------------------------------------------------------------------- platform

def _platform_one(v: str, fits_by: dict, points: list[OpPoint], levels: dict[str, int], opts: AnalysisOptions) -> dict:
    ps = opts.config.platform
    keys = [k for k in fits_by if k[0] == v and k[3] == levels[v]]
    if not keys:
        return {"variant": v, "status": str(FitStatus.REFUSED), "reason": "no aero map for this variant"}
    yaw = ps.yaw_deg if ps.yaw_deg is not None else min((abs(k[1]) for k in keys))
    keys = [k for k in keys if abs(abs(k[1]) - abs(yaw)) < 1e-3] or keys
    key = max(keys, key=lambda k: k[2])   # the highest tested speed: closest to running conditions
    fits = fits_by[key]
    base = {"variant": v, "map": {"yaw_deg": key[1], "speed": key[2], "mesh_level": key[3]}}
    f, r = fits["cl_front"], fits["cl_rear"]
    if not (f.ok and r.ok):
        return {**base, "status": str(FitStatus.REFUSED),
                "reason": "no axle-load maps (C_LF, C_LR): " + (f.reason or r.reason or "columns empty")}
    if f.design.dim < 2:
        return {**base, "status": str(FitStatus.REFUSED), "reason": "the map spans one line of ride heights; under "
                "load front and rear compress differently, so the platform needs front and rear ride heights "
                "varied independently (two or more rakes)"}
    areas = [p.area for p in points if p.variant == v and math.isfinite(p.area)]
    area = ps.reference_area if ps.reference_area is not None else (float(np.mean(areas)) if areas else None)
    if area is None:
        return {**base, "status": str(FitStatus.REFUSED),
                "reason": "no reference area: give a reference_area column or platform.reference_area"}
    rhos = [p.rho for p in points if p.variant == v and math.isfinite(p.rho)]
    rho = ps.air_density if ps.air_density is not None else (float(np.mean(rhos)) if rhos else STANDARD_AIR_DENSITY)
    plat = Platform(ps.static_front, ps.static_rear, ps.rate_front, ps.rate_rear)
    loads = AxleLoads(lambda a, b: float(f(a, b)), lambda a, b: float(r(a, b)), area, rho,
                      lambda a, b: bool(f.extrapolated(a, b)))
    res = platform_response(plat, loads, ps.speeds, ps.speed_max)
    return {**base, "status": str(FitStatus.OK), "reason": "", "reference_area": area, "air_density": rho,
            "static": [ps.static_front, ps.static_rear], "rates": [ps.rate_front, ps.rate_rear], **res.to_dict()}


def platform_all(variants: list[str], fits_by: dict, points, levels, opts: AnalysisOptions) -> list[dict]:
    """The platform per variant; a UserError when no variant holds the floor
    off the ground at any requested speed (static heights or rates wrong)."""
    if opts.config.platform is None:
        return []
    out = [_platform_one(v, fits_by, points, levels, opts) for v in variants]
    solved = [r for r in out if r["status"] == str(FitStatus.OK)]
    if solved and not any(s["state"] == str(PlatformState.EQUILIBRIUM) for r in solved for s in r["states"]):
        ps = opts.config.platform
        raise UserError(expected="an equilibrium off the ground at one or more platform speeds",
                        got="the floor on the ground (or pulled down) at every speed for every variant "
                            f"(static {ps.static_front:g}/{ps.static_rear:g} m, rates {ps.rate_front:g}/"
                            f"{ps.rate_rear:g} N/m)", file=opts.config.file, key="platform",
                        fix="check the static ride heights (m) and the rates (N/m, at the ride-height points), "
                            "or ask for lower speeds")
    return out


def platform_clearances(platform: list[dict]) -> dict[str, float]:
    """Each variant's smallest clearance over the requested speeds (0 when it bottoms)."""
    out = {}
    for r in platform:
        if r["status"] == str(FitStatus.OK):
            c = [s["clearance"] if s["state"] == str(PlatformState.EQUILIBRIUM) else 0.0 for s in r["states"]]
            out[r["variant"]] = float(min(c))
    return out


# --------------------------------------------------------------------------- ranking and the whole

def rank(points: list[OpPoint], levels: dict[str, int], opts: AnalysisOptions, facts: dict) -> dict:
    """The decision kernel on each variant's comparison level."""
    data: dict[str, list[PointData]] = {}
    for p in points:
        if p.level != levels[p.variant]:
            continue
        v = p.values
        data.setdefault(p.variant, []).append(PointData(
            point_key(p.h_f, p.h_r, p.yaw, p.speed), p.flags, v["cl"], v["cd"], v["cl_front"], v["cl_rear"],
            p.area, p.u("cl"), p.u("cd"), p.u("cl_front"), p.u("cl_rear")))
    out = decide(data, opts.decision, facts)
    if len(set(levels.values())) > 1:
        out["notes"].append("variants compared on different finest mesh levels: "
                            + ", ".join(f"{v} {m}" for v, m in sorted(levels.items())))
    return out


def _point_record(p: OpPoint) -> dict:
    return {"variant": p.variant, "ride_height_front": p.h_f, "ride_height_rear": p.h_r, "yaw_deg": p.yaw,
            "speed": p.speed, "mesh_level": p.level, "usable": p.usable, "flags": list(p.flags),
            "cases": list(p.case_ids), "reference_area": p.area, **{c: p.values[c] for c in p.values},
            "uncertainty": {c: {"combined": p.u(c), "iterative": p.u_iter.get(c, 0.0), "mesh": p.u_mesh.get(c, 0.0),
                                "fit": p.u_fit.get(c, 0.0)} for c in ("cl", "cd", "cl_front", "cl_rear")}}


def analyse_table(table: ResultsTable, cfg: AnalysisConfig) -> dict:
    """The whole analysis of one results table as JSON-ready data (the
    schema is in the README: ``analysis.json``)."""
    opts = resolve_options(cfg)
    points, notes = operating_points(table)
    study, n2 = mesh_study(points)
    points, n3 = with_mesh_uncertainty(points, study)
    levels = comparison_levels(points)
    maps, fits_by = fit_maps(points, levels, opts)
    points = with_fit_uncertainty(points, fits_by)
    peaks = find_peaks(points, levels, opts)
    variants = sorted(levels)
    platform = platform_all(variants, fits_by, points, levels, opts)
    clear = platform_clearances(platform)
    margins = peak_margins(peaks)
    facts = {v: {"min_clearance": clear.get(v), "peak_margin": margins.get(v)} for v in variants}
    ranking = rank(points, levels, opts, facts)
    refused = [f"{m['variant']} (yaw {m['yaw_deg']:g}, {m['speed']:g} m/s): {m['coefficients']['cl']['reason']}"
               for m in maps if m["coefficients"]["cl"]["status"] == str(FitStatus.REFUSED)]
    missing_maps = [v for v in variants if not any(m["variant"] == v for m in maps)]
    return json_ready({
        "schema": SCHEMA, "schema_version": SCHEMA_VERSION, "tool_version": __version__,
        "created_utc": _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ"),
        "source": {"path": table.source, "kind": table.kind, "rows": len(table),
                   "usable_rows": int(np.sum(table.usable)), "settings_file": cfg.file},
        "caution": CAUTION,
        "axes": "wind axes of caseprep.frames: C_L positive up (downforce = -C_L); C_LF + C_LR = C_L; balance = "
                "C_LF/(C_LF + C_LR), the front share of downforce; ride heights m; yaw deg; speed m/s",
        "settings": {"maps": {**opts.maps.__dict__, "mesh_levels": opts.mesh_levels},
                     "design": {"ride_height_front": opts.design_front, "ride_height_rear": opts.design_rear},
                     "ranking": {"weights": dict(opts.decision.weights), "coverage": opts.decision.coverage,
                                 "perturbation": opts.decision.perturbation,
                                 "constraints": dict(opts.decision.constraints)},
                     "platform": None if cfg.platform is None else dict(cfg.platform.__dict__)},
        "comparison_levels": levels,
        "points": [_point_record(p) for p in points],
        "mesh_study": study,
        "maps": maps,
        "peaks": peaks,
        "platform": platform,
        "ranking": ranking,
        "notes": list(table.notes) + list(cfg.notes) + notes + n2 + n3
        + [f"map refused: {r}" for r in refused]
        + [f"{v}: no usable point to map" for v in missing_maps],
    })


def default_config_path(source: Path, sweep_config: str | None = None) -> Path | None:
    """The settings a source implies: ``ANALYSIS.toml`` beside it (in the
    sweep folder, or next to the CSV), else the sweep's own config file
    (``sweep_config``, as the manifest records it: absolute, or relative to
    the sweep folder or the working folder) when it has an ``[analysis]``
    table; None when there is neither."""
    folder = source if source.is_dir() else source.parent
    p = folder / "ANALYSIS.toml"
    if p.is_file():
        return p
    if sweep_config:
        for c in (Path(sweep_config), folder / sweep_config):
            try:
                if c.is_file() and "[analysis" in c.read_text(encoding="utf-8", errors="replace"):
                    return c
            except OSError:
                continue
    return None


def write_analysis(data: dict, target: Path) -> Path:
    """Write ``analysis.json`` atomically as strict JSON (nothing on failure)."""
    json.dumps(data, allow_nan=False)   # strict JSON before anything is written
    try:
        write_json_atomic(target, data)
    except OSError as exc:
        raise UserError(expected="a writable output folder", got=f"{target.parent} ({exc.strerror})",
                        key="-o/--out", fix="choose a folder you can write to") from None
    return target


def _manifest_config(src: Path) -> str | None:
    """The config file a sweep folder's manifest records, if it is one."""
    if not (src.is_dir() and (src / "manifest.json").is_file()):
        return None
    try:
        return read_manifest(src).config_file or None
    except UserError:
        return None


def run_analysis(source: str | Path, config: str | Path | None = None, out_dir: str | Path | None = None,
                 force: bool = False) -> tuple[dict, Path]:
    """Read, analyse and write ``OUT/analysis.json`` atomically (OUT default:
    the sweep folder, or the CSV's folder). An existing file is not replaced
    unless ``force``. Returns the data and the path written."""
    src = Path(source)
    table = read_results(src)
    cfg_path = Path(config) if config is not None else default_config_path(src, _manifest_config(src))
    cfg = read_analysis_config(cfg_path)
    out = Path(out_dir) if out_dir is not None else (src if src.is_dir() else src.parent)
    target = out / OUTPUT_NAME
    if target.exists() and not force:
        raise UserError(expected="no earlier analysis in the output folder", got=str(target),
                        fix="pass --force to replace it, or -o to write somewhere else")
    if out.exists() and not out.is_dir():
        raise UserError(expected="an output folder", got=f"{out} (a file)", key="-o/--out")
    data = analyse_table(table, cfg)
    return data, write_analysis(data, target)
