"""The sweep config: TOML → validated, frozen, typed objects (parsed once).

SI units everywhere (m, s, kg, K, Pa); angles in degrees in keys ending
``_deg``; points are body-frame coordinates in metres (x rearward, y right,
z up, see :mod:`caseprep.contract.frames`) whatever the geometry files'
``length_unit``. The key table is in the README ("caseprep: config and sweep")
and in :data:`KEYS` below.

:func:`load_config` reads a file and returns a :class:`Config` or raises one
:class:`~caseprep.contract.errors.UserError` (several problems at once as
:class:`~caseprep.contract.errors.UserErrors`) naming the file, the key, what was
expected, what was found, and the fix.
"""
from __future__ import annotations

import re
import tomllib
from pathlib import Path
from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, PrivateAttr, ValidationError, field_validator
from pydantic_core import PydanticCustomError

from caseprep.contract.errors import UserError, UserErrors, did_you_mean

NAME_RE = re.compile(r"^[A-Za-z][A-Za-z0-9_-]*$")
NAME_RULE = "a name made of letters, digits, '_' and '-', starting with a letter"
FIDELITIES = ("smoke", "coarse", "production")
GROUND_MODES = ("moving", "stationary", "none")
TURBULENCE_MODELS = ("kOmegaSST", "laminar")
LENGTH_UNIT_NAMES = ("m", "mm", "in")
# ``variants.<name>.geometry = "none"``: an empty test section (no body), e.g.
# to check the ground's boundary layer or the empty-section flow.
EMPTY_GEOMETRY = "none"

Vec3 = tuple[float, float, float]

# key → (unit, meaning, default). Generic keys: "<name>" for table names,
# "[]" for list items. Used for error messages and mirrored in the README.
KEYS: dict[str, tuple[str, str, str]] = {
    "study.name": ("—", "study name (manifest, sweep folder)", "required"),
    "study.description": ("—", "free text", '""'),
    "air.speed": ("m/s", "road speed V (the sweep's default speed)", "required"),
    "air.temperature": ("K", "static temperature", "288.15 (or from altitude)"),
    "air.pressure": ("Pa", "static pressure (absolute)", "101325 (or from altitude)"),
    "air.altitude": ("m", "ISO 2533 troposphere altitude for temperature and pressure", "0"),
    "air.density": ("kg/m³", "density", "p/(R T)"),
    "air.viscosity": ("Pa s", "dynamic viscosity", "Sutherland's law"),
    "air.kinematic_viscosity": ("m²/s", "kinematic viscosity (overrides viscosity/density)", "μ/ρ"),
    "air.underfloor_speed_factor": ("—", "peak underfloor speed / air speed: first-cell sizing and the Mach check", "1.4"),
    "ground.mode": ("—", "moving | stationary | none (far field, no ground)", '"moving"'),
    "body.length_unit": ("—", "unit of the geometry files: m | mm | in", '"m"'),
    "body.reference_area": ("m²", 'reference area, or "auto" (frontal area of the first variant)', '"auto"'),
    "body.reference_length": ("m", "reference length for moment coefficients", "wheelbase"),
    "body.wheelbase": ("m", "wheelbase", "rear_axle.x − front_axle.x"),
    "body.front_axle": ("m", "front axle centre (body frame)", "required with a ground"),
    "body.rear_axle": ("m", "rear axle centre (body frame)", "required with a ground"),
    "body.ride_height_point_front": ("m", "front ride-height reference point on the underside", "required with a ground"),
    "body.ride_height_point_rear": ("m", "rear ride-height reference point on the underside", "required with a ground"),
    "body.pitch_pivot": ("m", "point about which pitch is applied; `ride_height` is its height", "ride_height_point_front"),
    "body.moment_point": ("m", "moment reference point", "mid-point of the axles"),
    "body.centre_of_gravity": ("m", "centre of gravity (optional)", "none"),
    "body.wheels[].name": ("—", "wheel name (patch name)", "required"),
    "body.wheels[].centre": ("m", "wheel centre (body frame)", "required"),
    "body.wheels[].axis": ("—", "rotation axis (body frame)", "[0, 1, 0]"),
    "body.wheels[].radius": ("m", "unloaded rolling radius (the centre stands at the loaded radius, radius × (1 − flattening))", "required"),
    "body.wheels[].geometry": ("—", "STL file of the wheel (same length_unit)", "none"),
    "body.wheels[].solid": ("—", "or: name of the wheel's solid in the body STL", "none"),
    "body.wheels[].steering_deg": ("deg", "steering angle about the ground normal (positive: front of the wheel to the driver's left)", "0"),
    "body.wheels[].camber_deg": ("deg", "camber angle (positive: top of the wheel leaning away from the centre plane)", "0"),
    "body.wheels[].flattening": ("—", "depth the tyre is sunk into the ground, fraction of the radius (flat contact patch)", "0.02"),
    "body.wheels[].rotation": ("—", "wall (rotating wall, axisymmetric wheels) | zone (also a rotating reference zone, spoked wheels)", '"wall"'),
    "body.wheels[].zone_radius": ("m", "radius of the rotating reference zone (rotation = \"zone\")", "0.75 × radius"),
    "variants.<name>.geometry": ("—", 'STL file of this variant (relative to the config), or "none" (empty test section)', "required"),
    "variants.<name>.length_unit": ("—", "overrides body.length_unit", "body.length_unit"),
    "variants.<name>.reference_area": ("m²", "overrides body.reference_area", "body.reference_area"),
    "variants.<name>.description": ("—", "free text", '""'),
    "sweep.yaw_mode": ("—", "crosswind | yawed-model", '"crosswind"'),
    "sweep.variants": ("—", "variants to run", "all"),
    "sweep.ride_height": ("m", "ride heights at the pitch pivot (crossed with pitch_deg)", "—"),
    "sweep.pitch_deg": ("deg", "pitch angles, positive nose-up (rake = −pitch)", "[0]"),
    "sweep.ride_heights_front_rear": ("m", "[front, rear] ride-height pairs (instead of ride_height × pitch)", "—"),
    "sweep.yaw_deg": ("deg", "yaw angles β", "[0]"),
    "sweep.speed": ("m/s", "road speeds", "[air.speed]"),
    "sweep.mesh_level": ("—", "mesh levels (each refines the base cell by √2)", "[0]"),
    "sweep.points": ("—", "explicit list of points instead of the axes", "—"),
    "sweep.points[].variant": ("—", "variant of the point", "all variants"),
    "sweep.points[].ride_height": ("m", "ride height at the pitch pivot", "—"),
    "sweep.points[].pitch_deg": ("deg", "pitch, positive nose-up", "0"),
    "sweep.points[].ride_height_front": ("m", "front ride height (with ride_height_rear)", "—"),
    "sweep.points[].ride_height_rear": ("m", "rear ride height", "—"),
    "sweep.points[].yaw_deg": ("deg", "yaw angle β", "0"),
    "sweep.points[].speed": ("m/s", "road speed", "air.speed"),
    "sweep.points[].mesh_level": ("—", "mesh level", "0"),
    "mesh.fidelity": ("—", "smoke | coarse | production", '"coarse"'),
    "mesh.base_cell": ("m", "background cell size at mesh level 0", "preset × body length"),
    "mesh.surface_levels": ("—", "[min, max] refinement levels on the body", "preset"),
    "mesh.feature_level": ("—", "refinement level of feature edges", "preset"),
    "mesh.max_level": ("—", "finest level allowed (underbody gap)", "preset"),
    "mesh.gap_cells": ("—", "cells required across the reference clearance (the lower ride height): prism layers and core cells", "preset"),
    "mesh.target_yplus": ("—", "y+ at the first cell centre at mesh level 0 (flat-plate estimate at the underfloor speed)", "preset"),
    "mesh.wall_treatment": ("—", "wall-function | low-re (viscous sublayer resolved, y+ ≈ 1)", '"wall-function"'),
    "mesh.layers": ("—", "number of prism layers (0: none)", "preset"),
    "mesh.layer_expansion": ("—", "layer growth ratio", "preset"),
    "mesh.ground_first_cell": ("m", "empty test section: height of the first background cell on the ground (graded upwards)", "uniform cells"),
    "domain.upstream": ("body lengths", "inlet distance ahead of the body", "5"),
    "domain.downstream": ("body lengths", "outlet distance behind the body", "10"),
    "domain.length": ("m", "empty test section: length from inlet to outlet", "required with geometry = \"none\""),
    "domain.lead_in": ("m", "empty test section: slip floor from the inlet to the ground's leading edge (part of domain.length)", "0"),
    "domain.width": ("m", "domain width (default: sized for blockage)", "auto"),
    "domain.height": ("m", "domain height (default: sized for blockage)", "auto"),
    "domain.target_blockage": ("—", "blockage the automatic size aims at (fraction)", "0.01"),
    "domain.max_blockage": ("—", "blockage above which a case is refused (fraction)", "0.05"),
    "solver.turbulence_model": ("—", "kOmegaSST | laminar", '"kOmegaSST"'),
    "solver.iterations": ("—", "iterations", "preset"),
    "solver.write_interval": ("—", "iterations between result writes", "iterations"),
    "solver.ranks": ("—", "parallel ranks (MPI processes)", "1"),
    "solver.turbulence_intensity": ("—", "free-stream turbulence intensity at the model (fraction)", "0.005"),
    "solver.turbulence_length_scale": ("m", "free-stream turbulence length scale at the model", "0.02 × body length"),
}


