"""The mesh lengths of a case (pure numeric kernels; no files): the fidelity
presets, the base cell of each mesh level, the prism-layer plan, the cells
across a clearance and the gap plan under the body.

Lengths in m, in the mesh frame = body frame (see
:mod:`caseprep.planning.domain` for the domain box and refinement regions
they are used in). Mesh levels: level n of a refinement region means cells
of base_cell / 2ⁿ; the sweep's ``mesh_level`` m scales the base cell by
1/√2ᵐ (:data:`LEVEL_FACTOR`) and with it every other length of the mesh.

The gap
-------
Under the body the mesh must resolve the flow between floor and ground.
The **reference clearance** c is the smaller of the two ride heights (the
heights of the ride-height reference points). Cells across a clearance h:

    n(h) = s N + (h − s T)/Δz,

with N prism layers of total thickness T on each of the s walls that carry
them (s = 2: floor and ground, 1: floor only, 0: no layers) and Δz the core
cell height. The underbody is covered by slab boxes (one per eighth of the
body length) from the ground to the underside (floor, tunnels, diffuser:
:mod:`caseprep.geometry.underside`); their cells are refined isotropically to
the gap level g (the coarsest level at or above the finest surface level
with at least ``iso_gap_cells`` cells across c) and then split ``z`` times
along the floor normal, Δz = Δ_g/2ᶻ, z chosen per slab as the fewest splits
that give n ≥ ``mesh.gap_cells`` across the larger of c and the slab's own
smallest clearance. The rear of the floor gets a wake region behind the
diffuser.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

from caseprep.contract.walls import LOW_RE_TARGET_YPLUS
from caseprep.planning.physics import first_cell_height, layer_stack_thickness

@dataclass(frozen=True)
class Preset:
    """A fidelity preset. ``cells_per_length``: body length / base cell at
    mesh level 0; levels as in :class:`~caseprep.planning.spec.RefinementRegion`;
    ``gap_cells``: cells required across the reference clearance (prism
    layers and core cells, see the module docstring); ``iso_gap_cells``:
    cells of the isotropic gap level across it; ``max_z_splits``: most
    splits of the gap cells along the floor normal (0: isotropic cells
    only); ``max_level``: finest isotropic level the underbody may use;
    ``wake_length`` in body lengths behind the body; ``layers`` 0 = no prism
    layers; ``target_yplus`` the y+ at the first cell centre at mesh level 0
    (wall functions); ``ground_layers``: prism layers also on the ground
    under the body."""

    name: str
    cells_per_length: float
    surface_levels: tuple[int, int]
    feature_level: int
    max_level: int
    gap_cells: float
    iso_gap_cells: float
    max_z_splits: int
    wake_level: int
    wake_length: float
    layers: int
    layer_expansion: float
    target_yplus: float
    ground_layers: bool
    iterations: int


PRESETS: dict[str, Preset] = {
    # smoke: meshes and solves in under a minute on two cores (tens of
    # thousands of cells on the demo body, 180 iterations). Base cell L/5;
    # body surface at level 3 (L/40), so the body's shape and a diffuser ramp
    # are there at all; no prism layers (wall functions on the snapped
    # cells). It relaxes the gap rule: one isotropic cell across the
    # reference clearance (level 4 = L/80 for clearances from L/80 to L/40;
    # level 5 at most, so clearances below L/160 are refused) and no splits.
    # One or two cells across the gap give the venturi's blockage and the
    # ordering of floors, not a resolved underbody boundary layer: use
    # `coarse` or finer for numbers.
    "smoke": Preset("smoke", 5.0, (1, 3), 2, 5, 1.0, 1.0, 0, 1, 1.0, 0, 1.3, 100.0, False, 180),
    # coarse and production: at least 12 cells across the reference clearance
    # (common practice, no source), prism layers on the body and on the
    # ground under it, first cell centre at y+ 100 (coarse) / 60 (production)
    # at mesh level 0: inside the wall-function band 30-150 for mesh levels
    # 0-3 (coarse) / 0-2 (production) of a similar mesh study.
    "coarse": Preset("coarse", 6.0, (3, 4), 4, 7, 12.0, 2.0, 3, 2, 2.0, 3, 1.2, 100.0, True, 1000),
    "production": Preset("production", 8.0, (4, 6), 6, 9, 12.0, 2.0, 3, 3, 3.0, 5, 1.2, 60.0, True, 3000),
}

LEVEL_FACTOR = math.sqrt(2.0)  # refinement of every mesh length per sweep mesh level


@dataclass(frozen=True)
class MeshSettings:
    """A preset with the config's overrides applied (``base_cell`` None:
    body length / cells_per_length; ``layers`` None: as many as the wall
    treatment needs, see :func:`layer_count`)."""

    preset: Preset
    base_cell: float | None
    surface_levels: tuple[int, int]
    feature_level: int
    max_level: int
    gap_cells: float
    layers: int | None
    layer_expansion: float
    target_yplus: float
    wall_treatment: str = "wall-function"


def mesh_settings(fidelity: str, base_cell=None, surface_levels=None, feature_level=None, max_level=None,
                  gap_cells=None, layers=None, layer_expansion=None, target_yplus=None,
                  wall_treatment: str = "wall-function") -> MeshSettings:
    """Resolve a preset and the overrides (None keeps the preset's value).
    ``wall_treatment`` "low-re" aims at y+ ≈ 1 at the first cell centre
    (``target_yplus`` then defaults to it) with as many layers as needed
    unless ``layers`` is given."""
    p = PRESETS[fidelity]
    low = wall_treatment == "low-re"
    return MeshSettings(
        preset=p,
        base_cell=base_cell,
        surface_levels=tuple(surface_levels) if surface_levels is not None else p.surface_levels,
        feature_level=p.feature_level if feature_level is None else feature_level,
        max_level=p.max_level if max_level is None else max_level,
        gap_cells=p.gap_cells if gap_cells is None else gap_cells,
        layers=(None if low else p.layers) if layers is None else layers,
        layer_expansion=p.layer_expansion if layer_expansion is None else layer_expansion,
        target_yplus=(LOW_RE_TARGET_YPLUS if low else p.target_yplus) if target_yplus is None else target_yplus,
        wall_treatment=wall_treatment,
    )


def base_cell_size(settings: MeshSettings, body_length: float, mesh_level: int) -> float:
    """Background cell size (m) at sweep mesh level m: Δ0 / √2ᵐ."""
    d0 = settings.base_cell if settings.base_cell is not None else body_length / settings.preset.cells_per_length
    return d0 / LEVEL_FACTOR**mesh_level


def layer_count(first_height: float, expansion: float, last_height: float) -> int:
    """Fewest layers whose last one, h₁ rⁿ⁻¹, is at least ``last_height``:
    n = 1 + ⌈ln(h_last/h₁)/ln r⌉ (geometric growth from ``first_height``
    h₁ by ``expansion`` r > 1; heights in m). Elementary."""
    if not first_height > 0 or not expansion > 1.0:
        raise ValueError("expected a positive first height and an expansion ratio above 1")
    if last_height <= first_height:
        return 1
    return 1 + math.ceil(math.log(last_height / first_height) / math.log(expansion) - 1e-12)


@dataclass(frozen=True)
class LayerPlan:
    """Prism layers of a point at mesh level 0 (``first_height``, ``thickness``
    in m) and the wall-function first height a low-Re stack grows to."""

    n_layers: int
    first_height: float
    expansion: float
    centre_yplus: float
    thickness: float
    treatment: str
    ground: bool


def plan_layers(settings: MeshSettings, local_speed: float, body_length: float, nu: float) -> LayerPlan | None:
    """The prism layers at mesh level 0, or None without layers.

    First height h₁ = 2 y+ ν/u_τ for the target centre y+ (flat plate at the
    local speed: :func:`caseprep.planning.physics.first_cell_height`).
    ``low-re`` without an explicit layer count: enough layers, growing by the
    expansion ratio, for the last one to reach the first height a wall
    function would use at the preset's y+ (:func:`layer_count`), i.e. the
    stack spans the viscous sublayer, the buffer region and the inner log
    layer."""
    n = settings.layers
    if n == 0:
        return None
    h1 = first_cell_height(settings.target_yplus, local_speed, body_length, nu)
    if n is None:
        h_wf = first_cell_height(settings.preset.target_yplus, local_speed, body_length, nu)
        n = layer_count(h1, settings.layer_expansion, h_wf)
    T = layer_stack_thickness(h1, n, settings.layer_expansion)
    return LayerPlan(n_layers=int(n), first_height=float(h1), expansion=float(settings.layer_expansion),
                     centre_yplus=float(settings.target_yplus), thickness=float(T), treatment=settings.wall_treatment,
                     ground=bool(settings.preset.ground_layers))


def cells_across(clearance: float, core_cell: float, layers: LayerPlan | None) -> float:
    """Cells across a ``clearance`` (m): s N + (h − s T)/Δz with s = 2 stacks
    (floor and ground) when the layers reach the ground, 1 otherwise, 0
    without layers; ``core_cell`` Δz (m). A core thinner than zero counts
    as zero (the stacks are squashed)."""
    if layers is None:
        return clearance / core_cell
    s = 2 if layers.ground else 1
    return s * layers.n_layers + max(clearance - s * layers.thickness, 0.0) / core_cell


@dataclass(frozen=True)
class GapPlan:
    """The underbody resolution of one point (decided at mesh level 0).

    ``reference_clearance`` c (m); ``level`` the isotropic gap level;
    ``z_splits`` per underbody slab; ``cells_across`` the fewest cells over
    the slabs across the larger of c and the slab's smallest clearance (at
    least ``mesh.gap_cells``); ``cells_min`` the fewest across each slab's
    own smallest clearance (below ``cells_across`` only where the floor dips
    under the reference clearance)."""

    reference_clearance: float
    level: int
    z_splits: tuple[int, ...]
    cells_across: float
    cells_min: float


def plan_gap(reference_clearance: float, slab_clearances: list[float], base0: float, settings: MeshSettings,
             layers: LayerPlan | None) -> GapPlan | tuple[str, str]:
    """Choose the gap level and the per-slab splits (module docstring) at
    mesh level 0 (``base0`` the level-0 base cell, m; clearances in m).
    Returns a :class:`GapPlan`, or (what is wrong, how to fix it)."""
    p = settings.preset
    c = reference_clearance
    smax = settings.surface_levels[1]
    g0 = max(smax, math.ceil(math.log2(p.iso_gap_cells * base0 / c) - 1e-12))
    clear = [max(c, h) for h in slab_clearances] or [c]
    for g in range(g0, settings.max_level + 1):
        dg = base0 / 2**g
        ks = []
        for h in clear:
            k = next((k for k in range(p.max_z_splits + 1) if cells_across(h, dg / 2**k, layers) >= settings.gap_cells - 1e-9),
                     None)
            if k is None:
                break
            ks.append(k)
        else:
            n_ref = min(cells_across(h, dg / 2**k, layers) for h, k in zip(clear, ks))
            n_min = min(cells_across(h0, dg / 2**k, layers) for h0, k in zip(slab_clearances or [c], ks))
            return GapPlan(float(c), int(g), tuple(int(k) for k in ks), float(n_ref), float(n_min))
    finest = base0 / 2**settings.max_level / 2**p.max_z_splits
    have = cells_across(c, finest, layers)
    return (f"the reference clearance {c * 1e3:.3f} mm needs {settings.gap_cells:g} cells across (prism layers and core "
            f"cells); the finest cells allowed (level {settings.max_level}, {finest * 1e3:.3f} mm after "
            f"{p.max_z_splits} splits along the floor normal) give {have:.1f}",
            "raise the ride height, use a finer fidelity, raise mesh.max_level or lower mesh.gap_cells")
