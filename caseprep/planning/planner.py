"""Planner: validated config → one :class:`~caseprep.planning.spec.CaseSpec` per sweep point.

Reads each geometry once (:mod:`caseprep.geometry.stl`), expands the sweep
(:mod:`caseprep.planning.points`), places the body (:func:`caseprep.contract.frames.place_body`),
measures the ground clearance on the precomputed convex-hull vertices, sizes
domain and mesh (:mod:`caseprep.planning.domain`) and fills in flow, wheels, solver
and reference values. All vectors are in the mesh frame = body frame
(x rearward, y right, z up, m). Nothing is written.

Clearance rule: the minimum ground clearance of a case is the smallest
height above the ground of the body's convex-hull vertices (the minimum of a
linear function over the surface lies at a vertex, and over the vertices at
a hull vertex). Wheels (separate wheel files or wheel solids) are excluded:
they touch the ground. A case whose clearance is ≤ 0 (touching or
penetrating) is refused, and so is a gap thinner than ``mesh.gap_cells``
cells of the finest level the preset allows (see :mod:`caseprep.planning.domain`).
"""
from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np

from caseprep.config.load import load_config
from caseprep.config.schema import EMPTY_GEOMETRY, Config
from caseprep.planning.domain import (BodyExtent, DomainSizing, decomposition_split, mesh_settings, plan_domain,
                                      plan_empty_section)
from caseprep.contract.errors import UserError, UserErrors
from caseprep.contract.frames import (Placement, air_speed, body_to_ground_rotation, ground_velocity_ground, place_body,
                     wind_direction_ground)
from caseprep.geometry.body import BodyGeometry, analyse
from caseprep.geometry.checks import surface_problems
from caseprep.geometry.hull import hull_points, hull_projected_area
from caseprep.geometry.stl import LENGTH_UNITS, read_stl
from caseprep.contract.manifest import Reference
from caseprep.planning.physics import air_density, inlet_turbulence, isa_troposphere, sutherland_viscosity
from caseprep.planning.spec import CaseSpec, Flow, SolverSpec, Wheel
from caseprep.planning.points import SweepPoint, check_case_count, expand_collect


@dataclass(frozen=True)
class Air:
    """Resolved free-stream properties: T (K), p (Pa), ρ (kg/m³), μ (Pa s), ν (m²/s)."""

    temperature: float
    pressure: float
    rho: float
    mu: float
    nu: float


def air_properties(cfg: Config) -> Air:
    """T and p from the config (or ISO 2533 at ``air.altitude``, default sea
    level); ρ = p/(R T) and μ from Sutherland's law unless given; ν = μ/ρ
    unless ``air.kinematic_viscosity`` is given."""
    a = cfg.air
    T0, p0 = isa_troposphere(a.altitude or 0.0)
    T = a.temperature if a.temperature is not None else T0
    p = a.pressure if a.pressure is not None else p0
    rho = a.density if a.density is not None else air_density(p, T)
    mu = a.viscosity if a.viscosity is not None else sutherland_viscosity(T)
    nu = a.kinematic_viscosity if a.kinematic_viscosity is not None else mu / rho
    return Air(float(T), float(p), float(rho), float(mu), float(nu))


def wheel_omega(centre, axis, contact, ground_velocity) -> float:
    """Spin Ω (rad/s, right-hand rule about the unit ``axis``) that makes the
    contact point move with the ground: Ω a × (c_p − c) = v_g for the part of
    v_g the wheel can produce (perpendicular to the axis); least squares
    Ω = v_g · (a × r) / |a × r|², r = c_p − c. Points in m (body frame),
    velocity in m/s (body axes)."""
    a = np.asarray(axis, float)
    a = a / np.linalg.norm(a)
    r = np.asarray(contact, float) - np.asarray(centre, float)
    t = np.cross(a, r)
    den = float(t @ t)
    if den == 0.0:
        raise ValueError("expected the contact point off the wheel axis")
    return float(np.asarray(ground_velocity, float) @ t / den)


