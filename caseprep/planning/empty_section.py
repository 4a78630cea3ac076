"""The empty test section (a config without a body): its domain box with
the ground grading and the lead-in floor, sized in the mesh frame (pure
numeric kernels; no files). Lengths in m; see :mod:`caseprep.planning.domain`
for the frames and :mod:`caseprep.planning.meshsizing` for the mesh levels.
"""
from __future__ import annotations

import math

import numpy as np

from caseprep.contract.frames import Placement
from caseprep.planning.domain import DomainPlan, cell_limit_problems, oriented_box, wind_axes
from caseprep.planning.meshsizing import LEVEL_FACTOR
from caseprep.planning.spec import Domain, MeshSpec

def ground_grading(height: float, first_cell: float, top_cell: float) -> tuple[int, float, float]:
    """Cells across a layer of ``height`` (m) that start at ``first_cell`` (m)
    on the ground and grow geometrically to about ``top_cell`` (m) at the top.

    With n cells of sizes h₁ rᵏ (k = 0 … n−1): h₁ (rⁿ − 1)/(r − 1) = H and
    h₁ rⁿ⁻¹ ≈ Δ give r = (H − h₁)/(H − Δ) and n = 1 + ln(Δ/h₁)/ln r, rounded
    up; r is then solved again (bisection) so the n cells fill H exactly with
    the first cell kept at h₁. Returns (n, r, grading) with grading = rⁿ⁻¹, the
    last-to-first cell size ratio (the mesher's simpleGrading value).
    Requires 0 < h₁ < Δ and H ≥ 2Δ (all in m). Geometric series: elementary.
    """
    H, h1, d = float(height), float(first_cell), float(top_cell)
    if not (0.0 < h1 < d and H >= 2.0 * d):
        raise ValueError(f"expected 0 < first_cell < top_cell and height ≥ 2 top_cell, got {h1}, {d}, {H}")
    r0 = (H - h1) / (H - d)
    n = max(2, math.ceil(1.0 + math.log(d / h1) / math.log(r0) - 1e-9))
    if n * h1 >= H:  # pragma: no cover - excluded by h1 < d ≤ H/2 and the rounding up
        return n, 1.0, 1.0
    lo, hi = 1.0 + 1e-12, r0 * 2.0
    for _ in range(200):  # sum_{k<n} h1 r^k is increasing in r
        mid = 0.5 * (lo + hi)
        if h1 * (mid**n - 1.0) / (mid - 1.0) > H:
            hi = mid
        else:
            lo = mid
    r = 0.5 * (lo + hi)
    return n, float(r), float(r ** (n - 1))


def plan_empty_section(*, placement: Placement, length: float, width: float, height: float, base_cell: float,
                       mesh_level: int, ground: str, first_cell: float | None = None, lead_in: float = 0.0) -> DomainPlan:
    """Domain and background mesh of an empty test section (no body).

    The box is aligned with the horizontal relative wind (e1, inlet at
    e1 = 0: the ground's leading edge), the ground normal (e3, ground at
    e3 = 0) and e2 = e3 × e1, centred on the ground point's e2 line;
    ``length``, ``width``, ``height`` in m are kept exactly. Cells: base cell
    Δ = ``base_cell``/√2ᵐ (m) along e1 and e2; along e3 uniform Δ cells, or,
    with ``first_cell`` (m), cells graded from ``first_cell`` on the ground to
    about Δ at the top (:func:`ground_grading`). ``lead_in`` (m, part of
    ``length``): a slip floor from the inlet to the ground's leading edge, so
    that the leading edge sits in undisturbed uniform flow instead of on the
    inlet (where the fixed inlet velocity would raise the pressure and the
    total pressure of the air near the floor); its cells are Δ long. No
    refinement regions, no layers: the background mesh is the final mesh.
    """
    axes = wind_axes(placement)
    g0 = placement.ground_point_body
    d0 = base_cell / LEVEL_FACTOR**mesh_level
    k = max(1, math.ceil(lead_in / d0 - 1e-9)) if lead_in > 0.0 else 0
    n1 = k + max(1, math.ceil((length - lead_in) / d0 - 1e-9))
    n2 = max(1, math.ceil(width / d0 - 1e-9))
    grading = 1.0
    if first_cell is not None:
        h1 = first_cell / LEVEL_FACTOR**mesh_level
        n3, _, grading = ground_grading(height, h1, d0)
    else:
        n3 = max(1, math.ceil(height / d0 - 1e-9))
    lo = np.array([0.0, -0.5 * width, 0.0])
    box = oriented_box("domain", g0, axes, lo, lo + np.array([length, width, height]))
    domain = Domain(box=box, cells=(int(n1), int(n2), int(n3)), ground=ground, blockage=0.0, ground_grading=float(grading),
                    lead_in=float(lead_in), lead_in_cells=int(k))
    c = np.array([0.4371 * length, 0.5 * width + 0.1371 * width / n2, 0.4371 * height])
    mesh = MeshSpec(base_cell=float(d0), surface_levels=(0, 0), feature_level=0, regions=(), layers=None,
                    location_in_mesh=tuple(float(v) for v in g0 + (lo + c) @ axes))
    return DomainPlan(domain=domain, mesh=mesh, base_cell=float(d0), gap_level=None, estimated_cells=int(n1 * n2 * n3),
                      warnings=(), problems=tuple(cell_limit_problems(int(n1 * n2 * n3))))
