"""Planner: validated config → one :class:`~caseprep.planning.spec.CaseSpec` per sweep point.

Reads each geometry once (:mod:`caseprep.planning.geometries`), expands the sweep
(:mod:`caseprep.planning.points`), places the body (:func:`caseprep.contract.frames.place_body`),
measures the ground clearance on the precomputed convex-hull vertices, sizes
domain and mesh (:mod:`caseprep.planning.domain`, :mod:`caseprep.planning.meshsizing`) and fills in flow, wheels, solver
and reference values. All vectors are in the mesh frame = body frame
(x rearward, y right, z up, m). Nothing is written.

Clearance rule: the minimum ground clearance of a case is the smallest
height above the ground of the body's convex-hull vertices (the minimum of a
linear function over the surface lies at a vertex, and over the vertices at
a hull vertex). Wheels (separate wheel files or wheel solids) are excluded:
they touch the ground. A case whose clearance is ≤ 0 (touching or
penetrating) is refused, and so is a gap thinner than ``mesh.gap_cells``
cells of the finest level the preset allows (see :mod:`caseprep.planning.meshsizing`).
"""
from __future__ import annotations

import hashlib
import json
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from caseprep.contract.limits import MAX_RIDE_HEIGHT_LENGTHS
from caseprep.config.load import load_config
from caseprep.config.schema import EMPTY_GEOMETRY, Config
from caseprep.contract.walls import WALL_TREATMENTS
from caseprep.planning.domain import BodyExtent, DomainSizing, plan_domain
from caseprep.planning.empty_section import plan_empty_section
from caseprep.planning.meshsizing import LEVEL_FACTOR, mesh_settings
from caseprep.contract.errors import UserError, UserErrors
from caseprep.contract.frames import Placement, body_to_ground_rotation, place_body
from caseprep.geometry.body import BodyGeometry
from caseprep.geometry.hull import hull_projected_area
from caseprep.geometry.stl import LENGTH_UNITS
from caseprep.contract.manifest import Reference
from caseprep.planning.spec import CaseSpec, Wheel
from caseprep.planning.wheels import place_wheel, rolling_omega
from caseprep.planning.points import SweepPoint, check_case_count, expand_collect
from caseprep.planning.geometries import VariantGeometry, load_geometries
from caseprep.planning.flowsetup import (STRONG_DECAY, Air, air_properties, flow_spec, flow_turbulence, mach_note,
                                        point_wind, solver_spec, vec3)


@dataclass(frozen=True)
class PlanResult:
    """The cases that could be planned, the problems (refused cases, bad
    geometry) and the warnings (``case_id: text``)."""

    cases: tuple[CaseSpec, ...]
    problems: tuple[UserError, ...]
    warnings: tuple[str, ...]


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
    return vec3(fa), vec3(ra), float(wb), float(lref), vec3(mp)


def wall_treatment_name(cfg: Config) -> str:
    """The wall treatment of the study: ``laminar`` for laminar flow, else
    ``mesh.wall_treatment`` (see :mod:`caseprep.contract.walls`)."""
    return "laminar" if cfg.solver.turbulence_model == "laminar" else cfg.mesh.wall_treatment


def config_mesh_settings(cfg: Config):
    """The mesh preset of ``cfg`` with its ``[mesh]`` overrides."""
    m = cfg.mesh
    return mesh_settings(m.fidelity, base_cell=m.base_cell, surface_levels=m.surface_levels, feature_level=m.feature_level,
                         max_level=m.max_level, gap_cells=m.gap_cells, layers=m.layers, layer_expansion=m.layer_expansion,
                         target_yplus=m.target_yplus, wall_treatment=wall_treatment_name(cfg))


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
    settings = config_mesh_settings(cfg)
    fa, ra, wb, lref, mp = _reference_geometry(cfg)
    baseline = next(iter(cfg.variants))
    cases: list[CaseSpec] = []
    cache = _RotationCache()
    for pt in points:
        empty = cfg.variants[pt.variant].geometry == EMPTY_GEOMETRY
        if not empty and (pt.variant not in geoms or (cfg.body.reference_area == "auto" and baseline not in geoms)):
            continue
        if not empty and any(w.name not in geoms[pt.variant].wheel_hulls for w in cfg.body.wheels):
            continue  # a wheel's geometry could not be read: already a problem
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
    problems.extend(similarity_problems(cfg, cases))
    return PlanResult(tuple(cases), tuple(problems), tuple(warnings))