@dataclass(frozen=True)
class VariantGeometry:
    """One variant's geometry facts for all its cases."""

    name: str
    source: str
    length_unit: str
    body: BodyGeometry
    body_solids: tuple[str, ...]
    extent_hull: np.ndarray  # hull of body + wheel files (domain sizing, blockage)


@dataclass(frozen=True)
class PlanResult:
    """The cases that could be planned, the problems (refused cases, bad
    geometry) and the warnings (``case_id: text``)."""

    cases: tuple[CaseSpec, ...]
    problems: tuple[UserError, ...]
    warnings: tuple[str, ...]


def load_geometries(cfg: Config) -> tuple[dict[str, VariantGeometry], dict[str, np.ndarray], list[UserError]]:
    """Read and check every variant's geometry and every wheel file once.
    Returns (variants, wheel hull points by wheel name, problems)."""
    errs: list[UserError] = []
    wheel_solids = tuple(w.solid for w in cfg.body.wheels if w.solid)
    wheel_pts: dict[str, np.ndarray] = {}
    for i, w in enumerate(cfg.body.wheels):
        if w.geometry:
            key = f"body.wheels[{i}].geometry"
            try:
                s = read_stl(w.geometry, cfg.body.length_unit, default_name=w.name)
            except UserError as e:
                errs.append(UserError(str(e) + f" (config {cfg.file} at {key})"))
                continue
            g = analyse(s)
            errs.extend(surface_problems(g.report, w.geometry, key, cfg.body.length_unit))
            wheel_pts[w.name] = g.hull
    out: dict[str, VariantGeometry] = {}
    for name, v in cfg.variants.items():
        if v.geometry == EMPTY_GEOMETRY:
            continue  # empty test section: nothing to read
        unit = cfg.length_unit(name)
        key = f"variants.{name}.geometry"
        try:
            s = read_stl(v.geometry, unit, default_name=name)
        except UserError as e:
            errs.append(UserError(str(e) + f" (config {cfg.file} at {key})"))
            continue
        missing = [n for n in wheel_solids if n not in s.solid_names]
        if missing:
            errs.append(UserError(expected=f"the wheel solids {', '.join(missing)} in the geometry", got=f"solids {', '.join(s.solid_names)}",
                                  file=v.geometry, key=key, fix="name the solids in the STL or fix body.wheels[].solid"))
        g = analyse(s, exclude_from_clearance=wheel_solids)
        errs.extend(surface_problems(g.report, v.geometry, key, unit))
        (y0, y1) = g.bounds[0][1], g.bounds[1][1]
        if min(-y0, y1) < 1e-3 * max(y1 - y0, 1e-9):
            errs.append(UserError(expected="a whole body spanning both sides of y = 0", got=f"y from {y0:.4g} m to {y1:.4g} m",
                                  file=v.geometry, key=key,
                                  fix="half models with a symmetry plane are not supported: mirror the geometry to a full body "
                                      "(and draw it with y = 0 on the centre line)"))
        body_solids = tuple(n for n in s.solid_names if n not in wheel_solids) or s.solid_names
        allp = [g.hull] + list(wheel_pts.values())
        if wheel_solids:
            allp.append(hull_points(s.triangles.reshape(-1, 3)))
        ext = hull_points(np.vstack(allp)) if len(allp) > 1 else g.hull
        out[name] = VariantGeometry(name, v.geometry, unit, g, body_solids, ext)
    return out, wheel_pts, errs


def _vec(v) -> tuple[float, float, float]:
    return tuple(float(x) for x in v)


def _reference_geometry(cfg: Config):
    b = cfg.body
    has_ground = cfg.ground.mode != "none"
    fa = b.front_axle if b.front_axle is not None else (0.0, 0.0, 0.0)
    ra = b.rear_axle if b.rear_axle is not None else (0.0, 0.0, 0.0)
    wb = b.wheelbase if b.wheelbase is not None else (ra[0] - fa[0] if has_ground else None)
    lref = b.reference_length if b.reference_length is not None else wb
    if wb is None:
        wb = lref
    mp = b.moment_point if b.moment_point is not None else tuple(0.5 * (np.asarray(fa) + np.asarray(ra)))
    return _vec(fa), _vec(ra), float(wb), float(lref), _vec(mp)


