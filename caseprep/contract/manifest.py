"""The sweep manifest: ``manifest.json`` at the sweep root.

caseprep writes it; postproc reads it and takes every fact it needs from it
(folders, parameters, frames, reference values), never from folder names.

Schema (version 1)
------------------
::

    {
      "schema": "underfloor-manifest",
      "schema_version": 1,
      "tool_version": "0.1.0",
      "config_file": "sweep.toml",            # as given, for the record
      "config_hash": "sha256:…",              # of the config file's bytes
      "created_utc": "2026-12-01T21:00:00Z",
      "study": "demo-floor-study",
      "cases": [ CaseRecord, … ]
    }

CaseRecord::

    {
      "case_id": "flat-ab12cd34",             # stable, see caseprep.planning.points
      "folder": "cases/flat-ab12cd34",        # relative to the sweep root
      "variant": "flat",
      "params": {"ride_height_front": 0.03, "ride_height_rear": 0.05,
                 "pitch_deg": -0.6, "yaw_deg": 0.0, "speed": 40.0,
                 "mesh_level": 0},
      "yaw_mode": "crosswind",                # or "yawed-model"
      "ground": "moving",                     # or "stationary", "none"
      "mesh_frame": "body",
      "frames": Placement.to_dict(),          # body → ground transform
      "wind_direction_body": [ux, uy, uz],    # unit, relative wind, body axes
      "reference": {
          "area": 0.35, "length": 0.75, "wheelbase": 0.75,
          "front_axle": [x, y, z], "rear_axle": [x, y, z],   # body frame, m
          "moment_point": [x, y, z],                        # body frame, m
          "cog": [x, y, z] | null,                           # body frame, m
          "rho": 1.225, "nu": 1.46e-5, "speed": 40.0,        # air speed for q
          "p_ref": 0.0                                       # gauge reference, Pa
      },
      "patches": {"body": ["body"], "wheels": ["wheel_fl", …], "ground": "ground"},
      "fidelity": "smoke",
      "min_clearance": 0.021, "min_clearance_at": [x, y, z], # body frame
      "estimated_cells": 180000,
      …the planning facts of INFO_FIELDS (geometry sources, air state, warnings…),
      "turbulence_model": "kOmegaSST",        # or "laminar"
      "target_yplus": 50.0 | null,            # at the first prism layer's centre; null without layers
      "wall_treatment": "wall-function",      # or "low-re", "laminar" (caseprep.contract.walls): its y+ band
      "fluid_volume": 259.5,                  # m³: the sizing rule's domain box less the body, for h = (V/N)^(1/3)
      "outputs": {"forces": "postProcessing/uf_forces/0/force.dat", …}, # where the run's outputs land
      "mesh_key": "sha256:…" | null,          # of the mesh dictionaries and surfaces; null: never shared
      "mesh_owner": "flat-ab12cd34" | null,   # the case whose mesh this case uses (itself: it meshes)
      "warm_start": "off",                    # or "nearest": start from the nearest solved case
      "stop_rule": "budget"                   # or "settled": stop once converged with the loads settled
    }

Every key a record carries is declared here: the fields of
:class:`CaseRecord`, and the planning facts it keeps for the record in
``info``, whose keys are those of :data:`INFO_FIELDS` (a record read from
disk keeps no other key).

All lengths in m, speeds in m/s, density kg/m³, kinematic viscosity m²/s,
angles in degrees (keys ending ``_deg``).
"""
from __future__ import annotations

import json
import os
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from caseprep.contract.errors import UserError
from caseprep.contract.frames import Placement
from caseprep.contract.atomicio import write_json_atomic
from caseprep.contract.limits import MAX_CASE_ID_LENGTH, MAX_CASES, NAME_RULE, is_case_id
from caseprep.contract.untrusted import (confined, expect_dict, expect_int, expect_list, expect_number, expect_str,
                                         expect_vec3, read_json, relative_parts)

SCHEMA = "underfloor-manifest"
#: The initial fields a case may start from: ``off`` the uniform free stream
#: written with the case; ``nearest`` the converged fields of the nearest
#: solved case of the same variant and mesh level (caseprep.run.economy).
WARM_STARTS: tuple[str, ...] = ("off", "nearest")
#: When a solve ends: ``budget`` at the iteration budget (or the solver's own
#: residual criterion); ``settled`` also as soon as the convergence rule counts
#: the run converged with its force monitor settled (caseprep.contract.convergence.judge_stop).
STOP_RULES: tuple[str, ...] = ("budget", "settled")
SCHEMA_VERSION = 1
MANIFEST_NAME = "manifest.json"


