"""Render a :class:`caseprep.planning.spec.CaseSpec` into the files of one solver case.

Pure function of the spec: :func:`render_case` returns ``{relative path:
CaseFile}`` (text + permission bits, or a relative symlink target) and
touches no file. :mod:`caseprep.casefiles.writer` puts the result on disk.

Frames: every vector in the spec is already in the mesh frame = body frame
(x rearward, y right, z up, m; see :mod:`caseprep.contract.frames`). Nothing here
rotates or scales anything; the domain box, the ground and the velocity
vectors are written as given.

Patches of the generated mesh
-----------------------------
Background block (faces of ``spec.domain.box``)::

    inlet    e1 = 0        patch  (fixed velocity)
    outlet   e1 = L1       patch  (fixed pressure 0)
    ground   e3 = 0        wall   (moving: fixed velocity spec.flow.ground_velocity,
                                    stationary: no-slip)   — ground != "none"
    bottom   e3 = 0        patch  (slip far field)          — ground == "none"
    top      e3 = L3       patch  (slip)
    sides    e2 = 0 and L2 patch  (slip)

Surfaces (snapped, walls): one patch per solid of the body file — the names
in ``spec.geometry_solid_names`` — plus one per wheel (``Wheel.patch``). A
wheel without its own file is a solid of the body file whose solid name is
its patch name; it must not also be listed in ``geometry_solid_names``
(the manifest would then count it twice, as body and as wheel).
:func:`surface_patch_name` is the one place that maps a solid to its patch.
"""
from __future__ import annotations

import math

import hashlib
import posixpath
import re
from dataclasses import dataclass
from functools import lru_cache
from typing import Any, Mapping

import jinja2
import numpy as np

from caseprep.casefiles import foamdict
from caseprep.planning.batch import BatchSettings
from caseprep.planning.spec import CaseSpec, OrientedBox
from caseprep.contract import walls
from caseprep.contract.errors import UserError
from caseprep.contract.monitor import FORCES_NAME
from caseprep.contract.walls import WallTreatment
from caseprep.contract.templating import environment

# Relative path from a case's constant/triSurface/ to the sweep's geometry/ folder
# (<sweep>/cases/<id>/constant/triSurface → <sweep>/geometry).
GEOMETRY_FROM_TRISURFACE = "../../../../geometry"
CASES_DIR = "cases"
GEOMETRY_DIR = "geometry"

# Function-object names in system/controlDict and where their output lands,
# relative to the case folder, for a run that starts at time 0 (the solve
# stage of run.sh always does). Written into the manifest record ("outputs").
SOLVER_INFO_NAME = "uf_residuals"
WALL_SHEAR_NAME = "uf_wall_shear"
YPLUS_NAME = "uf_yplus"
STOP_NAME = "uf_settled_stop"
#: The file whose appearance stops a solve with the stop rule ``settled``
#: (written by the runner; the solver writes its fields and ends).
STOP_FILE = "logs/settled.stop"
OUTPUTS = {
    "forces": f"postProcessing/{FORCES_NAME}/0/force.dat",
    "moments": f"postProcessing/{FORCES_NAME}/0/moment.dat",
    "residuals": f"postProcessing/{SOLVER_INFO_NAME}/0/solverInfo.dat",
    "vtk_dir": "VTK",
    "vtk_multiblock_glob": "VTK/*.vtm",
    "logs_dir": "logs",
    "forces_axes": "body",
}

# Convergence targets of the SIMPLE loop (initial residuals; common practice, no source).
RESIDUAL_TARGETS = {"p": 1e-4, "U": 1e-5, "turbulence": 1e-5}

