"""One variant's geometry measured once for all cases of a sweep: hull,
bounds, areas and topology facts (body frame, m)."""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from caseprep.geometry.checks import SurfaceReport, inspect_surface, weld
from caseprep.geometry.hull import hull_points, projected_area
from caseprep.geometry.stl import TriSurface
from caseprep.geometry.underside import Underside, underside_map


@dataclass(frozen=True)
class BodyGeometry:
    """What the planner needs from one variant's geometry (body frame, m).

    ``hull``: convex-hull vertices of the body solids (wheels excluded when
    they are separate solids), ``bounds`` (min, max) corners, ``area`` surface
    area (m²), ``frontal_area`` shadow area along +x (m², zero pitch and yaw),
    ``solid_names`` the patches, ``report`` the topology facts,
    ``underside`` the lowest surface height over a plan-view grid (body
    solids only, :func:`caseprep.geometry.underside.underside_map`).
    """

    hull: np.ndarray
    bounds: tuple[tuple[float, float, float], tuple[float, float, float]]
    area: float
    frontal_area: float
    solid_names: tuple[str, ...]
    report: SurfaceReport
    source: str
    underside: Underside | None = None

    @property
    def length(self) -> float:
        return float(self.bounds[1][0] - self.bounds[0][0])

    @property
    def width(self) -> float:
        return float(self.bounds[1][1] - self.bounds[0][1])

    @property
    def height(self) -> float:
        return float(self.bounds[1][2] - self.bounds[0][2])


def analyse(surface: TriSurface, exclude_from_clearance: tuple[str, ...] = ()) -> BodyGeometry:
    """Measure a surface once for all cases of a sweep (input untouched)."""
    welded = weld(surface.triangles)
    rep = inspect_surface(surface.triangles, welded)
    body = surface.select([n for n in surface.solid_names if n not in exclude_from_clearance])
    if body.n_triangles == surface.n_triangles or body.n_triangles == 0:
        pts = welded[0]
    else:
        pts = weld(body.triangles)[0]
    hull = hull_points(pts)
    fa = projected_area(surface.triangles, [1.0, 0.0, 0.0])
    under = underside_map(body.triangles if body.n_triangles else surface.triangles)
    return BodyGeometry(hull=hull, bounds=rep.bounds, area=rep.area, frontal_area=fa,
                        solid_names=surface.solid_names, report=rep, source=surface.source, underside=under)
