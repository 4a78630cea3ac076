"""CaseSpec: one fully resolved case, the hand-over between planning and writing.

The planning side (config → sweep → placement → domain and mesh sizing)
produces one :class:`CaseSpec` per sweep point with every number already
computed. The writing side (templates, scripts, manifest) renders a CaseSpec
into a case folder and computes nothing physical of its own.

Every vector and point is in the **mesh frame**, which is the body frame
(see :mod:`caseprep.contract.frames`): x rearward, y right, z up, metres. The ground
plane, the domain box and the velocities are placed in body coordinates so
that the geometry file is shared unchanged by all cases.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np

from caseprep.config.keys import KEYS
from caseprep.contract.frames import Placement
from caseprep.contract.manifest import INFO_FIELDS, CaseRecord, Reference

Vec3 = tuple[float, float, float]


@dataclass(frozen=True)
class OrientedBox:
    """A box with its own axes, in the mesh frame.

    ``origin`` is one corner (m); ``axes`` are three orthonormal row vectors
    (e1, e2, e3) in the mesh frame; ``lengths`` the edge lengths (m) along
    them. The box is {origin + a e1 + b e2 + c e3 : 0≤a≤L1, 0≤b≤L2, 0≤c≤L3}.
    """

    name: str
    origin: Vec3
    axes: tuple[Vec3, Vec3, Vec3]
    lengths: Vec3

    def corners(self) -> np.ndarray:
        """8×3 corners in blockMesh order: bottom face (c=0) counter-clockwise
        seen from +e3 starting at the origin, then the top face likewise."""
        o = np.asarray(self.origin, dtype=float)
        e = np.asarray(self.axes, dtype=float) * np.asarray(self.lengths, dtype=float)[:, None]
        bottom = [o, o + e[0], o + e[0] + e[1], o + e[1]]
        return np.array(bottom + [p + e[2] for p in bottom])

    @property
    def centre(self) -> np.ndarray:
        e = np.asarray(self.axes, dtype=float) * np.asarray(self.lengths, dtype=float)[:, None]
        return np.asarray(self.origin, dtype=float) + 0.5 * e.sum(axis=0)


@dataclass(frozen=True)
class RefinementRegion:
    """A volume refinement region: cells inside ``box`` refined to ``level``
    (level n = base cell size / 2**n), then split ``z_splits`` more times
    along the mesh frame's z axis (the floor normal: flat cells of
    base/2**level × base/2**level × base/2**(level + z_splits)).
    ``fluid_volume`` (m³, None: the box volume) is the part of the box the
    flow occupies, for the cell estimate."""

    box: OrientedBox
    level: int
    z_splits: int = 0
    fluid_volume: float | None = None


@dataclass(frozen=True)
class Domain:
    """The computational domain box and its background (level-0) mesh.

    ``box.axes``: e1 along the horizontal relative-wind direction (inlet at
    the e1 = 0 face, outlet at e1 = L1), e3 the ground normal (ground at
    e3 = 0, top at e3 = L3), e2 = e3 × e1 (sides at e2 = 0 and L2).
    ``cells`` = background cell counts along e1, e2, e3.
    ``ground``: "moving", "stationary" (no-slip walls) or "none" (far field:
    the bottom face is a slip far-field boundary like the sides and top).
    ``blockage`` is the frontal area of the body normal to the wind divided by
    the inlet face area (fraction, not %).
    ``ground_layer_cells`` (i1, i2, j1, j2): background cell indices along e1
    and e2 of the ground rectangle under the body that gets prism layers
    (patch ``ground``; the rest of the ground is the patch ``ground_far``);
    None: the whole ground is one patch ``ground`` without layers.
    ``ground_grading``: ratio of the last to the first background cell size
    along e3 (1 = uniform; > 1: cells grow away from the ground).
    ``lead_in`` (m): length along e1, from the inlet, of a slip floor ahead
    of the ground's leading edge (0: the ground starts at the inlet);
    ``lead_in_cells`` of the ``cells[0]`` cells along e1 lie on it.
    """

    box: OrientedBox
    cells: tuple[int, int, int]
    ground: str
    blockage: float
    ground_grading: float = 1.0
    lead_in: float = 0.0
    lead_in_cells: int = 0
    ground_layer_cells: tuple[int, int, int, int] | None = None


@dataclass(frozen=True)
class Layers:
    """Prism layers on the body and wheels (and, with ``ground``, on the
    ground under the body).

    ``first_cell_height`` (m) of this mesh level; ``n_layers``, ``expansion``
    (ratio between consecutive layers); ``target_yplus`` the y+ at the first
    cell **centre** that height gives by the flat-plate estimate (see
    caseprep.planning.physics) at this mesh level; ``treatment`` the wall
    treatment (:data:`caseprep.contract.walls.WALL_TREATMENTS`).
    """

    n_layers: int
    first_cell_height: float
    expansion: float
    target_yplus: float
    ground: bool = False
    treatment: str = "wall-function"


@dataclass(frozen=True)
class MeshSpec:
    """Mesh settings: base cell size (m), surface refinement levels
    (min, max) on the body, feature-edge level, refinement regions, layers,
    and a point inside the fluid (mesh frame) for the mesher."""

    base_cell: float
    surface_levels: tuple[int, int]
    feature_level: int
    regions: tuple[RefinementRegion, ...]
    layers: Layers | None
    location_in_mesh: Vec3
    feature_angle_deg: float = 150.0


@dataclass(frozen=True)
class Wheel:
    """A rotating wheel: a rotating wall on its own geometry file, and with
    ``rotation = "zone"`` also a rotating reference zone (a cylinder of
    ``zone_radius`` about the axis over the wheel's ``width``, for wheels
    with spokes).

    ``centre`` (m) and unit ``axis`` in the mesh frame; ``radius`` (m, as
    configured); ``omega`` (rad/s, right-hand rule about ``axis``) chosen so
    the surface at the contact moves with the ground; ``geometry`` the
    shared file name under the sweep's geometry folder (None: the wheel is
    a named solid of the body file, patch ``patch``, placed with the body);
    ``placement`` the JSON-ready contact facts
    (:meth:`caseprep.planning.wheels.WheelPlacement.to_dict`)."""

    name: str
    patch: str
    centre: Vec3
    axis: Vec3
    radius: float
    omega: float
    geometry: str | None = None
    rotation: str = "wall"
    zone_radius: float | None = None
    width: float | None = None
    placement: dict | None = None


@dataclass(frozen=True)
class Flow:
    """Free stream and turbulence.

    ``inlet_velocity`` and ``ground_velocity`` (m/s) are mesh-frame vectors;
    ``air_speed`` = |inlet_velocity| (m/s); ``rho`` kg/m³, ``nu`` m²/s,
    ``p_ref`` Pa (gauge reference, 0 by default: the solver's kinematic
    pressure is relative to it); turbulence ``model`` "kOmegaSST" or
    "laminar"; inlet ``k`` (m²/s²), ``omega`` (1/s), ``nut`` (m²/s) chosen
    so that the free-stream turbulence decays to ``intensity`` (fraction) and
    ``length_scale`` (m) at the model; ``turbulence`` the inlet and at-model
    values (:class:`caseprep.planning.physics.FreeStreamTurbulence` as a dict)."""

    inlet_velocity: Vec3
    ground_velocity: Vec3
    air_speed: float
    rho: float
    nu: float
    p_ref: float
    model: str
    intensity: float
    length_scale: float
    k: float
    omega: float
    nut: float
    turbulence: dict | None = None


@dataclass(frozen=True)
class SolverSpec:
    """Solver controls: iteration budget, output interval, parallel ranks,
    the decomposition split (product = n_procs) and relaxation (the momentum
    relaxation and the non-orthogonal correctors follow the mesh: see
    :data:`caseprep.casefiles.render.MESH_NUMERICS`). ``mesh_reuse``,
    ``warm_start`` and ``stop_rule``: the run economy (config ``mesh.reuse``,
    ``solver.warm_start``, ``solver.stop_rule``), carried into the manifest
    for the runner."""

    n_iterations: int
    write_interval: int
    n_procs: int
    split: tuple[int, int, int]
    relax_p: float = 1.0
    relax_turb: float = 0.7
    consistent: bool = True
    monitor_interval: int = 1
    mesh_reuse: str = KEYS["mesh.reuse"].value
    warm_start: str = KEYS["solver.warm_start"].value
    stop_rule: str = KEYS["solver.stop_rule"].value


@dataclass(frozen=True)
class CaseSpec:
    """One fully resolved case. See the module docstring for frames/units."""

    case_id: str
    variant: str
    params: dict[str, Any]
    yaw_mode: str
    placement: Placement
    geometry: str               # shared body file name under <sweep>/geometry/
    geometry_solid_names: tuple[str, ...]  # solids in that file → body patches
    flow: Flow
    wheels: tuple[Wheel, ...]
    domain: Domain
    mesh: MeshSpec
    solver: SolverSpec
    reference: Reference
    fidelity: str
    min_clearance: float | None
    min_clearance_at: Vec3 | None
    estimated_cells: int
    extra: dict[str, Any] = field(default_factory=dict)

    @property
    def body_patches(self) -> tuple[str, ...]:
        return tuple(self.geometry_solid_names)

    def record(self, folder: str) -> CaseRecord:
        """The manifest record of this case, its folder relative to the sweep root."""
        wind = np.asarray(self.flow.inlet_velocity, dtype=float)
        n = float(np.linalg.norm(wind))
        wdir = tuple(float(v) for v in (wind / n if n > 0 else wind))
        return CaseRecord(
            case_id=self.case_id,
            folder=folder,
            variant=self.variant,
            params=dict(self.params),
            yaw_mode=self.yaw_mode,
            ground=self.domain.ground,
            mesh_frame="body",
            placement=self.placement,
            wind_direction_body=wdir,
            reference=self.reference,
            patches={
                "body": list(self.body_patches),
                "wheels": [w.patch for w in self.wheels],
                "ground": "ground" if self.domain.ground != "none" else None,
                **({"ground_far": "ground_far"} if self.domain.ground_layer_cells is not None else {}),
            },
            fidelity=self.fidelity,
            min_clearance=self.min_clearance,
            min_clearance_at=self.min_clearance_at,
            estimated_cells=self.estimated_cells,
            turbulence_model=self.flow.model,
            target_yplus=self.mesh.layers.target_yplus if self.mesh.layers is not None else None,
            wall_treatment=self.extra.get("wall_treatment"),
            fluid_volume=self.extra.get("fluid_volume"),
            info={k: v for k, v in self.extra.items() if k in INFO_FIELDS},
            warm_start=self.solver.warm_start,
            stop_rule=self.solver.stop_rule,
        )