@dataclass(frozen=True)
class Reference:
    """Reference values for coefficients. SI units; points in the body frame."""

    area: float
    length: float
    wheelbase: float
    front_axle: tuple[float, float, float]
    rear_axle: tuple[float, float, float]
    moment_point: tuple[float, float, float]
    rho: float
    nu: float
    speed: float
    p_ref: float = 0.0
    cog: tuple[float, float, float] | None = None

    @property
    def q(self) -> float:
        """Dynamic pressure ½ρV², Pa."""
        return 0.5 * self.rho * self.speed**2


#: The planning facts a case record keeps for the record (``CaseRecord.info``),
#: with what they mean. postproc reads none of them.
INFO_FIELDS: dict[str, str] = {
    "geometry_source": "the variant's geometry file as configured (path)",
    "geometry_length_unit": "length unit of that file (m, mm, in)",
    "geometry_scale_to_m": "its scale to metres",
    "wheel_sources": "wheel name → its geometry file (path)",
    "geometry_sources": "shared file name under geometry/ → source path",
    "geometry_scales": "shared file name under geometry/ → scale to metres",
    "wheel_length_unit": "length unit of the wheel files",
    "air": "air state: temperature (K), pressure (Pa), dynamic viscosity mu (Pa s)",
    "frontal_area_wind": "body shadow area normal to the relative wind (m², convex-hull bound)",
    "min_clearance_x_percent": "where the smallest ground clearance is, % of the body length from the nose",
    "warnings": "planning warnings of the case",
    "empty_section": "true for an empty test section (no body)",
    "ground_leading_edge": "empty test section: distance of the ground's leading edge from the inlet (m)",
    "ground_first_cell": "empty test section: first background cell height on the ground (m), or null",
    "yplus_band": "y+ band of the wall treatment at the first cell centre [low, high]",
    "first_cell_height": "height of the first prism layer at this mesh level (m), or null",
    "centre_yplus": "flat-plate y+ at the first cell centre at this mesh level, or null",
    "prism_layers": "prism layers: count n, expansion ratio, whether the ground under the body has them",
    "underfloor_speed": "the speed the first cell is sized for: air speed × air.underfloor_speed_factor (m/s)",
    "local_mach": "Mach number of the underfloor speed",
    "gap": "underbody resolution: reference clearance (m), gap level, gap cell (m), splits along the floor normal "
           "per slab, cells across the reference clearance and the fewest across any slab's own clearance",
    "base_cell": "background cell size at this mesh level (m)",
    "turbulence": "free-stream turbulence at the inlet and at the model: k (m²/s²), omega (1/s), nut (m²/s), "
                  "intensity, length scale (m), distance inlet → model (m)",
    "wheels": "per wheel: centre, axis, contact point (mesh frame, m), centre height, radius, loaded radius, "
              "flattening depth, contact gap (m), spin omega (rad/s), rotation (wall or zone), steering and camber (deg)",
    "geometry_recipes": "files made for this case under geometry/: source, unit, solids kept, rotation and offset",
    "report": "the config's [report] settings: baseline variant, pictured ride height (m) and yaw (deg)",
}