def plan_all(cfg: Config) -> PlanResult:
    """Plan every case, collecting problems instead of stopping at the first."""
    problems: list[UserError] = []
    warnings: list[str] = []
    too_many = check_case_count(cfg)  # before reading anything or making any point
    if too_many is not None:
        return PlanResult((), (too_many,), ())
    geoms, _, gerrs = load_geometries(cfg)
    problems.extend(gerrs)
    points, perrs = expand_collect(cfg)
    problems.extend(perrs)
    air = air_properties(cfg)
    settings = mesh_settings(cfg.mesh.fidelity, cfg.mesh.base_cell, cfg.mesh.surface_levels, cfg.mesh.feature_level,
                             cfg.mesh.max_level, cfg.mesh.gap_cells, cfg.mesh.layers, cfg.mesh.layer_expansion,
                             cfg.mesh.target_yplus)
    fa, ra, wb, lref, mp = _reference_geometry(cfg)
    baseline = next(iter(cfg.variants))
    cases: list[CaseSpec] = []
    cache = _RotationCache()
    for pt in points:
        empty = cfg.variants[pt.variant].geometry == EMPTY_GEOMETRY
        if not empty and (pt.variant not in geoms or (cfg.body.reference_area == "auto" and baseline not in geoms)):
            continue
        try:
            if empty:
                spec, notes = plan_empty_case(cfg, pt, air)
            else:
                spec, notes = plan_case(cfg, pt, geoms, air, settings, (fa, ra, wb, lref, mp), cache)
        except UserErrors as e:
            problems.extend(e.errors)
            continue
        except UserError as e:
            problems.append(e)
            continue
        cases.append(spec)
        warnings.extend(f"{spec.case_id}: {n}" for n in notes)
    return PlanResult(tuple(cases), tuple(problems), tuple(warnings))


class _RotationCache:
    """Results that depend on a variant's geometry and the body's rotation
    only (not on its translation), so a sweep computes them once per distinct
    (variant, pitch, yaw) instead of once per case: the lowest hull vertex
    along the ground normal, the frontal area normal to the wind and the
    extent of the body along the domain axes. Keys are the rotation's unit
    vectors rounded to 1e-12 (cases at the same pitch and yaw reach them by
    different round-off), so the results equal per-case computation to
    round-off."""

    def __init__(self) -> None:
        self._d: dict = {}

    @staticmethod
    def _key(tag: str, variant: str, a: np.ndarray) -> tuple:
        return (tag, variant, np.round(np.asarray(a, dtype=float), 12).tobytes())

    def columns(self, name: str, points: np.ndarray) -> np.ndarray:
        """``points`` (N×3) as three contiguous rows, made once per name.
        Projections are then plain multiply-adds on contiguous arrays: a
        threaded BLAS matrix product stalls for milliseconds on a busy
        machine (measured 20× slower here on 500 k points)."""
        k = ("columns", name)
        if k not in self._d:
            self._d[k] = np.ascontiguousarray(np.asarray(points, dtype=float).T)
        return self._d[k]

    def get(self, tag: str, variant: str, a: np.ndarray, compute):
        k = self._key(tag, variant, a)
        if k not in self._d:
            self._d[k] = compute()
        return self._d[k]


def _wind(cfg: Config, pt: SweepPoint, P: Placement) -> tuple[float, np.ndarray, np.ndarray]:
    """(resultant air speed m/s, relative-wind direction (unit) and ground
    velocity (m/s, zero unless the ground moves), both in body axes) of a
    point placed by ``P``."""
    beta, mode = float(np.radians(pt.yaw_deg)), cfg.sweep.yaw_mode
    U = air_speed(pt.speed, beta, mode)
    w_body = P.vector_to_body(wind_direction_ground(beta, mode))
    vg_body = P.vector_to_body(ground_velocity_ground(pt.speed, beta, mode)) if cfg.ground.mode == "moving" else np.zeros(3)
    return U, w_body, vg_body