#: Plausible wheel angles (common practice, no source): the steering lock of
#: a road car is about 35–40 deg at the wheel; race cars run a few degrees of
#: camber.
MAX_STEERING_DEG = 40.0
MAX_CAMBER_DEG = 10.0


def _check_name(v: str) -> str:
    if not NAME_RE.match(v):
        raise PydanticCustomError("uf_name", "name", {"expected": NAME_RULE, "fix": "rename it, e.g. 'diffuser_8deg'"})
    return v


class _M(BaseModel):
    model_config = ConfigDict(frozen=True, extra="forbid", strict=True)


class StudyCfg(_M):
    name: str
    description: str = ""

    @field_validator("name")
    @classmethod
    def name_ok(cls, v: str) -> str:
        return _check_name(v)


class AirCfg(_M):
    speed: float
    temperature: float | None = None
    pressure: float | None = None
    altitude: float | None = None
    density: float | None = None
    viscosity: float | None = None
    kinematic_viscosity: float | None = None
    underfloor_speed_factor: float = 1.4


class GroundCfg(_M):
    mode: Literal["moving", "stationary", "none"] = "moving"


class WheelCfg(_M):
    name: str
    centre: Vec3
    radius: float
    axis: Vec3 = (0.0, 1.0, 0.0)
    geometry: str | None = None
    solid: str | None = None
    steering_deg: float = 0.0
    camber_deg: float = 0.0
    flattening: float = 0.02
    rotation: Literal["wall", "zone"] = "wall"
    zone_radius: float | None = None

    @field_validator("name")
    @classmethod
    def name_ok(cls, v: str) -> str:
        return _check_name(v)


class BodyCfg(_M):
    length_unit: Literal["m", "mm", "in"] = "m"
    reference_area: float | str = "auto"
    reference_length: float | None = None
    wheelbase: float | None = None
    front_axle: Vec3 | None = None
    rear_axle: Vec3 | None = None
    ride_height_point_front: Vec3 | None = None
    ride_height_point_rear: Vec3 | None = None
    pitch_pivot: Vec3 | None = None
    moment_point: Vec3 | None = None
    centre_of_gravity: Vec3 | None = None
    wheels: tuple[WheelCfg, ...] = ()