@dataclass(frozen=True)
class CaseRecord:
    """One case of the sweep as the manifest describes it (schema above).

    ``turbulence_model``, ``wall_treatment`` and ``target_yplus`` (at the
    first prism layer's centre, None without layers) are what the
    post-processing judges y+ by; ``fluid_volume`` (m³) gives the
    representative cell size h = (V/N)^(1/3) of the mesh study; ``outputs``
    where the run's outputs land, relative to the case folder; ``info`` the
    planning facts of :data:`INFO_FIELDS`.

    ``mesh_key``: a hash of everything that makes the mesh (the rendered mesh
    dictionaries' bytes, the surfaces' names and bytes); None when the case
    never shares. ``mesh_owner``: the case that meshes for every case with
    the same key (the first in the manifest; its own id when it meshes
    itself; None: it meshes itself). ``warm_start``: the initial field the
    runner prepares (:data:`WARM_STARTS`); ``stop_rule`` when the solve
    ends (:data:`STOP_RULES`). A record without these fields (a sweep
    written before them) reads as ``off`` and ``budget``: its files know
    nothing of either (the config's defaults are in caseprep.config.keys)."""

    case_id: str
    folder: str
    variant: str
    params: dict[str, Any]
    yaw_mode: str
    ground: str
    mesh_frame: str
    placement: Placement
    wind_direction_body: tuple[float, float, float]
    reference: Reference
    patches: dict[str, Any]
    fidelity: str
    min_clearance: float | None = None
    min_clearance_at: tuple[float, float, float] | None = None
    estimated_cells: int | None = None
    turbulence_model: str | None = None
    target_yplus: float | None = None
    wall_treatment: str | None = None
    fluid_volume: float | None = None
    outputs: dict[str, str] = field(default_factory=dict)
    info: dict[str, Any] = field(default_factory=dict)
    mesh_key: str | None = None
    mesh_owner: str | None = None
    warm_start: str = "off"
    stop_rule: str = "budget"

    @property
    def shares_mesh(self) -> bool:
        """Whether this case uses another case's mesh instead of meshing."""
        return self.mesh_owner is not None and self.mesh_owner != self.case_id

    def to_dict(self) -> dict[str, Any]:
        r = self.reference
        d = {
            "case_id": self.case_id,
            "folder": self.folder,
            "variant": self.variant,
            "params": dict(self.params),
            "yaw_mode": self.yaw_mode,
            "ground": self.ground,
            "mesh_frame": self.mesh_frame,
            "frames": self.placement.to_dict(),
            "wind_direction_body": [float(v) for v in self.wind_direction_body],
            "reference": {
                "area": r.area,
                "length": r.length,
                "wheelbase": r.wheelbase,
                "front_axle": list(r.front_axle),
                "rear_axle": list(r.rear_axle),
                "moment_point": list(r.moment_point),
                "cog": list(r.cog) if r.cog is not None else None,
                "rho": r.rho,
                "nu": r.nu,
                "speed": r.speed,
                "p_ref": r.p_ref,
            },
            "patches": self.patches,
            "fidelity": self.fidelity,
            "min_clearance": self.min_clearance,
            "min_clearance_at": list(self.min_clearance_at) if self.min_clearance_at is not None else None,
            "estimated_cells": self.estimated_cells,
        }
        d.update((k, v) for k, v in self.info.items() if k in INFO_FIELDS)
        d.update(turbulence_model=self.turbulence_model, target_yplus=self.target_yplus, wall_treatment=self.wall_treatment,
                 fluid_volume=self.fluid_volume, outputs=dict(self.outputs), mesh_key=self.mesh_key,
                 mesh_owner=self.mesh_owner, warm_start=self.warm_start, stop_rule=self.stop_rule)
        return d

    @classmethod
    def from_dict(cls, d: dict[str, Any], source: str = MANIFEST_NAME, index: int | None = None) -> "CaseRecord":
        check_record_dict(d, source, index)
        cid = d.get("case_id", "?")
        try:
            r = d["reference"]
            ref = Reference(
                area=float(r["area"]),
                length=float(r["length"]),
                wheelbase=float(r["wheelbase"]),
                front_axle=tuple(float(v) for v in r["front_axle"]),
                rear_axle=tuple(float(v) for v in r["rear_axle"]),
                moment_point=tuple(float(v) for v in r["moment_point"]),
                rho=float(r["rho"]),
                nu=float(r["nu"]),
                speed=float(r["speed"]),
                p_ref=float(r.get("p_ref", 0.0)),
                cog=tuple(float(v) for v in r["cog"]) if r.get("cog") is not None else None,
            )
            return cls(
                case_id=str(d["case_id"]),
                folder=str(d["folder"]),
                variant=str(d["variant"]),
                params=dict(d["params"]),
                yaw_mode=str(d["yaw_mode"]),
                ground=str(d["ground"]),
                mesh_frame=str(d["mesh_frame"]),
                placement=Placement.from_dict(d["frames"]),
                wind_direction_body=tuple(float(v) for v in d["wind_direction_body"]),
                reference=ref,
                patches=dict(d["patches"]),
                fidelity=str(d["fidelity"]),
                min_clearance=d.get("min_clearance"),
                min_clearance_at=tuple(d["min_clearance_at"]) if d.get("min_clearance_at") is not None else None,
                estimated_cells=d.get("estimated_cells"),
                turbulence_model=None if d.get("turbulence_model") is None else str(d["turbulence_model"]),
                target_yplus=None if d.get("target_yplus") is None else float(d["target_yplus"]),
                wall_treatment=None if d.get("wall_treatment") is None else str(d["wall_treatment"]),
                fluid_volume=None if d.get("fluid_volume") is None else float(d["fluid_volume"]),
                outputs={str(k): str(v) for k, v in (d.get("outputs") or {}).items()},
                info={k: v for k, v in d.items() if k in INFO_FIELDS},
                mesh_key=None if d.get("mesh_key") is None else str(d["mesh_key"]),
                mesh_owner=None if d.get("mesh_owner") is None else str(d["mesh_owner"]),
                warm_start=str(d.get("warm_start") or "off"),
                stop_rule=str(d.get("stop_rule") or "budget"),
            )
        except KeyError as exc:
            raise UserError(
                expected=f"a case record with the key {exc.args[0]!r}",
                got="a record without it",
                file=source,
                key=f"cases[{cid}]",
                fix="regenerate the sweep with `caseprep write` (the manifest is written by caseprep, not by hand)",
            ) from None
        except (TypeError, ValueError) as exc:
            raise UserError(
                f"malformed case record {cid!r} in {source}: {exc}",
                fix="regenerate the sweep with `caseprep write`",
            ) from None