def _flow(cfg: Config, air: Air, U: float, w_body: np.ndarray, vg_body: np.ndarray, lref: float) -> Flow:
    """The case's flow: inlet velocity U·w (m/s), ground velocity, air, model
    and inlet turbulence (intensity, length scale ``turbulence_length_scale``
    or 1e-3 × the reference length ``lref``, m)."""
    ell = cfg.solver.turbulence_length_scale or 1e-3 * lref
    k, om, nut = inlet_turbulence(U, cfg.solver.turbulence_intensity, ell)
    return Flow(inlet_velocity=_vec(U * w_body), ground_velocity=_vec(vg_body), air_speed=float(U), rho=air.rho,
                nu=air.nu, p_ref=0.0, model=cfg.solver.turbulence_model, intensity=cfg.solver.turbulence_intensity,
                length_scale=float(ell), k=k, omega=om, nut=nut)


def _solver(cfg: Config, domain, preset_iterations: int) -> SolverSpec:
    """Iterations (the config's, else the preset's), write interval and the
    rank split of the domain box."""
    iters = cfg.solver.iterations or preset_iterations
    corners = domain.box.corners()
    split = decomposition_split(cfg.solver.ranks, corners.max(axis=0) - corners.min(axis=0))
    return SolverSpec(n_iterations=int(iters), write_interval=int(cfg.solver.write_interval or iters),
                      n_procs=int(cfg.solver.ranks), split=split)


def _place(cfg: Config, pt: SweepPoint, g: BodyGeometry, cache: _RotationCache):
    """(placement, smallest clearance m, its body point, its % of the length
    from the nose, a description) of a point; with a ground the body stands
    on its ride heights (refused when it touches the ground), without one it
    is centred and pitched about its middle (clearance None)."""
    mode = cfg.sweep.yaw_mode
    beta = float(np.radians(pt.yaw_deg))
    if cfg.ground.mode == "none":
        th = float(np.radians(pt.pitch_deg))
        R = body_to_ground_rotation(th, beta, mode)
        c = 0.5 * (np.asarray(g.bounds[0]) + np.asarray(g.bounds[1]))
        return Placement(rotation=R, translation=-R @ c, pitch=th, beta=beta, yaw_mode=mode), None, None, None, ""
    P = place_body(np.asarray(cfg.body.ride_height_point_front, float), np.asarray(cfg.body.ride_height_point_rear, float),
                   pt.ride_height_front, pt.ride_height_rear, beta, mode)
    nz = P.rotation[2]

    def lowest():
        X = cache.columns(pt.variant + "/hull", g.hull)
        h = X[0] * nz[0] + X[1] * nz[1] + X[2] * nz[2]  # no BLAS: see _RotationCache
        j = int(np.argmin(h))
        return j, float(h[j])

    i, h_min = cache.get("lowest", pt.variant, nz, lowest)
    clearance = h_min + float(P.translation[2])
    at = g.hull[i]
    pct = float(100.0 * (at[0] - g.bounds[0][0]) / g.length)
    where = f"body point ({at[0]:.4f}, {at[1]:.4f}, {at[2]:.4f}) m, {pct:.0f} % of the length from the nose"
    if clearance <= 0.0:
        raise UserError(expected="a body clear of the ground",
                        got=f"clearance {clearance * 1e3:.3f} mm at {where} in case {pt.case_id}", file=cfg.file,
                        key=pt.source, fix="the body touches or penetrates the ground: raise the ride height or reduce the pitch")
    h_max = max(pt.ride_height_front, pt.ride_height_rear)
    if h_max > g.length:
        raise UserError(expected="ride heights up to one body length (the ground effect this tool studies)",
                        got=f"{h_max:g} m for a body {g.length:.4g} m long in case {pt.case_id}", file=cfg.file,
                        key=pt.source,
                        fix='ride heights are in m (not mm); for a body far from any ground use ground.mode = "none"')
    return P, clearance, at, pct, where


