"""Hand-made CaseSpecs for the writer's tests (until the planner provides them).

The body is a closed box-like demo shape (invented, not a real vehicle): a
slab with a flat floor at z = 0 in the body frame (x rearward, y right, z up),
a sloped nose and a sloped tail, written as an ASCII STL with two solids,
``body`` (everything but the floor) and ``floor`` (the flat underside).
"""
from __future__ import annotations

import math
from dataclasses import replace
from pathlib import Path

import numpy as np

from caseprep.contract import frames as fr
from caseprep.geometry.stl import write_stl_ascii
from caseprep.contract.manifest import Reference
from caseprep.planning.spec import (CaseSpec, Domain, Flow, Layers, MeshSpec, OrientedBox, RefinementRegion,
                           SolverSpec, Wheel)

LENGTH, WIDTH, HEIGHT = 1.0, 0.4, 0.2  # m, demo body


def body_polyhedron() -> tuple[np.ndarray, dict[str, list[tuple[int, int, int]]]]:
    """Vertices (m, body frame) and outward-oriented triangles per solid.

    Side profile (x rearward): floor from x = 0.1 to 0.9 at z = 0, nose
    ramps up to z = 0.08 at x = 0, roof at z = HEIGHT from x = 0.15 to 0.85,
    tail ramps to z = 0.08 at x = 1.
    """
    prof = [(0.1, 0.0), (0.9, 0.0), (LENGTH, 0.08), (0.85, HEIGHT), (0.15, HEIGHT), (0.0, 0.08)]  # (x, z), ccw seen from -y? see below
    n = len(prof)
    yl, yr = -WIDTH / 2, WIDTH / 2
    V = [(x, yl, z) for x, z in prof] + [(x, yr, z) for x, z in prof]
    V = np.array(V, dtype=float)
    tris = {"body": [], "floor": []}
    # side faces (polygon fan): left side y = yl has outward normal -y
    for i in range(1, n - 1):
        tris["body"].append((0, i, i + 1))          # left: check orientation below
        tris["body"].append((n, n + i + 1, n + i))  # right
    for i in range(n):
        j = (i + 1) % n
        quad = (i, j, n + j, n + i)
        solid = "floor" if i == 0 else "body"
        tris[solid].append((quad[0], quad[2], quad[1]))
        tris[solid].append((quad[0], quad[3], quad[2]))
    # fix orientation so every normal points away from the centroid
    c = V.mean(axis=0)
    for solid, ts in tris.items():
        fixed = []
        for a, b, d in ts:
            nrm = np.cross(V[b] - V[a], V[d] - V[a])
            if nrm @ (V[[a, b, d]].mean(axis=0) - c) < 0:
                a, b, d = a, d, b
            fixed.append((a, b, d))
        tris[solid] = fixed
    return V, tris


def write_body_stl(path: Path) -> Path:
    """Write the demo body as an ASCII STL with solids ``body`` and ``floor``."""
    V, tris = body_polyhedron()
    write_stl_ascii(path, [(solid, V[np.asarray(ts)]) for solid, ts in tris.items()])
    return path


def _box(name: str, origin_g, axes_g, lengths, P: fr.Placement) -> OrientedBox:
    """An OrientedBox given in ground coordinates, expressed in body coordinates."""
    o = P.to_body(np.asarray(origin_g, dtype=float))
    ax = P.vector_to_body(np.asarray(axes_g, dtype=float))
    return OrientedBox(name, tuple(map(float, o)), tuple(tuple(map(float, a)) for a in ax), tuple(map(float, lengths)))


