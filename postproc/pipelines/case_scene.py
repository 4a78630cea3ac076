"""Build the picture scene of one case (:class:`postproc.scenes.CaseScene`)
from its loaded result: the body with Cp, the ground footprint, the
underside on a plan grid, the Q iso-surface with the rotation sense, the
tracked vortex cores and the wall-shear streak lines. Uses VTK (through
pyvista) for the iso-surface; everything else is numpy.

Axes: body frame (x rearward, y right, z up, m). Cp as in
:mod:`postproc.underbody`. Q is normalised by the local gap scale,
Q/(V/h)², with V the reference speed and h the ride height (mean of the
front and rear ride heights of the case), because the underbody vortices
scale with the gap rather than with the car: on the demo floors every cell
above Q/(V/L)² = 100 (L the wheelbase) was wall shear, not a vortex.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from caseprep.contract.errors import UserError
from postproc.io import flow as flowio
from postproc.kernels import underbody as ub
from postproc.kernels import wallchecks as wc
from postproc.kernels.planview import PlanGrid, PlanRaster, plan_streaks, point_average, rasterise_lowest
from postproc.kernels.sections import SurfacePatch


@dataclass(frozen=True, eq=False)
class SurfaceData:
    """Polygons with one value per face (``values`` may be None: plain
    geometry)."""

    points: np.ndarray
    offsets: np.ndarray
    connectivity: np.ndarray
    values: np.ndarray | None = None
    name: str = ""

    @property
    def n_faces(self) -> int:
        return int(self.offsets.size - 1)

    @property
    def bounds(self) -> tuple[float, float, float, float, float, float]:
        p = np.asarray(self.points, dtype=float)
        if p.size == 0:
            return (0.0,) * 6
        lo, hi = p.min(axis=0), p.max(axis=0)
        return (float(lo[0]), float(hi[0]), float(lo[1]), float(hi[1]), float(lo[2]), float(hi[2]))

    @staticmethod
    def join(parts: list["SurfaceData"], name: str = "") -> "SurfaceData":
        """One surface from several (values kept when every part has them)."""
        pts, offs, conn, vals = [], [np.zeros(1, dtype=np.int64)], [], []
        base_p = base_c = 0
        for s in parts:
            pts.append(np.asarray(s.points, dtype=float))
            offs.append(np.asarray(s.offsets[1:], dtype=np.int64) + base_c)
            conn.append(np.asarray(s.connectivity, dtype=np.int64) + base_p)
            vals.append(s.values)
            base_p += pts[-1].shape[0]
            base_c += int(s.offsets[-1])
        v = None if any(x is None for x in vals) or not vals else np.concatenate([np.asarray(x, float) for x in vals])
        return SurfaceData(np.concatenate(pts) if pts else np.zeros((0, 3)), np.concatenate(offs),
                           np.concatenate(conn) if conn else np.zeros(0, dtype=np.int64), v, name)


@dataclass(frozen=True, eq=False)
class CoreTrack:
    """A vortex core followed along the stations: centres (K, 3) m and its
    rotation sense about +x (+1/−1, right-hand rule)."""

    centres: np.ndarray
    sense: int


@dataclass(frozen=True, eq=False)
class CaseScene:
    """Everything the pictures of one case show.

    ``body``: the body surface with Cp per face; ``ground``: the ground
    patch under the vehicle with Cp (None without a ground); ``underside``:
    the lowest body surface on a plan grid (values ``cp`` and ``shear`` (…,
    3), the wall shear stress, any unit) — the common grid of the difference
    pictures; ``q_surface``: iso-surface of Q/(V/h)² = ``q_level`` with the
    rotation sense (+1/−1) per face; ``tracks``: tracked core centres;
    ``streaks``: wall-shear streak lines (polylines (K, 3), m);
    ``attached_sign``: the sign of the streamwise wall shear of attached
    flow (reversed flow has the other sign); ``notes``: what could not be
    drawn and why.
    """

    case_id: str
    variant: str
    label: str
    body: SurfaceData
    ground: SurfaceData | None = None
    underside: PlanRaster | None = None
    q_surface: SurfaceData | None = None
    q_level: float | None = None
    tracks: tuple[CoreTrack, ...] = ()
    streaks: tuple[np.ndarray, ...] = ()
    attached_sign: int = 1
    ride_height: float | None = None
    notes: tuple[str, ...] = field(default_factory=tuple)
    cp_difference: PlanRaster | None = None
    baseline: str | None = None


def scene_difference(scene: CaseScene, base: CaseScene | None) -> CaseScene:
    """The scene with ``cp_difference``: its underside Cp minus the
    baseline's on the common plan grid (:func:`postproc.kernels.planview.difference`;
    NaN where either has no underside). Unchanged without a baseline, for the
    baseline itself, or when a raster is missing."""
    from dataclasses import replace

    from postproc.kernels.planview import difference

    if base is None or scene is base or scene.underside is None or base.underside is None:
        return scene
    return replace(scene, cp_difference=difference(scene.underside, base.underside, "cp"), baseline=base.variant)


#: plan-grid cells per reference length for the underside raster (pictures, integrals)
PLAN_CELLS_PER_LENGTH = 200


def plan_spacing(refs, body_length: float) -> float:
    """Cell size (m) of the underside plan grid: the reference length over
    :data:`PLAN_CELLS_PER_LENGTH` (the same for every case of a sweep, so
    that the rasters of two variants share their grid points), or the body
    length over the same number without a reference length."""
    return float(refs.length or body_length) / PLAN_CELLS_PER_LENGTH


def gap_scale(record) -> float | None:
    """The gap scale h (m) of a sweep case: the mean of its front and rear
    ride heights (manifest record ``params``); None without them."""
    if record is None:
        return None
    vals = [float(record.params[k]) for k in ("ride_height_front", "ride_height_rear")
            if record.params.get(k) is not None]
    h = float(np.mean(vals)) if vals else 0.0
    return h if h > 0 else None


def _surface_data(s: SurfacePatch, values: np.ndarray | None, name: str = "") -> SurfaceData:
    return SurfaceData(np.asarray(s.points, dtype=float), np.asarray(s.offsets, dtype=np.int64),
                       np.asarray(s.connectivity, dtype=np.int64), values, name or s.name)


def subset_faces(s: SurfaceData, mask: np.ndarray) -> SurfaceData:
    """The faces of ``s`` where ``mask`` is True, with only their points."""
    keep = np.flatnonzero(mask)
    counts = np.diff(s.offsets)[keep]
    starts = s.offsets[:-1][keep]
    idx = np.repeat(starts, counts) + (np.arange(counts.sum()) - np.repeat(np.cumsum(counts) - counts, counts))
    conn = np.asarray(s.connectivity)[idx]
    used, inv = np.unique(conn, return_inverse=True)
    off = np.concatenate([[0], np.cumsum(counts)]).astype(np.int64)
    vals = None if s.values is None else np.asarray(s.values)[keep]
    return SurfaceData(np.asarray(s.points)[used], off, inv.astype(np.int64), vals, s.name)


def patch_cp(case: flowio.FlowCase, name: str, speed: float, p_ref_kinematic: float,
             pressure: str = "p") -> SurfaceData:
    """One patch with Cp per face; UserError naming the array when the
    patch carries no pressure."""
    s = case.patches[name]
    p = s.cell_values(pressure)
    if p is None:
        raise UserError(expected=f"a pressure array {pressure!r} on the patch {name!r}",
                        got=f"arrays: {', '.join(s.array_names()) or 'none'}", file=str(case.source), key=pressure,
                        fix="export the pressure with the solver's VTK converter (the case's run script does it)")
    return _surface_data(s, ub.pressure_coefficient(np.asarray(p, dtype=float), speed, p_ref_kinematic), name)


def build_scene(case: flowio.FlowCase, refs, *, label: str, variant: str, case_id: str,
                gd=None, vortices=None, q_scale: float | None = None, q_level: float | None = None,
                spacing: float | None = None, pressure: str = "p", shear: str = "wallShearStress") -> CaseScene:
    """The scene of one case for the pictures.

    ``refs``: :class:`postproc.flowreport.Refs`; ``gd``: the case's
    :class:`postproc.flowreport.GradientData` (None: no Q surface);
    ``vortices``: its :class:`postproc.vortices.VortexResult` (tracked
    cores); ``q_scale`` (1/s²) the Q normalisation and ``q_level`` the
    iso-value of Q/q_scale; ``spacing`` (m) of the plan grid (default body
    :func:`plan_spacing`).

    Long because: it gathers each layer of the picture (body, ground, underside raster,
    Q iso-surface, cores, streaks) in turn, each a call into a kernel or the reader.
    """
    notes: list[str] = []
    if not refs.speed:
        raise UserError(expected="a reference speed for Cp", got="none", file=str(case.source), key="reference",
                        fix="run on a case of a caseprep sweep (manifest.json)")
    pk = refs.p_ref / refs.rho
    parts = [patch_cp(case, n, refs.speed, pk, pressure) for n in refs.body_patches if n in case.patches]
    if not parts:
        raise UserError(expected="body patches in the result", got=", ".join(case.patches) or "none",
                        file=str(case.source), key="patches", fix="export the boundary patches with the VTK converter")
    body = SurfaceData.join(parts, "body")
    bx0, bx1, by0, by1, bz0, bz1 = body.bounds
    L = bx1 - bx0
    # ground footprint under the vehicle
    ground = None
    if refs.ground_patch and refs.ground_patch in case.patches:
        g = case.patches[refs.ground_patch]
        if g.cell_values(pressure) is not None:
            gs = patch_cp(case, refs.ground_patch, refs.speed, pk, pressure)
            c = g.centroids
            win = (c[:, 0] >= bx0 - 0.1 * L) & (c[:, 0] <= bx1 + 0.3 * L) & \
                  (c[:, 1] >= by0 - 0.1 * L) & (c[:, 1] <= by1 + 0.1 * L)
            if win.any():
                ground = subset_faces(gs, win)
        else:
            notes.append(f"ground patch {refs.ground_patch!r} carries no {pressure!r}")
    # the underside on the plan grid: Cp and the wall shear of the lowest face
    d = spacing or plan_spacing(refs, L)
    grid = PlanGrid.covering(bx0, bx1, by0, by1, d)
    shear_parts = [case.patches[n].cell_values(shear) for n in refs.body_patches if n in case.patches]
    have_shear = all(v is not None and np.ndim(v) == 2 for v in shear_parts)
    fv = {"cp": body.values}
    tau = None
    if have_shear:
        tau = np.concatenate([np.asarray(v, dtype=float) for v in shear_parts])
        fv["shear"] = tau
    else:
        notes.append(f"no {shear!r} on the body: no streak lines")
    # Cp interpolated from the points (the pictures' smooth bands), the shear per face
    cp_points = point_average(body.points.shape[0], body.offsets, body.connectivity, body.values)
    raster = rasterise_lowest(body.points, body.offsets, body.connectivity, grid,
                              {k: v for k, v in fv.items() if k != "cp"}, point_values={"cp": cp_points})
    streaks: tuple = ()
    sign = 1
    if tau is not None:
        areas = np.concatenate([case.patches[n].areas for n in refs.body_patches if n in case.patches])
        faces = raster.face[raster.covered]
        uniq = np.unique(faces)
        sign = wc.attached_sign(tau[uniq, 0], areas[uniq])
        streaks = tuple(plan_streaks(raster, "shear", spacing_cells=max(2, int(round(raster.grid.shape[1] / 22)))))
    # Q iso-surface in the underbody region and the tracked cores
    q_surface = None
    if gd is not None and q_scale and q_level is not None:
        X = gd.centres
        gp, gn = refs.ground_point, refs.ground_normal
        hgt = (X - gp) @ gn
        zmid = 0.5 * (bz0 + bz1)
        box = ((X[:, 0] >= bx0 - 0.05 * L) & (X[:, 0] <= bx1 + 0.3 * L) & (X[:, 1] >= by0 - 0.1 * L)
               & (X[:, 1] <= by1 + 0.1 * L) & (X[:, 2] <= zmid) & (hgt > 0))
        qn = gd.fields.q / q_scale
        if vortices is not None and vortices.wall_rotation_min is not None and gd.n_boundary is not None:
            from postproc.kernels.vortices import wall_shear_cells

            sh = wall_shear_cells(gd.fields.q, gd.fields.vorticity, gd.n_boundary > 0, vortices.wall_rotation_min)
            qn = np.where(sh, -np.abs(qn), qn)
        cand = np.flatnonzero(box & (qn > 0.5 * q_level))
        if cand.size:
            # the candidates and their face neighbours, so that the surface closes
            nb = gd.adjacency[cand].indices
            ids = np.union1d(cand, nb[box[nb]])
            iso = flowio.q_isosurface(case.grid, qn, gd.fields.vorticity[:, 0], q_level, ids)
            if iso is not None:
                q_surface = SurfaceData(*iso, name="Q")
        if q_surface is None:
            notes.append(f"no Q/(V/h)² above {q_level:g} under the floor")
    tracks = ()
    if vortices is not None:
        tracks = tuple(CoreTrack(np.asarray(t.centres, dtype=float), int(t.sense)) for t in vortices.tracks
                       if len(t.members) >= 2)
    h = gap_scale(case.record)
    return CaseScene(case_id=case_id, variant=variant, label=label, body=body, ground=ground, underside=raster,
                     q_surface=q_surface, q_level=q_level, tracks=tracks, streaks=streaks, attached_sign=sign,
                     ride_height=h, notes=tuple(notes))