# Numerics that follow the mesh's own quality. After meshing, run.sh reads the
# checker's maximum non-orthogonality (logs/checkMesh.log) and writes
# system/meshNumerics, which system/fvSolution includes last (it overrides the
# defaults there): rows of (max non-orthogonality below this, degrees;
# non-orthogonal correctors of the pressure equation; momentum relaxation of
# the SIMPLEC loop). A mesh above the last bound gets the last row. Before a
# mesh exists the first row is the default. Common practice, no source (values
# from memory): snapped meshes with prism layers reach 60-70 degrees at layer
# terminations and need one corrector and a lower momentum relaxation; without
# them the pressure equation of the demo's layered diffuser mesh (64 degrees)
# diverged within 14 iterations, with them it converges (README, "Solver
# settings"). The converged steady solution does not depend on either value;
# they trade iterations for robustness.
MESH_NUMERICS: tuple[tuple[float, int, float], ...] = (
    (60.0, 0, 0.9),
    (70.0, 1, 0.7),
    (80.0, 2, 0.6),
    (90.0, 3, 0.5),
)

DOMAIN_PATCH_FACES = {
    # corner indices of OrientedBox.corners() (blockMesh order); each face
    # ordered so its right-hand normal points out of the block.
    "inlet": [(0, 4, 7, 3)],
    "outlet": [(1, 2, 6, 5)],
    "bottom": [(0, 3, 2, 1)],
    "top": [(4, 5, 6, 7)],
    "sides": [(0, 1, 5, 4), (3, 7, 6, 2)],
}
# With a lead-in floor the box is two blocks along e1: vertices 8-11 sit at
# e1 = lead_in (8, 9 on the floor at e2 = 0, L2; 10, 11 on the top), block 1
# (0 8 9 3 4 10 11 7) over the slip lead-in floor, block 2 (8 1 2 9 10 5 6 11)
# over the ground.
LEAD_IN_PATCH_FACES = {
    "inlet": [(0, 4, 7, 3)],
    "outlet": [(1, 2, 6, 5)],
    "lead_in": [(0, 3, 9, 8)],
    "bottom": [(8, 9, 2, 1)],
    "top": [(4, 10, 11, 7), (10, 5, 6, 11)],
    "sides": [(0, 8, 10, 4), (8, 1, 5, 10), (3, 7, 11, 9), (9, 11, 6, 2)],
}
LEAD_IN_PATCH = "lead_in"
# With prism layers on the ground under the body the box is 3 × 3 blocks in
# e1 × e2 (split at the background cells of spec.domain.ground_layer_cells):
# the bottom of the middle block is the patch ``ground`` (with layers), the
# other bottoms the patch ``ground_far`` (the same wall, no layers).
GROUND_FAR_PATCH = "ground_far"
_LOCAL_FACES = {"inlet": (0, 4, 7, 3), "outlet": (1, 2, 6, 5), "bottom": (0, 3, 2, 1), "top": (4, 5, 6, 7),
                "side_lo": (0, 1, 5, 4), "side_hi": (3, 7, 6, 2)}


@dataclass(frozen=True)
class CaseFile:
    """One file of a case: ``text`` (UTF-8) with permission ``mode``, or,
    when ``symlink`` is True, ``text`` is the relative link target."""

    text: str
    mode: int = 0o644
    symlink: bool = False


# --------------------------------------------------------------------------- naming
def surface_patch_name(solid: str) -> str:
    """Patch name of a surface solid: the solid name itself.

    The mesher is told this name explicitly per region (multi-solid files)
    or through the surface name (single-solid files), so the manifest's
    ``patches`` (which lists the solid names) is what the mesh has.
    """
    return foamdict.word(solid)


def ground_patch_name(ground: str) -> str:
    """Name of the bottom face of the domain: ``ground`` (a wall) unless the
    ground is ``none`` (then ``bottom``, a slip far-field boundary)."""
    return "bottom" if ground == "none" else "ground"


def _stem(filename: str) -> str:
    base = posixpath.basename(filename)
    return base.rsplit(".", 1)[0] if "." in base else base


def _check_component(name: str, what: str) -> str:
    """Assert ``name`` is a safe single path component (validated upstream)."""
    if not name or name in (".", "..") or "/" in name or "\\" in name or "\0" in name or name.startswith("."):
        raise ValueError(f"unsafe {what} {name!r}: expected a single path component")
    return name


