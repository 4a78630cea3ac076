"""The sweep config's schema: the frozen pydantic models of every table,
and the translation of pydantic's errors into UserErrors.

SI units everywhere (m, s, kg, K, Pa); angles in degrees in keys ending
``_deg``; points are body-frame coordinates in metres (x rearward, y right,
z up, see :mod:`caseprep.contract.frames`) whatever the geometry files'
``length_unit``. Every key's unit, default, allowed values and range
are declared once in :mod:`caseprep.config.keys` (the README's key table is
rendered from there); the value checks are in :mod:`caseprep.config.checks`.
Loading is :func:`caseprep.config.load.load_config`.
"""
from __future__ import annotations

import re
from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, PrivateAttr, ValidationError, field_validator
from pydantic_core import PydanticCustomError

from caseprep.config.keys import KEYS, choices, default
from caseprep.contract.errors import UserError, did_you_mean
from caseprep.contract.limits import MAX_NAME_LENGTH, NAME_RE, NAME_RULE as _RULE, is_name  # noqa: F401 (NAME_RE re-exported)

NAME_RULE = f"{_RULE}, at most {int(MAX_NAME_LENGTH.value)} characters"
# allowed values, from the one declaration of the keys (caseprep.config.keys)
FIDELITIES = choices("mesh.fidelity")
GROUND_MODES = choices("ground.mode")
TURBULENCE_MODELS = choices("solver.turbulence_model")
LENGTH_UNIT_NAMES = choices("body.length_unit")
YAW_MODES = choices("sweep.yaw_mode")
# ``variants.<name>.geometry = "none"``: an empty test section (no body), e.g.
# to check the ground's boundary layer or the empty-section flow.
EMPTY_GEOMETRY = "none"

Vec3 = tuple[float, float, float]


def _check_name(v: str) -> str:
    if not is_name(v):
        raise PydanticCustomError("uf_name", "name", {"expected": NAME_RULE, "fix": "rename it, e.g. 'diffuser_8deg'"})
    return v


class _M(BaseModel):
    # every number finite: NaN and ±inf are refused at their key
    model_config = ConfigDict(frozen=True, extra="forbid", strict=True, allow_inf_nan=False)


class StudyCfg(_M):
    name: str
    description: str = default("study.description")

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
    underfloor_speed_factor: float = default("air.underfloor_speed_factor")


class GroundCfg(_M):
    mode: Literal[GROUND_MODES] = default("ground.mode")


class WheelCfg(_M):
    name: str
    centre: Vec3
    radius: float
    axis: Vec3 = default("body.wheels[].axis")
    geometry: str | None = None
    solid: str | None = None
    steering_deg: float = default("body.wheels[].steering_deg")
    camber_deg: float = default("body.wheels[].camber_deg")
    flattening: float = default("body.wheels[].flattening")
    rotation: Literal[choices("body.wheels[].rotation")] = default("body.wheels[].rotation")
    zone_radius: float | None = None

    @field_validator("name")
    @classmethod
    def name_ok(cls, v: str) -> str:
        return _check_name(v)


class BodyCfg(_M):
    length_unit: Literal[LENGTH_UNIT_NAMES] = default("body.length_unit")
    reference_area: float | str = default("body.reference_area")
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
    length_unit: Literal[LENGTH_UNIT_NAMES] | None = None
    reference_area: float | str | None = None
    description: str = default("variants.<name>.description")


class PointCfg(_M):
    variant: str | None = None
    ride_height: float | None = None
    pitch_deg: float | None = None
    ride_height_front: float | None = None
    ride_height_rear: float | None = None
    yaw_deg: float = default("sweep.points[].yaw_deg")
    speed: float | None = None
    mesh_level: int = default("sweep.points[].mesh_level")


class SweepCfg(_M):
    yaw_mode: Literal[YAW_MODES] = default("sweep.yaw_mode")
    variants: tuple[str, ...] | None = None
    ride_height: tuple[float, ...] | None = None
    pitch_deg: tuple[float, ...] | None = None
    ride_heights_front_rear: tuple[tuple[float, float], ...] | None = None
    yaw_deg: tuple[float, ...] = default("sweep.yaw_deg")
    speed: tuple[float, ...] | None = None
    mesh_level: tuple[int, ...] = default("sweep.mesh_level")
    points: tuple[PointCfg, ...] | None = None


class MeshCfg(_M):
    fidelity: Literal[FIDELITIES] = default("mesh.fidelity")
    base_cell: float | None = None
    surface_levels: tuple[int, int] | None = None
    feature_level: int | None = None
    max_level: int | None = None
    gap_cells: float | None = None
    target_yplus: float | None = None
    layers: int | None = None
    layer_expansion: float | None = None
    ground_first_cell: float | None = None
    wall_treatment: Literal[choices("mesh.wall_treatment")] = default("mesh.wall_treatment")
    reuse: Literal[choices("mesh.reuse")] = default("mesh.reuse")


class DomainCfg(_M):
    length: float | None = None
    lead_in: float | None = None
    upstream: float = default("domain.upstream")
    downstream: float = default("domain.downstream")
    width: float | None = None
    height: float | None = None
    target_blockage: float = default("domain.target_blockage")
    max_blockage: float = default("domain.max_blockage")


class SolverCfg(_M):
    turbulence_model: Literal[TURBULENCE_MODELS] = default("solver.turbulence_model")
    iterations: int | None = None
    write_interval: int | None = None
    ranks: int = default("solver.ranks")
    turbulence_intensity: float = default("solver.turbulence_intensity")
    turbulence_length_scale: float | None = None
    warm_start: Literal[choices("solver.warm_start")] = default("solver.warm_start")
    stop_rule: Literal[choices("solver.stop_rule")] = default("solver.stop_rule")


class ClusterCfg(_M):
    partition: str = default("cluster.partition")
    account: str = default("cluster.account")
    cores_per_case: int | None = None
    memory_per_core: str = default("cluster.memory_per_core")
    case_time: str = default("cluster.case_time")
    max_running: int = default("cluster.max_running")
    postproc_shards: int = default("cluster.postproc_shards")
    postproc_cores: int = default("cluster.postproc_cores")
    postproc_memory: str = default("cluster.postproc_memory")
    postproc_time: str = default("cluster.postproc_time")
    report_memory: str = default("cluster.report_memory")
    report_time: str = default("cluster.report_time")
class ReportCfg(_M):
    """What the sweep report pictures (``postproc sweep`` reads it from the manifest)."""

    baseline: str | None = None
    picture_ride_height: float | None = None
    picture_yaw_deg: float | None = None


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
    cluster: ClusterCfg = ClusterCfg()
    report: ReportCfg = ReportCfg()
    # settings of `postproc analyse` (read by postproc.io.analysis_config; caseprep only carries them)
    analysis: dict[str, Any] | None = None
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
    "solver": SolverCfg, "cluster": ClusterCfg, "report": ReportCfg,
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
            u = KEYS[g].unit
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
    "list_type": "a list", "finite_number": "a finite number (not nan or inf)",
}


_UNION_TAGS = ("float", "str", "int", "bool")


def translate_errors(exc: ValidationError, file: str) -> list[UserError]:
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
