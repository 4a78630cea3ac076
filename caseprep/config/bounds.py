"""Upper and lower bounds of the config's values: sizes (before anything is
expanded) and the physical range of every number.

Two passes, both cheap and both before any sweep point is made:

* :func:`raw_problems` walks the parsed TOML (before type validation): text
  no longer than :data:`~caseprep.contract.limits.MAX_TEXT_LENGTH`, lists no
  longer than :data:`~caseprep.contract.limits.MAX_AXIS_VALUES`, at most
  :data:`~caseprep.contract.limits.MAX_VARIANTS` variants.
* :func:`range_problems` checks every number of the validated config against
  its physical range (:data:`RANGES`, plus :data:`~caseprep.contract.limits.MAX_LENGTH`
  for every point and length) and the counts (ranks, iterations, domain size).
  Finiteness (no NaN or infinity) is enforced by the schema itself.

The signs (positive speeds, lengths, …) and the ranges already given in
:mod:`caseprep.config.schema` (temperature, pressure, altitude, angles, mesh
levels, layers, blockage, turbulence intensity) are checked there; a value
that fails its sign check is not reported again here.
"""
from __future__ import annotations

from typing import Any, Iterator

from caseprep.contract.errors import UserError
from caseprep.contract.limits import (MAX_AXIS_VALUES, MAX_DOMAIN_LENGTHS, MAX_ITERATIONS, MAX_LENGTH, MAX_RANKS,
                                      MAX_TEXT_LENGTH, MAX_VARIANTS)

L = float(MAX_LENGTH.value)

#: Physical range (lowest, highest, unit, why) of the numbers whose range the
#: schema does not already check. Generic keys as in ``schema.KEYS``: ``[]``
#: for list items, ``<name>`` for variant names.
RANGES: dict[str, tuple[float, float, str, str]] = {
    "air.speed": (0.1, 150.0, "m/s", "the solver is incompressible (Mach < 0.45); below 0.1 m/s there is no vehicle flow"),
    "sweep.speed[]": (0.1, 150.0, "m/s", "as air.speed"),
    "sweep.points[].speed": (0.1, 150.0, "m/s", "as air.speed"),
    "air.density": (1e-3, 1e3, "kg/m³", "from thin air to water"),
    "air.viscosity": (1e-7, 1e-1, "Pa s", "air is 1.8e-5 Pa s"),
    "air.kinematic_viscosity": (1e-8, 1e-1, "m²/s", "air is 1.5e-5 m²/s"),
    "body.reference_area": (1e-6, 1e4, "m²", "a vehicle's frontal area"),
    "variants.<name>.reference_area": (1e-6, 1e4, "m²", "a vehicle's frontal area"),
    "body.reference_length": (1e-4, L, "m", "a vehicle's length"),
    "body.wheelbase": (1e-4, L, "m", "a vehicle's wheelbase"),
    "body.wheels[].radius": (1e-4, L, "m", "a wheel's radius"),
    "sweep.ride_height[]": (0.0, L, "m", "ride heights above one body length are also refused per case"),
    "sweep.ride_heights_front_rear[][]": (0.0, L, "m", "as sweep.ride_height"),
    "sweep.points[].ride_height": (0.0, L, "m", "as sweep.ride_height"),
    "sweep.points[].ride_height_front": (0.0, L, "m", "as sweep.ride_height"),
    "sweep.points[].ride_height_rear": (0.0, L, "m", "as sweep.ride_height"),
    "mesh.base_cell": (1e-5, L, "m", "below 10 µm the cell counts overflow; the cell estimate bounds the rest"),
    "mesh.ground_first_cell": (1e-7, L, "m", "a first cell below 0.1 µm is below round-off of the mesh points"),
    "mesh.gap_cells": (0.0, 100.0, "cells", "cells across the smallest ground clearance"),
    "mesh.target_yplus": (0.01, 1000.0, "—", "wall-resolved (about 1) to wall functions (30–300)"),
    "domain.upstream": (0.0, float(MAX_DOMAIN_LENGTHS.value), "body lengths", MAX_DOMAIN_LENGTHS.why),
    "domain.downstream": (0.0, float(MAX_DOMAIN_LENGTHS.value), "body lengths", MAX_DOMAIN_LENGTHS.why),
    "domain.length": (0.0, L, "m", MAX_LENGTH.why),
    "domain.width": (0.0, L, "m", MAX_LENGTH.why),
    "domain.height": (0.0, L, "m", MAX_LENGTH.why),
    "domain.lead_in": (0.0, L, "m", MAX_LENGTH.why),
    "solver.turbulence_length_scale": (1e-6, L, "m", "an inlet eddy size from 1 µm to the domain's"),
}

#: Whole numbers with an upper bound: key → (highest, unit, why).
COUNTS: dict[str, tuple[int, str, str]] = {
    "solver.ranks": (int(MAX_RANKS.value), "ranks", MAX_RANKS.why),
    "solver.iterations": (int(MAX_ITERATIONS.value), "iterations", MAX_ITERATIONS.why),
    "solver.write_interval": (int(MAX_ITERATIONS.value), "iterations", MAX_ITERATIONS.why),
}