# --------------------------------------------------------------------------- surfaces
@dataclass(frozen=True)
class SnapSurface:
    """A snapped surface for the mesher: the shared file, its entry name in
    the mesher's geometry list, (solid, patch) pairs and whether it is a wheel."""

    file: str
    entry: str
    regions: tuple[tuple[str, str], ...]
    wheel: bool

    @property
    def patches(self) -> tuple[str, ...]:
        return tuple(p for _, p in self.regions)

    @property
    def single(self) -> bool:
        return len(self.regions) == 1

    @property
    def feature_file(self) -> str:
        return _stem(self.file) + ".eMesh"


def empty_section(spec: CaseSpec) -> bool:
    """True for an empty test section: no body solids and no wheels (the
    background mesh is the whole mesh; no snapping, no force monitor)."""
    return not spec.geometry_solid_names and not spec.wheels


def surfaces(spec: CaseSpec) -> list[SnapSurface]:
    """The snapped surfaces of a case (body file first, then wheel files);
    none for an empty test section (:func:`empty_section`)."""
    if empty_section(spec):
        return []
    _check_component(spec.geometry, "geometry file name")
    wheel_solids = [w.patch for w in spec.wheels if w.geometry is None]
    overlap = set(wheel_solids) & set(spec.geometry_solid_names)
    if overlap:
        raise ValueError(
            f"wheel patch(es) {sorted(overlap)} also listed in geometry_solid_names: a wheel solid of the body "
            "file is named by Wheel.patch only (else it counts as body and wheel)")
    body_solids = list(spec.geometry_solid_names) + wheel_solids
    if not body_solids:
        raise ValueError("expected at least one solid in the body file")
    out = []
    regions = tuple((s, surface_patch_name(s)) for s in body_solids)
    # Single-solid file: the mesher names the patch after the surface entry;
    # multi-solid: each region is renamed explicitly to its patch name.
    entry = regions[0][1] if len(regions) == 1 else "uf_" + foamdict.word(_stem(spec.geometry).replace("-", "_"))
    out.append(SnapSurface(spec.geometry, entry, regions, wheel=False))
    for w in spec.wheels:
        if w.geometry is not None:
            _check_component(w.geometry, "wheel geometry file name")
            p = surface_patch_name(w.patch)
            out.append(SnapSurface(w.geometry, p, ((p, p),), wheel=True))
    files = [s.file for s in out]
    if len(set(files)) != len(files):
        raise ValueError(f"a geometry file is used by two surfaces: {files}")
    entries = [s.entry for s in out]
    if len(set(entries)) != len(entries):
        raise ValueError(f"two surfaces get the same name: {entries}")
    return out


def body_patches(spec: CaseSpec) -> list[str]:
    """Patches of the body (not wheels), as the mesher names them."""
    return [surface_patch_name(s) for s in spec.geometry_solid_names]


def wheel_patches(spec: CaseSpec) -> list[str]:
    return [surface_patch_name(w.patch) for w in spec.wheels]


def _grid(spec: CaseSpec) -> tuple[list[np.ndarray], list[dict[str, Any]], dict[str, list[tuple[int, ...]]]]:
    """The 3 × 3-block background of a case with a layered ground rectangle:
    vertices (m), blocks and faces per role (see :data:`GROUND_FAR_PATCH`)."""
    d = spec.domain
    i1, i2, j1, j2 = d.ground_layer_cells
    n1, n2, n3 = d.cells
    if not (0 < i1 < i2 < n1 and 0 < j1 < j2 < n2):
        raise ValueError(f"ground rectangle {d.ground_layer_cells} does not fit inside {d.cells[:2]} background cells")
    xs, ys = (0, i1, i2, n1), (0, j1, j2, n2)
    ax = np.asarray(d.box.axes, dtype=float)
    step = ax * (np.asarray(d.box.lengths, dtype=float) / np.asarray(d.cells, dtype=float))[:, None]
    o = np.asarray(d.box.origin, dtype=float)
    verts = [o + xs[a] * step[0] + ys[b] * step[1] + c * n3 * step[2] for c in (0, 1) for b in range(4) for a in range(4)]

    def v(a: int, b: int, c: int) -> int:
        return c * 16 + b * 4 + a

    blocks, faces = [], {r: [] for r in ("inlet", "outlet", "sides", "top", "bottom", "bottom_far")}
    for b in range(3):
        for a in range(3):
            loc = (v(a, b, 0), v(a + 1, b, 0), v(a + 1, b + 1, 0), v(a, b + 1, 0),
                   v(a, b, 1), v(a + 1, b, 1), v(a + 1, b + 1, 1), v(a, b + 1, 1))
            blocks.append({"verts": loc, "cells": (xs[a + 1] - xs[a], ys[b + 1] - ys[b], n3)})
            face = {k: tuple(loc[i] for i in f) for k, f in _LOCAL_FACES.items()}
            if a == 0:
                faces["inlet"].append(face["inlet"])
            if a == 2:
                faces["outlet"].append(face["outlet"])
            if b == 0:
                faces["sides"].append(face["side_lo"])
            if b == 2:
                faces["sides"].append(face["side_hi"])
            faces["top"].append(face["top"])
            faces["bottom" if (a, b) == (1, 1) else "bottom_far"].append(face["bottom"])
    return verts, blocks, faces


