"""Flow-structure analyses of one case: joins the I/O layer
(:mod:`postproc.io.flow`) to the numeric kernels (gradients, vortices,
diffuser, underbody, wallchecks) and returns JSON-ready results. No click, no
printing.

Reference values (speed, length, ρ, ν, p_ref, ground plane, wind direction,
body patches) come from the sweep manifest when the case belongs to a sweep;
otherwise from the caller's overrides, with clearly stated fallbacks. The
sweep's flow columns, a reduction of :func:`flow_payload`, are in
:mod:`postproc.pipelines.flow_columns`.
Axes: body frame (x rearward, y right, z up, m).
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from caseprep.contract.errors import UserError
from caseprep.contract.walls import WALL_TREATMENTS

from postproc.io import flow as flowio
from postproc.kernels import diffuser as dif
from postproc.kernels import gradients as grad
from postproc.kernels import meshtopo
from postproc.kernels import underbody as ub
from postproc.kernels import vortices as vx
from postproc.kernels import wallchecks as wc
from postproc.kernels.planview import PlanGrid, rasterise_lowest
from postproc.pipelines.case_scene import gap_scale, plan_spacing


DOMAIN_PATCH_WORDS = ("ground", "inlet", "outlet", "top", "side", "left", "right", "front", "back", "symmetry",
                      "farfield", "wall_domain", "lowerwall", "upperwall", "empty")


@dataclass(frozen=True)
class Refs:
    """Reference values for one case (SI, body frame)."""

    speed: float | None
    length: float | None
    rho: float
    nu: float | None
    p_ref: float
    free_stream: np.ndarray | None
    ground_point: np.ndarray
    ground_normal: np.ndarray
    body_patches: tuple[str, ...]
    ground_patch: str | None
    notes: tuple[str, ...]


def references(case: flowio.FlowCase, *, speed: float | None = None, length: float | None = None,
               rho: float | None = None, nu: float | None = None) -> Refs:
    """Reference values from the manifest record, overridden by the
    arguments given (speed m/s, length m, rho kg/m³, nu m²/s)."""
    notes = []
    rec = case.record
    if rec is not None:
        r = rec.reference
        speed = speed or r.speed
        length = length or r.length
        rho = rho or r.rho
        nu = nu or r.nu
        p_ref = r.p_ref
        fs = np.asarray(rec.wind_direction_body, dtype=float) * speed
        gp, gn = rec.placement.ground_point_body, rec.placement.ground_normal_body
        bp = rec.patches.get("body", [])
        body = tuple([bp] if isinstance(bp, str) else bp)
        gpatch = rec.patches.get("ground") if rec.ground != "none" else None
    else:
        p_ref = 0.0
        fs = np.array([speed, 0.0, 0.0]) if speed else None
        if rho is None:
            rho = 1.225
            notes.append("no manifest: rho = 1.225 kg/m³ assumed (ISO 2533 sea level)")
        names = list(case.patches)
        gpatch = next((n for n in names if "ground" in n.lower()), None)
        if gpatch is not None:
            s = case.patches[gpatch]
            a = s.areas
            gp = (s.centroids * a[:, None]).sum(axis=0) / a.sum()
            gn = (s.normals * a[:, None]).sum(axis=0)
            gn = gn / np.linalg.norm(gn)
            if gn[2] < 0:
                gn = -gn
            notes.append(f"no manifest: ground plane from patch {gpatch!r}")
        else:
            b = case.grid.bounds
            gp, gn = np.array([0.0, 0.0, b[4]]), np.array([0.0, 0.0, 1.0])
            notes.append("no manifest: ground taken as the domain's lowest z plane")
        body = tuple(n for n in names if not any(w in n.lower() for w in DOMAIN_PATCH_WORDS))
    return Refs(speed=speed, length=length, rho=float(rho), nu=nu, p_ref=float(p_ref),
                free_stream=fs, ground_point=np.asarray(gp, float), ground_normal=np.asarray(gn, float),
                body_patches=body, ground_patch=gpatch, notes=tuple(notes))


def _finite(case: flowio.FlowCase, name: str, arr: np.ndarray) -> None:
    bad = ~np.isfinite(arr).reshape(arr.shape[0], -1).all(axis=1)
    if bad.any():
        raise UserError(expected=f"finite values in the cell array {name!r}", got=f"{int(bad.sum())} cells with NaN/inf",
                        file=str(case.source), key=name,
                        fix="the run diverged or was written mid-iteration; check the solver log and re-run")


@dataclass
class GradientData:
    """Mesh topology, centres, the LSQ operator and the velocity-gradient
    fields of one case (cell data, body frame)."""

    adjacency: object
    centres: np.ndarray
    operator: grad.GradientOperator
    velocity: np.ndarray
    fields: grad.VelocityGradientFields
    volumes: np.ndarray | None = None
    n_boundary: np.ndarray | None = None


def gradient_data(case: flowio.FlowCase, velocity: str = "U", *, with_lambda2: bool = True,
                  speed: float | None = None, length: float | None = None,
                  use_boundary: bool = True) -> GradientData:
    """Velocity-gradient quantities of the case from its cell data; with
    ``use_boundary`` the patches' face velocities are used in the stencils
    of the wall-adjacent cells (when every patch carries the velocity)."""
    U = case.cell_array(velocity)
    if U.ndim != 2 or U.shape[1] != 3:
        raise UserError(expected=f"a 3-component velocity array {velocity!r}", got=f"shape {U.shape}",
                        file=str(case.source), key=velocity, fix="name the velocity array with --velocity")
    _finite(case, velocity, U)
    topo = flowio.topology(case.grid)
    X, vol = flowio.cell_geometry(case.grid)
    # single-precision data (the solver's VTK arrays are Float32): single-
    # precision coefficients halve the operator's memory at no loss
    dtype = np.float32 if U.dtype == np.float32 else np.float64
    bf = flowio.boundary_faces(case) if use_boundary else None
    Ub = bf.values(case, velocity) if bf is not None else None
    if Ub is not None and Ub.ndim == 2 and Ub.shape[1] == 3 and np.isfinite(Ub).all():
        # the patches' face velocities (wall, inflow, outflow values) join
        # the stencils of the cells that own those faces
        A, nbf, owners = meshtopo.cell_adjacency(topo, boundary_polygons=(bf.offsets, bf.point_ids))
        op = grad.lsq_gradient_operator(X, A, dtype=dtype, boundary_points=bf.centres, boundary_owner=owners)
    else:
        A, nbf = meshtopo.cell_adjacency(topo)
        op = grad.lsq_gradient_operator(X, A, dtype=dtype)
        Ub = None
    f = grad.velocity_gradient_fields(op, U, speed=speed, length=length, with_lambda2=with_lambda2, boundary=Ub)
    return GradientData(adjacency=A, centres=X, operator=op, velocity=U, fields=f, volumes=vol, n_boundary=nbf)


def _check_stations(case: flowio.FlowCase, xs, what: str) -> np.ndarray:
    b = case.grid.bounds
    xs = np.asarray(xs, dtype=float)
    out = xs[(xs <= b[0]) | (xs >= b[1])]
    if out.size:
        raise UserError(expected=f"{what} inside the domain, {b[0]:.6g} < x < {b[1]:.6g} m (body frame, x rearward)",
                        got=[float(v) for v in out], file=str(case.source), key=what,
                        fix="choose stations between the domain's inlet and outlet")
    return xs


def body_extent(case: flowio.FlowCase, refs: Refs) -> tuple[float, float] | None:
    """x range (m) of the body patches, or None without body patches."""
    pts = [case.patches[n].points for n in refs.body_patches if n in case.patches]
    if not pts:
        return None
    p = np.concatenate(pts)
    return float(p[:, 0].min()), float(p[:, 0].max())


def analyse_vortices(case: flowio.FlowCase, *, stations=None, q_star: float = 100.0, speed: float | None = None,
                     length: float | None = None, max_jump: float | None = None, regions: bool = True,
                     velocity: str = "U", gd: GradientData | None = None,
                     wall_rotation_min: float | None = 1.5, q_length: float | None = None) -> vx.VortexResult:
    """Vortex cores per station, tracks and 3D Q-regions of a case.

    ``stations``: x positions (m, body frame) or None for every 5 % of the
    reference length from the nose to half a reference length behind the
    tail (the body patches' x extent).
    ``q_star``: threshold on Q* = Q/(V/ℓ)² with ℓ = ``q_length`` (m; default
    the reference length L; :func:`q_length` gives the gap scale, the ride
    height, for underbody cores). ``max_jump``: track linking limit
    (m), default 2 station spacings. ``wall_rotation_min``: cells on the
    boundary where ‖Ω‖ < this × ‖S‖ (boundary-layer shear, not a vortex:
    :func:`postproc.kernels.vortices.wall_shear_cells`) do not count as core cells;
    None keeps every cell.
    """
    refs = references(case, speed=speed, length=length)
    if not (refs.speed and refs.length):
        raise UserError(expected="a reference speed and length for Q* = Q/(V/L)²", got="none",
                        file=str(case.source), key="reference",
                        fix="run on a case of a caseprep sweep (manifest.json), or pass --speed and --length")
    ql = float(q_length) if q_length else refs.length
    q_scale = (refs.speed / ql) ** 2
    gd = gd or gradient_data(case, velocity, with_lambda2=False, speed=refs.speed, length=refs.length)
    b = case.grid.bounds
    if stations is None:
        ext = body_extent(case, refs)
        x_front = ext[0] if ext else b[0]
        L = refs.length
        xs = vx.default_stations(x_front, L, b[0], b[1], x_tail=ext[1] if ext else None)
        if xs.size == 0:
            xs = np.linspace(b[0], b[1], 22)[1:-1]
    else:
        xs = _check_stations(case, stations, "--stations")
    xs = np.sort(xs)
    q = gd.fields.q
    n_excl = 0
    if wall_rotation_min is not None and gd.n_boundary is not None:
        shear = vx.wall_shear_cells(q, gd.fields.vorticity, gd.n_boundary > 0, wall_rotation_min)
        n_excl = int(np.count_nonzero(shear & (q > q_star * q_scale)))
        if shear.any():
            q = q.copy()
            q[shear] = -np.abs(q[shear])
    arrays = {"Q": q, "vorticity": gd.fields.vorticity, "U": gd.velocity}
    secs = flowio.slice_stations(case.grid, xs, arrays)
    thr = q_star * q_scale
    cores = [vx.find_cores(s, thr, free_stream=refs.free_stream, q_scale=q_scale) for s in secs]
    if max_jump is None:
        max_jump = 2.0 * float(np.median(np.diff(xs))) if xs.size > 1 else 0.1 * refs.length
    tracks = vx.link_tracks(cores, max_jump)
    regs = []
    if regions:
        ids = np.flatnonzero(q > thr)
        if ids.size:
            vol = gd.volumes[ids] if gd.volumes is not None else flowio.cell_volumes(case.grid, ids)
            regs = vx.q_regions(gd.adjacency, q, thr, gd.centres, vol, gd.fields.vorticity)
    return vx.VortexResult(stations=xs, cores=cores, tracks=tracks, regions=regs, q_threshold=thr, q_scale=q_scale,
                           wall_cells_excluded=n_excl, wall_rotation_min=wall_rotation_min, q_length=ql)


def _station_section(case, refs, x, y_range, pressure, velocity, use_floor: bool):
    secs = flowio.slice_stations(case.grid, [x], {"p": case.cell_array(pressure), "U": case.cell_array(velocity)})
    s = secs[0]
    floor_h = None
    if use_floor and refs.body_patches:
        segs = []
        for n in refs.body_patches:
            if n in case.patches:
                sg, _, _ = flowio.slice_surface(case.patches[n], 0, x)
                segs.append(sg)
        seg = np.concatenate(segs) if segs else np.zeros((0, 2, 3))
        if seg.shape[0]:
            floor_h = dif.floor_heights(seg, s.centroids[:, 1], refs.ground_point, refs.ground_normal)
        else:
            raise UserError(expected=f"the body above the station x = {x:.6g} m", got="no body surface there",
                            file=str(case.source), key="station", fix="choose a station under the floor")
    m = dif.underfloor_mask(s.centroids, refs.ground_point, refs.ground_normal, floor_h, y_range)
    return s, m


def analyse_diffuser(case: flowio.FlowCase, *, throat: float | None = None, exit: float | None = None,
                     y_range: tuple[float, float] | None = None, rho: float | None = None,
                     pressure: str = "p", velocity: str = "U", kinematic: bool = True,
                     use_floor: bool = True) -> dif.DiffuserResult:
    """Diffuser pressure recovery between ``throat`` and ``exit`` (m, body x).

    Cross-sections: the fluid between the ground and the floor (the lowest
    body surface above each point; ``use_floor=False`` takes the whole
    section, e.g. for a channel mesh), within ``y_range`` (m) when given.
    Without stations, they are found from the floor's side profile
    (:func:`postproc.kernels.diffuser.find_diffuser`). Pressure ``kinematic`` (m²/s²)
    is converted with ρ.
    """
    refs = references(case, rho=rho)
    if throat is None or exit is None:
        surfs = [case.patches[n] for n in refs.body_patches if n in case.patches]
        if not surfs:
            raise UserError(expected="body surface patches to find the diffuser", got="none",
                            file=str(case.source), key="--throat/--exit", fix="give --throat and --exit (m, body x)")
        band = y_range
        # the floor is seen through the centroids of the body faces that face up or
        # down (|n_z| > 0.5: floor, ramp, top; not the sides), binned in x at about
        # two face sizes so that every bin holds underside faces of the snapped mesh
        c = np.concatenate([s.centroids for s in surfs])
        nz = np.abs(np.concatenate([s.normals for s in surfs])[:, 2])
        a = np.concatenate([s.areas for s in surfs])
        flat = nz > 0.5
        allp = c[flat] if flat.sum() >= 10 else c
        size = float(np.median(np.sqrt(a[flat]))) if flat.sum() >= 10 else 0.0
        span = float(allp[:, 0].max() - allp[:, 0].min())
        n_bins = int(np.clip(span / (2.0 * size), 10, 100)) if size > 0 else 100
        # the profile in the body frame (flat floor level, rake removed) finds
        # the ramp; the clearance above the ground is the rise reference
        x, z = dif.underside_profile(allp, np.zeros(3), np.array([0.0, 0.0, 1.0]), y_band=band, n_bins=n_bins)
        _, h = dif.underside_profile(allp, refs.ground_point, refs.ground_normal, y_band=band, n_bins=n_bins)
        t, e = dif.find_diffuser(x, z, clearance=h)
        # the exit as close to the trailing edge as the faces allow (a bin centre
        # lies half a bin ahead of it): the rearmost underside face centroid
        # less half a face
        e = max(e, float(allp[:, 0].max()) - 0.5 * size)
        throat = t if throat is None else throat
        exit = e if exit is None else exit
    _check_stations(case, [throat, exit], "--throat/--exit")
    if not exit > throat:
        raise UserError(expected="an exit station behind the throat (x rearward)", got=f"throat {throat}, exit {exit}",
                        key="--throat/--exit", fix="swap the stations")
    results = []
    for x in (throat, exit):
        s, m = _station_section(case, refs, x, y_range, pressure, velocity, use_floor)
        p = s.data["p"][m] * (refs.rho if kinematic else 1.0)
        u = s.data["U"][m]
        if not (np.isfinite(p).all() and np.isfinite(u).all()):
            raise UserError(expected="finite pressure and velocity on the station", got="NaN/inf",
                            file=str(case.source), key=f"x = {x}", fix="the run diverged; check the solver log")
        results.append(dif.station_average(x, s.areas[m], p, u, refs.rho))
    return dif.pressure_recovery(results[0], results[1], refs.rho, p_ref=refs.p_ref if refs.speed else None,
                                 speed=refs.speed)


def analyse_underbody(case: flowio.FlowCase, *, lines=(0.0,), speed: float | None = None,
                      pressure: str = "p") -> dict:
    """Cp along the underside at the spanwise positions ``lines`` (m, body y)
    and the ground-plane footprint. JSON-ready dict."""
    refs = references(case, speed=speed)
    if not refs.speed:
        raise UserError(expected="a reference speed for Cp", got="none", file=str(case.source), key="reference",
                        fix="run on a sweep case (manifest.json) or pass --speed")
    p_ref_k = refs.p_ref / refs.rho
    out = {"lines": [], "ground": None}
    for y in lines:
        segs, cps = [], []
        for n in refs.body_patches:
            if n not in case.patches:
                continue
            sg, ids, _ = flowio.slice_surface(case.patches[n], 1, float(y))
            pv = case.patches[n].cell_values(pressure)
            if pv is None or sg.shape[0] == 0:
                continue
            segs.append(sg)
            cps.append(ub.pressure_coefficient(pv[ids], refs.speed, p_ref_k))
        if segs:
            line = ub.underside_line(float(y), np.concatenate(segs), np.concatenate(cps), refs.ground_point,
                                     refs.ground_normal)
            out["lines"].append(line.to_dict() if line is not None else {"y": float(y), "missing": True})
        else:
            out["lines"].append({"y": float(y), "missing": True})
    if refs.ground_patch and refs.ground_patch in case.patches:
        g = case.patches[refs.ground_patch]
        pv = g.cell_values(pressure)
        ext = body_extent(case, refs)
        if pv is not None and ext is not None:
            pts = np.concatenate([case.patches[n].points for n in refs.body_patches if n in case.patches])
            L = ext[1] - ext[0]
            win = (ext[0] - 0.1 * L, ext[1] + 0.3 * L, pts[:, 1].min() - 0.1 * L, pts[:, 1].max() + 0.1 * L)
            try:
                out["ground"] = ub.ground_footprint(g.centroids, g.areas,
                                                    ub.pressure_coefficient(pv, refs.speed, p_ref_k), win).to_dict()
            except ValueError:
                out["ground"] = None
    # the whole underside seen from below on a plan grid: area integrals of Cp
    parts = [case.patches[n] for n in refs.body_patches if n in case.patches]
    if parts and all(s.cell_values(pressure) is not None for s in parts):
        pts, offs, conn, cps = [], [np.zeros(1, dtype=np.int64)], [], []
        bp = bc = 0
        for s in parts:
            pts.append(np.asarray(s.points, dtype=float))
            offs.append(np.asarray(s.offsets[1:], dtype=np.int64) + bc)
            conn.append(np.asarray(s.connectivity, dtype=np.int64) + bp)
            cps.append(ub.pressure_coefficient(s.cell_values(pressure), refs.speed, p_ref_k))
            bp += pts[-1].shape[0]
            bc += int(s.offsets[-1])
        P = np.concatenate(pts)
        lo, hi = P.min(axis=0), P.max(axis=0)
        grid = PlanGrid.covering(lo[0], hi[0], lo[1], hi[1], plan_spacing(refs, hi[0] - lo[0]))
        r = rasterise_lowest(P, np.concatenate(offs), np.concatenate(conn), grid, {"cp": np.concatenate(cps)})
        out["underside"] = ub.underside_integrals(r.values["cp"], grid.spacing).to_dict()
    out["notes"] = list(refs.notes)
    return out


#: The y+ band flow passes judge by when none is given: the wall-function
#: treatment's (caseprep.contract.walls, where it is declared).
DEFAULT_YPLUS_BAND: tuple[float, float] = WALL_TREATMENTS["wall-function"].band


def analyse_walls(case: flowio.FlowCase, *, target: tuple[float, float] = DEFAULT_YPLUS_BAND,
                  nu: float | None = None, speed: float | None = None, floor_lines=(0.0,), centres=None) -> dict:
    """y+ per wall patch, streamwise shear reversals on the floor lines and
    suspicious cell values. JSON-ready dict."""
    refs = references(case, nu=nu, speed=speed)
    X = centres if centres is not None else flowio.cell_centres(case.grid)
    tree = None
    patches = {}
    notes = list(refs.notes)
    for name, s in case.patches.items():
        yp = s.cell_values("yPlus")
        src = "yPlus"
        if yp is not None and not np.any(np.asarray(yp)):
            # the solver writes y+ on every patch, zero on those that are not walls
            notes.append(f"patch {name!r}: y+ identically zero (not a wall), left out")
            continue
        if yp is None:
            tau = s.cell_values("wallShearStress")
            if tau is None:
                continue
            if refs.nu is None:
                raise UserError(expected="a kinematic viscosity to compute y+", got="none", file=str(case.source),
                                key="nu", fix="run on a sweep case (manifest.json) or pass --nu")
            if tree is None:
                from scipy.spatial import cKDTree
                tree = cKDTree(X)
            y = wc.wall_distance(s.centroids, s.normals, X, tree=tree)
            yp = wc.yplus(tau, y, refs.nu)
            src = "wallShearStress + wall distance"
        patches[name] = wc.yplus_stats(name, yp, s.areas, target, source=src).to_dict()
    reversals = []
    for n in refs.body_patches:
        s = case.patches.get(n)
        if s is None:
            continue
        tau = s.cell_values("wallShearStress")
        if tau is None:
            continue
        tau = np.asarray(tau, dtype=float)
        sign = wc.attached_sign(tau[:, 0], s.areas)
        for y in floor_lines:
            sg, ids, _ = flowio.slice_surface(s, 1, float(y))
            if sg.shape[0] == 0:
                continue
            # the underside's streamwise shear along y = const (lowest segment per x)
            line = ub.underside_line(float(y), sg, tau[ids, 0], refs.ground_point, refs.ground_normal)
            if line is None:
                continue
            rev = wc.shear_reversals(line.x, line.cp, sign)
            reversals.append({"patch": n, "y": float(y), "attached_sign": sign,
                              "reversals": [r.to_dict() for r in rev],
                              "reversed_share_patch": wc.reversed_share(tau[:, 0], s.areas, sign)})
    flags = []
    for name in case.cell_array_names():
        arr = case.cell_array(name)
        lower = upper = None
        if name == "U" and refs.speed:
            upper = 5.0 * refs.speed
        elif name in ("k", "epsilon", "omega", "nut", "nuTilda"):
            lower = 0.0
        elif name == "p" and refs.speed:
            lower = -50.0 * 0.5 * refs.speed**2
            upper = 5.0 * 0.5 * refs.speed**2
        flags.append(wc.field_flags(name, arr, X, lower=lower, upper=upper).to_dict())
    return {"yplus": patches, "shear_reversals": reversals, "field_flags": flags, "notes": notes}


#: Default core thresholds on Q/(V/ℓ)² by the length ℓ in the normalisation:
#: the reference length L ("length", the wheelbase for a car) or the gap
#: scale h ("gap", the ride height). Our choice, no source: see the README
#: ("postproc: vortices …") for what they give on the demo floors.
Q_STAR_DEFAULTS = {"length": 100.0, "gap": 0.01}


def q_normalisation(case: flowio.FlowCase, q_scale: str = "auto", gap: float | None = None) -> tuple[str, float | None]:
    """Which length normalises Q: ("gap", h) with h = ``gap`` or the case's
    ride height (:func:`gap_scale`), or ("length", None) for the reference
    length. ``q_scale`` "auto" takes the gap when one is known."""
    if q_scale not in ("auto", "gap", "length"):
        raise UserError(expected="a Q scale 'auto', 'gap' or 'length'", got=q_scale, key="--q-scale",
                        fix="use --q-scale gap (ride height) or --q-scale length (reference length)")
    h = gap if gap is not None else gap_scale(case.record)
    if gap is not None and not gap > 0:
        raise UserError(expected="a positive gap scale (m)", got=gap, key="--gap", fix="give the ride height in m")
    if q_scale == "length" or (q_scale == "auto" and h is None):
        return "length", None
    if h is None:
        raise UserError(expected="a ride height for the gap scale (V/h)²", got="none (no sweep manifest)",
                        file=str(case.source), key="--q-scale gap",
                        fix="pass --gap H (m), or --q-scale length to normalise by the reference length")
    return "gap", h


def flow_payload(case: flowio.FlowCase, *, q_star: float | None = None, q_scale: str = "auto",
                 gap: float | None = None, target: tuple[float, float] = DEFAULT_YPLUS_BAND,
                 gd: GradientData | None = None) -> tuple[dict, GradientData | None]:
    """All flow-structure results of one case (vortices, diffuser,
    underbody, walls) as one JSON-ready dict, each part replaced by
    ``{"error": message}`` when it cannot be computed — what ``postproc
    flow`` prints and what the sweep reduces to its flow columns
    (:mod:`postproc.caseflow`). Also returns the gradient data it used (None
    when the velocity is unusable) so that a caller can reuse it.

    ``q_scale``/``gap``: the normalisation of Q (:func:`q_normalisation`);
    ``q_star``: the core threshold (default :data:`Q_STAR_DEFAULTS`).
    """
    payload: dict = {"source": str(case.source), "case_id": case.record.case_id if case.record else None}
    errors: dict[str, str] = {}
    r0 = references(case)
    ext = body_extent(case, r0)
    payload["frame"] = {"axes": "body frame: x rearward, y right, z up, m",
                        "body_x": list(ext) if ext is not None else None,
                        "ground_point": r0.ground_point.tolist(), "ground_normal": r0.ground_normal.tolist()}
    try:
        kind, h = q_normalisation(case, q_scale, gap)
        thr = float(q_star) if q_star is not None else Q_STAR_DEFAULTS[kind]
        payload["q_normalisation"] = {"scale": kind, "gap": h, "threshold": thr}
    except UserError as exc:
        kind, h, thr = None, None, None
        errors["vortices"] = str(exc)
    centres = None
    if gd is None and kind is not None:
        try:
            gd = gradient_data(case, with_lambda2=False, speed=r0.speed, length=r0.length)
        except UserError as exc:
            errors["vortices"] = str(exc)
    if gd is not None:
        centres = gd.centres
    parts = {
        "vortices": lambda: analyse_vortices(case, q_star=thr, q_length=h, gd=gd).to_dict(),
        "diffuser": lambda: analyse_diffuser(case).to_dict(),
        "underbody": lambda: analyse_underbody(case),
        "walls": lambda: analyse_walls(case, target=target, centres=centres),
    }
    for name, fn in parts.items():
        if name in errors:
            payload[name] = {"error": errors[name]}
            continue
        try:
            payload[name] = fn()
        except UserError as exc:
            payload[name] = {"error": str(exc)}
    return payload, gd
