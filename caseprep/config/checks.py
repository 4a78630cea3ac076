"""The value checks of a parsed config: ranges (declared in
:mod:`caseprep.config.keys`), files that must exist, and the rules that tie
keys together (ride heights need a ground, an empty test section is the only
variant, …). Every problem is collected, none raised: :func:`problems`
returns them all so ``caseprep check`` can list them at once.
"""
from __future__ import annotations

from pathlib import Path

from caseprep.config.keys import KEYS
from caseprep.config.schema import EMPTY_GEOMETRY, NAME_RULE, Config
from caseprep.contract.limits import is_name
from caseprep.contract.errors import UserError, did_you_mean


class _Problems(list):
    """The problems found so far in one config file."""

    def __init__(self, file: str) -> None:
        super().__init__()
        self.file = file

    def add(self, **kw) -> None:
        self.append(UserError(file=self.file, **kw))

    def check(self, key: str, value, declared: str | None = None) -> None:
        """``value`` at ``key`` against the declared range of ``declared``
        (default: ``key`` itself); None (not given) passes."""
        r = KEYS[declared or key].range
        if value is not None and r is not None and not r.contains(value):
            self.add(expected=r.text(), got=value, key=key, fix=r.fix)


def problems(cfg: Config, base: Path, file: str) -> list[UserError]:
    """Every problem of ``cfg`` (read from ``file``; geometry paths relative
    to the folder ``base``); empty when it is fine."""
    errs = _Problems(file)
    _air(cfg, errs)
    _variants(cfg, base, errs)
    _body(cfg, errs)
    _wheels(cfg, base, errs)
    _sweep_axes(cfg, errs)
    for i, pt in enumerate(cfg.sweep.points or ()):
        _sweep_point(cfg, i, pt, errs)
    _mesh(cfg, errs)
    _domain(cfg, errs)
    _solver(cfg, errs)
    _cluster(cfg, errs)
    _report(cfg, errs)
    return list(errs)


def _cluster(cfg: Config, errs: _Problems) -> None:
    """The batch settings: numbers in range, texts in the batch system's formats."""
    for name in type(cfg.cluster).model_fields:
        key = f"cluster.{name}"
        value = getattr(cfg.cluster, name)
        pattern = KEYS[key].pattern
        if pattern is not None:
            if not pattern.matches(value):
                errs.add(expected=pattern.expected, got=value, key=key, fix=pattern.fix)
        else:
            errs.check(key, value)


def _has_ground(cfg: Config) -> bool:
    return cfg.ground.mode != "none"


def _air(cfg: Config, errs: _Problems) -> None:
    for k in ("speed", "temperature", "pressure", "altitude", "density", "viscosity", "kinematic_viscosity",
              "underfloor_speed_factor"):
        errs.check(f"air.{k}", getattr(cfg.air, k))


def _reference_area(value, key: str, declared: str, errs: _Problems) -> None:
    if isinstance(value, str) and value != "auto":
        errs.add(expected='a number (m²) or "auto"', got=value, key=key)
    elif isinstance(value, float):
        errs.check(key, value, declared)


def _variants(cfg: Config, base: Path, errs: _Problems) -> None:
    if not cfg.variants:
        errs.add(expected="at least one [variants.NAME] table", got="none", key="variants",
                 fix='add e.g. [variants.baseline] with geometry = "baseline.stl"')
    for name, v in cfg.variants.items():
        if not is_name(name):
            errs.add(expected=NAME_RULE + " (it becomes a folder, a patch and a shell word)", got=name,
                     key=f"variants.{name}", fix="rename the variant, e.g. 'diffuser_8deg'")
        p = base / v.geometry
        if v.geometry != EMPTY_GEOMETRY and not p.is_file():
            errs.add(expected="an existing geometry file", got=str(p), key=f"variants.{name}.geometry",
                     fix="check the path (relative paths are relative to the config file's folder)")
        _reference_area(v.reference_area, f"variants.{name}.reference_area", "variants.<name>.reference_area", errs)


