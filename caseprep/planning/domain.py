"""Domain box, background mesh, refinement regions, layers and cell estimate
(pure numeric kernels; no files).

Everything is in the **mesh frame** = body frame (x rearward, y right, z up,
metres, see :mod:`caseprep.contract.frames`). The domain is an
:class:`~caseprep.planning.spec.OrientedBox` aligned with the horizontal relative
wind: e1 along the wind (inlet at e1 = 0), e3 the ground normal (ground at
e3 = 0), e2 = e3 × e1.

Sizing rules (common practice for external vehicle aerodynamics, no single
source):

- inlet ``upstream`` = 3 body lengths ahead of the body, outlet
  ``downstream`` = 6 body lengths behind it (config: ``domain.*``);
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
The sweep's ``mesh_level`` m scales the base cell by 1/√2ᵐ (every length of
the mesh shrinks by √2 per level, about 2.8 × the cells).
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable

import numpy as np

from caseprep.contract.frames import Placement, ground_to_wind_rotation, wind_direction_ground
from caseprep.contract.limits import MAX_CELLS, MAX_RANKS
from caseprep.planning.physics import first_cell_height, layer_stack_thickness
from caseprep.planning.spec import Domain, Layers, MeshSpec, OrientedBox, RefinementRegion

WARN_BLOCKAGE = 0.01  # common practice, no source


@dataclass(frozen=True)
class Preset:
    """A fidelity preset. ``cells_per_length``: body length / base cell at
    mesh level 0; levels as in :class:`~caseprep.planning.spec.RefinementRegion`;
    ``gap_cells``: cells required across the smallest ground clearance;
    ``max_level``: finest level the underbody region may use; ``wake_length``
    in body lengths behind the body; ``layers`` 0 = no prism layers."""

    name: str
    cells_per_length: float
    surface_levels: tuple[int, int]
    feature_level: int
    max_level: int
    gap_cells: float
    wake_level: int
    wake_length: float
    layers: int
    layer_expansion: float
    target_yplus: float
    iterations: int


PRESETS: dict[str, Preset] = {
    # smoke: meshes and solves in under a minute on two cores (31–36 thousand
    # cells on the demo body, 180 iterations). Base cell L/5; body surface at level 3 (L/40),
    # so the body's shape and a diffuser ramp are there at all; no prism
    # layers (wall functions). Gap rule with gap_cells = 1: the underbody
    # gets the coarsest level whose cells fit once into the smallest ground
    # clearance (level 4 = L/80 for clearances from L/80 to L/40; level 5 at
    # most, so clearances below L/160 are refused). One or two cells across
    # the gap give the venturi's blockage and the ordering of floors, not a
    # resolved underbody boundary layer: use `coarse` or finer for numbers.
    "smoke": Preset("smoke", 5.0, (1, 3), 2, 5, 1.0, 1, 1.0, 0, 1.3, 30.0, 180),
    "coarse": Preset("coarse", 6.0, (3, 4), 4, 7, 4.0, 2, 2.0, 3, 1.3, 50.0, 1000),
    "production": Preset("production", 8.0, (4, 6), 6, 9, 4.0, 3, 3.0, 8, 1.2, 30.0, 3000),
}

LEVEL_FACTOR = math.sqrt(2.0)  # base-cell refinement per sweep mesh level


@dataclass(frozen=True)
class MeshSettings:
    """A preset with the config's overrides applied (``base_cell`` None:
    body length / cells_per_length)."""

    preset: Preset
    base_cell: float | None
    surface_levels: tuple[int, int]
    feature_level: int
    max_level: int
    gap_cells: float
    layers: int
    layer_expansion: float
    target_yplus: float


def mesh_settings(fidelity: str, base_cell=None, surface_levels=None, feature_level=None, max_level=None,
                  gap_cells=None, layers=None, layer_expansion=None, target_yplus=None) -> MeshSettings:
    """Resolve a preset and the overrides (None keeps the preset's value)."""
    p = PRESETS[fidelity]
    return MeshSettings(
        preset=p,
        base_cell=base_cell,
        surface_levels=tuple(surface_levels) if surface_levels is not None else p.surface_levels,
        feature_level=p.feature_level if feature_level is None else feature_level,
        max_level=p.max_level if max_level is None else max_level,
        gap_cells=p.gap_cells if gap_cells is None else gap_cells,
        layers=p.layers if layers is None else layers,
        layer_expansion=p.layer_expansion if layer_expansion is None else layer_expansion,
        target_yplus=p.target_yplus if target_yplus is None else target_yplus,
    )


def base_cell_size(settings: MeshSettings, body_length: float, mesh_level: int) -> float:
    """Background cell size (m) at sweep mesh level m: Δ0 / √2ᵐ."""
    d0 = settings.base_cell if settings.base_cell is not None else body_length / settings.preset.cells_per_length
    return d0 / LEVEL_FACTOR**mesh_level


def wind_axes(placement: Placement) -> np.ndarray:
    """Rows e1 (horizontal wind), e2, e3 (ground normal) in body axes."""
    wg = wind_direction_ground(placement.beta, placement.yaw_mode)
    G2W = ground_to_wind_rotation(wg)  # rows: wind axes in ground axes
    return np.vstack([placement.vector_to_body(G2W[i]) for i in range(3)])


def _box(name: str, origin_b: np.ndarray, axes: np.ndarray, lo: np.ndarray, hi: np.ndarray) -> OrientedBox:
    o = origin_b + lo @ axes
    return OrientedBox(name=name, origin=tuple(float(v) for v in o), axes=tuple(tuple(float(c) for c in a) for a in axes),
                       lengths=tuple(float(v) for v in (hi - lo)))


@dataclass(frozen=True)
class DomainPlan:
    """Domain, mesh and estimate of one case, plus notes (warnings) and
    problems (messages for refused cases, without file/key)."""

    domain: Domain
    mesh: MeshSpec
    base_cell: float
    gap_level: int | None
    estimated_cells: int
    warnings: tuple[str, ...]
    problems: tuple[tuple[str, str], ...]  # (what is wrong, how to fix it)


@dataclass(frozen=True)
class BodyExtent:
    """What sizing needs of the placed body: ``points`` (N,3) body (and
    wheel) points in the body frame, m (hull vertices suffice); ``length`` L
    (m); ``area`` surface area (m²); ``frontal_area`` shadow normal to the
    wind (m²); ``min_clearance`` smallest ground clearance (m, None without a
    ground); ``ride_heights`` (front, rear) m or None; ``extent_range(axes)``
    (optional) the (min, max) of ``points @ axes.T`` — a caller planning many
    cases passes a cached version (the range depends on the rotation only)."""

    points: np.ndarray
    length: float
    area: float
    frontal_area: float
    min_clearance: float | None = None
    ride_heights: tuple[float, float] | None = None
    extent_range: Callable[[np.ndarray], tuple[np.ndarray, np.ndarray]] | None = None


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
    domain = Domain(box=_box("domain", g0, axes, origin, origin + lens), cells=(int(n[0]), int(n[1]), int(n[2])),
                    ground=ground, blockage=float(blockage))
    return _Section(origin, lens, (int(n[0]), int(n[1]), int(n[2])), domain, tuple(problems), tuple(warnings))


def _regions(body: BodyExtent, lo, hi, axes, g0, ground: str, z0: float, settings: MeshSettings,
             d0: float) -> tuple[list[RefinementRegion], int | None, list[tuple[str, str]]]:
    """Refinement regions (wake; underbody gap and rear with a ground, else a
    near-body box), the gap level and the problem of a gap too fine for the
    preset's finest level."""
    L = body.length
    bw, bh = hi[1] - lo[1], hi[2] - lo[2]
    smin, smax = settings.surface_levels
    regions: list[RefinementRegion] = []
    problems: list[tuple[str, str]] = []
    gap_level = None
    margin = 0.02 * L
    wl = settings.preset.wake_level
    regions.append(RefinementRegion(_box(
        "wake", g0, axes, np.array([lo[0] - 0.1 * L, lo[1] - 0.2 * bw, max(z0, lo[2] - 0.3 * bh) if ground == "none" else -margin]),
        np.array([hi[0] + settings.preset.wake_length * L, hi[1] + 0.2 * bw, hi[2] + 0.3 * bh])), wl))
    clearance = body.min_clearance
    if ground != "none" and clearance is not None:
        if clearance > 0:
            need = max(smax, math.ceil(math.log2(settings.gap_cells * d0 / clearance) - 1e-12))
            gap_level = int(need)
            if need > settings.max_level:
                finest = d0 / 2**settings.max_level
                problems.append((
                    f"the smallest ground clearance {clearance * 1e3:.3f} mm needs {settings.gap_cells:g} cells of at most "
                    f"{clearance / settings.gap_cells * 1e3:.3f} mm; the finest level allowed (level {settings.max_level}, "
                    f"{finest * 1e3:.3f} mm cells) gives {clearance / finest:.2f} cells",
                    "raise the ride height, use a finer fidelity or mesh level, or raise mesh.max_level"))
                gap_level = settings.max_level
            top = 1.5 * max(max(body.ride_heights) if body.ride_heights else 0.0, clearance)
            regions.append(RefinementRegion(_box("underbody", g0, axes, np.array([lo[0] - margin, lo[1] - margin, -margin]),
                                                 np.array([hi[0] + margin, hi[1] + margin, top])), gap_level))
            regions.append(RefinementRegion(_box("rear", g0, axes, np.array([hi[0] - 0.25 * L, lo[1] - margin, -margin]),
                                                 np.array([hi[0] + 0.5 * L, hi[1] + margin, lo[2] + 0.6 * bh])),
                                            max(wl, min(gap_level - 1, smax))))
    else:
        regions.append(RefinementRegion(_box("near", g0, axes, np.array([lo[0] - 0.2 * L, lo[1] - 0.2 * bw, lo[2] - 0.2 * bh]),
                                             np.array([hi[0] + 0.5 * L, hi[1] + 0.2 * bw, hi[2] + 0.2 * bh])), max(wl, smin)))
    regions.sort(key=lambda r: r.level)
    return regions, gap_level, problems


def _layers(body: BodyExtent, ground: str, settings: MeshSettings, air_speed: float, nu: float,
            d0: float) -> tuple[Layers | None, list[str]]:
    """The prism layers for the target y+ (None without layers) and warnings
    when the stack is thicker than the finest surface cell or half the gap."""
    if settings.layers <= 0:
        return None, []
    warnings = []
    h1 = first_cell_height(settings.target_yplus, air_speed, body.length, nu)
    layers = Layers(n_layers=settings.layers, first_cell_height=h1, expansion=settings.layer_expansion,
                    target_yplus=settings.target_yplus)
    T = layer_stack_thickness(h1, settings.layers, settings.layer_expansion)
    ds = d0 / 2**settings.surface_levels[1]
    if T > ds:
        warnings.append(f"the prism-layer stack ({T * 1e3:.3f} mm) is thicker than the finest surface cell "
                        f"({ds * 1e3:.3f} mm); the mesher may collapse layers (raise target_yplus or layers)")
    if body.min_clearance is not None and ground != "none" and T > 0.5 * body.min_clearance:
        warnings.append(f"the prism-layer stack ({T * 1e3:.3f} mm) fills more than half of the smallest ground clearance "
                        f"({body.min_clearance * 1e3:.3f} mm)")
    return layers, warnings


def plan_domain(body: BodyExtent, placement: Placement, ground: str, sizing: DomainSizing, settings: MeshSettings,
                mesh_level: int, air_speed: float, nu: float) -> DomainPlan:
    """Size the domain and the mesh of one case: the background box
    (:func:`_section`), the refinement regions (:func:`_regions`), the
    prism layers (:func:`_layers`) and the point that marks the fluid.

    ``placement`` the body → ground transform; ``ground`` "moving" |
    "stationary" | "none"; ``mesh_level`` of the sweep point; ``air_speed``
    m/s and ``nu`` m²/s for the first-cell height.
    """
    axes = wind_axes(placement)
    g0 = placement.ground_point_body if ground != "none" else np.zeros(3)
    lo, hi = _wind_extent(body, axes, g0)
    d0 = base_cell_size(settings, body.length, mesh_level)
    sec = _section(body, lo, hi, axes, g0, ground, sizing, d0)
    regions, gap_level, gap_problems = _regions(body, lo, hi, axes, g0, ground, sec.origin[2], settings, d0)
    layers, layer_warnings = _layers(body, ground, settings, air_speed, nu, d0)
    # location in mesh: upstream of the body, at a fraction of a cell no refinement level puts on a face
    frac = 0.4371
    n = sec.n
    k1 = max(0, min(n[0] - 1, int(0.3 * sizing.upstream * body.length / d0)))
    c = np.array([(k1 + frac) * d0, (n[1] // 2 + frac) * sec.lens[1] / n[1], (n[2] // 2 + frac) * sec.lens[2] / n[2]])
    lim = g0 + (sec.origin + c) @ axes
    smin, smax = settings.surface_levels
    mesh = MeshSpec(base_cell=float(d0), surface_levels=(int(smin), int(smax)), feature_level=int(settings.feature_level),
                    regions=tuple(regions), layers=layers, location_in_mesh=tuple(float(v) for v in lim))
    est = estimate_cells(sec.domain, mesh, body.area)
    return DomainPlan(domain=sec.domain, mesh=mesh, base_cell=float(d0), gap_level=gap_level, estimated_cells=est,
                      warnings=sec.warnings + tuple(layer_warnings),
                      problems=sec.problems + tuple(gap_problems) + tuple(cell_limit_problems(est)))


def cell_limit_problems(estimated_cells: int) -> list[tuple[str, str]]:
    """(what, fix) when a case's estimated cells exceed :data:`MAX_CELLS`."""
    if estimated_cells <= MAX_CELLS.value:
        return []
    return [(f"an estimated {estimated_cells:.3g} cells, above the limit of {MAX_CELLS.value:.3g} cells per case "
             f"({MAX_CELLS.why})",
             "raise mesh.base_cell (m, not mm?), lower the fidelity, mesh levels or refinement levels, or shrink the domain")]


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
    box = _box("domain", g0, axes, lo, lo + np.array([length, width, height]))
    domain = Domain(box=box, cells=(int(n1), int(n2), int(n3)), ground=ground, blockage=0.0, ground_grading=float(grading),
                    lead_in=float(lead_in), lead_in_cells=int(k))
    c = np.array([0.4371 * length, 0.5 * width + 0.1371 * width / n2, 0.4371 * height])
    mesh = MeshSpec(base_cell=float(d0), surface_levels=(0, 0), feature_level=0, regions=(), layers=None,
                    location_in_mesh=tuple(float(v) for v in g0 + (lo + c) @ axes))
    return DomainPlan(domain=domain, mesh=mesh, base_cell=float(d0), gap_level=None, estimated_cells=int(n1 * n2 * n3),
                      warnings=(), problems=tuple(cell_limit_problems(int(n1 * n2 * n3))))


def estimate_cells(domain: Domain, mesh: MeshSpec, body_area: float) -> int:
    """Rough cell count (±50 %) of the finished mesh.

    Background n1·n2·n3; each refinement region (taken as nested, in order
    of level) adds V (1/Δ_r³ − 1/Δ_prev³); the body surface adds three cells
    thick of the finest surface cells, A/Δ_s² × 3, and each prism layer
    A/Δ_s². Δ_n = base_cell / 2ⁿ (m); ``body_area`` m².
    """
    d0 = mesh.base_cell
    total = float(np.prod(np.asarray(domain.cells, dtype=float)))  # float: no integer overflow
    prev = d0
    for r in sorted(mesh.regions, key=lambda r: r.level):
        dr = d0 / 2**r.level
        if dr >= prev:
            continue
        V = float(np.prod(r.box.lengths))
        total += V * (1.0 / dr**3 - 1.0 / prev**3)
        prev = dr
    ds = d0 / 2**mesh.surface_levels[1]
    surf = body_area / ds**2
    total += 3.0 * surf
    if mesh.layers is not None:
        total += mesh.layers.n_layers * surf
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
