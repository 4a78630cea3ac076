"""Domain box, background mesh, refinement regions, layers and cell estimate
(pure numeric kernels; no files).

Everything is in the **mesh frame** = body frame (x rearward, y right, z up,
metres, see :mod:`caseprep.contract.frames`). The domain is an
:class:`~caseprep.planning.spec.OrientedBox` aligned with the horizontal relative
wind: e1 along the wind (inlet at e1 = 0), e3 the ground normal (ground at
e3 = 0), e2 = e3 × e1.

Sizing rules (common practice for external vehicle aerodynamics, no single
source):

- inlet ``upstream`` = 5 body lengths ahead of the body, outlet
  ``downstream`` = 10 body lengths behind it (config: ``domain.*``); the
  background cells there are the coarsest of the mesh, so the length costs
  little;
- width and height chosen so that the blockage (frontal area normal to the
  wind / inlet face area) equals ``domain.target_blockage`` = 1 %, with
  width = 2 × height over a ground (the ground mirrors the flow) and a square
  section centred on the body without a ground; never closer to the body than
  two body heights above and on each side;
- blockage above 1 % gives a warning, above ``domain.max_blockage`` = 5 % the
  case is refused (raise ``max_blockage`` to accept it knowingly).

The frontal area used for blockage is the shadow of the convex hull of the
body (and wheels) normal to the wind: an upper bound of the true shadow, so
the blockage is never under-estimated.

Mesh levels: level n of a refinement region means cells of base_cell / 2ⁿ.
The sweep's ``mesh_level`` m scales the base cell by 1/√2ᵐ, and with it every
other length of the mesh: the refinement levels and the gap's splits are
chosen once per point (at mesh level 0) and kept, and the prism-layer
heights scale by the same 1/√2ᵐ. The mesh levels of one point are therefore
geometrically similar (about 2.8 × the cells per level); only the far-field
boundaries move by less than one background cell (the domain is a whole
number of cells long at every level), and the ground rectangle with prism
layers follows the background cells likewise.

The mesh lengths (presets, base cell per level, prism layers, the gap plan)
are in :mod:`caseprep.planning.meshsizing`; the empty test section in
:mod:`caseprep.planning.empty_section`.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from typing import Callable

import numpy as np

from caseprep.contract.frames import Placement, axle_axes, ground_to_wind_rotation, wind_direction_ground
from caseprep.contract.limits import MAX_CELLS, MAX_RANKS
from caseprep.contract.walls import WALL_TREATMENTS
from caseprep.geometry.underside import Underside
from caseprep.planning.meshsizing import (LEVEL_FACTOR, GapPlan, LayerPlan, MeshSettings, base_cell_size, plan_gap,
                                         plan_layers)
from caseprep.planning.spec import Domain, Layers, MeshSpec, OrientedBox, RefinementRegion

WARN_BLOCKAGE = 0.01  # common practice, no source
#: Slab boxes of the underbody region along the body (common practice, no source).
UNDERBODY_SLABS = 8
#: A layer stack pair filling more than this share of the reference clearance
#: leaves too little room for the core flow (common practice, no source).
MAX_STACK_SHARE = 0.75


def wind_axes(placement: Placement) -> np.ndarray:
    """Rows e1 (horizontal wind), e2, e3 (ground normal) in body axes."""
    wg = wind_direction_ground(placement.beta, placement.yaw_mode)
    G2W = ground_to_wind_rotation(wg)  # rows: wind axes in ground axes
    return np.vstack([placement.vector_to_body(G2W[i]) for i in range(3)])


def oriented_box(name: str, origin_b: np.ndarray, axes: np.ndarray, lo: np.ndarray, hi: np.ndarray) -> OrientedBox:
    o = origin_b + lo @ axes
    return OrientedBox(name=name, origin=tuple(float(v) for v in o), axes=tuple(tuple(float(c) for c in a) for a in axes),
                       lengths=tuple(float(v) for v in (hi - lo)))


@dataclass(frozen=True)
class DomainPlan:
    """Domain, mesh and estimate of one case, plus notes (warnings) and
    problems (messages for refused cases: what, fix and optionally the
    config key at fault; without it the point's own key), the gap plan and
    the underbody facts (``info``: JSON-ready)."""

    domain: Domain
    mesh: MeshSpec
    base_cell: float
    gap_level: int | None
    estimated_cells: int
    warnings: tuple[str, ...]
    problems: tuple[tuple[str, ...], ...]  # (what is wrong, how to fix it[, the config key at fault])
    gap: GapPlan | None = None
    info: dict = field(default_factory=dict)
    nominal_volume: float | None = None  # m³, the domain box of the sizing rule before rounding to whole cells


@dataclass(frozen=True)
class _Slab:
    lo: np.ndarray      # (s, t, z) in axle axes from the ground point, m
    hi: np.ndarray
    clearance: float    # smallest underside height above the ground in the slab (m)
    top: float          # 95th percentile of the underside height in the slab (m)
    fluid_volume: float  # m³ above the ground and below the underside, inside the box


def underbody_slabs(underside: Underside, placement: Placement, margin: float, n_slabs: int = UNDERBODY_SLABS) -> tuple[
        list[_Slab], np.ndarray, np.ndarray]:
    """Slab boxes covering the volume between the body's underside and the
    ground, in the axle axes (x_A along the body on the ground, z_A the
    ground normal; :func:`caseprep.contract.frames.axle_axes`). The body's
    length is cut into ``n_slabs`` equal slabs; each reaches from ``margin``
    (m) below the ground to the highest underside point inboard of the
    body's rounded side edges (a tenth of the span in from each side) plus
    ``2 margin``, and sideways over the slab's covered cells ±
    ``margin``. Returns (slabs, axes rows x_A, y_A, z_A, ground point)."""
    xA, yA, zA, g0 = axle_axes(placement)
    axes = np.vstack([xA, yA, zA])
    pts = underside.points()
    q = (pts - g0) @ axes.T
    h = placement.height_above_ground(pts)
    s0, s1 = float(q[:, 0].min()) - 0.5 * underside.dx, float(q[:, 0].max()) + 0.5 * underside.dx
    edges = np.linspace(s0, s1, n_slabs + 1)
    slabs = []
    for i in range(n_slabs):
        sel = (q[:, 0] >= edges[i]) & (q[:, 0] <= edges[i + 1]) if i == n_slabs - 1 else (q[:, 0] >= edges[i]) & (q[:, 0] < edges[i + 1])
        if not np.any(sel):
            continue
        t0, t1 = float(q[sel, 1].min()) - 0.5 * underside.dy - margin, float(q[sel, 1].max()) + 0.5 * underside.dy + margin
        # the highest point of the floor, tunnels and diffuser in the slab: the underside inboard of the body's
        # rounded side edges (a tenth of the span in from each side), two margins above it
        span = t1 - t0
        inner = sel & (q[:, 1] >= t0 + 0.1 * span) & (q[:, 1] <= t1 - 0.1 * span)
        top95 = float(np.max(h[inner])) if np.any(inner) else float(np.percentile(h[sel], 95.0))
        top = top95 + 2.0 * margin
        a0 = edges[i] - (margin if i == 0 else 0.0)
        a1 = edges[i + 1] + (margin if i == n_slabs - 1 else 0.0)
        covered = float(np.count_nonzero(sel)) * underside.cell_area
        vol = float(np.clip(h[sel], 0.0, top).sum()) * underside.cell_area + max((a1 - a0) * (t1 - t0) - covered, 0.0) * top
        slabs.append(_Slab(np.array([a0, t0, -margin]), np.array([a1, t1, top]), float(h[sel].min()), top95, vol))
    return slabs, axes, g0


@dataclass(frozen=True)
class BodyExtent:
    """What sizing needs of the placed body: ``points`` (N,3) body (and
    wheel) points in the body frame, m (hull vertices suffice); ``length`` L
    (m); ``area`` surface area (m²); ``frontal_area`` shadow normal to the
    wind (m²); ``min_clearance`` smallest ground clearance (m, None without a
    ground); ``ride_heights`` (front, rear) m or None; ``extent_range(axes)``
    (optional) the (min, max) of ``points @ axes.T`` — a caller planning many
    cases passes a cached version (the range depends on the rotation only);
    ``underside`` the body's underside map (body frame, None: a single
    underbody box)."""

    points: np.ndarray
    length: float
    area: float
    frontal_area: float
    min_clearance: float | None = None
    ride_heights: tuple[float, float] | None = None
    extent_range: Callable[[np.ndarray], tuple[np.ndarray, np.ndarray]] | None = None
    underside: Underside | None = None


@dataclass(frozen=True)
class DomainSizing:
    """The config's domain table (defaults in :mod:`caseprep.config.keys`):
    ``upstream``/``downstream`` in body lengths; ``width``/``height`` (m) fix the section instead of sizing it for
    ``target_blockage``; cases above ``max_blockage`` are refused."""

    upstream: float
    downstream: float
    width: float | None
    height: float | None
    target_blockage: float
    max_blockage: float


def _wind_extent(body: BodyExtent, axes: np.ndarray, g0: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(min, max) of the body along the wind axes e1, e2, e3, measured from the ground point g0 (m)."""
    if body.extent_range is None:
        q = np.asarray(body.points, float) @ axes.T  # coordinates along e1, e2, e3
        lo, hi = q.min(axis=0), q.max(axis=0)
    else:
        lo, hi = body.extent_range(axes)
    off = g0 @ axes.T
    return lo - off, hi - off