def _body(cfg: Config, errs: _Problems) -> None:
    b = cfg.body
    _reference_area(b.reference_area, "body.reference_area", "body.reference_area", errs)
    errs.check("body.reference_length", b.reference_length)
    errs.check("body.wheelbase", b.wheelbase)
    empty = cfg.empty_section
    if empty:
        errs.extend(_empty_section_problems(cfg, errs.file))
    if _has_ground(cfg) and not empty:
        for k in ("front_axle", "rear_axle", "ride_height_point_front", "ride_height_point_rear"):
            if getattr(b, k) is None:
                errs.add(expected=f"the key body.{k} ([x, y, z] in m, body frame)", got="nothing", key=f"body.{k}",
                         fix=f"add body.{k}; it is required when there is a ground (ground.mode = {cfg.ground.mode!r})")
        f, r = b.ride_height_point_front, b.ride_height_point_rear
        if f is not None and r is not None and not r[0] > f[0]:
            errs.add(expected="ride_height_point_rear behind (larger x than) ride_height_point_front",
                     got=f"x_front = {f[0]}, x_rear = {r[0]}", key="body.ride_height_point_rear",
                     fix="body x points rearward: the front point has the smaller x")
        if b.front_axle is not None and b.rear_axle is not None and b.wheelbase is None \
                and not b.rear_axle[0] > b.front_axle[0]:
            errs.add(expected="rear_axle behind (larger x than) front_axle", got=f"{b.front_axle} / {b.rear_axle}",
                     key="body.rear_axle", fix="body x points rearward; or give body.wheelbase")
    if not empty and b.reference_length is None and b.wheelbase is None \
            and (b.front_axle is None or b.rear_axle is None or not _has_ground(cfg)):
        errs.add(expected="body.reference_length (m)", got="nothing", key="body.reference_length",
                 fix="give body.reference_length (or body.wheelbase)")


def _wheels(cfg: Config, base: Path, errs: _Problems) -> None:
    wheels = cfg.body.wheels
    for i, w in enumerate(wheels):
        key = f"body.wheels[{i}]"
        errs.check(key + ".radius", w.radius, "body.wheels[].radius")
        if (w.geometry is None) == (w.solid is None):
            errs.add(expected="exactly one of geometry (a wheel STL file) or solid (a solid name in the body STL)",
                     got="both" if w.geometry else "neither", key=key)
        if w.geometry is not None and not (base / w.geometry).is_file():
            errs.add(expected="an existing geometry file", got=str(base / w.geometry), key=key + ".geometry",
                     fix="check the path (relative to the config file's folder)")
        if sum(c * c for c in w.axis) == 0:
            errs.add(expected="a non-zero axis vector", got=w.axis, key=key + ".axis")
        elif w.axis[0] ** 2 + w.axis[1] ** 2 < 1e-6 * sum(c * c for c in w.axis):
            errs.add(expected="a wheel axis with a horizontal part (the wheel stands on the ground)", got=w.axis,
                     key=key + ".axis", fix="give the axle direction, e.g. [0, 1, 0]")
        for k in ("steering_deg", "camber_deg", "flattening", "zone_radius"):
            errs.check(f"{key}.{k}", getattr(w, k), f"body.wheels[].{k}")
        if w.zone_radius is not None and w.rotation != "zone":
            errs.add(expected='zone_radius only with rotation = "zone"', got=w.zone_radius, key=key + ".zone_radius",
                     fix='remove it or set rotation = "zone"')
        elif w.zone_radius is not None and w.radius > 0 and 0 < w.zone_radius and not w.zone_radius < w.radius * (1 - w.flattening):
            errs.add(expected="a rotating-zone radius below the loaded radius (the zone must not reach the ground)",
                     got=w.zone_radius, key=key + ".zone_radius",
                     fix=f"use less than {w.radius * (1.0 - w.flattening):.4g} m (a rim's radius is typical)")
    names = [w.name for w in wheels]
    for n in set(names):
        if names.count(n) > 1:
            errs.add(expected="unique wheel names", got=n, key="body.wheels")
    if wheels and not _has_ground(cfg):
        errs.add(expected="no rotating wheels without a ground", got=f"{len(wheels)} wheels", key="body.wheels",
                 fix='remove the wheels or set ground.mode = "moving"')


