"""The analysis settings: ``ANALYSIS.toml`` or the ``[analysis]`` table of a
sweep config, read into one frozen :class:`AnalysisConfig`.

Keys (units SI; every key optional; a value left out takes the default of
the kernel that uses it, stated in the README) are declared once in
:data:`KEYS`. Weight names and constraint names are checked against the
ranking's own tables by the pipeline (with a did-you-mean message).
"""
from __future__ import annotations

import math
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from types import MappingProxyType
from typing import Any, Mapping

from caseprep.contract.errors import UserError, did_you_mean

#: section.key → (unit, meaning)
KEYS: Mapping[str, tuple[str, str]] = MappingProxyType({
    "ranking.weights": ("—", "table metric = weight (≥ 0); metrics: downforce, drag, efficiency, balance_range, "
                             "yaw_retention, downforce_spread"),
    "ranking.coverage": ("—", "coverage factor k of a tie: |Δscore| ≤ k·√(u_a² + u_b²)"),
    "ranking.perturbation": ("—", "relative change of each weight for the winner-stability check"),
    "constraints": ("various", "table of limits: balance_min, balance_max (fraction), max_cd (—), max_cd_area (m²), "
                               "min_clearance (m), min_peak_margin (m)"),
    "maps.mesh_levels": ("—", '"finest" (one map per variant on its finest mesh level) or "each"'),
    "maps.max_degree": ("—", "highest polynomial degree tried"),
    "maps.margin": ("—", "points required beyond the number of model terms"),
    "maps.smooth": ("—", "also try a thin-plate spline (chosen only if its leave-one-out error is lower)"),
    "maps.smooth_min_points": ("—", "fewest distinct points for the spline (2-D designs)"),
    "maps.smooth_max_points": ("—", "most points for the spline (its leave-one-out search grows as n⁴)"),
    "maps.confidence": ("—", "confidence of the prediction intervals (0 < c < 1)"),
    "maps.queries": ("m", "list of [h_f, h_r] points at which to report the maps with prediction intervals"),
    "maps.grid": ("—", "points per axis of the map grid written for plotting"),
    "design.ride_height_front": ("m", "design (running) front ride height: margin to the downforce peak"),
    "design.ride_height_rear": ("m", "design rear ride height (picks the nearest rake line; default: front + rake)"),
    "platform.static_front": ("m", "static front ride height with the car's weight on the springs"),
    "platform.static_rear": ("m", "static rear ride height"),
    "platform.rate_front": ("N/m", "front rate referred to the front ride-height point"),
    "platform.rate_rear": ("N/m", "rear rate referred to the rear ride-height point"),
    "platform.speeds": ("m/s", "speeds at which to report the equilibrium"),
    "platform.speed_max": ("m/s", "highest speed searched for bottoming (default 1.5 × the largest speed)"),
    "platform.air_density": ("kg/m³", "air density of the dynamic pressure (default: the table's air_density, "
                                      "else ISO 2533 sea level, 1.225)"),
    "platform.reference_area": ("m²", "reference area of the coefficients (default: the table's reference_area)"),
    "platform.yaw_deg": ("deg", "yaw of the map used (default: the smallest |yaw| tested)"),
})
SECTIONS = ("ranking", "constraints", "maps", "design", "platform")
#: kg/m³, ISO 2533:1975 standard atmosphere at sea level (288.15 K, 101 325 Pa): the platform's
#: density when neither the settings nor the results table give one
STANDARD_AIR_DENSITY = 1.225


@dataclass(frozen=True)
class PlatformSettings:
    static_front: float
    static_rear: float
    rate_front: float
    rate_rear: float
    speeds: tuple[float, ...]
    speed_max: float | None = None
    air_density: float | None = None
    reference_area: float | None = None
    yaw_deg: float | None = None


@dataclass(frozen=True)
class AnalysisConfig:
    """Everything the analysis pipeline may be told; ``None`` = the kernel's
    default. ``file`` is where it came from (for messages), None for defaults."""

    file: str | None = None
    weights: Mapping[str, float] | None = None
    coverage: float | None = None
    perturbation: float | None = None
    constraints: Mapping[str, float] = field(default_factory=dict)
    maps: Mapping[str, Any] = field(default_factory=dict)
    queries: tuple[tuple[float, float], ...] = ()
    grid: int = 21
    design_front: float | None = None
    design_rear: float | None = None
    platform: PlatformSettings | None = None
    notes: tuple[str, ...] = ()