def _wheels(cfg: Config, P: Placement, vg_body: np.ndarray, notes: list[str]) -> tuple[list[Wheel], dict[str, str]]:
    """The wheels (rotation rate from the ground velocity ``vg_body`` when
    the ground moves) and their geometry sources; a note for each wheel
    whose centre is not within 2 % of its radius above the ground."""
    wheels, sources = [], {}
    for w in cfg.body.wheels:
        c = np.asarray(w.centre, float)
        a = np.asarray(w.axis, float) / np.linalg.norm(w.axis)
        h = float(P.height_above_ground(c))
        contact = c - h * P.ground_normal_body
        omega = wheel_omega(c, a, contact, vg_body) if cfg.ground.mode == "moving" else 0.0
        off = h - w.radius
        if abs(off) > 0.02 * w.radius:
            notes.append(f"wheel {w.name}: centre {h * 1e3:.2f} mm above the ground for a radius of {w.radius * 1e3:.2f} mm "
                         f"({'gap' if off > 0 else 'overlap'} {abs(off) * 1e3:.2f} mm at the contact patch)")
        wheels.append(Wheel(name=w.name, patch=w.solid or w.name, centre=_vec(c), axis=_vec(a), radius=float(w.radius),
                            omega=float(omega), geometry=f"wheel_{w.name}.stl" if w.geometry else None))
        if w.geometry:
            sources[w.name] = w.geometry
    return wheels, sources