@dataclass(frozen=True)
class Manifest:
    """The whole sweep: header facts and the case records."""

    cases: tuple[CaseRecord, ...]
    tool_version: str
    config_file: str
    config_hash: str
    created_utc: str
    study: str
    root: Path | None = None  # folder the manifest was read from (not serialised)

    def to_dict(self) -> dict[str, Any]:
        return {
            "schema": SCHEMA,
            "schema_version": SCHEMA_VERSION,
            "tool_version": self.tool_version,
            "config_file": self.config_file,
            "config_hash": self.config_hash,
            "created_utc": self.created_utc,
            "study": self.study,
            "cases": [c.to_dict() for c in self.cases],
        }

    def case(self, case_id: str) -> CaseRecord:
        for c in self.cases:
            if c.case_id == case_id:
                return c
        raise UserError(
            expected="a case id listed in the manifest",
            got=case_id,
            file=str((self.root or Path(".")) / MANIFEST_NAME),
            key="cases",
            fix="known ids: " + ", ".join(c.case_id for c in self.cases[:20]) + (" …" if len(self.cases) > 20 else ""),
        )

    def case_dir(self, case: CaseRecord) -> Path:
        """The case's folder: ``root/folder``, refused (UserError naming the
        record) unless it stays inside the sweep folder, links followed."""
        root = self.root or Path(".")
        return confined(root, case.folder, file=str(root / MANIFEST_NAME), key=f"cases[{case.case_id}].folder",
                        what="a case folder")


_FIX = "the manifest is written by `caseprep write`: regenerate the sweep (or restore the file) instead of editing it"
#: params every case record carries: name -> (whole number?, may be null?)
_PARAMS = {"ride_height_front": (False, True), "ride_height_rear": (False, True), "pitch_deg": (False, False),
           "yaw_deg": (False, False), "speed": (False, False), "mesh_level": (True, False)}
_REFERENCE_NUMBERS = ("area", "length", "wheelbase", "rho", "nu", "speed")
_REFERENCE_POINTS = ("front_axle", "rear_axle", "moment_point")