def _num(v: Any, file: str, key: str, lo: float | None = None, hi: float | None = None, strict_lo: bool = True,
         unit: str = "", fix: str | None = None) -> float:
    """A finite number within (lo, hi] (or [lo, hi] when not strict)."""
    if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
        raise UserError(expected=f"a number{f' ({unit})' if unit else ''}", got=v, file=file, key=key, fix=fix)
    bad_lo = lo is not None and (v <= lo if strict_lo else v < lo)
    if bad_lo or (hi is not None and v > hi):
        rng = f"{'>' if strict_lo else '≥'} {lo:g}" if lo is not None else ""
        rng += (" and " if rng and hi is not None else "") + (f"≤ {hi:g}" if hi is not None else "")
        raise UserError(expected=f"a number {rng}{f' ({unit})' if unit else ''}", got=v, file=file, key=key, fix=fix)
    return float(v)


def _height(v: Any, file: str, key: str) -> float:
    return _num(v, file, key, 0.0, 1.0, unit="m", fix="ride heights are in metres above the ground "
                "(a value above 1 is probably in mm: divide by 1000)")


def _table(d: Any, file: str, key: str) -> dict:
    if not isinstance(d, dict):
        raise UserError(expected="a table", got=d, file=file, key=key, fix=f"write it as [{key}] with key = value lines")
    return d


def _check_keys(d: dict, section: str, file: str) -> None:
    known = [k.split(".", 1)[1] for k in KEYS if k.startswith(section + ".")]
    for k in d:
        if k not in known:
            raise UserError(expected=f"one of the keys {', '.join(known)}", got=k, file=file, key=f"{section}.{k}",
                            fix="remove it or correct the spelling." + did_you_mean(k, known))


def _ranking(d: dict, file: str) -> dict:
    _check_keys(d, "ranking", file)
    out: dict[str, Any] = {}
    if "weights" in d:
        w = _table(d["weights"], file, "ranking.weights")
        out["weights"] = {str(k): _num(v, file, f"ranking.weights.{k}", 0.0, strict_lo=False) for k, v in w.items()}
        if not any(out["weights"].values()):
            raise UserError(expected="at least one positive weight", got="all zero", file=file, key="ranking.weights")
    if "coverage" in d:
        out["coverage"] = _num(d["coverage"], file, "ranking.coverage", 0.0, strict_lo=False)
    if "perturbation" in d:
        out["perturbation"] = _num(d["perturbation"], file, "ranking.perturbation", 0.0, 0.99)
    return out


def _maps(d: dict, file: str) -> tuple[dict, tuple, int]:
    _check_keys(d, "maps", file)
    out: dict[str, Any] = {}
    if "mesh_levels" in d and d["mesh_levels"] not in ("finest", "each"):
        raise UserError(expected='"finest" or "each"', got=d["mesh_levels"], file=file, key="maps.mesh_levels")
    for k, lo, hi in (("max_degree", 1, 6), ("margin", 0, 100), ("smooth_min_points", 3, 1000),
                      ("smooth_max_points", 3, 2000)):
        if k in d:
            v = d[k]
            if isinstance(v, bool) or not isinstance(v, int) or not lo <= v <= hi:
                raise UserError(expected=f"a whole number ({lo}–{hi})", got=v, file=file, key=f"maps.{k}")
            out[k] = v
    if "smooth" in d:
        if not isinstance(d["smooth"], bool):
            raise UserError(expected="true or false", got=d["smooth"], file=file, key="maps.smooth")
        out["smooth"] = d["smooth"]
    if "confidence" in d:
        out["confidence"] = _num(d["confidence"], file, "maps.confidence", 0.0, 0.999)
    if "mesh_levels" in d:
        out["mesh_levels"] = d["mesh_levels"]
    queries = d.get("queries", [])
    if not isinstance(queries, list) or not all(isinstance(q, list) and len(q) == 2 for q in queries):
        raise UserError(expected="a list of [h_f, h_r] pairs (m)", got=queries, file=file, key="maps.queries",
                        fix="e.g. queries = [[0.025, 0.040]]")
    qs = tuple((_height(a, file, f"maps.queries[{i}][0]"), _height(b, file, f"maps.queries[{i}][1]"))
               for i, (a, b) in enumerate(queries))
    grid = d.get("grid", 21)
    if isinstance(grid, bool) or not isinstance(grid, int) or not 3 <= grid <= 201:
        raise UserError(expected="a whole number 3–201", got=grid, file=file, key="maps.grid")
    return out, qs, grid


