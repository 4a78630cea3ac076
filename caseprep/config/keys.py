"""Every key of the sweep config, declared once: unit, meaning, default,
allowed values and valid range. The pydantic models (:mod:`caseprep.config.schema`)
take their defaults and allowed values from here, the checks
(:mod:`caseprep.config.checks`) their ranges, the error messages their
units, and the README's config table is rendered from here
(:func:`markdown_table`; a test keeps the README in step).

Generic keys: ``<name>`` for table names, ``[]`` for list items. Ranges are
common practice, no source: they catch a wrong unit or a typo, not physics.
"""
from __future__ import annotations

import math
import re
from dataclasses import dataclass
from typing import Any

from caseprep.contract.limits import MAX_DOMAIN_LENGTHS, MAX_ITERATIONS, MAX_LENGTH, MAX_RANKS

NO_DEFAULT = object()  # the key has no Python default (required, or derived at planning)


@dataclass(frozen=True)
class Range:
    """Valid values lo … hi (None: unbounded); ``open_lo``/``open_hi``
    exclude the bound; ``magnitude``: the range applies to |value|.
    ``expected`` is the message's "expected …" text, with ``{lo}``/``{hi}``
    filled in from the bounds; ``fix`` the message's fix (optional)."""

    lo: float | None = None
    hi: float | None = None
    open_lo: bool = False
    open_hi: bool = False
    magnitude: bool = False
    expected: str = ""
    fix: str | None = None

    def contains(self, value: float) -> bool:
        v = abs(value) if self.magnitude else value
        if not isinstance(v, (int, float)) or math.isnan(v):
            return False
        if self.lo is not None and not (v > self.lo if self.open_lo else v >= self.lo):
            return False
        if self.hi is not None and not (v < self.hi if self.open_hi else v <= self.hi):
            return False
        return True

    def text(self) -> str:
        return self.expected.format(lo=_num(self.lo), hi=_num(self.hi))

    def table_text(self) -> str:
        """The range as the README table shows it (e.g. ``> 0``, ``150 … 400``, ``|x| < 45``)."""
        x = "|x|" if self.magnitude else "x"
        if self.lo is not None and self.hi is not None and not self.magnitude:
            lo = "(" if self.open_lo else "["
            hi = ")" if self.open_hi else "]"
            return f"{lo}{_num(self.lo)}, {_num(self.hi)}{hi}"
        if self.lo is not None:
            return f"{x} {'>' if self.open_lo else '≥'} {_num(self.lo)}"
        return f"{x} {'<' if self.open_hi else '≤'} {_num(self.hi)}"


def _num(v: float | None) -> str:
    return "" if v is None else f"{v:g}"


def _positive(unit: str, fix: str | None = None) -> Range:
    return Range(lo=0.0, open_lo=True, expected=f"a positive number ({unit})", fix=fix or "use a value > 0")


def _at_least_one(what: str) -> Range:
    return Range(lo=1, expected=what)


def _within(lo: float, hi: float, unit: str, fix: str | None = None) -> Range:
    """lo < x ≤ hi for lo = 0 (a positive number with an upper bound), else lo ≤ x ≤ hi."""
    if lo == 0:
        return Range(lo=0.0, hi=hi, open_lo=True, expected="a positive number ({unit}) up to {hi}".replace("{unit}", unit),
                     fix=fix or "use a value > 0; check the unit")
    return Range(lo=lo, hi=hi, expected="a value from {lo} to {hi} ({unit})".replace("{unit}", unit),
                 fix=fix or "check the unit and the value")


def _count(what: str, limit) -> Range:
    return Range(lo=1, hi=int(limit.value), expected=f"{what} from {{lo}} to {{hi}}", fix=limit.why)


#: Upper bound of every length, ride height and coordinate (contract.limits.MAX_LENGTH).
_L = float(MAX_LENGTH.value)
_POINT = Range(hi=_L, magnitude=True, expected="a coordinate within ±{hi} m (body frame)",
               fix="points are in metres, whatever the geometry's length_unit")
_SPEED = _within(0.1, 150.0, "m/s", "the solver is incompressible (Mach < 0.45); speeds are in m/s")