def check_record_dict(d: object, source: str = MANIFEST_NAME, index: int | None = None) -> None:
    """Refuse a case record read from disk whose shape or values are wrong
    (UserError naming the key, e.g. ``cases[3].params.yaw_deg``): the id
    must follow the name rule, the folder be a relative path, the numbers
    finite, the lists of the right length."""
    where = f"cases[{index}]" if index is not None else "cases[?]"
    expect_dict(d, file=source, key=where, fix=_FIX)
    cid = d.get("case_id")
    if not is_case_id(cid):
        raise UserError(expected=f"a case id: {NAME_RULE}, at most {MAX_CASE_ID_LENGTH} characters", got=cid,
                        file=source, key=f"{where}.case_id", fix=_FIX)
    where = f"cases[{index}] ({cid})" if index is not None else f"cases[{cid}]"
    for k in ("folder", "variant", "yaw_mode", "ground", "mesh_frame", "fidelity"):
        if k not in d:
            raise UserError(expected=f"a case record with the key {k!r}", got="a record without it", file=source,
                            key=where, fix=_FIX)
        expect_str(d[k], file=source, key=f"{where}.{k}", fix=_FIX)
    params = expect_dict(d.get("params"), file=source, key=f"{where}.params", fix=_FIX)
    for k, (whole, nullable) in _PARAMS.items():
        if k not in params:
            continue
        if whole:
            expect_int(params[k], file=source, key=f"{where}.params.{k}", fix=_FIX, lo=0, hi=100)
        else:
            expect_number(params[k], file=source, key=f"{where}.params.{k}", fix=_FIX, none_ok=nullable)
    ref = expect_dict(d.get("reference"), file=source, key=f"{where}.reference", fix=_FIX)
    for k in _REFERENCE_NUMBERS:
        expect_number(ref.get(k), file=source, key=f"{where}.reference.{k}", fix=_FIX)
    for k in ("area", "length", "rho", "speed"):
        if not ref[k] > 0:
            raise UserError(expected="a positive number", got=ref[k], file=source, key=f"{where}.reference.{k}", fix=_FIX)
    expect_number(ref.get("p_ref", 0.0), file=source, key=f"{where}.reference.p_ref", fix=_FIX)
    for k in _REFERENCE_POINTS:
        expect_vec3(ref.get(k), file=source, key=f"{where}.reference.{k}", fix=_FIX)
    if ref.get("cog") is not None:
        expect_vec3(ref["cog"], file=source, key=f"{where}.reference.cog", fix=_FIX)
    expect_vec3(d.get("wind_direction_body"), file=source, key=f"{where}.wind_direction_body", fix=_FIX)
    frames = expect_dict(d.get("frames"), file=source, key=f"{where}.frames", fix=_FIX)
    patches = expect_dict(d.get("patches"), file=source, key=f"{where}.patches", fix=_FIX)
    for k in ("body", "wheels"):
        if k in patches:
            for j, n in enumerate(expect_list(patches[k], file=source, key=f"{where}.patches.{k}", fix=_FIX)):
                expect_str(n, file=source, key=f"{where}.patches.{k}[{j}]", fix=_FIX, max_len=256)
    for k in ("min_clearance",):
        expect_number(d.get(k), file=source, key=f"{where}.{k}", fix=_FIX, none_ok=True)
    if d.get("min_clearance_at") is not None:
        expect_vec3(d["min_clearance_at"], file=source, key=f"{where}.min_clearance_at", fix=_FIX)
    expect_int(d.get("estimated_cells"), file=source, key=f"{where}.estimated_cells", fix=_FIX, none_ok=True)
    if d.get("turbulence_model") is not None:
        expect_str(d["turbulence_model"], file=source, key=f"{where}.turbulence_model", fix=_FIX, max_len=64)
    expect_number(d.get("target_yplus"), file=source, key=f"{where}.target_yplus", fix=_FIX, none_ok=True)
    if d.get("mesh_key") is not None:
        expect_str(d["mesh_key"], file=source, key=f"{where}.mesh_key", fix=_FIX, max_len=100)
    if d.get("mesh_owner") is not None and not is_case_id(d["mesh_owner"]):
        raise UserError(expected=f"a case id: {NAME_RULE}", got=d["mesh_owner"], file=source,
                        key=f"{where}.mesh_owner", fix=_FIX)
    if d.get("warm_start") is not None and d["warm_start"] not in WARM_STARTS:
        raise UserError(expected="one of " + ", ".join(WARM_STARTS), got=d["warm_start"], file=source,
                        key=f"{where}.warm_start", fix=_FIX)
    if d.get("stop_rule") is not None and d["stop_rule"] not in STOP_RULES:
        raise UserError(expected="one of " + ", ".join(STOP_RULES), got=d["stop_rule"], file=source,
                        key=f"{where}.stop_rule", fix=_FIX)
    for k, v in expect_dict(d.get("outputs") or {}, file=source, key=f"{where}.outputs", fix=_FIX).items():
        relative_parts(v, file=source, key=f"{where}.outputs.{k}", what="an output path")
    rot = frames.get("rotation_body_to_ground")
    if not isinstance(rot, list) or len(rot) != 3:
        raise UserError(expected="a 3 × 3 rotation (three rows of 3 numbers)", got=rot if not isinstance(rot, (dict, list)) else "another shape",
                        file=source, key=f"{where}.frames.rotation_body_to_ground", fix=_FIX)
    for j, row in enumerate(rot):
        expect_vec3(row, file=source, key=f"{where}.frames.rotation_body_to_ground[{j}]", fix=_FIX)
    expect_vec3(frames.get("translation_body_to_ground"), file=source, key=f"{where}.frames.translation_body_to_ground",
                fix=_FIX)
    for k in ("pitch_deg", "yaw_deg"):
        expect_number(frames.get(k), file=source, key=f"{where}.frames.{k}", fix=_FIX)
    expect_str(frames.get("yaw_mode"), file=source, key=f"{where}.frames.yaw_mode", fix=_FIX)
    try:
        Placement.from_dict(frames)
    except (KeyError, TypeError, ValueError, IndexError) as exc:
        raise UserError(expected="a body placement (rotation, translation, pitch, beta, yaw_mode)",
                        got=f"{type(exc).__name__}: {str(exc)[:120]}", file=source, key=f"{where}.frames", fix=_FIX) from None