def _sweep_axes(cfg: Config, errs: _Problems) -> None:
    s = cfg.sweep
    known = list(cfg.variants)
    for i, v in enumerate(s.variants or ()):
        if v not in cfg.variants:
            errs.add(expected="a variant defined under [variants]", got=v, key=f"sweep.variants[{i}]",
                     fix=("define it or remove it." + did_you_mean(v, known)))
    axes_given = [k for k in ("ride_height", "pitch_deg", "ride_heights_front_rear") if getattr(s, k) is not None]
    if s.points is not None and axes_given:
        errs.add(expected="either sweep.points or the sweep axes", got=f"both (points and {', '.join(axes_given)})",
                 key="sweep.points", fix="use one way of describing the sweep")
    if s.ride_height is not None and s.ride_heights_front_rear is not None:
        errs.add(expected="either sweep.ride_height (× pitch_deg) or sweep.ride_heights_front_rear", got="both",
                 key="sweep.ride_heights_front_rear", fix="keep one of the two")
    if s.ride_heights_front_rear is not None and s.pitch_deg is not None:
        errs.add(expected="no sweep.pitch_deg with ride_heights_front_rear (the pairs fix the pitch)", got=s.pitch_deg,
                 key="sweep.pitch_deg", fix="remove sweep.pitch_deg")
    if _has_ground(cfg) and not cfg.empty_section:
        if s.points is None and s.ride_height is None and s.ride_heights_front_rear is None:
            errs.add(expected="sweep.ride_height or sweep.ride_heights_front_rear (m)", got="neither", key="sweep",
                     fix="give the ride heights to run, e.g. ride_height = [0.03]")
        for i, h in enumerate(s.ride_height or ()):
            errs.check(f"sweep.ride_height[{i}]", h, "sweep.ride_height")
        for i, (hf, hr) in enumerate(s.ride_heights_front_rear or ()):
            errs.check(f"sweep.ride_heights_front_rear[{i}][0]", hf, "sweep.ride_heights_front_rear")
            errs.check(f"sweep.ride_heights_front_rear[{i}][1]", hr, "sweep.ride_heights_front_rear")
    else:
        for k in ("ride_height", "ride_heights_front_rear"):
            if getattr(s, k) is not None:
                what, fix = (("an empty test section", "remove them (there is no body to place)") if cfg.empty_section
                             else ("a ground", 'remove them, or set ground.mode = "moving"'))
                errs.add(expected=f"no ride heights without {what}", got=getattr(s, k), key=f"sweep.{k}", fix=fix)
    for k in ("yaw_deg", "pitch_deg", "speed", "mesh_level"):
        for i, v in enumerate(getattr(s, k) or ()):
            errs.check(f"sweep.{k}[{i}]", v, f"sweep.{k}")


