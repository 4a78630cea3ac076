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
:func:`caseprep.casefiles.patches.surface_patch_name` is the one place that maps a solid to its patch
(the patches in :mod:`caseprep.casefiles.patches`, the boundary conditions
in :mod:`caseprep.casefiles.boundaries`).
"""
from __future__ import annotations

import math

import hashlib
import re
from dataclasses import dataclass
from functools import lru_cache
from typing import Any, Mapping

import jinja2
import numpy as np

from caseprep.casefiles import foamdict
from caseprep.casefiles.boundaries import (FIELD_INFO, boundary_conditions, field_names, rotating_zones, turbulent,
                                          uniform_scalar, uniform_vector)
from caseprep.casefiles.patches import (all_patches, background_blocks, body_patches, check_component, domain_patches,
                                       ground_patch_name, surface_patch_name, surfaces, wheel_patches)
from caseprep.planning.batch import BatchSettings
from caseprep.planning.spec import CaseSpec, OrientedBox
from caseprep.contract import walls
from caseprep.contract.monitor import FORCES_NAME
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

@dataclass(frozen=True)
class CaseFile:
    """One file of a case: ``text`` (UTF-8) with permission ``mode``, or,
    when ``symlink`` is True, ``text`` is the relative link target."""

    text: str
    mode: int = 0o644
    symlink: bool = False


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
    """Template context of one case: formatted numbers and patch tables.

    Long because: it lists, key after key, every value the templates read; split up,
    the one place that defines the templates' inputs would be scattered.
    """
    check_component(spec.case_id, "case id")
    check_component(spec.variant, "variant name")
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
            "U": uniform_vector(spec.flow.inlet_velocity),
            "p": uniform_scalar(0.0),
            "k": uniform_scalar(spec.flow.k),
            "omega": uniform_scalar(spec.flow.omega),
            "nut": uniform_scalar(spec.flow.nut),
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
    ids = [check_component(i, "case id") for i in case_ids]
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