def _lengths(c: CaseSpec) -> dict[str, float]:
    """Every cell length of a case's mesh (m): the background cell along
    each domain axis, the cell of each refinement region (with its splits
    along the floor normal) and the first prism layer."""
    d = c.domain
    out = {f"background cell along e{i + 1}": float(d.box.lengths[i] / d.cells[i]) for i in range(3)}
    for r in c.mesh.regions:
        out[f"cell of region {r.box.name}"] = c.mesh.base_cell / 2**r.level
        if r.z_splits:
            out[f"split cell of region {r.box.name}"] = c.mesh.base_cell / 2**(r.level + r.z_splits)
    for i, lv in enumerate(c.mesh.surface_levels):
        out[f"surface cell ({'min' if i == 0 else 'max'} level)"] = c.mesh.base_cell / 2**lv
    if c.mesh.layers is not None:
        out["first prism layer"] = c.mesh.layers.first_cell_height
        out["prism layer count"] = float(c.mesh.layers.n_layers)
    return out


def similarity_problems(cfg: Config, cases: list[CaseSpec], rel_tol: float = 1e-6) -> list[UserError]:
    """The mesh levels of one point must be geometrically similar: every
    cell length of level m equals that of the coarsest level times
    (1/√2)^(m − m0) (layer counts equal), so that the grid convergence index
    may assume h ∝ (1/√2)^m. Returns one UserError per point whose levels
    are not, naming the first length that breaks the rule (e.g. a fixed
    ``domain.width`` that is not a whole number of cells at every level)."""
    groups: dict[tuple, list[CaseSpec]] = {}
    for c in cases:
        p = dict(c.params)
        level = p.pop("mesh_level", 0)
        groups.setdefault((c.variant, json.dumps(p, sort_keys=True)), []).append((level, c))
    errs = []
    for (variant, _), items in groups.items():
        if len(items) < 2:
            continue
        items.sort(key=lambda t: t[0])
        m0, c0 = items[0]
        ref = _lengths(c0)
        for m, c in items[1:]:
            got = _lengths(c)
            for name, v0 in ref.items():
                want = v0 if name == "prism layer count" else v0 / LEVEL_FACTOR ** (m - m0)
                v = got.get(name)
                if v is None or abs(v - want) > rel_tol * abs(want):
                    key = "domain.width" if name.endswith("e2") and cfg.domain.width is not None else (
                        "domain.height" if name.endswith("e3") and cfg.domain.height is not None else "sweep.mesh_level")
                    errs.append(UserError(
                        expected="mesh levels of one point that are geometrically similar (every length × 1/√2 per level)",
                        got=f"{name} of case {c.case_id} (level {m}) = {v if v is None else f'{v:.6g}'} m, similarity needs "
                            f"{want:.6g} m from case {c0.case_id} (level {m0})",
                        file=cfg.file, key=key,
                        fix="leave domain.width and domain.height automatic (whole cells at every level), or run one mesh level"))
                    break
            else:
                continue
            break
    return errs


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
    if h_max > float(MAX_RIDE_HEIGHT_LENGTHS) * g.length:
        raise UserError(expected=f"ride heights up to {MAX_RIDE_HEIGHT_LENGTHS.value:g} body lengths "
                                 "(the ground effect this tool studies)",
                        got=f"{h_max:g} m for a body {g.length:.4g} m long in case {pt.case_id}", file=cfg.file,
                        key=pt.source,
                        fix='ride heights are in m (not mm); for a body far from any ground use ground.mode = "none"')
    return P, clearance, at, pct, where