def _sweep_point(cfg: Config, i: int, pt, errs: _Problems) -> None:
    key = f"sweep.points[{i}]"
    if pt.variant is not None and pt.variant not in cfg.variants:
        errs.add(expected="a variant defined under [variants]", got=pt.variant, key=key + ".variant",
                 fix="define it or fix the name." + did_you_mean(pt.variant, list(cfg.variants)))
    pair = pt.ride_height_front is not None or pt.ride_height_rear is not None
    single = pt.ride_height is not None
    if _has_ground(cfg) and not cfg.empty_section:
        if pair and single:
            errs.add(expected="either ride_height (+ pitch_deg) or ride_height_front and ride_height_rear",
                     got="both", key=key)
        elif pair and (pt.ride_height_front is None or pt.ride_height_rear is None):
            errs.add(expected="both ride_height_front and ride_height_rear", got="one", key=key)
        elif not pair and not single:
            errs.add(expected="ride_height or ride_height_front and ride_height_rear (m)", got="nothing", key=key)
        if pair and pt.pitch_deg is not None:
            errs.add(expected="no pitch_deg with front/rear ride heights", got=pt.pitch_deg, key=key + ".pitch_deg",
                     fix="the two ride heights fix the pitch; remove pitch_deg")
        for k in ("ride_height", "ride_height_front", "ride_height_rear"):
            errs.check(f"{key}.{k}", getattr(pt, k), f"sweep.points[].{k}")
    elif pair or single:
        errs.add(expected="no ride heights without a ground", got="ride heights", key=key)
    for k in ("yaw_deg", "speed", "mesh_level"):
        errs.check(f"{key}.{k}", getattr(pt, k), f"sweep.points[].{k}")


def _mesh(cfg: Config, errs: _Problems) -> None:
    m = cfg.mesh
    for k in ("base_cell", "ground_first_cell", "target_yplus", "gap_cells", "feature_level", "max_level", "layers",
              "layer_expansion"):
        errs.check(f"mesh.{k}", getattr(m, k))
    if m.ground_first_cell is not None and not cfg.empty_section:
        errs.add(expected="mesh.ground_first_cell only for an empty test section (a variant with geometry = \"none\")",
                 got=m.ground_first_cell, key="mesh.ground_first_cell",
                 fix="remove it; with a body the ground is meshed by the refinement regions")
    r = KEYS["mesh.surface_levels"].range
    if m.surface_levels is not None and not r.lo <= m.surface_levels[0] <= m.surface_levels[1] <= r.hi:
        errs.add(expected=r.text(), got=m.surface_levels, key="mesh.surface_levels")
    if m.wall_treatment == "low-re" and cfg.solver.turbulence_model == "laminar":
        errs.add(expected="mesh.wall_treatment only with a turbulence model", got="low-re with laminar flow",
                 key="mesh.wall_treatment", fix="remove it: a laminar case resolves its walls anyway")
    if m.wall_treatment == "low-re" and m.fidelity == "smoke" and not m.layers:
        errs.add(expected='prism layers for mesh.wall_treatment = "low-re"', got="the smoke preset (no layers)",
                 key="mesh.wall_treatment", fix='use mesh.fidelity = "coarse" or "production", or give mesh.layers')
    if m.wall_treatment == "low-re" and m.layer_expansion is not None and not m.layer_expansion > 1.0:
        errs.add(expected="a layer expansion ratio above 1 for low-re layers (they grow from y+ ≈ 1)",
                 got=m.layer_expansion, key="mesh.layer_expansion")


def _domain(cfg: Config, errs: _Problems) -> None:
    d = cfg.domain
    empty = cfg.empty_section
    for k in ("length", "upstream", "downstream", "width", "height", "lead_in"):
        errs.check(f"domain.{k}", getattr(d, k))
    if d.lead_in is not None and d.lead_in >= 0.0 and d.length is not None and not d.lead_in < d.length:
        errs.add(expected="domain.lead_in shorter than domain.length (the ground must start inside the section)",
                 got=f"{d.lead_in} m ≥ {d.length} m", key="domain.lead_in", fix="shorten the lead-in or lengthen the section")
    if d.lead_in is not None and not empty:
        errs.add(expected="domain.lead_in only for an empty test section (a variant with geometry = \"none\")",
                 got=d.lead_in, key="domain.lead_in", fix="remove it")
    if d.length is not None and not empty:
        errs.add(expected="domain.length only for an empty test section (a variant with geometry = \"none\")",
                 got=d.length, key="domain.length",
                 fix="remove it; with a body the length follows from domain.upstream and domain.downstream")
    if not 0 < d.target_blockage <= d.max_blockage < 1:
        errs.add(expected="0 < target_blockage ≤ max_blockage < 1 (fractions, 0.01 = 1 %)",
                 got=f"{d.target_blockage} / {d.max_blockage}", key="domain.max_blockage")