@dataclass(frozen=True)
class _Section:
    """The background box: origin and lengths along the wind axes (m, from
    the ground point), cells per direction, and the refused-case problems
    and warnings of its size."""

    origin: np.ndarray
    lens: np.ndarray
    n: tuple[int, int, int]
    domain: Domain
    problems: tuple[tuple[str, str], ...]
    warnings: tuple[str, ...]
    nominal_volume: float = 0.0  # m³: the sizing rule's box before rounding to whole cells (the same at every level)


def _section(body: BodyExtent, lo, hi, axes, g0, ground: str, sz: DomainSizing, d0: float) -> _Section:
    """Size the background box for blockage (or as fixed by the config) in
    whole cubic cells of ``d0`` (m) and check the blockage."""
    L = body.length
    bw, bh = hi[1] - lo[1], hi[2] - lo[2]
    A_box = body.frontal_area / sz.target_blockage
    if ground != "none":
        H = sz.height if sz.height is not None else max(math.sqrt(A_box / 2.0), hi[2] + 2.0 * bh)
        W = sz.width if sz.width is not None else max(2.0 * H, bw + 4.0 * bh)
    else:
        S = math.sqrt(A_box)
        H = sz.height if sz.height is not None else max(S, bh + 4.0 * bh)
        W = sz.width if sz.width is not None else max(S, bw + 4.0 * bw)
    x0 = lo[0] - sz.upstream * L
    Lx = (hi[0] - lo[0]) + (sz.upstream + sz.downstream) * L
    n = [max(1, math.ceil(Lx / d0 - 1e-9)), max(1, math.ceil(W / d0 - 1e-9)), max(1, math.ceil(H / d0 - 1e-9))]
    if sz.width is None:
        n[1] += n[1] % 2  # keep the body centred on a cell face line
    # cubic background cells: lengths rounded up to whole cells (fixed sizes kept)
    lens = np.array([n[0] * d0, n[1] * d0 if sz.width is None else W, n[2] * d0 if sz.height is None else H])
    y0 = 0.5 * (lo[1] + hi[1]) - 0.5 * lens[1]
    z0 = 0.0 if ground != "none" else 0.5 * (lo[2] + hi[2]) - 0.5 * lens[2]
    problems, warnings = [], []
    if sz.width is not None and (lo[1] < y0 or hi[1] > y0 + lens[1]):
        problems.append((f"the body ({bw:.4g} m wide across the wind) does not fit in domain.width = {W} m",
                         "enlarge domain.width or leave it out (automatic size)"))
    if sz.height is not None and hi[2] > z0 + lens[2]:
        problems.append((f"the body (top at {hi[2]:.4g} m) does not fit under domain.height = {H} m",
                         "enlarge domain.height or leave it out (automatic size)"))
    origin = np.array([x0, y0, z0])
    blockage = body.frontal_area / float(lens[1] * lens[2])
    if blockage > sz.max_blockage:
        problems.append((f"blockage {100 * blockage:.2f} % is above the limit of {100 * sz.max_blockage:.2f} % (frontal "
                         f"area {body.frontal_area:.4g} m², inlet {lens[1]:.4g} m × {lens[2]:.4g} m)",
                         "enlarge domain.width/height, or raise domain.max_blockage to accept the blockage knowingly"))
    elif blockage > WARN_BLOCKAGE:
        warnings.append(f"blockage {100 * blockage:.2f} % is above 1 % (common-practice limit); results carry a blockage effect")
    domain = Domain(box=oriented_box("domain", g0, axes, origin, origin + lens), cells=(int(n[0]), int(n[1]), int(n[2])),
                    ground=ground, blockage=float(blockage))
    return _Section(origin, lens, (int(n[0]), int(n[1]), int(n[2])), domain, tuple(problems), tuple(warnings),
                    float(Lx * W * H))