@dataclass(frozen=True)
class Pattern:
    """Valid text values: the whole value matches ``regex``; ``expected`` is
    the message's "expected …" text (and the README's valid values), ``fix``
    the message's fix (optional)."""

    regex: str
    expected: str
    fix: str | None = None

    def matches(self, value: str) -> bool:
        return isinstance(value, str) and re.fullmatch(self.regex, value) is not None


@dataclass(frozen=True)
class Key:
    """One config key: ``unit`` (— when dimensionless), ``meaning``, the
    Python ``value`` of its default (:data:`NO_DEFAULT` when it has none) or
    the ``default`` text (for defaults derived elsewhere: "required",
    "preset", …), allowed ``choices``, valid ``range`` and the ``source`` of
    the default (a reference, "common practice, no source", or empty for
    keys without a default to justify)."""

    unit: str
    meaning: str
    value: Any = NO_DEFAULT
    default: str = ""
    choices: tuple[str, ...] | None = None
    range: Range | None = None
    pattern: Pattern | None = None
    source: str = ""

    def default_text(self) -> str:
        if self.value is NO_DEFAULT:
            return self.default
        return _literal(self.value)


def _literal(v: Any) -> str:
    if isinstance(v, str):
        return f'"{v}"'
    if isinstance(v, (tuple, list)):
        return "[" + ", ".join(_literal(x) for x in v) + "]"
    return f"{v:g}"


_COMMON = "common practice, no source"
RIDE_HEIGHT_FIX = "ride heights are measured upwards from the ground; use a value > 0"
_YAW = Range(hi=45.0, open_hi=True, magnitude=True, expected="a yaw angle with |β| < {hi} deg")
_PITCH = Range(hi=20.0, open_hi=True, magnitude=True, expected="a pitch angle with |θ| < {hi} deg",
               fix="angles are in degrees")
_MESH_LEVEL = Range(lo=0, hi=6, expected="a mesh level from {lo} to {hi}")
_LEVEL = Range(lo=0, hi=12, expected="a level from {lo} to {hi}")
_RIDE_HEIGHT = _within(0.0, _L, "m", RIDE_HEIGHT_FIX)
# the batch system's formats (SLURM's sbatch syntax); the values are written into #SBATCH lines
_BATCH_TIME = Pattern(r"\d+|\d+:\d{2}(:\d{2})?|\d+-\d+(:\d{2}){0,2}",
                      "a time limit: minutes, HH:MM:SS or D-HH:MM:SS", "e.g. \"04:00:00\" or \"1-12:00:00\"")
_BATCH_MEMORY = Pattern(r"\d+[KMGT]?", "an amount of memory: whole MB, or a whole number with K, M, G or T",
                        "e.g. \"2G\" or \"500M\"")
_BATCH_NAME = Pattern(r"[A-Za-z0-9_.,+-]*", "a name of letters, digits and . , _ + - (no spaces)",
                      "use the name the cluster gives (sinfo lists partitions), or \"\" for the default")