def plan_case(cfg: Config, pt: SweepPoint, geoms: dict[str, VariantGeometry], air: Air, settings, refgeo,
              cache: _RotationCache | None = None) -> tuple[CaseSpec, list[str]]:
    """Plan one point; raises UserError if the case must be refused."""
    cache = cache if cache is not None else _RotationCache()
    fa, ra, wb, lref, mp = refgeo
    vg = geoms[pt.variant]
    g = vg.body
    ground = cfg.ground.mode
    mode = cfg.sweep.yaw_mode
    cid = pt.case_id
    notes: list[str] = []
    P, clearance, at, pct, where = _place(cfg, pt, g, cache)
    U, w_body, vg_body = _wind(cfg, pt, P)
    frontal_wind = cache.get("frontal", pt.variant, w_body, lambda: hull_projected_area(vg.extent_hull, w_body))

    def extent_range(axes: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        def compute():
            X = cache.columns(pt.variant + "/extent", vg.extent_hull)
            q = [X[0] * a[0] + X[1] * a[1] + X[2] * a[2] for a in axes]
            return np.array([v.min() for v in q]), np.array([v.max() for v in q])
        return cache.get("extent", pt.variant, axes, compute)

    body = BodyExtent(points=vg.extent_hull, length=g.length, area=g.area, frontal_area=frontal_wind,
                      min_clearance=clearance,
                      ride_heights=(pt.ride_height_front, pt.ride_height_rear) if ground != "none" else None,
                      extent_range=extent_range)
    d = cfg.domain
    sizing = DomainSizing(upstream=d.upstream, downstream=d.downstream, width=d.width, height=d.height,
                          target_blockage=d.target_blockage, max_blockage=d.max_blockage)
    dp = plan_domain(body, P, ground, sizing, settings, pt.mesh_level, U, air.nu)
    if dp.problems:
        extra = f" (at {where})" if where else ""
        msgs = [UserError(f"case {cid} ({cfg.file} at {pt.source}): {what}{extra if 'clearance' in what else ''}", fix=fix,
                          file=cfg.file, key=pt.source)
                for what, fix in dp.problems]
        raise msgs[0] if len(msgs) == 1 else UserErrors(msgs)
    notes.extend(dp.warnings)
    flow = _flow(cfg, air, U, w_body, vg_body, lref)
    wheels, wheel_sources = _wheels(cfg, P, vg_body, notes)
    solver = _solver(cfg, dp.domain, settings.preset.iterations)
    area = reference_area(cfg, pt.variant, geoms)
    ref = Reference(area=area, length=lref, wheelbase=wb, front_axle=fa, rear_axle=ra, moment_point=mp, rho=air.rho,
                    nu=air.nu, speed=float(U), p_ref=0.0,
                    cog=_vec(cfg.body.centre_of_gravity) if cfg.body.centre_of_gravity is not None else None)
    extra = {
        "geometry_source": vg.source,
        "geometry_length_unit": vg.length_unit,
        "geometry_scale_to_m": LENGTH_UNITS[vg.length_unit],
        "wheel_sources": wheel_sources,
        # what the writer reads: shared file name → source path and → scale to metres
        "geometry_sources": {f"{pt.variant}.stl": str(vg.source),
                             **{f"wheel_{n}.stl": str(p) for n, p in wheel_sources.items()}},
        "geometry_scales": {f"{pt.variant}.stl": LENGTH_UNITS[vg.length_unit],
                            **{f"wheel_{n}.stl": LENGTH_UNITS[cfg.body.length_unit] for n in wheel_sources}},
        "wheel_length_unit": cfg.body.length_unit,
        "air": {"temperature": air.temperature, "pressure": air.pressure, "mu": air.mu},
        "frontal_area_wind": frontal_wind,
        "min_clearance_x_percent": pct,
        "warnings": list(notes),
        # what the sweep report pictures ([report]; postproc reads it from the manifest)
        "report": cfg.report.model_dump(exclude_none=True),
    }
    spec = CaseSpec(
        case_id=cid, variant=pt.variant, params=pt.params(), yaw_mode=mode, placement=P, geometry=f"{pt.variant}.stl",
        geometry_solid_names=vg.body_solids, flow=flow, wheels=tuple(wheels), domain=dp.domain, mesh=dp.mesh, solver=solver,
        reference=ref, fidelity=cfg.mesh.fidelity, min_clearance=clearance,
        min_clearance_at=_vec(at) if at is not None else None, estimated_cells=dp.estimated_cells, extra=extra)
    return spec, notes


def plan_empty_case(cfg: Config, pt: SweepPoint, air: Air) -> tuple[CaseSpec, list[str]]:
    """Plan one point of an empty test section (a variant with ``geometry =
    "none"``): no body; the ground (moving or stationary) starts at the inlet.

    The "body frame" of the case is the ground frame turned by the model yaw
    (crosswind: the ground frame itself; yawed-model: turned by −β), so the
    ground moves along its x axis in crosswind and with the air in
    yawed-model, as with a body. The domain is ``domain.length`` ×
    ``domain.width`` × ``domain.height`` (m) aligned with the wind, the base
    cell ``mesh.base_cell`` (m), optionally graded from
    ``mesh.ground_first_cell`` (m) on the ground
    (:func:`caseprep.planning.domain.plan_empty_section`). Reference values: area =
    the inlet face (width × height, m²) unless ``body.reference_area`` is a
    number, length = ``domain.length`` unless ``body.reference_length`` is
    given (there is no body to take them from).
    """
    mode = cfg.sweep.yaw_mode
    beta = float(np.radians(pt.yaw_deg))
    R = body_to_ground_rotation(0.0, beta, mode)
    P = Placement(rotation=R, translation=np.zeros(3), pitch=0.0, beta=beta, yaw_mode=mode)
    d, m = cfg.domain, cfg.mesh
    dp = plan_empty_section(placement=P, length=d.length, width=d.width, height=d.height, base_cell=m.base_cell,
                            mesh_level=pt.mesh_level, ground=cfg.ground.mode, first_cell=m.ground_first_cell,
                            lead_in=float(d.lead_in or 0.0))
    U, w_body, vg_body = _wind(cfg, pt, P)
    lref = cfg.body.reference_length if cfg.body.reference_length is not None else float(d.length)
    flow = _flow(cfg, air, U, w_body, vg_body, lref)
    solver = _solver(cfg, dp.domain, mesh_settings(m.fidelity).preset.iterations)
    ra = cfg.body.reference_area
    area = float(ra) if not isinstance(ra, str) else float(d.width * d.height)
    origin = _vec(P.ground_point_body)
    mp = _vec(cfg.body.moment_point) if cfg.body.moment_point is not None else origin
    ref = Reference(area=area, length=float(lref), wheelbase=float(lref), front_axle=origin, rear_axle=origin, moment_point=mp,
                    rho=air.rho, nu=air.nu, speed=float(U), p_ref=0.0, cog=None)
    extra = {
        "empty_section": True,
        # the ground's leading edge: e1 = lead_in (m) from the inlet, along the wind
        "ground_leading_edge": float(d.lead_in or 0.0),
        # first background cell on the ground (m), after the mesh level's refinement
        "ground_first_cell": None if m.ground_first_cell is None else float(m.ground_first_cell / 2.0 ** (0.5 * pt.mesh_level)),
        "air": {"temperature": air.temperature, "pressure": air.pressure, "mu": air.mu},
        "warnings": [],
    }
    spec = CaseSpec(
        case_id=pt.case_id, variant=pt.variant, params=pt.params(), yaw_mode=mode, placement=P, geometry="",
        geometry_solid_names=(), flow=flow, wheels=(), domain=dp.domain, mesh=dp.mesh, solver=solver, reference=ref,
        fidelity=m.fidelity, min_clearance=None, min_clearance_at=None, estimated_cells=dp.estimated_cells, extra=extra)
    return spec, []


def reference_area(cfg: Config, variant: str, geoms: dict[str, VariantGeometry]) -> float:
    """Reference area (m²): a number as given; ``body.reference_area = "auto"``
    → the frontal area (shadow along body +x, zero pitch and yaw) of the
    first listed variant, the same for all variants so their coefficients
    compare; ``variants.X.reference_area = "auto"`` → that variant's own."""
    own = cfg.variants[variant].reference_area
    if own is not None:
        return float(geoms[variant].body.frontal_area) if own == "auto" else float(own)
    if cfg.body.reference_area == "auto":
        return float(geoms[next(iter(cfg.variants))].body.frontal_area)
    return float(cfg.body.reference_area)


def plan(cfg: Config) -> list[CaseSpec]:
    """All cases of the sweep; raises UserError/UserErrors if any problem."""
    r = plan_all(cfg)
    if r.problems:
        raise r.problems[0] if len(r.problems) == 1 else UserErrors(r.problems)
    return list(r.cases)


def check(path: str | Path) -> PlanResult:
    """Validate a config file, its geometry and every case; never raises for
    user mistakes: everything found is in ``problems``."""
    try:
        cfg = load_config(path)
    except UserErrors as e:
        return PlanResult((), tuple(e.errors), ())
    except UserError as e:
        return PlanResult((), (e,), ())
    return plan_all(cfg)


TABLE_COLUMNS = ("case", "variant", "rh_front_mm", "rh_rear_mm", "pitch_deg", "yaw_deg", "speed_m_s", "level",
                 "clearance_mm", "at_x_pct", "blockage_pct", "cells_est")


def table_rows(cases) -> list[dict]:
    """One row per case for ``caseprep plan`` (keys :data:`TABLE_COLUMNS`,
    ride heights and clearance in mm, speed m/s, angles deg)."""
    rows = []
    for c in cases:
        p = c.params
        mm = (lambda v: None if v is None else round(v * 1e3, 3))
        rows.append({
            "case": c.case_id, "variant": c.variant, "rh_front_mm": mm(p["ride_height_front"]),
            "rh_rear_mm": mm(p["ride_height_rear"]), "pitch_deg": round(p["pitch_deg"], 4), "yaw_deg": p["yaw_deg"],
            "speed_m_s": p["speed"], "level": p["mesh_level"], "clearance_mm": mm(c.min_clearance),
            "at_x_pct": None if c.extra.get("min_clearance_x_percent") is None else round(float(c.extra["min_clearance_x_percent"]), 1),
            "blockage_pct": round(100 * c.domain.blockage, 3), "cells_est": c.estimated_cells,
        })
    return rows