def _ground_rectangle(sec: _Section, lo, hi, L: float) -> tuple[int, int, int, int] | None:
    """Background cell indices (i1, i2, j1, j2) along e1 and e2 of the ground
    rectangle that gets prism layers: the body's footprint from 0.1 L ahead
    of it to 0.5 L behind it (its near wake on the ground) and 0.1 L to each
    side, rounded outwards to whole background cells and kept one cell
    inside the domain (common practice, no source). None for a domain too
    small to split."""
    n, lens, origin = sec.n, sec.lens, sec.origin
    if n[0] < 3 or n[1] < 3:
        return None
    d1, d2 = lens[0] / n[0], lens[1] / n[1]
    a, b = lo[0] - 0.1 * L - origin[0], hi[0] + 0.5 * L - origin[0]
    c, e = lo[1] - 0.1 * L - origin[1], hi[1] + 0.1 * L - origin[1]
    i1 = min(max(1, math.floor(a / d1)), n[0] - 2)
    i2 = max(min(n[0] - 1, math.ceil(b / d1)), i1 + 1)
    j1 = min(max(1, math.floor(c / d2)), n[1] - 2)
    j2 = max(min(n[1] - 1, math.ceil(e / d2)), j1 + 1)
    return (int(i1), int(i2), int(j1), int(j2))