def write_manifest(manifest: Manifest, root: str | os.PathLike) -> Path:
    """Write ``manifest.json`` into ``root`` atomically; returns its path."""
    path = Path(root) / MANIFEST_NAME
    write_json_atomic(path, manifest.to_dict(), root=root)
    return path


def read_manifest(path: str | os.PathLike) -> Manifest:
    """Read a manifest from a sweep folder or a ``manifest.json`` path."""
    p = Path(path)
    if p.is_dir():
        p = p / MANIFEST_NAME
    if not p.is_file():
        from caseprep.contract.locking import refuse_interrupted

        refuse_interrupted(p.parent, "this command")  # a first write killed before its manifest
        raise UserError(
            expected="a sweep folder holding manifest.json (written by `caseprep write`)",
            got=str(path),
            fix="point at the folder given to `caseprep write -o`",
        )
    d = read_json(p, "sweep manifest", fix="regenerate it with `caseprep write --force`")
    if not isinstance(d, dict) or d.get("schema") != SCHEMA:
        raise UserError(expected=f"schema {SCHEMA!r}", got=d.get("schema") if isinstance(d, dict) else type(d).__name__, file=str(p), key="schema")
    if d.get("schema_version") != SCHEMA_VERSION:
        raise UserError(expected=f"schema_version {SCHEMA_VERSION}", got=d.get("schema_version"), file=str(p), key="schema_version",
                        fix="regenerate the sweep with this version of caseprep")
    raw = expect_list(d.get("cases", []), file=str(p), key="cases", fix=_FIX)
    if len(raw) > MAX_CASES.value:
        raise UserError(expected=f"at most {int(MAX_CASES.value):,} cases", got=f"{len(raw):,}", file=str(p), key="cases",
                        fix="split the study into several sweep folders")
    for k in ("tool_version", "config_file", "config_hash", "created_utc", "study"):
        if k in d:
            expect_str(d[k], file=str(p), key=k, fix=_FIX)
    cases = tuple(CaseRecord.from_dict(c, source=str(p), index=i) for i, c in enumerate(raw))
    seen: dict[str, int] = {}
    folders: dict[str, int] = {}
    for i, c in enumerate(cases):
        for what, value, table in (("case_id", c.case_id, seen), ("folder", c.folder, folders)):
            if value in table:
                raise UserError(expected=f"each {what} once", got=f"{value!r} at cases[{table[value]}] and cases[{i}]",
                                file=str(p), key=f"cases[{i}].{what}", fix=_FIX)
            table[value] = i
        confined(p.parent, c.folder, file=str(p), key=f"cases[{i}] ({c.case_id}).folder", what="a case folder")
    return Manifest(
        cases=cases,
        tool_version=str(d.get("tool_version", "")),
        config_file=str(d.get("config_file", "")),
        config_hash=str(d.get("config_hash", "")),
        created_utc=str(d.get("created_utc", "")),
        study=str(d.get("study", "")),
        root=p.parent,
    )


def find_case_manifest(case_dir: str | os.PathLike) -> tuple[Manifest, CaseRecord] | None:
    """For a case folder, find the sweep manifest above it and the case's record.

    Looks in the folder's parents (up to three levels) for ``manifest.json``
    and matches the record whose ``folder`` resolves to ``case_dir``.
    Returns None when the folder is not part of a sweep.
    """
    cd = Path(case_dir).resolve()
    for parent in [cd, *list(cd.parents)[:3]]:
        mp = parent / MANIFEST_NAME
        if mp.is_file():
            m = read_manifest(mp)
            for c in m.cases:
                if (parent / c.folder).resolve() == cd:
                    return m, c
    return None