def domain_patches(spec: CaseSpec) -> list[dict[str, Any]]:
    """Background-mesh patches: name, type, faces (corner indices), role."""
    g = spec.domain.ground
    if g not in ("moving", "stationary", "none"):
        raise ValueError(f"expected domain.ground moving/stationary/none, got {g!r}")
    if spec.domain.ground_layer_cells is not None:
        if g == "none" or spec.domain.lead_in > 0.0:
            raise ValueError("a layered ground rectangle needs a ground and no lead-in floor")
        out = []
        for role, fs in _grid(spec)[2].items():
            name = {"bottom": ground_patch_name(g), "bottom_far": GROUND_FAR_PATCH}.get(role, role)
            ptype = "wall" if role.startswith("bottom") else "patch"
            out.append({"name": name, "type": ptype, "faces": fs, "role": role})
        return out
    out = []
    lead = spec.domain.lead_in > 0.0
    faces = LEAD_IN_PATCH_FACES if lead else DOMAIN_PATCH_FACES
    for role in faces:
        name, ptype = role, "patch"
        if role == "bottom":
            name = ground_patch_name(g)
            ptype = "patch" if g == "none" else "wall"
        out.append({"name": name, "type": ptype, "faces": faces[role], "role": role})
    return out


def background_blocks(spec: CaseSpec) -> tuple[list[np.ndarray], list[dict[str, Any]]]:
    """Vertices (mesh frame, m) and hex blocks of the background mesh: one
    block on the domain box, or two along e1 with a lead-in floor (see
    :data:`LEAD_IN_PATCH_FACES`). Each block: vertex indices, cell counts,
    grading (1, 1, ``ground_grading``)."""
    d = spec.domain
    if d.ground_layer_cells is not None:
        verts, blocks, _ = _grid(spec)
        return verts, blocks
    corners = list(d.box.corners())
    n1, n2, n3 = d.cells
    if d.lead_in <= 0.0:
        return corners, [{"verts": (0, 1, 2, 3, 4, 5, 6, 7), "cells": (n1, n2, n3)}]
    if not 0 < d.lead_in_cells < n1 or not d.lead_in < d.box.lengths[0]:
        raise ValueError(f"lead-in {d.lead_in} m / {d.lead_in_cells} cells does not fit the box ({d.box.lengths[0]} m, {n1} cells)")
    e1 = np.asarray(d.box.axes[0], dtype=float) * d.lead_in
    corners += [corners[0] + e1, corners[3] + e1, corners[4] + e1, corners[7] + e1]
    k = d.lead_in_cells
    return corners, [{"verts": (0, 8, 9, 3, 4, 10, 11, 7), "cells": (k, n2, n3)},
                     {"verts": (8, 1, 2, 9, 10, 5, 6, 11), "cells": (n1 - k, n2, n3)}]


def all_patches(spec: CaseSpec) -> list[str]:
    """Every patch of the final mesh (background faces then surfaces)."""
    domain = [p["name"] for p in domain_patches(spec)]
    names = list(domain)
    for s in surfaces(spec):
        names += list(s.patches)
    clash = sorted({n for n in names if names.count(n) > 1})
    if clash:
        taken = [n for n in clash if n in domain]
        raise UserError(expected="surface (solid and wheel) names different from each other and from the domain's "
                                 f"patches ({', '.join(domain)})",
                        got=", ".join(clash) + (" (a domain patch)" if taken else ""),
                        key=f"variants.{spec.variant}.geometry",
                        fix="rename the solid in the STL (or the wheel in body.wheels): every surface becomes its own patch")
    return names


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