class VariantCfg(_M):
    geometry: str
    length_unit: Literal["m", "mm", "in"] | None = None
    reference_area: float | str | None = None
    description: str = ""


class PointCfg(_M):
    variant: str | None = None
    ride_height: float | None = None
    pitch_deg: float | None = None
    ride_height_front: float | None = None
    ride_height_rear: float | None = None
    yaw_deg: float = 0.0
    speed: float | None = None
    mesh_level: int = 0


class SweepCfg(_M):
    yaw_mode: Literal["crosswind", "yawed-model"] = "crosswind"
    variants: tuple[str, ...] | None = None
    ride_height: tuple[float, ...] | None = None
    pitch_deg: tuple[float, ...] | None = None
    ride_heights_front_rear: tuple[tuple[float, float], ...] | None = None
    yaw_deg: tuple[float, ...] = (0.0,)
    speed: tuple[float, ...] | None = None
    mesh_level: tuple[int, ...] = (0,)
    points: tuple[PointCfg, ...] | None = None


class MeshCfg(_M):
    fidelity: Literal["smoke", "coarse", "production"] = "coarse"
    base_cell: float | None = None
    surface_levels: tuple[int, int] | None = None
    feature_level: int | None = None
    max_level: int | None = None
    gap_cells: float | None = None
    target_yplus: float | None = None
    layers: int | None = None
    layer_expansion: float | None = None
    ground_first_cell: float | None = None
    wall_treatment: Literal["wall-function", "low-re"] = "wall-function"


class DomainCfg(_M):
    length: float | None = None
    lead_in: float | None = None
    upstream: float = 5.0
    downstream: float = 10.0
    width: float | None = None
    height: float | None = None
    target_blockage: float = 0.01
    max_blockage: float = 0.05


class SolverCfg(_M):
    turbulence_model: Literal["kOmegaSST", "laminar"] = "kOmegaSST"
    iterations: int | None = None
    write_interval: int | None = None
    ranks: int = 1
    turbulence_intensity: float = 0.005
    turbulence_length_scale: float | None = None


class Config(_M):
    """The whole validated config. Geometry paths are absolute after loading;
    :attr:`file` is the config file's path (for messages)."""

    study: StudyCfg
    air: AirCfg
    ground: GroundCfg = GroundCfg()
    body: BodyCfg = BodyCfg()
    variants: dict[str, VariantCfg]
    sweep: SweepCfg = SweepCfg()
    mesh: MeshCfg = MeshCfg()
    domain: DomainCfg = DomainCfg()
    solver: SolverCfg = SolverCfg()
    _file: str = PrivateAttr(default="config.toml")

    @property
    def file(self) -> str:
        return self._file

    @property
    def variant_names(self) -> tuple[str, ...]:
        return tuple(self.variants)

    @property
    def empty_section(self) -> bool:
        """True for an empty test section (a variant with ``geometry = "none"``)."""
        return any(v.geometry == EMPTY_GEOMETRY for v in self.variants.values())

    def length_unit(self, variant: str) -> str:
        return self.variants[variant].length_unit or self.body.length_unit

    def reference_area_setting(self, variant: str) -> float | str:
        v = self.variants[variant].reference_area
        return self.body.reference_area if v is None else v


# ----------------------------------------------------------------- messages

_MODELS: dict[str, type[BaseModel]] = {
    "": Config, "study": StudyCfg, "air": AirCfg, "ground": GroundCfg, "body": BodyCfg, "wheels": WheelCfg,
    "variants": VariantCfg, "sweep": SweepCfg, "points": PointCfg, "mesh": MeshCfg, "domain": DomainCfg,
    "solver": SolverCfg,
}


def _key(loc: tuple) -> str:
    out = ""
    for part in loc:
        if isinstance(part, int):
            out += f"[{part}]"
        else:
            out += ("." if out else "") + str(part)
    return out


def _generic(loc: tuple) -> str:
    parts = []
    for i, part in enumerate(loc):
        if isinstance(part, int):
            parts.append("[]")
        elif i == 1 and loc[0] == "variants":
            parts.append(".<name>")
        else:
            parts.append(("." if parts else "") + str(part))
    return "".join(parts)


def _unit(loc: tuple) -> str:
    g = _generic(tuple(p for p in loc))
    while g:
        if g in KEYS:
            u = KEYS[g][0]
            return "" if u == "—" else f" ({u})"
        if g.endswith("[]"):
            g = g[:-2]
        else:
            break
    return ""


def _model_for(loc: tuple) -> type[BaseModel]:
    names = [p for p in loc if isinstance(p, str)]
    if names and names[0] == "variants":
        return VariantCfg
    model = _MODELS.get(names[-1] if names else "", Config) if names else Config
    return model


def _fixed_len(loc: tuple) -> int | None:
    """Length of the fixed-size list (tuple) at ``loc``, from the model annotation."""
    import types
    import typing

    names = [i for i, p in enumerate(loc) if isinstance(p, str)]
    if not names:
        return None
    k = names[-1]
    model = _model_for(loc[:k])
    f = model.model_fields.get(loc[k])
    if f is None:
        return None
    ann = f.annotation
    depth = len(loc) - k - 1
    for _ in range(depth + 1):
        if typing.get_origin(ann) in (typing.Union, types.UnionType):
            ann = next(a for a in typing.get_args(ann) if a is not type(None))
        args = typing.get_args(ann)
        if typing.get_origin(ann) is not tuple:
            return None
        if _ == depth:
            return None if (len(args) == 2 and args[1] is Ellipsis) else len(args)
        ann = args[0]
    return None