def _solver(cfg: Config, errs: _Problems) -> None:
    for k in ("iterations", "write_interval", "ranks", "turbulence_intensity", "turbulence_length_scale"):
        errs.check(f"solver.{k}", getattr(cfg.solver, k))


def _report(cfg: Config, errs: _Problems) -> None:
    r = cfg.report
    known = list(cfg.variants)
    if r.baseline is not None and r.baseline not in cfg.variants:
        errs.add(expected="a variant defined under [variants]", got=r.baseline, key="report.baseline",
                 fix="name one of: " + ", ".join(known) + "." + did_you_mean(r.baseline, known))
    errs.check("report.picture_ride_height", r.picture_ride_height)
    errs.check("report.picture_yaw_deg", r.picture_yaw_deg)


def _empty_section_problems(cfg: Config, file: str) -> list[UserError]:
    """Rules of an empty test section (a variant with ``geometry = "none"``):
    the only variant, over a ground, no wheels or ride heights, and the
    section's size and cell size given (there is no body to size them from)."""
    errs = _Problems(file)
    names = [n for n, v in cfg.variants.items() if v.geometry == EMPTY_GEOMETRY]
    if len(cfg.variants) > 1:
        others = [n for n in cfg.variants if n not in names]
        errs.add(expected='an empty test section (geometry = "none") as the only variant',
                 got=f"also {', '.join(others or names[1:])}", key=f"variants.{names[0]}.geometry",
                 fix="write the empty test section as its own study (its domain is given explicitly)")
    if cfg.ground.mode == "none":
        errs.add(expected='a ground (ground.mode = "moving" or "stationary") for an empty test section', got="none",
                 key="ground.mode", fix='set ground.mode = "stationary" or "moving"')
    for k in ("domain.length", "domain.width", "domain.height", "mesh.base_cell"):
        sec, key = k.split(".")
        if getattr(getattr(cfg, sec), key) is None:
            errs.add(expected=f"the key {k} (m) for an empty test section", got="nothing", key=k,
                     fix=f"add `{key} = …` under [{sec}]: with no body there is nothing to size it from")
    if cfg.body.wheels:
        errs.add(expected="no wheels in an empty test section", got=f"{len(cfg.body.wheels)} wheels", key="body.wheels",
                 fix="remove the wheels")
    if cfg.sweep.pitch_deg is not None and any(p != 0.0 for p in cfg.sweep.pitch_deg):
        errs.add(expected="no pitch in an empty test section", got=cfg.sweep.pitch_deg, key="sweep.pitch_deg",
                 fix="remove sweep.pitch_deg (there is no body to pitch)")
    for i, pt in enumerate(cfg.sweep.points or ()):
        if pt.pitch_deg not in (None, 0.0):
            errs.add(expected="no pitch in an empty test section", got=pt.pitch_deg, key=f"sweep.points[{i}].pitch_deg",
                     fix="remove pitch_deg (there is no body to pitch)")
    d, m = cfg.domain, cfg.mesh
    if m.base_cell is not None and d.height is not None and not d.height >= 2.0 * m.base_cell:
        errs.add(expected="domain.height at least two base cells (mesh.base_cell)",
                 got=f"{d.height} m for cells of {m.base_cell} m", key="domain.height",
                 fix="raise domain.height or lower mesh.base_cell")
    if m.ground_first_cell is not None and m.base_cell is not None and not m.ground_first_cell < m.base_cell:
        errs.add(expected="mesh.ground_first_cell smaller than mesh.base_cell (the cells grow away from the ground)",
                 got=f"{m.ground_first_cell} m ≥ {m.base_cell} m", key="mesh.ground_first_cell",
                 fix="lower mesh.ground_first_cell, or leave it out for uniform cells")
    return list(errs)