def _platform(d: dict, file: str) -> PlatformSettings:
    _check_keys(d, "platform", file)
    need = ("static_front", "static_rear", "rate_front", "rate_rear", "speeds")
    missing = [k for k in need if k not in d]
    if missing:
        raise UserError(expected="the platform keys " + ", ".join(need), got="no " + ", ".join(missing), file=file,
                        key="platform", fix="give static ride heights (m), rates (N/m) and speeds (m/s)")
    rates = {k: _num(d[k], file, f"platform.{k}", 0.0, unit="N/m",
                     fix="a spring rate must be positive: the wheel rate referred to the ride-height point")
             for k in ("rate_front", "rate_rear")}
    speeds = d["speeds"]
    if not isinstance(speeds, list) or not speeds:
        raise UserError(expected="a non-empty list of speeds (m/s)", got=speeds, file=file, key="platform.speeds")
    sp = tuple(_num(v, file, f"platform.speeds[{i}]", 0.0, 400.0, unit="m/s") for i, v in enumerate(speeds))
    opt = {k: _num(d[k], file, f"platform.{k}", 0.0, unit=u) for k, u in
           (("speed_max", "m/s"), ("air_density", "kg/m³"), ("reference_area", "m²")) if k in d}
    if "speed_max" in opt and opt["speed_max"] < max(sp):
        raise UserError(expected=f"speed_max ≥ the largest speed ({max(sp):g} m/s)", got=opt["speed_max"], file=file,
                        key="platform.speed_max")
    yaw = _num(d["yaw_deg"], file, "platform.yaw_deg", -90.0, 90.0, strict_lo=False) if "yaw_deg" in d else None
    return PlatformSettings(_height(d["static_front"], file, "platform.static_front"),
                            _height(d["static_rear"], file, "platform.static_rear"), rates["rate_front"],
                            rates["rate_rear"], sp, yaw_deg=yaw, **opt)


def parse_analysis(data: dict, file: str) -> AnalysisConfig:
    """An :class:`AnalysisConfig` from a parsed TOML table (see :data:`KEYS`)."""
    notes = []
    if "analysis" in data:
        data = _table(data["analysis"], file, "analysis")
    elif not any(s in data for s in SECTIONS):
        unknown = [k for k in data if k not in SECTIONS]
        if unknown and not {"study", "sweep", "variants"} & set(data):
            raise UserError(expected="analysis sections " + ", ".join(SECTIONS), got=", ".join(unknown), file=file,
                            fix="correct the section name." + did_you_mean(unknown[0], SECTIONS))
        notes.append(f"{file}: no analysis settings found; defaults used")
        data = {}
    for k in data:
        if k not in SECTIONS:
            raise UserError(expected="analysis sections " + ", ".join(SECTIONS), got=k, file=file, key=k,
                            fix="correct the section name." + did_you_mean(k, SECTIONS))
    rk = _ranking(_table(data.get("ranking", {}), file, "ranking"), file)
    cons = {str(k): _num(v, file, f"constraints.{k}", unit="") for k, v in
            _table(data.get("constraints", {}), file, "constraints").items()}
    maps, queries, grid = _maps(_table(data.get("maps", {}), file, "maps"), file)
    design = _table(data.get("design", {}), file, "design")
    _check_keys(design, "design", file)
    df = _height(design["ride_height_front"], file, "design.ride_height_front") if "ride_height_front" in design else None
    dr = _height(design["ride_height_rear"], file, "design.ride_height_rear") if "ride_height_rear" in design else None
    plat = _platform(_table(data["platform"], file, "platform"), file) if "platform" in data else None
    return AnalysisConfig(file, rk.get("weights"), rk.get("coverage"), rk.get("perturbation"), cons, maps, queries,
                          grid, df, dr, plat, tuple(notes))


def read_analysis_config(path: str | Path | None) -> AnalysisConfig:
    """Read ``ANALYSIS.toml`` (or a sweep config with an ``[analysis]``
    table); ``None`` gives the defaults."""
    if path is None:
        return AnalysisConfig()
    p = Path(path)
    if not p.is_file():
        raise UserError(expected="an analysis settings file (TOML)", got=str(p), key="-c/--config",
                        fix="check the path, or leave -c out for the defaults")
    try:
        data = tomllib.loads(p.read_text(encoding="utf-8"))
    except UnicodeDecodeError:
        raise UserError(expected="a UTF-8 text file", got="binary data", file=str(p)) from None
    except tomllib.TOMLDecodeError as exc:
        raise UserError(f"{p} is not valid TOML: {exc}", fix="fix the syntax at that line") from None
    return parse_analysis(data, str(p))