_TYPE_WORDS = {
    "float_type": "a number", "int_type": "a whole number", "string_type": "a text string (in quotes)",
    "bool_type": "true or false", "tuple_type": "a list", "dict_type": "a table", "model_type": "a table",
    "list_type": "a list",
}


_UNION_TAGS = ("float", "str", "int", "bool")


def _translate(exc: ValidationError, file: str) -> list[UserError]:
    errs: list[UserError] = []
    seen: set[str] = set()
    for e in exc.errors():
        loc = tuple(e["loc"])
        typ = e["type"]
        cut = [i for i, p in enumerate(loc) if isinstance(p, str) and (p in _UNION_TAGS or p.startswith(("literal[", "function-")))]
        if cut:  # a union member's error: report once for the field
            loc = loc[: cut[0]]
            if _key(loc) in seen:
                continue
            if loc and loc[-1] == "reference_area":
                seen.add(_key(loc))
                errs.append(UserError(expected='a number (m²) or "auto"', got=e.get("input"), file=file, key=_key(loc),
                                      fix='give the area in m², or "auto" for the frontal area from the geometry'))
                continue
        seen.add(_key(loc))
        inp = e.get("input")
        ctx = e.get("ctx") or {}
        if typ == "extra_forbidden":
            parent_loc = loc[:-1]
            name = str(loc[-1])
            model = _model_for(parent_loc) if parent_loc else Config
            fields = list(model.model_fields)
            where = _key(parent_loc) or "the top level"
            errs.append(UserError(expected=f"one of the keys {', '.join(fields)} in {where}", got=name, file=file,
                                  key=_key(loc), fix=f"remove or rename the key.{did_you_mean(name, fields)}".replace(".  ", ". ")))
            continue
        key = _key(loc)
        unit = _unit(loc)
        if (typ == "missing" and isinstance(loc[-1], int)) or typ in ("too_short", "too_long"):
            ploc = loc[:-1] if typ == "missing" else loc
            n = _fixed_len(ploc) or ctx.get("expected") or ctx.get("max_length") or ctx.get("min_length")
            pk = _key(ploc)
            if pk in seen and typ == "missing":
                continue
            seen.add(pk)
            what = "x, y, z in m, body frame" if n == 3 and _unit(ploc) == " (m)" else "numbers"
            errs.append(UserError(expected=f"a list of {n} values ({what})", got=list(inp) if isinstance(inp, (tuple, list)) else inp,
                                  file=file, key=pk, fix=f"give exactly {n} values"))
        elif typ == "missing":
            errs.append(UserError(expected=f"the key {key}{unit}", got="nothing", file=file, key=key,
                                  fix=f"add `{loc[-1]} = …` (see the README's config table)"))
        elif typ == "literal_error":
            allowed = ctx.get("expected", "")
            choices = re.findall(r"'([^']*)'", allowed)
            errs.append(UserError(expected=f"one of {allowed}", got=inp, file=file, key=key,
                                  fix=("use one of the listed values." + did_you_mean(str(inp), choices)) if isinstance(inp, str) else "use one of the listed values"))
        elif typ.startswith("uf_"):
            errs.append(UserError(expected=ctx.get("expected", "a valid value"), got=inp, file=file, key=key, fix=ctx.get("fix")))
        else:
            word = _TYPE_WORDS.get(typ, e.get("msg", "a valid value").replace("Input should be ", ""))
            errs.append(UserError(expected=f"{word}{unit}", got=inp, file=file, key=key,
                                  fix="write a plain TOML value of that type (numbers without quotes)" if typ in ("float_type", "int_type") else "see the README's config table"))
    return errs


def _tuplify(x: Any) -> Any:
    if isinstance(x, list):
        return tuple(_tuplify(v) for v in x)
    if isinstance(x, dict):
        return {k: _tuplify(v) for k, v in x.items()}
    return x


# ----------------------------------------------------------------- semantics


def _positive(errs: list, file: str, key: str, value, unit: str, fix: str | None = None) -> None:
    if value is not None and not value > 0:
        errs.append(UserError(expected=f"a positive number ({unit})", got=value, file=file, key=key,
                              fix=fix or "use a value > 0"))