def plan_wheels(cfg: Config, pt: SweepPoint, vg: "VariantGeometry", P: Placement, vg_body: np.ndarray,
                notes: list[str]) -> tuple[list[Wheel], list[dict], dict]:
    """Place every wheel of the config on the ground for the body placement
    ``P`` (:func:`caseprep.planning.wheels.place_wheel`): independent of the
    body's ride height and pitch, yawed with the model, steered and cambered
    as configured, sunk by its flattening; spin for rolling without slip on
    the ground moving at ``vg_body`` (m/s, body axes). Returns the wheels, a
    JSON-ready fact sheet per wheel (centre height, radius, loaded radius,
    contact gap, spin) and the writer's recipes of the files to make: each
    wheel transformed into place, named after its pose so cases with the
    same pose share one file, and the body file without its wheel solids."""
    wheels, facts, recipes = [], [], {}
    wheel_solids = [w.solid for w in cfg.body.wheels if w.solid]
    if wheel_solids:
        recipes[f"{pt.variant}.stl"] = {"source": str(vg.source), "unit": vg.length_unit, "solids": list(vg.body_solids),
                                        "rotation": None, "offset": None, "solid_name": None}
    for w in cfg.body.wheels:
        wp = place_wheel(P, w.centre, w.axis, w.radius, vg.wheel_hulls[w.name], w.flattening, w.steering_deg, w.camber_deg)
        omega = rolling_omega(wp.centre, wp.axis, wp.contact, vg_body) if cfg.ground.mode == "moving" else 0.0
        if abs(wp.geometry_radius - w.radius) > 0.03 * w.radius:
            notes.append(f"wheel {w.name}: its geometry's radius is {wp.geometry_radius * 1e3:.2f} mm, the configured "
                         f"radius {w.radius * 1e3:.2f} mm: the contact follows the geometry, the spin the configured radius")
        src, unit = (w.geometry, cfg.body.length_unit) if w.geometry else (vg.source, vg.length_unit)
        key = json.dumps([src, w.solid, np.round(wp.rotation, 12).tolist(), np.round(wp.offset, 12).tolist()])
        fname = f"wheel_{w.name}_{hashlib.sha256(key.encode()).hexdigest()[:8]}.stl"
        recipes[fname] = {"source": str(src), "unit": unit, "solids": [w.solid] if w.solid else None,
                          "rotation": wp.rotation.tolist(), "offset": wp.offset.tolist(), "solid_name": w.solid or w.name}
        zone_r = (w.zone_radius if w.zone_radius is not None else ZONE_RADIUS_FRACTION * w.radius) if w.rotation == "zone" else None
        wheels.append(Wheel(name=w.name, patch=w.solid or w.name, centre=vec3(wp.centre), axis=vec3(wp.axis),
                            radius=float(w.radius), omega=float(omega), geometry=fname, rotation=w.rotation,
                            zone_radius=None if zone_r is None else float(zone_r), width=float(wp.width),
                            placement=wp.to_dict()))
        facts.append({"name": w.name, **wp.to_dict(), "omega": float(omega), "rotation": w.rotation,
                      "zone_radius": zone_r, "steering_deg": w.steering_deg, "camber_deg": w.camber_deg,
                      "surface_speed_at_contact": (float(omega) * np.cross(wp.axis, wp.contact - wp.centre)).tolist()})
    return wheels, facts, recipes


#: Default radius of a wheel's rotating reference zone, fraction of its
#: radius: about a rim's radius (common practice, no source).
ZONE_RADIUS_FRACTION = 0.75


def mesh_facts(cfg: Config, dp, body_volume: float, speed: float) -> dict:
    """What a case's mesh is meant to be, for the manifest and ``caseprep
    plan --json``: wall treatment and its y+ band, first-cell height (m) and
    the flat-plate y+ at its centre at this mesh level, the underfloor speed
    (m/s) it was sized for, the gap plan, and the fluid volume V (m³) from
    which the representative cell size h = (V/N)^(1/3) follows once the
    cell count N is known: the domain box of the sizing rule before its
    rounding to whole background cells, less the body. That box is the same
    at every mesh level of a point, so h follows the cell count alone; the
    meshed box differs from it by less than one background cell per side,
    whose few large cells bias h by about 0.1 %."""
    L = dp.mesh.layers
    tr = WALL_TREATMENTS[wall_treatment_name(cfg)]
    box = dp.nominal_volume if dp.nominal_volume else float(np.prod(dp.domain.box.lengths))
    V = float(box) - max(body_volume, 0.0)
    return {
        "wall_treatment": tr.name,
        "yplus_band": list(tr.band),
        "first_cell_height": None if L is None else L.first_cell_height,
        "centre_yplus": None if L is None else L.target_yplus,
        "prism_layers": None if L is None else {"n": L.n_layers, "expansion": L.expansion, "on_ground": L.ground},
        "underfloor_speed": cfg.air.underfloor_speed_factor * speed,
        "gap": dict(dp.info) or None,
        "fluid_volume": V,
        "base_cell": dp.base_cell,
    }