def _u(v) -> str:
    return "uniform " + foamdict.fmt_vector(v)


def _s(x: float) -> str:
    return "uniform " + foamdict.fmt_scalar(x)


def boundary_conditions(spec: CaseSpec) -> dict[str, dict[str, dict[str, str]]]:
    """Boundary conditions: ``{field: {patch: {keyword: value text}}}``.

    Velocities in m/s (mesh frame), kinematic pressure in m²/s² (gauge, 0 at
    the outlet), k in m²/s², omega in 1/s, nut in m²/s. Every patch of
    :func:`all_patches` gets an entry in every field of :func:`field_names`.
    """
    f = spec.flow
    turb = turbulent(spec)
    zero_v = _u((0.0, 0.0, 0.0))
    k_in, om_in, nut_in = _s(f.k), _s(f.omega), _s(f.nut)
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
        k_wall = {"type": "fixedValue", "value": _s(0.0)}
    else:
        k_wall = {"type": tr.k or "kqRWallFunction", "value": k_in}
    om_wall = {"type": tr.omega or "omegaWallFunction", "value": om_in}
    nut_wall = {"type": tr.nut or "nutkWallFunction", "value": _s(0.0)}

    for dp in domain_patches(spec):
        name, role = dp["name"], dp["role"]
        if role == "inlet":
            put(name, {"type": "fixedValue", "value": _u(f.inlet_velocity)}, zg,
                {"type": "fixedValue", "value": k_in}, {"type": "fixedValue", "value": om_in},
                {"type": "calculated", "value": nut_in})
        elif role == "outlet":
            put(name, {"type": "inletOutlet", "inletValue": zero_v, "value": _u(f.inlet_velocity)},
                {"type": "fixedValue", "value": _s(0.0)},
                {"type": "inletOutlet", "inletValue": k_in, "value": k_in},
                {"type": "inletOutlet", "inletValue": om_in, "value": om_in},
                {"type": "calculated", "value": nut_in})
        elif role in ("bottom", "bottom_far") and spec.domain.ground == "moving":
            put(name, {"type": "fixedValue", "value": _u(f.ground_velocity)}, zg, k_wall, om_wall, nut_wall)
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
                     "value": _u((0.0, 0.0, 0.0))}
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


# --------------------------------------------------------------------------- context
def _box_dict(b: OrientedBox) -> dict[str, Any]:
    ax = np.asarray(b.axes, dtype=float)
    return {
        "name": foamdict.word(b.name),
        "origin": foamdict.fmt_vector(b.origin),
        "span": foamdict.fmt_vector(b.lengths),
        "e1": foamdict.fmt_vector(ax[0]),
        "e3": foamdict.fmt_vector(ax[2]),
    }


def _check_box(b: OrientedBox, what: str) -> None:
    ax = np.asarray(b.axes, dtype=float)
    if ax.shape != (3, 3) or not np.allclose(ax @ ax.T, np.eye(3), atol=1e-9):
        raise ValueError(f"{what} {b.name!r}: axes are not orthonormal")
    if np.linalg.det(ax) < 0:
        raise ValueError(f"{what} {b.name!r}: axes are left-handed (expected e2 = e3 × e1)")
    if min(b.lengths) <= 0:
        raise ValueError(f"{what} {b.name!r}: non-positive edge length {b.lengths}")


def layer_total_thickness(first: float, expansion: float, n: int) -> float:
    """Total thickness (m) of ``n`` prism layers growing geometrically from
    ``first`` (m) by ``expansion``: first·(r^n − 1)/(r − 1), or first·n at r = 1."""
    if abs(expansion - 1.0) < 1e-12:
        return first * n
    return first * (expansion**n - 1.0) / (expansion - 1.0)


