"""The geometry of a study, read once: each variant's body (and wheel)
surfaces checked and measured (:class:`VariantGeometry`), the convex-hull
vertices the clearance rule uses, and the problems found (collected, not
raised one at a time). Lengths in m, body frame.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from caseprep.config.schema import EMPTY_GEOMETRY, Config
from caseprep.contract.errors import UserError
from caseprep.geometry.body import BodyGeometry, analyse
from caseprep.geometry.checks import surface_problems
from caseprep.geometry.hull import hull_points
from caseprep.geometry.inside import inside
from caseprep.geometry.stl import read_stl


@dataclass(frozen=True)
class VariantGeometry:
    """One variant's geometry facts for all its cases."""

    name: str
    source: str
    length_unit: str
    body: BodyGeometry
    body_solids: tuple[str, ...]
    extent_hull: np.ndarray  # hull of body + wheel files (domain sizing, blockage)
    wheel_hulls: dict = field(default_factory=dict)  # wheel name → hull points of its geometry (body frame, m)


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
        hulls = {w.name: wheel_pts[w.name] for w in cfg.body.wheels if w.geometry and w.name in wheel_pts}
        for w in cfg.body.wheels:
            if w.solid and w.solid in s.solid_names:
                hulls[w.name] = hull_points(s.select([w.solid]).triangles.reshape(-1, 3))
        body_tris = s.select(body_solids).triangles
        for i, w in enumerate(cfg.body.wheels):
            if inside(body_tris, w.centre):
                errs.append(UserError(expected="a wheel centre outside the body (in its wheel arch or beside it)",
                                      got=f"({', '.join(f'{c:g}' for c in w.centre)}) m, inside the body of {v.geometry}",
                                      file=cfg.file, key=f"body.wheels[{i}].centre",
                                      fix="give the wheel centre in the body frame (x rearward, y right, z up, m); the body "
                                          "surface must have an opening (wheel arch) where the wheel sits"))
        allp = [g.hull] + list(hulls.values())
        ext = hull_points(np.vstack(allp)) if len(allp) > 1 else g.hull
        out[name] = VariantGeometry(name, v.geometry, unit, g, body_solids, ext, hulls)
    return out, wheel_pts, errs