@dataclass(frozen=True)
class _Regions:
    """The refinement regions, the gap plan and its facts, and the problems
    and warnings of the underbody resolution."""

    regions: list[RefinementRegion]
    gap: GapPlan | None
    info: dict
    problems: list[tuple[str, str]]
    warnings: list[str]


def _underbody(body: BodyExtent, lo, hi, placement: Placement, axes, g0, settings: MeshSettings, base0: float,
               lp: LayerPlan | None, scale: float) -> _Regions:
    """Underbody slabs and the wake behind the diffuser with their gap plan
    (module docstring "The gap"); every box and level is decided at mesh
    level 0 (``base0`` m) so the levels of a point stay similar."""
    L = body.length
    smax = settings.surface_levels[1]
    wl = settings.preset.wake_level
    margin = 0.02 * L
    c_ref = float(min(body.ride_heights))
    regions, problems, warnings = [], [], []
    slabs, sax, sg0 = ([], None, None)
    if body.underside is not None:
        slabs, sax, sg0 = underbody_slabs(body.underside, placement, base0 / 2**smax)
    gp = plan_gap(c_ref, [s.clearance for s in slabs], base0, settings, lp)
    if isinstance(gp, tuple):
        return _Regions([], None, {}, [gp], [])
    if slabs:  # boxes again with a margin of one gap cell (level 0: the same boxes at every mesh level)
        dg0 = base0 / 2**gp.level
        slabs, sax, sg0 = underbody_slabs(body.underside, placement, dg0)
        # one split count under the whole body: a change of the count (or the end of the split cells) where
        # the floor or the diffuser meets the cells leaves wall faces of skewness up to 6 (measured on the demo
        # floor's diffuser14 at coarse), so the flat cells end only off the body, in the fluid around the slabs
        k = max(gp.z_splits)
        for i, sl in enumerate(slabs):
            regions.append(RefinementRegion(oriented_box(f"underbody{i}", sg0, sax, sl.lo, sl.hi), gp.level, int(k),
                                            fluid_volume=sl.fluid_volume))
        # behind the diffuser: from a quarter length ahead of the tail to one length behind it,
        # up to 1.25 × the exit height (the last slab's underside) and two cells of its level
        tail = max(sl.hi[0] for sl in slabs)
        lw = max(wl, min(gp.level - 1, smax))
        t0, t1 = min(sl.lo[1] for sl in slabs), max(sl.hi[1] for sl in slabs)
        regions.append(RefinementRegion(
            oriented_box("diffuser_wake", sg0, sax, np.array([tail - 0.25 * L, t0, -dg0]),
                 np.array([tail + 1.0 * L, t1, 1.25 * slabs[-1].top + 2.0 * base0 / 2**lw])), lw))
    else:  # no underside map: one box under the whole body
        top = 1.5 * max(max(body.ride_heights), body.min_clearance)
        regions.append(RefinementRegion(oriented_box("underbody", g0, axes, np.array([lo[0] - margin, lo[1] - margin, -margin]),
                                             np.array([hi[0] + margin, hi[1] + margin, top])), gp.level, max(gp.z_splits)))
    info = {"reference_clearance": c_ref, "gap_level": gp.level, "gap_cell": base0 / 2**gp.level / scale,
            "z_splits": max(gp.z_splits), "z_splits_needed_per_slab": list(gp.z_splits),
            "gap_cells_reference": round(gp.cells_across, 2), "gap_cells_min": round(gp.cells_min, 2)}
    if body.min_clearance < c_ref and gp.cells_min < settings.gap_cells - 1.0:  # more than a cell short
        warnings.append(f"the smallest clearance ({body.min_clearance * 1e3:.3f} mm) is below the reference clearance "
                        f"({c_ref * 1e3:.3f} mm): {gp.cells_min:.1f} cells across it")
    if lp is not None:
        stacks = (2 if lp.ground else 1) * lp.thickness
        if stacks > MAX_STACK_SHARE * c_ref:
            what = (f"the prism layers ({lp.n_layers} × {lp.first_height * 1e3:.4f} mm growing by {lp.expansion:g}, "
                    f"{lp.thickness * 1e3:.3f} mm per stack, {'floor and ground' if lp.ground else 'floor'}) fill "
                    f"{100 * stacks / c_ref:.0f} % of the reference clearance {c_ref * 1e3:.3f} mm (at most "
                    f"{100 * MAX_STACK_SHARE:.0f} %)")
            if lp.treatment == "low-re":
                problems.append((what + ": the gap cannot hold the low-Re layers",
                                 'raise the ride height, raise mesh.layer_expansion, or use mesh.wall_treatment = "wall-function"',
                                 "mesh.wall_treatment"))
            else:
                warnings.append(what + "; the mesher may squash them")
    return _Regions(regions, gp, info, problems, warnings)