#: Points (x, y, z in m): every coordinate within ±MAX_LENGTH.
POINTS = ("body.front_axle", "body.rear_axle", "body.ride_height_point_front", "body.ride_height_point_rear",
          "body.pitch_pivot", "body.moment_point", "body.centre_of_gravity", "body.wheels[].centre")


def _walk(obj: Any, key: str = "") -> Iterator[tuple[str, Any]]:
    """(key, value) of every value below ``obj``, keys as in messages (``a.b[2]``); iterative."""
    stack = [(key, obj)]
    while stack:
        k, o = stack.pop()
        yield k, o
        if isinstance(o, dict):
            stack.extend(((f"{k}.{n}" if k else str(n)), v) for n, v in o.items())
        elif isinstance(o, (list, tuple)):
            stack.extend((f"{k}[{i}]", v) for i, v in enumerate(o))


def raw_problems(data: dict, file: str) -> list[UserError]:
    """Sizes of the parsed TOML, before type validation: text length, list
    length, number of variants. Returns the problems (naming the key)."""
    errs: list[UserError] = []
    n_text, n_list = int(MAX_TEXT_LENGTH.value), int(MAX_AXIS_VALUES.value)
    for k, v in _walk(data):
        if isinstance(v, str) and len(v) > n_text:
            errs.append(UserError(expected=f"a text of at most {n_text} characters", got=f"{len(v)} characters",
                                  file=file, key=k, fix="shorten it"))
        elif isinstance(v, (list, tuple)) and len(v) > n_list:
            errs.append(UserError(expected=f"at most {n_list} values", got=f"{len(v):,} values", file=file, key=k,
                                  fix="split the study into several sweeps (see the README: What the tool refuses)"))
        elif isinstance(v, dict) and any(isinstance(n, str) and len(n) > n_text for n in v):
            errs.append(UserError(expected=f"keys of at most {n_text} characters", got="a longer key", file=file, key=k))
    variants = data.get("variants")
    if isinstance(variants, dict) and len(variants) > MAX_VARIANTS.value:
        errs.append(UserError(expected=f"at most {int(MAX_VARIANTS.value)} variants", got=f"{len(variants):,}", file=file,
                              key="variants", fix="split the study into several sweeps"))
    return errs[:20]


def _generic(key: str) -> str:
    """``sweep.points[3].speed`` → ``sweep.points[].speed``; ``variants.x.y`` → ``variants.<name>.y``."""
    import re

    g = re.sub(r"\[\d+\]", "[]", key)
    parts = g.split(".")
    if parts[0] == "variants" and len(parts) > 2:
        parts[1] = "<name>"
    return ".".join(parts)


def range_problems(cfg_data: dict, file: str) -> list[UserError]:
    """Every number of the validated config (as ``model_dump()``) against its
    range: :data:`RANGES`, :data:`COUNTS`, and ±MAX_LENGTH for the
    coordinates of :data:`POINTS`. A value already refused by its sign check
    (not > 0 where a positive value is required) is not reported again."""
    errs: list[UserError] = []
    for k, v in _walk(cfg_data):
        g = _generic(k)
        if g in RANGES and isinstance(v, (int, float)) and not isinstance(v, bool):
            lo, hi, unit, why = RANGES[g]
            if v > 0 and not lo <= v <= hi:
                errs.append(UserError(expected=f"a value from {lo:g} to {hi:g} {unit}", got=v, file=file, key=k,
                                      fix=f"check the unit and the value ({why})"))
        elif g in COUNTS and isinstance(v, int) and not isinstance(v, bool):
            hi, unit, why = COUNTS[g]
            if v > hi:
                errs.append(UserError(expected=f"at most {hi:,} {unit}", got=v, file=file, key=k, fix=why))
        elif _generic(k.rsplit("[", 1)[0]) in POINTS and k.endswith("]") and isinstance(v, (int, float)):
            if not abs(v) <= L:
                errs.append(UserError(expected=f"a coordinate within ±{L:g} m (body frame)", got=v, file=file, key=k,
                                      fix="points are in metres, whatever the geometry's length_unit"))
    return errs


#: Sweep lists that must not be empty (an empty axis means no case at all,
#: and an empty variant list is not "all variants").
NON_EMPTY = ("sweep.variants", "sweep.ride_height", "sweep.pitch_deg", "sweep.ride_heights_front_rear",
             "sweep.yaw_deg", "sweep.speed", "sweep.mesh_level", "sweep.points")


def empty_problems(sweep: Any, file: str) -> list[UserError]:
    """An empty list in a sweep axis (UserError naming the key)."""
    errs = []
    for key in NON_EMPTY:
        v = getattr(sweep, key.split(".")[1])
        if v is not None and len(v) == 0:
            fix = ("remove the key to run every variant" if key == "sweep.variants"
                   else "give at least one value, or remove the key to use its default")
            errs.append(UserError(expected="at least one value", got="an empty list []", file=file, key=key, fix=fix))
    return errs
