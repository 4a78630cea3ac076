"""The boundary conditions of a case: the wall treatment and turbulence
fields, the inlet, outlet, ground, body and wheel conditions of each field,
and the rotating zones of the wheels. Velocities in m/s, mesh frame = body
frame.
"""
from __future__ import annotations

import re
from typing import Any

import numpy as np

from caseprep.casefiles import foamdict
from caseprep.casefiles.patches import domain_patches, surface_patch_name, surfaces
from caseprep.contract import walls
from caseprep.contract.walls import WallTreatment
from caseprep.planning.spec import CaseSpec

# --------------------------------------------------------------------------- boundary conditions
def wall_treatment(spec: CaseSpec) -> WallTreatment:
    """The wall treatment of a case (its layers', else its model's default)."""
    name = spec.mesh.layers.treatment if spec.mesh.layers is not None else None
    if name is not None and not turbulent(spec):
        name = "laminar"
    return walls.wall_treatment(name, spec.flow.model)


def turbulent(spec: CaseSpec) -> bool:
    m = spec.flow.model
    if m not in ("kOmegaSST", "laminar"):
        raise ValueError(f"expected flow.model kOmegaSST or laminar, got {m!r}")
    return m == "kOmegaSST"


def field_names(spec: CaseSpec) -> list[str]:
    """Fields in 0/: U, p (+ k, omega, nut for kOmegaSST)."""
    return ["U", "p", "k", "omega", "nut"] if turbulent(spec) else ["U", "p"]


FIELD_INFO = {
    # name: (class, dimensions [kg m s K mol A cd], kind)
    "U": ("volVectorField", (0, 1, -1, 0, 0, 0, 0), "vector"),
    "p": ("volScalarField", (0, 2, -2, 0, 0, 0, 0), "scalar"),   # kinematic pressure p/rho, m²/s²
    "k": ("volScalarField", (0, 2, -2, 0, 0, 0, 0), "scalar"),
    "omega": ("volScalarField", (0, 0, -1, 0, 0, 0, 0), "scalar"),
    "nut": ("volScalarField", (0, 2, -1, 0, 0, 0, 0), "scalar"),
}


def uniform_vector(v) -> str:
    return "uniform " + foamdict.fmt_vector(v)


def uniform_scalar(x: float) -> str:
    return "uniform " + foamdict.fmt_scalar(x)


def boundary_conditions(spec: CaseSpec) -> dict[str, dict[str, dict[str, str]]]:
    """Boundary conditions: ``{field: {patch: {keyword: value text}}}``.

    Velocities in m/s (mesh frame), kinematic pressure in m²/s² (gauge, 0 at
    the outlet), k in m²/s², omega in 1/s, nut in m²/s. Every patch of
    :func:`all_patches` gets an entry in every field of :func:`field_names`.
    """
    f = spec.flow
    turb = turbulent(spec)
    zero_v = uniform_vector((0.0, 0.0, 0.0))
    k_in, om_in, nut_in = uniform_scalar(f.k), uniform_scalar(f.omega), uniform_scalar(f.nut)
    bc: dict[str, dict[str, dict[str, str]]] = {n: {} for n in field_names(spec)}

    def put(patch: str, U: dict, p: dict, k: dict, om: dict, nut: dict) -> None:
        bc["U"][patch] = U
        bc["p"][patch] = p
        if turb:
            bc["k"][patch] = k
            bc["omega"][patch] = om
            bc["nut"][patch] = nut

    zg = {"type": "zeroGradient"}
    slip = {"type": "slip"}
    tr = wall_treatment(spec)
    if tr.k == "fixedValue":  # turbulence resolved to the wall: k = 0 there
        k_wall = {"type": "fixedValue", "value": uniform_scalar(0.0)}
    else:
        k_wall = {"type": tr.k or "kqRWallFunction", "value": k_in}
    om_wall = {"type": tr.omega or "omegaWallFunction", "value": om_in}
    nut_wall = {"type": tr.nut or "nutkWallFunction", "value": uniform_scalar(0.0)}

    for dp in domain_patches(spec):
        name, role = dp["name"], dp["role"]
        if role == "inlet":
            put(name, {"type": "fixedValue", "value": uniform_vector(f.inlet_velocity)}, zg,
                {"type": "fixedValue", "value": k_in}, {"type": "fixedValue", "value": om_in},
                {"type": "calculated", "value": nut_in})
        elif role == "outlet":
            put(name, {"type": "inletOutlet", "inletValue": zero_v, "value": uniform_vector(f.inlet_velocity)},
                {"type": "fixedValue", "value": uniform_scalar(0.0)},
                {"type": "inletOutlet", "inletValue": k_in, "value": k_in},
                {"type": "inletOutlet", "inletValue": om_in, "value": om_in},
                {"type": "calculated", "value": nut_in})
        elif role in ("bottom", "bottom_far") and spec.domain.ground == "moving":
            put(name, {"type": "fixedValue", "value": uniform_vector(f.ground_velocity)}, zg, k_wall, om_wall, nut_wall)
        elif role in ("bottom", "bottom_far") and spec.domain.ground == "stationary":
            put(name, {"type": "noSlip"}, zg, k_wall, om_wall, nut_wall)
        else:  # top, sides, far-field bottom
            put(name, slip, zg, slip, slip, {"type": "calculated", "value": nut_in})

    wheels = {surface_patch_name(w.patch): w for w in spec.wheels}
    for s in surfaces(spec):
        for patch in s.patches:
            w = wheels.get(patch)
            if w is None:
                U = {"type": "noSlip"}
            else:
                U = {"type": "rotatingWallVelocity", "origin": foamdict.fmt_vector(w.centre),
                     "axis": foamdict.fmt_vector(w.axis), "omega": foamdict.fmt_scalar(w.omega),
                     "value": uniform_vector((0.0, 0.0, 0.0))}
            put(patch, U, zg, k_wall, om_wall, nut_wall)
    return bc


# --------------------------------------------------------------------------- rotating zones
def rotating_zones(spec: CaseSpec) -> list[dict[str, Any]]:
    """The rotating reference zones of wheels with ``rotation = "zone"``: a
    cylinder about the wheel axis through its centre, ``zone_radius`` (m)
    in radius, over the wheel's width (m), as the mesher's cell zone and the
    solver's MRF entry (origin, axis, omega rad/s: the wheel's own spin, so
    the zone's frame turns with the rim). Names ``<patch>_zone``."""
    out = []
    for w in spec.wheels:
        if w.rotation != "zone":
            continue
        if not w.zone_radius or not w.width:
            raise ValueError(f"wheel {w.name}: a rotating zone needs zone_radius and width")
        c, a = np.asarray(w.centre, dtype=float), np.asarray(w.axis, dtype=float)
        a = a / np.linalg.norm(a)
        half = 0.5 * float(w.width)
        name = foamdict.word(surface_patch_name(w.patch) + "_zone")
        out.append({"name": name, "point1": foamdict.fmt_vector(c - half * a), "point2": foamdict.fmt_vector(c + half * a),
                    "radius": foamdict.fmt_scalar(w.zone_radius), "origin": foamdict.fmt_vector(c),
                    "axis": foamdict.fmt_vector(a), "omega": foamdict.fmt_scalar(w.omega)})
    return out