def _regions(body: BodyExtent, lo, hi, placement: Placement, axes, g0, ground: str, z0: float, settings: MeshSettings,
             base0: float, lp: LayerPlan | None, scale: float) -> _Regions:
    """Refinement regions: the wake; with a ground the underbody slabs and
    the wake behind the diffuser (:func:`_underbody`), else a near-body box."""
    L = body.length
    bw, bh = hi[1] - lo[1], hi[2] - lo[2]
    smin = settings.surface_levels[0]
    wl = settings.preset.wake_level
    margin = 0.02 * L
    wake = RefinementRegion(oriented_box(
        "wake", g0, axes, np.array([lo[0] - 0.1 * L, lo[1] - 0.2 * bw, max(z0, lo[2] - 0.3 * bh) if ground == "none" else -margin]),
        np.array([hi[0] + settings.preset.wake_length * L, hi[1] + 0.2 * bw, hi[2] + 0.3 * bh])), wl)
    if ground != "none" and body.min_clearance is not None and body.ride_heights is not None:
        r = _underbody(body, lo, hi, placement, axes, g0, settings, base0, lp, scale)
        regions = [wake] + r.regions
    else:
        r = _Regions([], None, {}, [], [])
        regions = [wake, RefinementRegion(oriented_box("near", g0, axes, np.array([lo[0] - 0.2 * L, lo[1] - 0.2 * bw, lo[2] - 0.2 * bh]),
                                              np.array([hi[0] + 0.5 * L, hi[1] + 0.2 * bw, hi[2] + 0.2 * bh])),
                                         max(wl, smin))]
    regions.sort(key=lambda x: x.level)
    return _Regions(regions, r.gap, r.info, r.problems, r.warnings)