def effective_write_interval(n_iterations: int, write_interval: int) -> int:
    """Write interval (iterations) actually used so the last iteration is written.

    The solver writes only at multiples of the interval, so an interval that
    does not divide ``n_iterations`` would lose the final state. Returns the
    largest divisor of ``n_iterations`` not above ``write_interval`` if it is
    at least half of it, else ``n_iterations`` (write at the end only).
    """
    n, w = int(n_iterations), int(write_interval)
    if n < 1 or w < 1:
        raise ValueError(f"expected positive iteration counts, got n_iterations={n}, write_interval={w}")
    if w >= n:
        return n
    # the divisors come in pairs (d, n/d) with d ≤ √n: √n steps, whatever the interval
    best = 1
    for d in range(1, math.isqrt(n) + 1):
        if n % d == 0:
            for q in (d, n // d):
                if best < q <= w:
                    best = q
    return best if 2 * best >= w else n


def context(spec: CaseSpec) -> dict[str, Any]:
    """Template context of one case: formatted numbers and patch tables."""
    _check_component(spec.case_id, "case id")
    _check_component(spec.variant, "variant name")
    d = spec.domain
    _check_box(d.box, "domain box")
    if len(d.cells) != 3 or min(d.cells) < 1:
        raise ValueError(f"expected 3 positive background cell counts, got {d.cells}")
    m = spec.mesh
    for r in m.regions:
        _check_box(r.box, "refinement region")
    sv = spec.solver
    if sv.n_procs < 1 or int(np.prod(sv.split)) != sv.n_procs:
        raise ValueError(f"solver.split {sv.split} does not multiply to n_procs {sv.n_procs}")
    surf = surfaces(spec)
    all_patches(spec)  # refuse a surface named like another or like a domain patch
    turb = turbulent(spec)
    layers = None
    if m.layers is not None and m.layers.n_layers > 0:
        L = m.layers
        total = layer_total_thickness(L.first_cell_height, L.expansion, L.n_layers)
        layers = {
            "n": L.n_layers,
            "first": foamdict.fmt_scalar(L.first_cell_height),
            "expansion": foamdict.fmt_scalar(L.expansion),
            # absolute (relativeSizes false): a layer stack thinner than 10 % of its
            # target is dropped rather than kept squashed (common practice, no source).
            "min_thickness": foamdict.fmt_scalar(0.1 * total),
        }
    monitored = body_patches(spec) + wheel_patches(spec)
    surface_walls = [p for s in surf for p in s.patches]
    ground_walls = [dp["name"] for dp in domain_patches(spec) if dp["type"] == "wall"]
    walls_with_ground = surface_walls + ground_walls
    layered = surface_walls + ([ground_patch_name(spec.domain.ground)]
                               if m.layers is not None and m.layers.ground and spec.domain.ground_layer_cells is not None else [])
    bc = boundary_conditions(spec)
    zones = rotating_zones(spec)
    return {
        "spec": spec,
        "case_id": spec.case_id,
        "turbulent": turb,
        "fields": field_names(spec),
        "field_info": FIELD_INFO,
        "bc": bc,
        "corners": [foamdict.fmt_vector(c) for c in background_blocks(spec)[0]],
        "blocks": [{"verts": b["verts"], "cells": list(b["cells"])} for b in background_blocks(spec)[1]],
        "cells": list(d.cells),
        "grading": foamdict.fmt_scalar(d.ground_grading),
        "domain_patches": domain_patches(spec),
        "surfaces": surf,
        "surface_min": m.surface_levels[0],
        "surface_max": m.surface_levels[1],
        "feature_level": m.feature_level,
        "feature_angle": foamdict.fmt_scalar(m.feature_angle_deg),
        "regions": [dict(_box_dict(r.box), level=int(r.level), z_splits=int(r.z_splits)) for r in m.regions],
        "location_in_mesh": foamdict.fmt_vector(m.location_in_mesh),
        "layers": layers,
        "layer_patches": layered,
        "max_global_cells": int(max(2_000_000, 4 * int(spec.estimated_cells))),
        "merge_tolerance": "1e-06",
        "nu": foamdict.fmt_scalar(spec.flow.nu),
        "rho": foamdict.fmt_scalar(spec.flow.rho),
        "cofr": foamdict.fmt_vector(spec.reference.moment_point),
        "monitored_patches": monitored,
        "wall_patches": walls_with_ground,
        "n_iterations": int(sv.n_iterations),
        "write_interval": effective_write_interval(sv.n_iterations, sv.write_interval),
        "monitor_interval": int(sv.monitor_interval),
        "n_procs": int(sv.n_procs),
        "split": list(sv.split),
        "relax_p": foamdict.fmt_scalar(sv.relax_p),
        "relax_u": foamdict.fmt_scalar(MESH_NUMERICS[0][2]),
        "non_orth_correctors": int(MESH_NUMERICS[0][1]),
        "mesh_numerics": [(foamdict.fmt_scalar(b), int(n), foamdict.fmt_scalar(u)) for b, n, u in MESH_NUMERICS],
        "relax_turb": foamdict.fmt_scalar(sv.relax_turb),
        "consistent": "yes" if sv.consistent else "no",
        "residual_p": foamdict.fmt_scalar(RESIDUAL_TARGETS["p"]),
        "residual_u": foamdict.fmt_scalar(RESIDUAL_TARGETS["U"]),
        "residual_turb": foamdict.fmt_scalar(RESIDUAL_TARGETS["turbulence"]),
        "names": {"forces": FORCES_NAME, "residuals": SOLVER_INFO_NAME,
                  "wall_shear": WALL_SHEAR_NAME, "yplus": YPLUS_NAME, "stop": STOP_NAME},
        "stop_settled": spec.solver.stop_rule == "settled",
        "stop_file": STOP_FILE,
        "geometry_link_dir": GEOMETRY_FROM_TRISURFACE,
        "zones": zones,
        "zone_level": m.surface_levels[1],
        "non_rotating_patches": [p for p in all_patches(spec) if p not in set(wheel_patches(spec))],
    }


# --------------------------------------------------------------------------- rendering
# (template, output path, mode); field files are added per field.
CASE_TEMPLATES = (
    ("case/system/controlDict.j2", "system/controlDict", 0o644),
    ("case/system/fvSchemes.j2", "system/fvSchemes", 0o644),
    ("case/system/fvSolution.j2", "system/fvSolution", 0o644),
    ("case/system/blockMeshDict.j2", "system/blockMeshDict", 0o644),
    ("case/system/snappyHexMeshDict.j2", "system/snappyHexMeshDict", 0o644),
    ("case/system/surfaceFeatureExtractDict.j2", "system/surfaceFeatureExtractDict", 0o644),
    ("case/system/decomposeParDict.j2", "system/decomposeParDict", 0o644),
    ("case/constant/transportProperties.j2", "constant/transportProperties", 0o644),
    ("case/constant/turbulenceProperties.j2", "constant/turbulenceProperties", 0o644),
    ("case/run.sh.j2", "run.sh", 0o755),
)


# files only a case with surfaces needs
SURFACE_ONLY = ("system/snappyHexMeshDict", "system/surfaceFeatureExtractDict")


@lru_cache(maxsize=1)
def _env() -> jinja2.Environment:
    env = environment()
    env.filters["foam"] = foamdict.fmt
    env.globals["header"] = foamdict.header
    return env


def render_case(spec: CaseSpec, env: jinja2.Environment | None = None) -> dict[str, CaseFile]:
    """All files of the case folder of ``spec``: ``{posix relative path: CaseFile}``.

    Includes ``constant/triSurface/<file>`` symlinks to
    ``../../../../geometry/<file>`` (the sweep's shared copy) for the body
    and every wheel file. Pure: reads templates, writes nothing.
    """
    env = env or _env()
    ctx = context(spec)
    out: dict[str, CaseFile] = {}
    for tpl, path, mode in CASE_TEMPLATES:
        if not ctx["surfaces"] and path in SURFACE_ONLY:
            continue  # empty test section: nothing to snap
        out[path] = CaseFile(env.get_template(tpl).render(ctx), mode)
    if ctx["zones"]:
        out["constant/MRFProperties"] = CaseFile(env.get_template("case/constant/MRFProperties.j2").render(ctx), 0o644)
    field_tpl = env.get_template("case/0/field.j2")
    for name in ctx["fields"]:
        cls, dims, kind = FIELD_INFO[name]
        internal = {
            "U": _u(spec.flow.inlet_velocity),
            "p": _s(0.0),
            "k": _s(spec.flow.k),
            "omega": _s(spec.flow.omega),
            "nut": _s(spec.flow.nut),
        }[name]
        out[f"0/{name}"] = CaseFile(field_tpl.render(
            ctx, field=name, cls=cls, dims=" ".join(str(v) for v in dims), internal=internal,
            patches=ctx["bc"][name]), 0o644)
    for s in ctx["surfaces"]:
        out[f"constant/triSurface/{s.file}"] = CaseFile(f"{GEOMETRY_FROM_TRISURFACE}/{s.file}", 0o777, symlink=True)
    return out


#: The sweep-root job scripts for a batch system (SLURM), written beside run_all.sh.
BATCH_SCRIPTS = ("slurm_array.sh", "slurm_post.sh", "slurm_merge.sh", "submit.sh")


def render_sweep_scripts(case_ids: list[str], max_ranks: int, batch: BatchSettings = BatchSettings(),
                         study: str = "", env: jinja2.Environment | None = None) -> dict[str, CaseFile]:
    """Sweep-root files: ``cases.txt`` (the ids, one per line), ``run_all.sh``
    and the batch chain (:data:`BATCH_SCRIPTS`): the solver array (one task
    per line of cases.txt, ``batch.cores_per_case`` or else ``max_ranks`` MPI
    ranks per task), the post-processing array (``batch.shards(n)`` shards),
    the merge and report job, and ``submit.sh`` that submits them with
    ``afterany`` dependencies. ``study`` names the jobs."""
    env = env or _env()
    ids = [_check_component(i, "case id") for i in case_ids]
    cores = batch.cores_per_case or max(1, int(max_ranks))
    tag = re.sub(r"[^A-Za-z0-9_-]", "", study)[:24] or "sweep"
    ctx = {"n_cases": len(ids), "max_ranks": max(1, int(max_ranks)), "cases_dir": CASES_DIR, "batch": batch,
           "case_cores": cores, "shards": batch.shards(len(ids)), "study_tag": tag,
           "throttle": f"%{batch.max_running}" if batch.max_running else ""}
    out = {
        "cases.txt": CaseFile("".join(i + "\n" for i in ids)),
        "run_all.sh": CaseFile(env.get_template("sweep/run_all.sh.j2").render(ctx), 0o755),
    }
    for name in BATCH_SCRIPTS:
        out[name] = CaseFile(env.get_template(f"sweep/{name}.j2").render(ctx), 0o755)
    return out


#: The case files that make the mesh: the background mesher's, the snapping
#: mesher's and the feature extractor's dictionaries (with the surfaces under
#: constant/triSurface, see :func:`mesh_fingerprint`).
MESH_FILES = ("system/blockMeshDict", "system/snappyHexMeshDict", "system/surfaceFeatureExtractDict")


def mesh_fingerprint(files: Mapping[str, CaseFile], surfaces: Mapping[str, bytes] | None = None) -> str:
    """A hash of everything that makes a case's mesh: the bytes of its
    rendered mesh dictionaries (:data:`MESH_FILES`, those present), the names
    its ``constant/triSurface`` links point to and, where given, those
    surfaces' bytes (``surfaces``: file name → bytes). Two cases with the same
    fingerprint run the meshing tools on the same input and get the same mesh
    (the tools are deterministic in serial), so one can use the other's."""
    h = hashlib.sha256()
    for rel in sorted(files):
        f = files[rel]
        if rel in MESH_FILES or rel.startswith("constant/triSurface/"):
            h.update(rel.encode() + b"\0" + f.text.encode() + b"\0" + (b"link" if f.symlink else b"file") + b"\0")
            name = rel.rsplit("/", 1)[-1]
            if f.symlink and surfaces is not None and name in surfaces:
                h.update(hashlib.sha256(surfaces[name]).digest())
    return "sha256:" + h.hexdigest()


def outputs_record() -> dict[str, str]:
    """Where a case's monitors and exports land (relative to the case folder)."""
    return dict(OUTPUTS)