def _semantic(cfg: Config, base: Path, file: str) -> list[UserError]:
    errs: list[UserError] = []
    a = cfg.air
    _positive(errs, file, "air.speed", a.speed, "m/s")
    if a.temperature is not None and not 150.0 <= a.temperature <= 400.0:
        errs.append(UserError(expected="a temperature in K between 150 and 400", got=a.temperature, file=file,
                              key="air.temperature", fix="temperatures are absolute, in kelvin (20 °C = 293.15 K)"))
    if a.pressure is not None and not 1.0e3 <= a.pressure <= 2.0e5:
        errs.append(UserError(expected="an absolute pressure in Pa between 1e3 and 2e5", got=a.pressure, file=file,
                              key="air.pressure", fix="give the absolute static pressure in Pa (sea level: 101325)"))
    if a.altitude is not None and not -2000.0 <= a.altitude <= 11000.0:
        errs.append(UserError(expected="an altitude in m between -2000 and 11000 (ISO 2533 troposphere)", got=a.altitude,
                              file=file, key="air.altitude"))
    for k in ("density", "viscosity", "kinematic_viscosity"):
        _positive(errs, file, f"air.{k}", getattr(a, k), KEYS[f"air.{k}"][0])
    if not 1.0 <= a.underfloor_speed_factor <= 3.0:
        errs.append(UserError(expected="an underfloor speed factor from 1.0 to 3.0 (peak speed under the floor / air speed)",
                              got=a.underfloor_speed_factor, file=file, key="air.underfloor_speed_factor",
                              fix="1.3–1.5 is typical of a ground-effect floor (a suction peak C_p of about −1)"))

    if not cfg.variants:
        errs.append(UserError(expected="at least one [variants.NAME] table", got="none", file=file, key="variants",
                              fix='add e.g. [variants.baseline] with geometry = "baseline.stl"'))
    for name, v in cfg.variants.items():
        if not NAME_RE.match(name):
            errs.append(UserError(expected=NAME_RULE + " (it becomes a folder, a patch and a shell word)", got=name,
                                  file=file, key=f"variants.{name}", fix="rename the variant, e.g. 'diffuser_8deg'"))
        p = (base / v.geometry)
        if v.geometry != EMPTY_GEOMETRY and not p.is_file():
            errs.append(UserError(expected="an existing geometry file", got=str(p), file=file, key=f"variants.{name}.geometry",
                                  fix="check the path (relative paths are relative to the config file's folder)"))
        ra = v.reference_area
        if isinstance(ra, str) and ra != "auto":
            errs.append(UserError(expected='a number (m²) or "auto"', got=ra, file=file, key=f"variants.{name}.reference_area"))
        elif isinstance(ra, float):
            _positive(errs, file, f"variants.{name}.reference_area", ra, "m²")
    b = cfg.body
    if isinstance(b.reference_area, str) and b.reference_area != "auto":
        errs.append(UserError(expected='a number (m²) or "auto"', got=b.reference_area, file=file, key="body.reference_area"))
    elif isinstance(b.reference_area, float):
        _positive(errs, file, "body.reference_area", b.reference_area, "m²")
    _positive(errs, file, "body.reference_length", b.reference_length, "m")
    _positive(errs, file, "body.wheelbase", b.wheelbase, "m")
    has_ground = cfg.ground.mode != "none"
    empty = cfg.empty_section
    if empty:
        errs.extend(_empty_section_problems(cfg, file))
    if has_ground and not empty:
        for k in ("front_axle", "rear_axle", "ride_height_point_front", "ride_height_point_rear"):
            if getattr(b, k) is None:
                errs.append(UserError(expected=f"the key body.{k} ([x, y, z] in m, body frame)", got="nothing", file=file,
                                      key=f"body.{k}", fix=f"add body.{k}; it is required when there is a ground (ground.mode = {cfg.ground.mode!r})"))
        f, r = b.ride_height_point_front, b.ride_height_point_rear
        if f is not None and r is not None and not r[0] > f[0]:
            errs.append(UserError(expected="ride_height_point_rear behind (larger x than) ride_height_point_front",
                                  got=f"x_front = {f[0]}, x_rear = {r[0]}", file=file, key="body.ride_height_point_rear",
                                  fix="body x points rearward: the front point has the smaller x"))
        if b.front_axle is not None and b.rear_axle is not None and b.wheelbase is None and not b.rear_axle[0] > b.front_axle[0]:
            errs.append(UserError(expected="rear_axle behind (larger x than) front_axle", got=f"{b.front_axle} / {b.rear_axle}",
                                  file=file, key="body.rear_axle", fix="body x points rearward; or give body.wheelbase"))
    if not empty and b.reference_length is None and b.wheelbase is None and (b.front_axle is None or b.rear_axle is None or not has_ground):
        errs.append(UserError(expected="body.reference_length (m)", got="nothing", file=file, key="body.reference_length",
                              fix="give body.reference_length (or body.wheelbase)"))
    for i, w in enumerate(b.wheels):
        key = f"body.wheels[{i}]"
        _positive(errs, file, key + ".radius", w.radius, "m")
        if (w.geometry is None) == (w.solid is None):
            errs.append(UserError(expected="exactly one of geometry (a wheel STL file) or solid (a solid name in the body STL)",
                                  got="both" if w.geometry else "neither", file=file, key=key))
        if w.geometry is not None and not (base / w.geometry).is_file():
            errs.append(UserError(expected="an existing geometry file", got=str(base / w.geometry), file=file, key=key + ".geometry",
                                  fix="check the path (relative to the config file's folder)"))
        if sum(c * c for c in w.axis) == 0:
            errs.append(UserError(expected="a non-zero axis vector", got=w.axis, file=file, key=key + ".axis"))
        elif w.axis[0] ** 2 + w.axis[1] ** 2 < 1e-6 * sum(c * c for c in w.axis):
            errs.append(UserError(expected="a wheel axis with a horizontal part (the wheel stands on the ground)", got=w.axis,
                                  file=file, key=key + ".axis", fix="give the axle direction, e.g. [0, 1, 0]"))
        if not abs(w.steering_deg) <= MAX_STEERING_DEG:
            errs.append(UserError(expected=f"a steering angle with |δ| ≤ {MAX_STEERING_DEG:g} deg (road-car steering lock)",
                                  got=w.steering_deg, file=file, key=key + ".steering_deg", fix="angles are in degrees"))
        if not abs(w.camber_deg) <= MAX_CAMBER_DEG:
            errs.append(UserError(expected=f"a camber angle with |γ| ≤ {MAX_CAMBER_DEG:g} deg", got=w.camber_deg, file=file,
                                  key=key + ".camber_deg", fix="angles are in degrees"))
        if not 0.0 <= w.flattening <= 0.1:
            errs.append(UserError(expected="a flattening from 0 to 0.1 of the radius (0.02: sunk 2 % into the ground)",
                                  got=w.flattening, file=file, key=key + ".flattening"))
        if w.zone_radius is not None and w.rotation != "zone":
            errs.append(UserError(expected='zone_radius only with rotation = "zone"', got=w.zone_radius, file=file,
                                  key=key + ".zone_radius", fix='remove it or set rotation = "zone"'))
        elif w.zone_radius is not None and w.radius > 0 and not 0.0 < w.zone_radius < w.radius * (1.0 - w.flattening):
            errs.append(UserError(expected="a rotating-zone radius between 0 and the loaded radius (the zone must not reach the ground)",
                                  got=w.zone_radius, file=file, key=key + ".zone_radius",
                                  fix=f"use at most {w.radius * (1.0 - w.flattening):.4g} m (a rim's radius is typical)"))
    names = [w.name for w in b.wheels]
    for n in set(names):
        if names.count(n) > 1:
            errs.append(UserError(expected="unique wheel names", got=n, file=file, key="body.wheels"))
    if b.wheels and not has_ground:
        errs.append(UserError(expected="no rotating wheels without a ground", got=f"{len(b.wheels)} wheels", file=file,
                              key="body.wheels", fix='remove the wheels or set ground.mode = "moving"'))

    s = cfg.sweep
    known = list(cfg.variants)
    for i, v in enumerate(s.variants or ()):
        if v not in cfg.variants:
            errs.append(UserError(expected="a variant defined under [variants]", got=v, file=file, key=f"sweep.variants[{i}]",
                                  fix=("define it or remove it." + did_you_mean(v, known))))
    axes_given = [k for k in ("ride_height", "pitch_deg", "ride_heights_front_rear") if getattr(s, k) is not None]
    if s.points is not None and axes_given:
        errs.append(UserError(expected="either sweep.points or the sweep axes", got=f"both (points and {', '.join(axes_given)})",
                              file=file, key="sweep.points", fix="use one way of describing the sweep"))
    if s.ride_height is not None and s.ride_heights_front_rear is not None:
        errs.append(UserError(expected="either sweep.ride_height (× pitch_deg) or sweep.ride_heights_front_rear", got="both",
                              file=file, key="sweep.ride_heights_front_rear", fix="keep one of the two"))
    if s.ride_heights_front_rear is not None and s.pitch_deg is not None:
        errs.append(UserError(expected="no sweep.pitch_deg with ride_heights_front_rear (the pairs fix the pitch)", got=s.pitch_deg,
                              file=file, key="sweep.pitch_deg", fix="remove sweep.pitch_deg"))
    rh_fix = "ride heights are measured upwards from the ground; use a value > 0"
    if has_ground and not empty:
        if s.points is None and s.ride_height is None and s.ride_heights_front_rear is None:
            errs.append(UserError(expected="sweep.ride_height or sweep.ride_heights_front_rear (m)", got="neither", file=file,
                                  key="sweep", fix="give the ride heights to run, e.g. ride_height = [0.03]"))
        for i, h in enumerate(s.ride_height or ()):
            _positive(errs, file, f"sweep.ride_height[{i}]", h, "m", rh_fix)
        for i, (hf, hr) in enumerate(s.ride_heights_front_rear or ()):
            _positive(errs, file, f"sweep.ride_heights_front_rear[{i}][0]", hf, "m", rh_fix)
            _positive(errs, file, f"sweep.ride_heights_front_rear[{i}][1]", hr, "m", rh_fix)
    else:
        for k in ("ride_height", "ride_heights_front_rear"):
            if getattr(s, k) is not None:
                what, fix = (("an empty test section", "remove them (there is no body to place)") if empty else
                             ("a ground", 'remove them, or set ground.mode = "moving"'))
                errs.append(UserError(expected=f"no ride heights without {what}", got=getattr(s, k), file=file, key=f"sweep.{k}",
                                      fix=fix))
    for i, y in enumerate(s.yaw_deg):
        if not abs(y) < 45.0:
            errs.append(UserError(expected="a yaw angle with |β| < 45 deg", got=y, file=file, key=f"sweep.yaw_deg[{i}]"))
    for i, p in enumerate(s.pitch_deg or ()):
        if not abs(p) < 20.0:
            errs.append(UserError(expected="a pitch angle with |θ| < 20 deg", got=p, file=file, key=f"sweep.pitch_deg[{i}]",
                                  fix="angles are in degrees"))
    for i, v in enumerate(s.speed or ()):
        _positive(errs, file, f"sweep.speed[{i}]", v, "m/s")
    for i, m in enumerate(s.mesh_level):
        if not 0 <= m <= 6:
            errs.append(UserError(expected="a mesh level from 0 to 6", got=m, file=file, key=f"sweep.mesh_level[{i}]"))
    for i, pt in enumerate(s.points or ()):
        key = f"sweep.points[{i}]"
        if pt.variant is not None and pt.variant not in cfg.variants:
            errs.append(UserError(expected="a variant defined under [variants]", got=pt.variant, file=file, key=key + ".variant",
                                  fix="define it or fix the name." + did_you_mean(pt.variant, known)))
        pair = pt.ride_height_front is not None or pt.ride_height_rear is not None
        single = pt.ride_height is not None
        if has_ground and not empty:
            if pair and single:
                errs.append(UserError(expected="either ride_height (+ pitch_deg) or ride_height_front and ride_height_rear",
                                      got="both", file=file, key=key))
            elif pair and (pt.ride_height_front is None or pt.ride_height_rear is None):
                errs.append(UserError(expected="both ride_height_front and ride_height_rear", got="one", file=file, key=key))
            elif not pair and not single:
                errs.append(UserError(expected="ride_height or ride_height_front and ride_height_rear (m)", got="nothing",
                                      file=file, key=key))
            if pair and pt.pitch_deg is not None:
                errs.append(UserError(expected="no pitch_deg with front/rear ride heights", got=pt.pitch_deg, file=file,
                                      key=key + ".pitch_deg", fix="the two ride heights fix the pitch; remove pitch_deg"))
            for k in ("ride_height", "ride_height_front", "ride_height_rear"):
                _positive(errs, file, f"{key}.{k}", getattr(pt, k), "m", rh_fix)
        elif pair or single:
            errs.append(UserError(expected="no ride heights without a ground", got="ride heights", file=file, key=key))
        if not abs(pt.yaw_deg) < 45.0:
            errs.append(UserError(expected="a yaw angle with |β| < 45 deg", got=pt.yaw_deg, file=file, key=key + ".yaw_deg"))
        _positive(errs, file, key + ".speed", pt.speed, "m/s")
        if not 0 <= pt.mesh_level <= 6:
            errs.append(UserError(expected="a mesh level from 0 to 6", got=pt.mesh_level, file=file, key=key + ".mesh_level"))

    m = cfg.mesh
    _positive(errs, file, "mesh.base_cell", m.base_cell, "m")
    _positive(errs, file, "mesh.ground_first_cell", m.ground_first_cell, "m")
    if m.ground_first_cell is not None and not empty:
        errs.append(UserError(expected="mesh.ground_first_cell only for an empty test section (a variant with geometry = \"none\")",
                              got=m.ground_first_cell, file=file, key="mesh.ground_first_cell",
                              fix="remove it; with a body the ground is meshed by the refinement regions"))
    _positive(errs, file, "mesh.target_yplus", m.target_yplus, "dimensionless")
    _positive(errs, file, "mesh.gap_cells", m.gap_cells, "cells")
    if m.surface_levels is not None and not 0 <= m.surface_levels[0] <= m.surface_levels[1] <= 12:
        errs.append(UserError(expected="[min, max] levels with 0 ≤ min ≤ max ≤ 12", got=m.surface_levels, file=file, key="mesh.surface_levels"))
    for k in ("feature_level", "max_level"):
        v = getattr(m, k)
        if v is not None and not 0 <= v <= 12:
            errs.append(UserError(expected="a level from 0 to 12", got=v, file=file, key=f"mesh.{k}"))
    if m.layers is not None and not 0 <= m.layers <= 40:
        errs.append(UserError(expected="a number of layers from 0 to 40", got=m.layers, file=file, key="mesh.layers"))
    if m.wall_treatment == "low-re" and cfg.solver.turbulence_model == "laminar":
        errs.append(UserError(expected="mesh.wall_treatment only with a turbulence model", got="low-re with laminar flow",
                              file=file, key="mesh.wall_treatment", fix="remove it: a laminar case resolves its walls anyway"))
    if m.wall_treatment == "low-re" and m.fidelity == "smoke" and not m.layers:
        errs.append(UserError(expected="prism layers for mesh.wall_treatment = \"low-re\"", got="the smoke preset (no layers)",
                              file=file, key="mesh.wall_treatment",
                              fix='use mesh.fidelity = "coarse" or "production", or give mesh.layers'))
    if m.wall_treatment == "low-re" and m.layer_expansion is not None and not m.layer_expansion > 1.0:
        errs.append(UserError(expected="a layer expansion ratio above 1 for low-re layers (they grow from y+ ≈ 1)",
                              got=m.layer_expansion, file=file, key="mesh.layer_expansion"))
    if m.layer_expansion is not None and not 1.0 <= m.layer_expansion <= 2.0:
        errs.append(UserError(expected="a layer expansion ratio from 1.0 to 2.0", got=m.layer_expansion, file=file, key="mesh.layer_expansion"))
    d = cfg.domain
    for k in ("length", "upstream", "downstream", "width", "height"):
        _positive(errs, file, f"domain.{k}", getattr(d, k), KEYS[f"domain.{k}"][0])
    if d.lead_in is not None and not d.lead_in >= 0.0:
        errs.append(UserError(expected="a lead-in length ≥ 0 (m)", got=d.lead_in, file=file, key="domain.lead_in"))
    elif d.lead_in is not None and d.length is not None and not d.lead_in < d.length:
        errs.append(UserError(expected="domain.lead_in shorter than domain.length (the ground must start inside the section)",
                              got=f"{d.lead_in} m ≥ {d.length} m", file=file, key="domain.lead_in",
                              fix="shorten the lead-in or lengthen the section"))
    if d.lead_in is not None and not empty:
        errs.append(UserError(expected="domain.lead_in only for an empty test section (a variant with geometry = \"none\")",
                              got=d.lead_in, file=file, key="domain.lead_in", fix="remove it"))
    if d.length is not None and not empty:
        errs.append(UserError(expected="domain.length only for an empty test section (a variant with geometry = \"none\")",
                              got=d.length, file=file, key="domain.length",
                              fix="remove it; with a body the length follows from domain.upstream and domain.downstream"))
    if not 0 < d.target_blockage <= d.max_blockage < 1:
        errs.append(UserError(expected="0 < target_blockage ≤ max_blockage < 1 (fractions, 0.01 = 1 %)",
                              got=f"{d.target_blockage} / {d.max_blockage}", file=file, key="domain.max_blockage"))
    sv = cfg.solver
    if sv.iterations is not None and sv.iterations < 1:
        errs.append(UserError(expected="a positive number of iterations", got=sv.iterations, file=file, key="solver.iterations"))
    if sv.write_interval is not None and sv.write_interval < 1:
        errs.append(UserError(expected="a positive write interval", got=sv.write_interval, file=file, key="solver.write_interval"))
    if sv.ranks < 1:
        errs.append(UserError(expected="at least 1 rank", got=sv.ranks, file=file, key="solver.ranks"))
    if not 0 < sv.turbulence_intensity <= 0.2:
        errs.append(UserError(expected="a turbulence intensity fraction in (0, 0.2] (0.01 = 1 %)", got=sv.turbulence_intensity,
                              file=file, key="solver.turbulence_intensity"))
    _positive(errs, file, "solver.turbulence_length_scale", sv.turbulence_length_scale, "m")
    return errs