def make_spec(
    case_id: str = "demo-0001",
    *,
    beta_deg: float = 0.0,
    yaw_mode: str = "crosswind",
    ground: str = "moving",
    speed: float = 20.0,
    rh_front: float = 0.04,
    rh_rear: float = 0.06,
    base_cell: float = 0.1,
    surface_levels: tuple[int, int] = (2, 2),
    layers: bool = True,
    n_procs: int = 1,
    n_iterations: int = 20,
    model: str = "kOmegaSST",
    wheels: tuple[Wheel, ...] = (),
    extra_solids: tuple[str, ...] = (),
) -> CaseSpec:
    """A small smoke-sized case around the demo body (SI units, body frame)."""
    beta = math.radians(beta_deg)
    P = fr.place_body([0.1, 0.0, 0.0], [0.9, 0.0, 0.0], rh_front, rh_rear, beta, yaw_mode)
    w_g = fr.wind_direction_ground(beta, yaw_mode)
    xw = np.array([w_g[0], w_g[1], 0.0]) / math.hypot(w_g[0], w_g[1])
    zg = np.array([0.0, 0.0, 1.0])
    yw = np.cross(zg, xw)
    # domain in ground axes, aligned with the horizontal wind: 1 L upstream,
    # 2 L downstream, ±1 L sideways, 1.2 L high (smoke size, not for results)
    c = P.to_ground(np.array([0.5, 0.0, 0.1]))
    c[2] = 0.0
    L1, L2, L3 = 3.6, 2.0, 1.2
    origin = c - 1.2 * xw - 0.5 * L2 * yw
    dom = _box("domain", origin, [xw, yw, zg], (L1, L2, L3), P)
    cells = tuple(int(math.ceil(v / base_cell - 1e-9)) for v in (L1, L2, L3))
    near = _box("near_body", c - 0.7 * xw - 0.4 * yw, [xw, yw, zg], (1.8, 0.8, 0.4), P)
    air = fr.air_speed(speed, beta, yaw_mode)
    u_in = air * P.vector_to_body(w_g)
    u_g = P.vector_to_body(fr.ground_velocity_ground(speed, beta, yaw_mode))
    nu, rho, I, ls = 1.5e-5, 1.225, 0.01, 0.1
    k = 1.5 * (air * I) ** 2          # k = 3/2 (U I)^2 (common practice, no source)
    omega = math.sqrt(k) / (0.09**0.25 * ls)  # ω = √k / (Cμ^¼ l) (common practice, no source)
    flow = Flow(tuple(map(float, u_in)), tuple(map(float, u_g)), air, rho, nu, 0.0, model, I, ls, k, omega, k / omega)
    mesh = MeshSpec(
        base_cell=base_cell,
        surface_levels=surface_levels,
        feature_level=surface_levels[1],
        regions=(RefinementRegion(near, 1),),
        layers=Layers(2, 0.004, 1.3, 30.0) if layers else None,
        location_in_mesh=tuple(map(float, P.to_body(origin + 0.213 * xw + 0.317 * L2 * yw + 0.813 * L3 * zg))),
    )
    split = (n_procs, 1, 1)
    ref = Reference(area=WIDTH * HEIGHT, length=LENGTH, wheelbase=0.8, front_axle=(0.1, 0.0, 0.05),
                    rear_axle=(0.9, 0.0, 0.05), moment_point=(0.5, 0.0, 0.0), rho=rho, nu=nu, speed=air)
    return CaseSpec(
        case_id=case_id,
        variant="demo",
        params={"ride_height_front": rh_front, "ride_height_rear": rh_rear, "yaw_deg": beta_deg, "speed": speed},
        yaw_mode=yaw_mode,
        placement=P,
        geometry="body.stl",
        geometry_solid_names=("body", "floor") + tuple(extra_solids),
        flow=flow,
        wheels=tuple(wheels),
        domain=Domain(dom, cells, ground, blockage=WIDTH * HEIGHT / (L2 * L3)),
        mesh=mesh,
        solver=SolverSpec(n_iterations=n_iterations, write_interval=n_iterations, n_procs=n_procs, split=split),
        reference=ref,
        fidelity="smoke",
        min_clearance=rh_front,
        min_clearance_at=(0.1, 0.0, 0.0),
        estimated_cells=30_000,
    )


def demo_wheel(name: str = "wheel_fl", geometry: str | None = "wheel_fl.stl", speed: float = 20.0) -> Wheel:
    """A demo wheel whose contact point moves with a ground moving at ``speed``
    (m/s) along body +x: bottom point r = (0, 0, −R), axis a = (0, −1, 0),
    ω a × r = (ωR, 0, 0), so ω = V / R (rad/s)."""
    r = 0.05
    return Wheel(name=name, patch=name, centre=(0.2, -0.25, 0.0), axis=(0.0, -1.0, 0.0), radius=r,
                 omega=speed / r, geometry=geometry)


def with_solver(spec: CaseSpec, **kw) -> CaseSpec:
    return replace(spec, solver=replace(spec.solver, **kw))


def write_box_stl(path: Path, lo, hi, solid: str) -> Path:
    """A closed axis-aligned box (m, body frame) as a one-solid ASCII STL,
    outward normals — a stand-in demo 'wheel' for mesher tests."""
    lo, hi = np.asarray(lo, float), np.asarray(hi, float)
    c = np.array([[x, y, z] for x in (lo[0], hi[0]) for y in (lo[1], hi[1]) for z in (lo[2], hi[2])])
    quads = [(0, 1, 3, 2), (4, 6, 7, 5), (0, 4, 5, 1), (2, 3, 7, 6), (0, 2, 6, 4), (1, 5, 7, 3)]
    centre = c.mean(axis=0)
    out = [f"solid {solid}"]
    for q in quads:
        for a, b, d in ((q[0], q[1], q[2]), (q[0], q[2], q[3])):
            n = np.cross(c[b] - c[a], c[d] - c[a])
            if n @ (c[[a, b, d]].mean(axis=0) - centre) < 0:
                b, d = d, b
                n = -n
            n = n / np.linalg.norm(n)
            out += ["facet normal {:.9g} {:.9g} {:.9g}".format(*n), "outer loop"]
            out += ["vertex {:.9g} {:.9g} {:.9g}".format(*c[k]) for k in (a, b, d)]
            out += ["endloop", "endfacet"]
    out.append(f"endsolid {solid}")
    path.write_text("\n".join(out) + "\n")
    return path