def _layers(lp: LayerPlan | None, settings: MeshSettings, mesh_level: int, d0: float) -> tuple[Layers | None, list[tuple[str, str]], list[str]]:
    """The prism layers of this mesh level (every height of the level-0
    plan ``lp`` scaled by 1/√2ᵐ), the problem of a level whose first-cell y+
    leaves the wall treatment's band or of too many layers, and a warning
    when the stack is thicker than the finest surface cell."""
    if lp is None:
        return None, [], []
    scale = LEVEL_FACTOR**mesh_level
    layers = Layers(n_layers=lp.n_layers, first_cell_height=lp.first_height / scale, expansion=lp.expansion,
                    target_yplus=lp.centre_yplus / scale, ground=lp.ground, treatment=lp.treatment)
    problems, warnings = [], []
    if lp.treatment != "laminar":
        band = WALL_TREATMENTS[lp.treatment].band
        if not band[0] <= layers.target_yplus <= band[1]:
            problems.append((f"mesh level {mesh_level} puts the first cell centre at y+ {layers.target_yplus:.3g} (y+ "
                             f"{lp.centre_yplus:.3g} at level 0, scaled by 1/√2 per level with every other mesh length), "
                             f"outside the {lp.treatment} band {band[0]:g}–{band[1]:g}: the mesh levels cannot be similar "
                             "and keep the wall treatment",
                             "use fewer or lower mesh levels, or set mesh.target_yplus so that every level stays in the band",
                             "sweep.mesh_level"))
    if lp.n_layers > 40:
        problems.append((f"the {lp.treatment} treatment needs {lp.n_layers} prism layers (first layer "
                         f"{lp.first_height * 1e3:.4f} mm growing by {lp.expansion:g})",
                         "raise mesh.layer_expansion or use wall functions", "mesh.layer_expansion"))
    ds = d0 / 2**settings.surface_levels[1]
    T = lp.thickness / scale
    if T > ds:
        warnings.append(f"the prism-layer stack ({T * 1e3:.3f} mm) is thicker than the finest surface cell "
                        f"({ds * 1e3:.3f} mm); the mesher may collapse layers (raise target_yplus or lower layers)")
    return layers, problems, warnings