def _empty_section_problems(cfg: Config, file: str) -> list[UserError]:
    """Rules of an empty test section (a variant with ``geometry = "none"``):
    the only variant, over a ground, no wheels or ride heights, and the
    section's size and cell size given (there is no body to size them from)."""
    errs: list[UserError] = []
    names = [n for n, v in cfg.variants.items() if v.geometry == EMPTY_GEOMETRY]
    if len(cfg.variants) > 1:
        others = [n for n in cfg.variants if n not in names]
        errs.append(UserError(expected='an empty test section (geometry = "none") as the only variant', got=f"also {', '.join(others or names[1:])}",
                              file=file, key=f"variants.{names[0]}.geometry",
                              fix="write the empty test section as its own study (its domain is given explicitly)"))
    if cfg.ground.mode == "none":
        errs.append(UserError(expected='a ground (ground.mode = "moving" or "stationary") for an empty test section', got="none",
                              file=file, key="ground.mode", fix='set ground.mode = "stationary" or "moving"'))
    for k in ("domain.length", "domain.width", "domain.height", "mesh.base_cell"):
        sec, key = k.split(".")
        if getattr(getattr(cfg, sec), key) is None:
            errs.append(UserError(expected=f"the key {k} (m) for an empty test section", got="nothing", file=file, key=k,
                                  fix=f"add `{key} = …` under [{sec}]: with no body there is nothing to size it from"))
    if cfg.body.wheels:
        errs.append(UserError(expected="no wheels in an empty test section", got=f"{len(cfg.body.wheels)} wheels", file=file,
                              key="body.wheels", fix="remove the wheels"))
    if cfg.sweep.pitch_deg is not None and any(p != 0.0 for p in cfg.sweep.pitch_deg):
        errs.append(UserError(expected="no pitch in an empty test section", got=cfg.sweep.pitch_deg, file=file,
                              key="sweep.pitch_deg", fix="remove sweep.pitch_deg (there is no body to pitch)"))
    for i, pt in enumerate(cfg.sweep.points or ()):
        if pt.pitch_deg not in (None, 0.0):
            errs.append(UserError(expected="no pitch in an empty test section", got=pt.pitch_deg, file=file,
                                  key=f"sweep.points[{i}].pitch_deg", fix="remove pitch_deg (there is no body to pitch)"))
    d, m = cfg.domain, cfg.mesh
    if m.base_cell is not None and d.height is not None and not d.height >= 2.0 * m.base_cell:
        errs.append(UserError(expected="domain.height at least two base cells (mesh.base_cell)", got=f"{d.height} m for cells of {m.base_cell} m",
                              file=file, key="domain.height", fix="raise domain.height or lower mesh.base_cell"))
    if m.ground_first_cell is not None and m.base_cell is not None and not m.ground_first_cell < m.base_cell:
        errs.append(UserError(expected="mesh.ground_first_cell smaller than mesh.base_cell (the cells grow away from the ground)",
                              got=f"{m.ground_first_cell} m ≥ {m.base_cell} m", file=file, key="mesh.ground_first_cell",
                              fix="lower mesh.ground_first_cell, or leave it out for uniform cells"))
    return errs


