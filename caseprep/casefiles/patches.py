"""The surfaces and patches of a case: patch naming (the one place,
:func:`surface_patch_name`), the surfaces the mesher snaps to, the body,
wheel and domain patches, the background blocks of the domain box (with the
lead-in floor and the layered ground rectangle). Lengths in m, mesh frame =
body frame.
"""
from __future__ import annotations

import posixpath
import re
from dataclasses import dataclass
from typing import Any

import numpy as np

from caseprep.casefiles import foamdict
from caseprep.contract.errors import UserError
from caseprep.planning.spec import CaseSpec

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


def check_component(name: str, what: str) -> str:
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
    check_component(spec.geometry, "geometry file name")
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
            check_component(w.geometry, "wheel geometry file name")
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