def plan_domain(body: BodyExtent, placement: Placement, ground: str, sizing: DomainSizing, settings: MeshSettings,
                mesh_level: int, air_speed: float, nu: float, local_speed: float | None = None) -> DomainPlan:
    """Size the domain and the mesh of one case: the background box
    (:func:`_section`), the prism layers (:func:`plan_layers`, decided at
    mesh level 0 and scaled: :func:`_layers`), the ground rectangle with
    layers (:func:`_ground_rectangle`), the refinement regions and the gap
    plan (:func:`_regions`) and the point that marks the fluid.

    ``placement`` the body → ground transform; ``ground`` "moving" |
    "stationary" | "none"; ``mesh_level`` of the sweep point; ``air_speed``
    m/s, ``local_speed`` (m/s, default the air speed: the planner passes the
    underfloor speed) and ``nu`` m²/s for the first-cell height.
    """
    axes = wind_axes(placement)
    g0 = placement.ground_point_body if ground != "none" else np.zeros(3)
    lo, hi = _wind_extent(body, axes, g0)
    d0 = base_cell_size(settings, body.length, mesh_level)
    base0 = base_cell_size(settings, body.length, 0)
    scale = LEVEL_FACTOR**mesh_level
    sec = _section(body, lo, hi, axes, g0, ground, sizing, d0)
    lp = plan_layers(settings, local_speed if local_speed is not None else air_speed, body.length, nu)
    if lp is not None and ground == "none":
        lp = replace(lp, ground=False)
    layers, layer_problems, layer_warnings = _layers(lp, settings, mesh_level, d0)
    domain = sec.domain
    if lp is not None and lp.ground and ground != "none":
        domain = replace(domain, ground_layer_cells=_ground_rectangle(sec, lo, hi, body.length))
    reg = _regions(body, lo, hi, placement, axes, g0, ground, sec.origin[2], settings, base0, lp, scale)
    # location in mesh: upstream of the body, at a fraction of a cell no refinement level puts on a face
    frac = 0.4371
    n = sec.n
    k1 = max(0, min(n[0] - 1, int(0.3 * sizing.upstream * body.length / d0)))
    c = np.array([(k1 + frac) * d0, (n[1] // 2 + frac) * sec.lens[1] / n[1], (n[2] // 2 + frac) * sec.lens[2] / n[2]])
    lim = g0 + (sec.origin + c) @ axes
    smin, smax = settings.surface_levels
    mesh = MeshSpec(base_cell=float(d0), surface_levels=(int(smin), int(smax)), feature_level=int(settings.feature_level),
                    regions=tuple(reg.regions), layers=layers, location_in_mesh=tuple(float(v) for v in lim))
    footprint = None
    if body.underside is not None and domain.ground_layer_cells is not None:
        footprint = float(np.count_nonzero(np.isfinite(body.underside.z))) * body.underside.cell_area
    est = estimate_cells(domain, mesh, body.area, ground_layer_area=footprint)
    return DomainPlan(domain=domain, mesh=mesh, base_cell=float(d0), gap_level=None if reg.gap is None else reg.gap.level,
                      estimated_cells=est, warnings=sec.warnings + tuple(reg.warnings) + tuple(layer_warnings),
                      problems=sec.problems + tuple(layer_problems) + tuple(reg.problems) + tuple(cell_limit_problems(est)),
                      gap=reg.gap, info=reg.info, nominal_volume=sec.nominal_volume)


def cell_limit_problems(estimated_cells: int) -> list[tuple[str, str]]:
    """(what, fix) when a case's estimated cells exceed :data:`MAX_CELLS`."""
    if estimated_cells <= MAX_CELLS.value:
        return []
    return [(f"an estimated {estimated_cells:.3g} cells, above the limit of {MAX_CELLS.value:.3g} cells per case "
             f"({MAX_CELLS.why})",
             "raise mesh.base_cell (m, not mm?), lower the fidelity, mesh levels or refinement levels, or shrink the domain")]


def estimate_cells(domain: Domain, mesh: MeshSpec, body_area: float, ground_layer_area: float | None = None) -> int:
    """Rough cell count (±50 %) of the finished mesh.

    Background n1·n2·n3; each refinement region adds V (2ᶻ/Δ_r³ − 1/Δ_c³),
    V its fluid volume (or its box volume), Δ_r = base_cell/2^level its cell,
    z its splits along the floor normal and Δ_c the cell of the next coarser
    level present (regions of one level are taken as disjoint, regions of
    different levels as nested); the body surface adds three cells thick of
    the finest surface cells, A/Δ_s² × 3, and each prism layer A/Δ_s²; with
    layers on the ground, each layer adds the body's footprint area
    ``ground_layer_area`` (m²) over the gap cells' face area. Δ_n =
    base_cell / 2ⁿ (m); ``body_area`` m².
    """
    d0 = mesh.base_cell
    total = float(np.prod(np.asarray(domain.cells, dtype=float)))  # float: no integer overflow
    levels = sorted({r.level for r in mesh.regions})
    coarser = {lv: (d0 / 2**levels[i - 1] if i > 0 else d0) for i, lv in enumerate(levels)}
    for r in mesh.regions:
        dr = d0 / 2**r.level
        V = float(np.prod(r.box.lengths)) if r.fluid_volume is None else float(r.fluid_volume)
        total += max(V * (2**r.z_splits / dr**3 - 1.0 / coarser[r.level]**3), 0.0)
    ds = d0 / 2**mesh.surface_levels[1]
    surf = body_area / ds**2
    total += 3.0 * surf
    if mesh.layers is not None:
        total += mesh.layers.n_layers * surf
        if mesh.layers.ground and ground_layer_area:
            gl = max((r.level for r in mesh.regions if r.box.name.startswith("underbody")), default=mesh.surface_levels[1])
            total += mesh.layers.n_layers * ground_layer_area / (d0 / 2**gl) ** 2
    return int(round(total))


def decomposition_split(n_procs: int, extent: np.ndarray) -> tuple[int, int, int]:
    """Split ``n_procs`` ranks into (nx, ny, nz) along the mesh-frame axes,
    product = n_procs, giving more pieces to the longer ``extent`` (m, the
    domain's bounding-box size along mesh x, y, z): the prime factors are
    handed out largest first to the axis with the largest length per piece."""
    if not 1 <= n_procs <= MAX_RANKS.value:
        raise ValueError(f"expected 1 to {int(MAX_RANKS.value)} ranks, got {n_procs}")
    f, k, m = [], 2, n_procs
    while k * k <= m:
        while m % k == 0:
            f.append(k)
            m //= k
        k += 1
    if m > 1:
        f.append(m)
    split = [1, 1, 1]
    ext = np.asarray(extent, float)
    for p in sorted(f, reverse=True):
        i = int(np.argmax(ext / np.array(split)))
        split[i] *= p
    return split[0], split[1], split[2]