def _resolve_paths(cfg: Config, base: Path) -> Config:
    variants = {n: (v if v.geometry == EMPTY_GEOMETRY else v.model_copy(update={"geometry": str((base / v.geometry).resolve())}))
                for n, v in cfg.variants.items()}
    wheels = tuple(w.model_copy(update={"geometry": str((base / w.geometry).resolve())}) if w.geometry else w for w in cfg.body.wheels)
    return cfg.model_copy(update={"variants": variants, "body": cfg.body.model_copy(update={"wheels": wheels})})


def parse_config(data: dict, file: str = "config.toml", base_dir: str | Path = ".") -> Config:
    """Validate an already-parsed TOML mapping. Raises UserError/UserErrors."""
    try:
        cfg = Config.model_validate(_tuplify(data))
    except ValidationError as exc:
        errs = _translate(exc, file)
        raise (errs[0] if len(errs) == 1 else UserErrors(errs)) from None
    base = Path(base_dir)
    errs = _semantic(cfg, base, file)
    if errs:
        raise errs[0] if len(errs) == 1 else UserErrors(errs)
    out = _resolve_paths(cfg, base)
    out._file = file
    return out


def load_config(path: str | Path) -> Config:
    """Read and validate a TOML config file; returns the frozen :class:`Config`.

    Raises :class:`UserError` (or :class:`UserErrors` for several problems)
    for anything wrong in it: syntax, unknown keys, types, values, missing
    geometry files.
    """
    p = Path(path)
    if not p.is_file():
        raise UserError(expected="an existing config file (TOML)", got=str(p), fix="check the path")
    try:
        data = tomllib.loads(p.read_text(encoding="utf-8"))
    except UnicodeDecodeError:
        raise UserError(expected="a UTF-8 text file", got="binary data", file=str(p)) from None
    except tomllib.TOMLDecodeError as exc:
        raise UserError(f"{p} is not valid TOML: {exc}", fix="fix the syntax at that line (strings in quotes, arrays in [ ])") from None
    return parse_config(data, file=str(p), base_dir=p.parent)


FIDELITIES: tuple[str, ...] = ("smoke", "coarse", "production")


def with_fidelity(cfg: Config, fidelity: str | None, file: str = "--fidelity") -> Config:
    """``cfg`` with its mesh fidelity preset replaced by ``fidelity`` (one of
    :data:`FIDELITIES`); ``None`` returns ``cfg`` unchanged. Used by
    ``caseprep write --fidelity`` and the demo to write a sweep at another
    level without editing the config."""
    if fidelity is None or fidelity == cfg.mesh.fidelity:
        return cfg
    if fidelity not in FIDELITIES:
        raise UserError(expected=f"a fidelity preset ({', '.join(FIDELITIES)})", got=fidelity, key=file,
                        fix="pick one of those." + did_you_mean(fidelity, FIDELITIES))
    return cfg.model_copy(update={"mesh": cfg.mesh.model_copy(update={"fidelity": fidelity})})