KEYS: dict[str, Key] = {
    "study.name": Key("—", "study name (manifest, sweep folder)", default="required"),
    "study.description": Key("—", "free text", ""),
    "air.speed": Key("m/s", "road speed V (the sweep's default speed)", default="required", range=_SPEED),
    "air.temperature": Key("K", "static temperature", default="288.15 (or from altitude)",
                           range=Range(150.0, 400.0, expected="a temperature in K between {lo} and {hi}",
                                       fix="temperatures are absolute, in kelvin (20 °C = 293.15 K)"),
        source="ISO 2533:1975 standard atmosphere"),
    "air.pressure": Key("Pa", "static pressure (absolute)", default="101325 (or from altitude)",
                        range=Range(1.0e3, 2.0e5, expected="an absolute pressure in Pa between {lo} and {hi}",
                                    fix="give the absolute static pressure in Pa (sea level: 101325)"),
        source="ISO 2533:1975 standard atmosphere"),
    "air.altitude": Key("m", "ISO 2533 troposphere altitude for temperature and pressure", default="0",
                        range=Range(-2000.0, 11000.0,
                                    expected="an altitude in m between {lo} and {hi} (ISO 2533 troposphere)")),
    "air.density": Key("kg/m³", "density", default="p/(R T)", range=_within(1e-3, 1e3, "kg/m³"),
        source="ideal gas, ISO 2533:1975 gas constant"),
    "air.viscosity": Key("Pa s", "dynamic viscosity", default="Sutherland's law", range=_within(1e-7, 0.1, "Pa s"),
        source="Sutherland (1893), ISO 2533:1975 constants"),
    "air.kinematic_viscosity": Key("m²/s", "kinematic viscosity (overrides viscosity/density)", default="μ/ρ",
                                   range=_within(1e-8, 0.1, "m²/s")),
    "air.underfloor_speed_factor": Key("—", "peak speed under the floor / air speed: sizes the first cell and the Mach check",
                                       1.4, range=Range(1.0, 3.0, expected="an underfloor speed factor from {lo} to {hi}",
                                                        fix="1.3–1.5 is typical of a ground-effect floor"),
                                       source=_COMMON + "; Bernoulli: a floor suction peak C_p = 1 − 1.4² ≈ −1"),
    "ground.mode": Key("—", "how the ground moves; none: far field, no ground", "moving",
                       choices=("moving", "stationary", "none"),
        source="the road moves under a car: a moving ground (common practice for ground-effect cars)"),
    "body.length_unit": Key("—", "unit of the geometry files", "m", choices=("m", "mm", "in")),
    "body.reference_area": Key("m²", 'reference area, or "auto" (frontal area of the first variant)', "auto",
                               range=_within(1e-6, 1e4, "m²"),
        source="frontal area: SAE J1594 (from memory)"),
    "body.reference_length": Key("m", "reference length for moment coefficients", default="wheelbase",
                                 range=_within(1e-4, _L, "m")),
    "body.wheelbase": Key("m", "wheelbase", default="rear_axle.x − front_axle.x", range=_within(1e-4, _L, "m")),
    "body.front_axle": Key("m", "front axle centre (body frame)", default="required with a ground", range=_POINT),
    "body.rear_axle": Key("m", "rear axle centre (body frame)", default="required with a ground", range=_POINT),
    "body.ride_height_point_front": Key("m", "front ride-height reference point on the underside",
                                        default="required with a ground", range=_POINT),
    "body.ride_height_point_rear": Key("m", "rear ride-height reference point on the underside",
                                       default="required with a ground", range=_POINT),
    "body.pitch_pivot": Key("m", "point about which pitch is applied; `ride_height` is its height",
                            default="ride_height_point_front", range=_POINT),
    "body.moment_point": Key("m", "moment reference point", default="mid-point of the axles", range=_POINT),
    "body.centre_of_gravity": Key("m", "centre of gravity (optional)", default="none", range=_POINT),
    "body.wheels[].name": Key("—", "wheel name (patch name)", default="required"),
    "body.wheels[].centre": Key("m", "wheel centre (body frame)", default="required", range=_POINT),
    "body.wheels[].axis": Key("—", "rotation axis (body frame)", (0.0, 1.0, 0.0),
        source="an axle along the body y axis"),
    "body.wheels[].radius": Key("m", "unloaded radius; the wheel stands at the loaded radius r (1 − flattening)",
                                default="required", range=_within(1e-4, _L, "m")),
    "body.wheels[].geometry": Key("—", "STL file of the wheel (same length_unit), drawn at its centre", default="none"),
    "body.wheels[].solid": Key("—", "or: name of the wheel's solid in the body STL", default="none"),
    "body.wheels[].steering_deg": Key("deg", "steering angle about the ground normal (+: front of the wheel to the "
                                             "driver's left)", 0.0,
                                      range=Range(hi=40.0, magnitude=True, fix="angles are in degrees",
                                                  expected="a steering angle with |δ| ≤ {hi} deg (a road car's lock)"),
                                      source="straight ahead"),
    "body.wheels[].camber_deg": Key("deg", "camber (+: top of the wheel leaning away from the centre plane)", 0.0,
                                    range=Range(hi=10.0, magnitude=True, fix="angles are in degrees",
                                                expected="a camber angle with |γ| ≤ {hi} deg"), source="upright"),
    "body.wheels[].flattening": Key("—", "depth the tyre is sunk into the ground, fraction of the radius (a flat "
                                         "contact patch the mesher can resolve)", 0.02,
                                    range=Range(0.0, 0.1, expected="a flattening from {lo} to {hi} of the radius"),
                                    source=_COMMON + " (a patch about 0.4 r long)"),
    "body.wheels[].rotation": Key("—", "rotating wall, or also a rotating reference zone (spoked wheels)", "wall",
                                  choices=("wall", "zone"), source="axisymmetric wheels"),
    "body.wheels[].zone_radius": Key("m", 'radius of the rotating reference zone (rotation = "zone")',
                                     default="0.75 × radius", range=_within(1e-4, _L, "m"), source=_COMMON + " (a rim's radius)"),
    "variants.<name>.geometry": Key("—", 'STL file of this variant (relative to the config), or `"none"` '
                                         "(empty test section)", default="required"),
    "variants.<name>.length_unit": Key("—", "overrides body.length_unit", default="body.length_unit",
                                       choices=("m", "mm", "in")),
    "variants.<name>.reference_area": Key("m²", "overrides body.reference_area", default="body.reference_area",
                                          range=_within(1e-6, 1e4, "m²")),
    "variants.<name>.description": Key("—", "free text", ""),
    "sweep.yaw_mode": Key("—", "how yaw is set up (see \"Yaw modes\")", "crosswind",
                          choices=("crosswind", "yawed-model"),
        source="a car on the road in a side wind"),
    "sweep.variants": Key("—", "variants to run", default="all"),
    "sweep.ride_height": Key("m", "ride heights at the pitch pivot (crossed with pitch_deg)", default="—",
                             range=_RIDE_HEIGHT),
    "sweep.pitch_deg": Key("deg", "pitch angles, positive nose-up (rake = −pitch)", default="[0]", range=_PITCH),
    "sweep.ride_heights_front_rear": Key("m", "[front, rear] ride-height pairs (instead of ride_height × pitch)",
                                         default="—", range=_RIDE_HEIGHT),
    "sweep.yaw_deg": Key("deg", "yaw angles β", (0.0,), range=_YAW),
    "sweep.speed": Key("m/s", "road speeds", default="[air.speed]", range=_SPEED),
    "sweep.mesh_level": Key("—", "mesh levels (each refines the base cell by √2)", (0,), range=_MESH_LEVEL,
        source="one mesh; add levels for a mesh study"),
    "sweep.points": Key("—", "explicit list of points instead of the axes", default="—"),
    "sweep.points[].variant": Key("—", "variant of the point", default="all variants"),
    "sweep.points[].ride_height": Key("m", "ride height at the pitch pivot", default="—", range=_RIDE_HEIGHT),
    "sweep.points[].pitch_deg": Key("deg", "pitch, positive nose-up", default="0"),
    "sweep.points[].ride_height_front": Key("m", "front ride height (with ride_height_rear)", default="—",
                                            range=_RIDE_HEIGHT),
    "sweep.points[].ride_height_rear": Key("m", "rear ride height", default="—", range=_RIDE_HEIGHT),
    "sweep.points[].yaw_deg": Key("deg", "yaw angle β", 0.0, range=_YAW),
    "sweep.points[].speed": Key("m/s", "road speed", default="air.speed", range=_SPEED),
    "sweep.points[].mesh_level": Key("—", "mesh level", 0, range=_MESH_LEVEL),
    "mesh.fidelity": Key("—", "mesh fidelity preset (see \"Fidelity presets\")", "coarse",
                         choices=("smoke", "coarse", "production"),
        source="the lightest preset that resolves the gap and the near-wall flow (README presets)"),
    "mesh.base_cell": Key("m", "background cell size at mesh level 0", default="preset × body length",
                          range=_within(1e-5, _L, "m", "below 10 µm the cell counts overflow (m, not mm?)")),
    "mesh.surface_levels": Key("—", "[min, max] refinement levels on the body", default="preset",
                               range=Range(0, 12, expected="[min, max] levels with {lo} ≤ min ≤ max ≤ {hi}")),
    "mesh.feature_level": Key("—", "refinement level of feature edges", default="preset", range=_LEVEL),
    "mesh.max_level": Key("—", "finest level allowed (underbody gap)", default="preset", range=_LEVEL),
    "mesh.gap_cells": Key("—", "cells across the reference clearance (the lower ride height): prism layers and core "
                               "cells", default="preset", range=_within(0.0, 100.0, "cells"), source=_COMMON),
    "mesh.target_yplus": Key("—", "y+ at the first cell centre at mesh level 0 (flat plate at the underfloor speed)",
                             default="preset", range=_within(0.01, 1000.0, "dimensionless"),
                             source="inside the wall treatment's band (caseprep/contract/walls.py)"),
    "mesh.wall_treatment": Key("—", "wall functions, or the viscous sublayer resolved (y+ ≈ 1)", "wall-function",
                               choices=("wall-function", "low-re"), source=_COMMON),
    "mesh.layers": Key("—", "number of prism layers (0: none)", default="preset",
                       range=Range(0, 40, expected="a number of layers from {lo} to {hi}")),
    "mesh.layer_expansion": Key("—", "layer growth ratio", default="preset",
                                range=Range(1.0, 2.0, expected="a layer expansion ratio from {lo} to {hi}")),
    "mesh.ground_first_cell": Key("m", "empty test section: first background cell on the ground, cells graded upwards",
                                  default="uniform cells", range=_within(1e-7, _L, "m")),
    "mesh.reuse": Key("—", "identical: cases whose mesh dictionaries and surfaces are byte-identical (e.g. a speed "
                           "axis) are meshed once and share that mesh; off: every case meshes", "identical",
                      choices=("identical", "off"),
                      source="a mesh is a function of its dictionaries and surfaces: sharing it changes no result"),
    "domain.length": Key("m", "empty test section: inlet to outlet", default='required with `geometry = "none"`',
                         range=_within(0.0, _L, "m")),
    "domain.lead_in": Key("m", "empty test section: slip floor from the inlet to the ground's leading edge "
                               "(part of `length`)", default="0", range=Range(lo=0.0, hi=_L, expected="a lead-in length from {lo} to {hi} (m)")),
    "domain.upstream": Key("body lengths", "inlet distance ahead of the body", 5.0,
                           range=_within(0.0, float(MAX_DOMAIN_LENGTHS.value), "body lengths"), source=_COMMON),
    "domain.downstream": Key("body lengths", "outlet distance behind the body", 10.0,
                             range=_within(0.0, float(MAX_DOMAIN_LENGTHS.value), "body lengths"), source=_COMMON),
    "domain.width": Key("m", "domain width (default: sized for blockage)", default="auto", range=_within(0.0, _L, "m")),
    "domain.height": Key("m", "domain height (default: sized for blockage)", default="auto", range=_within(0.0, _L, "m")),
    "domain.target_blockage": Key("—", "blockage the automatic size aims at (fraction)", 0.01, source=_COMMON),
    "domain.max_blockage": Key("—", "blockage above which a case is refused (fraction)", 0.05, source=_COMMON),
    "solver.turbulence_model": Key("—", "turbulence model of the steady solver", "kOmegaSST",
                                   choices=("kOmegaSST", "laminar"),
        source="k-ω SST, Menter (1994) AIAA J. 32(8) 1598–1605: common practice for external vehicle flows"),
    "solver.iterations": Key("—", "iterations", default="preset", range=_count("a number of iterations", MAX_ITERATIONS)),
    "solver.write_interval": Key("—", "iterations between result writes", default="iterations",
                                 range=_count("a write interval", MAX_ITERATIONS)),
    "solver.ranks": Key("—", "parallel ranks (MPI processes)", 1, range=_count("a number of ranks", MAX_RANKS),
        source="serial"),
    "solver.turbulence_intensity": Key("—", "free-stream turbulence intensity at the model (fraction)", 0.005,
                                       range=Range(0.0, 0.2, open_lo=True,
                                                   expected="a turbulence intensity fraction in ({lo}, {hi}] (0.01 = 1 %)"),
                                       source=_COMMON + " (a low-turbulence tunnel)"),
    "solver.turbulence_length_scale": Key("m", "free-stream turbulence length scale at the model",
                                          default="0.02 × body length", range=_within(1e-6, _L, "m"),
                                          source=_COMMON + " (decays mildly over 5 body lengths)"),
    "solver.warm_start": Key("—", "initial field: off = the uniform free stream; nearest = the converged fields of the "
                                  "nearest solved case of the same variant and mesh level (README \"Mesh reuse and warm starts\")",
                             "off", choices=("off", "nearest"),
                             source="opt-in: measured savings in README \"Mesh reuse, warm starts and the settled stop (measured)\"; "
                                    "a warm start may land on another branch of a hysteretic flow"),
    "solver.stop_rule": Key("—", "when a solve ends: budget = at solver.iterations (or the solver's residual "
                                 "criterion); settled = also as soon as the convergence rule counts it converged "
                                 "with the force monitor settled (at least 40 iterations)", "budget",
                            choices=("budget", "settled"),
                            source="opt-in: with the coefficient-count rule it seldom fires, and its window differs from "
                                   "the post-processing's (README \"Mesh reuse, warm starts and the settled stop (measured)\")"),
    "cluster.partition": Key("—", "batch partition (queue) of every job; empty: the cluster's default", "",
                             pattern=_BATCH_NAME),
    "cluster.account": Key("—", "account the jobs are charged to; empty: the user's default", "", pattern=_BATCH_NAME),
    "cluster.cores_per_case": Key("cores", "cores (MPI ranks) of one case's job", default="solver.ranks",
                                  range=_at_least_one("at least 1 core")),
    "cluster.memory_per_core": Key("—", "memory per core of a case's job", "2G", pattern=_BATCH_MEMORY),
    "cluster.case_time": Key("—", "time limit of one case (mesh, solve, export)", "04:00:00", pattern=_BATCH_TIME),
    "cluster.max_running": Key("—", "cases running at once (0: as many as the cluster allows)", 0,
                               range=Range(lo=0, expected="a number of cases ≥ {lo}")),
    "cluster.postproc_shards": Key("—", "post-processing array tasks (at most one per case)", 8,
                                   range=_at_least_one("at least 1 shard")),
    "cluster.postproc_cores": Key("cores", "worker processes of each post-processing task", 1,
                                  range=_at_least_one("at least 1 core")),
    "cluster.postproc_memory": Key("—", "memory of each post-processing task", "4G", pattern=_BATCH_MEMORY),
    "cluster.postproc_time": Key("—", "time limit of each post-processing task", "01:00:00", pattern=_BATCH_TIME),
    "cluster.report_memory": Key("—", "memory of the merge and report job", "4G", pattern=_BATCH_MEMORY),
    "cluster.report_time": Key("—", "time limit of the merge and report job", "00:30:00", pattern=_BATCH_TIME),
    "report.baseline": Key("—", "variant the report's pressure-difference pictures compare against "
                                "(`postproc sweep --baseline` overrides)", default="the first variant"),
    "report.picture_ride_height": Key("m", "front ride height of the operating point pictured for every variant "
                                           "(`--picture-ride-height`)", default="median of the sweep",
                                      range=_RIDE_HEIGHT),
    "report.picture_yaw_deg": Key("deg", "yaw of the pictured operating point (`--picture-yaw`)",
                                  default="smallest yaw", range=_YAW),
    "analysis": Key("—", "settings of `postproc analyse` (its own sections under [analysis]; caseprep only "
                         "carries them)", default="none"),
}


def default(key: str) -> Any:
    """The Python default of ``key`` (for the models)."""
    v = KEYS[key].value
    if v is NO_DEFAULT:
        raise KeyError(f"{key} has no default value")
    return v


def choices(key: str) -> tuple[str, ...]:
    """The allowed values of ``key``."""
    c = KEYS[key].choices
    if c is None:
        raise KeyError(f"{key} has no list of allowed values")
    return c


def unit(key: str) -> str:
    return KEYS[key].unit


def markdown_table() -> str:
    """The README's config table: key, unit, meaning, default, valid values,
    source of the default."""
    rows = ["| key | unit | meaning | default | valid values | source of the default |", "|---|---|---|---|---|---|"]
    for name, k in KEYS.items():
        valid = (" / ".join(k.choices) if k.choices else k.range.table_text() if k.range
                 else k.pattern.expected if k.pattern else "")
        valid = valid.replace("|", "\\|")  # a bar inside a cell would split it
        rows.append(f"| `{name}` | {k.unit} | {k.meaning} | {k.default_text()} | {valid} | {k.source} |")
    return "\n".join(rows) + "\n"