def plan_case(cfg: Config, pt: SweepPoint, geoms: dict[str, VariantGeometry], air: Air, settings, refgeo,
              cache: _RotationCache | None = None) -> tuple[CaseSpec, list[str]]:
    """Plan one point; raises UserError if the case must be refused.

    Long because: it is the sequence that resolves one case (place, measure the
    clearance, size the domain and mesh, flow, wheels, solver, reference values),
    each step one call whose results the later steps use.
    """
    cache = cache if cache is not None else _RotationCache()
    fa, ra, wb, lref, mp = refgeo
    vg = geoms[pt.variant]
    g = vg.body
    ground = cfg.ground.mode
    mode = cfg.sweep.yaw_mode
    cid = pt.case_id
    notes: list[str] = []
    P, clearance, at, pct, where = _place(cfg, pt, g, cache)
    U, w_body, vg_body = point_wind(cfg, pt, P)
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
                      extent_range=extent_range, underside=g.underside if ground != "none" else None)
    d = cfg.domain
    sizing = DomainSizing(upstream=d.upstream, downstream=d.downstream, width=d.width, height=d.height,
                          target_blockage=d.target_blockage, max_blockage=d.max_blockage)
    dp = plan_domain(body, P, ground, sizing, settings, pt.mesh_level, U, air.nu,
                     local_speed=cfg.air.underfloor_speed_factor * U)
    if dp.problems:
        extra = f" (at {where})" if where else ""
        msgs = []
        for what, fix, *key in dp.problems:
            k = key[0] if key else pt.source
            msgs.append(UserError(f"case {cid} ({cfg.file} at {k}): {what}{extra if 'clearance' in what else ''}", fix=fix,
                                  file=cfg.file, key=k))
        raise msgs[0] if len(msgs) == 1 else UserErrors(msgs)
    notes.extend(dp.warnings)
    mach, why = mach_note(cfg, air, U)
    if why:
        notes.append(why)
    # the model starts `upstream` body lengths downstream of the inlet (plan_domain)
    turb = flow_turbulence(cfg, U, g.length, cfg.domain.upstream * g.length)
    if turb.k_inlet > STRONG_DECAY * turb.k_model:
        notes.append(f"the free-stream turbulence decays strongly before the model (k at the inlet "
                     f"{turb.k_inlet / turb.k_model:.1f} × that at the model): the values at the model depend on the "
                     "model's decay constants; a larger solver.turbulence_length_scale decays less")
    flow = flow_spec(cfg, air, U, w_body, vg_body, turb)
    wheels, wheel_facts, recipes = plan_wheels(cfg, pt, vg, P, vg_body, notes)
    solver = solver_spec(cfg, dp.domain, settings.preset.iterations)
    area = reference_area(cfg, pt.variant, geoms)
    ref = Reference(area=area, length=lref, wheelbase=wb, front_axle=fa, rear_axle=ra, moment_point=mp, rho=air.rho,
                    nu=air.nu, speed=float(U), p_ref=0.0,
                    cog=vec3(cfg.body.centre_of_gravity) if cfg.body.centre_of_gravity is not None else None)
    extra = {
        "geometry_source": vg.source,
        "geometry_length_unit": vg.length_unit,
        "geometry_scale_to_m": LENGTH_UNITS[vg.length_unit],
        "wheel_sources": {w.name: w.geometry for w in cfg.body.wheels if w.geometry},
        # what the writer reads: shared file name → source path and → scale to metres
        "geometry_sources": {f"{pt.variant}.stl": str(vg.source)},
        "geometry_scales": {f"{pt.variant}.stl": LENGTH_UNITS[vg.length_unit]},
        # files the writer makes: the body without its wheel solids, each wheel placed on the ground
        "geometry_recipes": recipes,
        "wheels": wheel_facts,
        "wheel_length_unit": cfg.body.length_unit,
        "air": {"temperature": air.temperature, "pressure": air.pressure, "mu": air.mu},
        "frontal_area_wind": frontal_wind,
        "min_clearance_x_percent": pct,
        **mesh_facts(cfg, dp, float(g.report.volume), U),
        "local_mach": mach,
        "turbulence": turb.to_dict(),
        "warnings": list(notes),
        # what the sweep report pictures ([report]; postproc reads it from the manifest)
        "report": cfg.report.model_dump(exclude_none=True),
    }
    spec = CaseSpec(
        case_id=cid, variant=pt.variant, params=pt.params(), yaw_mode=mode, placement=P, geometry=f"{pt.variant}.stl",
        geometry_solid_names=vg.body_solids, flow=flow, wheels=tuple(wheels), domain=dp.domain, mesh=dp.mesh, solver=solver,
        reference=ref, fidelity=cfg.mesh.fidelity, min_clearance=clearance,
        min_clearance_at=vec3(at) if at is not None else None, estimated_cells=dp.estimated_cells, extra=extra)
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
    U, w_body, vg_body = point_wind(cfg, pt, P)
    lref = cfg.body.reference_length if cfg.body.reference_length is not None else float(d.length)
    # without a body the "model" is the middle of the section
    turb = flow_turbulence(cfg, U, float(d.length), 0.5 * float(d.length))
    flow = flow_spec(cfg, air, U, w_body, vg_body, turb)
    solver = solver_spec(cfg, dp.domain, mesh_settings(m.fidelity).preset.iterations)
    ra = cfg.body.reference_area
    area = float(ra) if not isinstance(ra, str) else float(d.width * d.height)
    origin = vec3(P.ground_point_body)
    mp = vec3(cfg.body.moment_point) if cfg.body.moment_point is not None else origin
    ref = Reference(area=area, length=float(lref), wheelbase=float(lref), front_axle=origin, rear_axle=origin, moment_point=mp,
                    rho=air.rho, nu=air.nu, speed=float(U), p_ref=0.0, cog=None)
    extra = {
        "empty_section": True,
        # the ground's leading edge: e1 = lead_in (m) from the inlet, along the wind
        "ground_leading_edge": float(d.lead_in or 0.0),
        # first background cell on the ground (m), after the mesh level's refinement
        "ground_first_cell": None if m.ground_first_cell is None else float(m.ground_first_cell / 2.0 ** (0.5 * pt.mesh_level)),
        "air": {"temperature": air.temperature, "pressure": air.pressure, "mu": air.mu},
        "turbulence": turb.to_dict(),
        "fluid_volume": float(np.prod(dp.domain.box.lengths)),
        "base_cell": dp.base_cell,
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


#: Keys of each case in ``caseprep plan --json`` besides the table's columns.
PLAN_FACTS = ("wall_treatment", "yplus_band", "first_cell_height", "centre_yplus", "prism_layers", "underfloor_speed",
              "local_mach", "gap", "turbulence", "fluid_volume", "base_cell", "wheels", "warnings")


def plan_json(cases) -> list[dict]:
    """One JSON-ready dict per case for ``caseprep plan --json``: the table
    row (:func:`table_rows`, mm and degrees there) plus the planning facts of
    :data:`PLAN_FACTS` in SI units (m, m/s, m³; y+ dimensionless): wall
    treatment and y+ band, first-cell height and the flat-plate y+ at its
    centre, the gap plan, the free-stream turbulence at the inlet and at the
    model, the local Mach number and the wheels' placement."""
    out = []
    for row, c in zip(table_rows(cases), cases):
        d = dict(row)
        d.update({k: c.extra.get(k) for k in PLAN_FACTS if k in c.extra})
        d["estimated_cells"] = c.estimated_cells
        out.append(d)
    return out


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
