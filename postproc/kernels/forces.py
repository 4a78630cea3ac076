"""Surface integration of pressure and wall shear into forces and moments.

Pure numeric kernel: numpy arrays in, a :class:`ForceResult` out. No file
I/O, no printing. Inputs are never modified.

Axes and units
--------------
All vectors are in the frame of the given points (for underfloor cases the
mesh frame, which is the **body frame** of :mod:`caseprep.contract.frames`: x rearward,
y right, z up). Lengths m, areas m², forces N, moments N·m, static pressure
Pa, kinematic pressure m²/s², density kg/m³.

Method
------
Each face is a planar or non-planar polygon with vertices p_0 … p_{n−1}. Its
area vector is the exact vector area S = ½ Σ_i p_i × p_{i+1} (the sum of the
fan triangles (p_0, p_i, p_{i+1})); its centroid is the fan triangles'
centroids weighted by their area projected on S (exact for planar polygons).
With one pressure p and one shear-stress vector τ per face (face, i.e. VTK
*cell*, data; never point-interpolated data), the force on the body is the
midpoint rule

    F_p = − Σ (p − p_ref) n̂_out |S|,     F_v = Σ τ_wall |S|,

with n̂_out the unit normal pointing out of the body (into the fluid) and
τ_wall the stress the fluid exerts on the wall. Moments are taken about the
**face centroids**: M = Σ (c_f − r_0) × dF_f. For face values that are the
face averages this is exact for the force and second-order accurate in the
face size for the moment (the midpoint rule; the tests measure the order).

Conventions of the input (all explicit options, defaults are those of the
solver's VTK export):

``normals``
    ``"into_body"`` (the solver's: boundary-face normals point out of the
    fluid, i.e. into the body) or ``"out_of_body"``.
``shear_on``
    ``"fluid"`` (the solver's ``wallShearStress``: the stress acting on the
    fluid, pointing against the near-wall flow, so the force on the body is
    −ρ Σ τ |S|) or ``"wall"`` (the stress acting on the wall).
``kinematic``
    True (the solver's incompressible form: p and τ divided by ρ, m²/s²) —
    multiplied by ``rho`` here — or False (static values in Pa).

Gauge pressure: ``p_ref`` (Pa, always static) is subtracted from the static
pressure. A closed surface has Σ S = 0, so a uniform pressure gives no net
force or moment and the result does not depend on ``p_ref``; an open patch
(a floor panel, a wing without its tips) gets an extra force −p_ref Σ n̂|S|,
so its result depends on ``p_ref``. :func:`closure` measures how open a
surface is.

Accumulation is in float64 whatever the input dtype (the solver exports
Float32). Faces are grouped by vertex count (triangles, quads, each larger
polygon size) and processed in chunks small enough for the CPU cache, with
component arithmetic on contiguous 1-D arrays; the working memory is the
float64 coordinates plus a few chunk-sized arrays.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Literal, Sequence

import numpy as np

from caseprep.contract.errors import UserError
from postproc.kernels.polygons import CHUNK, _coords, _Faces, _polygons

Normals = Literal["into_body", "out_of_body"]
NORMALS: tuple[str, ...] = ("into_body", "out_of_body")
SHEAR_ON: tuple[str, ...] = ("fluid", "wall")


#: A face whose area is below this fraction of the squared bounding-box
#: diagonal is degenerate (1e-14: a 5 m body's faces below ~0.5 µm × 0.5 µm).
DEGENERATE_REL_AREA = 1e-14


@dataclass(frozen=True)
class ForceResult:
    """Integrated loads on a surface.

    Vectors (3,) in the frame of the input points; forces N, moments N·m about
    ``about`` (m), ``area`` m² (sum of face areas). ``parts`` maps a part name
    to its own ForceResult (same ``about``); empty when no part ids were given.
    """

    force: np.ndarray
    force_pressure: np.ndarray
    force_viscous: np.ndarray
    moment: np.ndarray
    moment_pressure: np.ndarray
    moment_viscous: np.ndarray
    area: float
    about: np.ndarray
    n_faces: int
    parts: dict[str, "ForceResult"] = field(default_factory=dict)
    open_fraction: float = 0.0  # |Σ S| / Σ |S| of the whole surface (0 closed, 1 flat patch)

    def moment_about(self, point: Sequence[float]) -> np.ndarray:
        """Total moment (N·m) about another point (m): M' = M + (r_0 − r') × F."""
        q = np.asarray(point, dtype=float).reshape(3)
        return self.moment + np.cross(self.about - q, self.force)

    def shifted(self, point: Sequence[float]) -> "ForceResult":
        """The same loads with every moment (and part) taken about ``point`` (m)."""
        q = np.asarray(point, dtype=float).reshape(3)
        d = self.about - q
        return ForceResult(
            force=self.force, force_pressure=self.force_pressure, force_viscous=self.force_viscous,
            moment=self.moment + np.cross(d, self.force),
            moment_pressure=self.moment_pressure + np.cross(d, self.force_pressure),
            moment_viscous=self.moment_viscous + np.cross(d, self.force_viscous),
            area=self.area, about=q.copy(), n_faces=self.n_faces,
            parts={k: v.shifted(q) for k, v in self.parts.items()}, open_fraction=self.open_fraction,
        )

    def to_dict(self) -> dict:
        """JSON-ready dict (lists of floats)."""
        d = {
            "force": self.force.tolist(),
            "force_pressure": self.force_pressure.tolist(),
            "force_viscous": self.force_viscous.tolist(),
            "moment": self.moment.tolist(),
            "moment_pressure": self.moment_pressure.tolist(),
            "moment_viscous": self.moment_viscous.tolist(),
            "about": self.about.tolist(),
            "area": float(self.area),
            "n_faces": int(self.n_faces),
            "open_fraction": float(self.open_fraction),
        }
        if self.parts:
            d["parts"] = {k: {kk: vv for kk, vv in v.to_dict().items() if kk != "parts"} for k, v in self.parts.items()}
        return d


# --------------------------------------------------------------------------- checks

def _check_finite(name: str, arr: np.ndarray, where, allow: bool) -> np.ndarray | None:
    """Mask of faces with non-finite values (None if all finite). Raises
    UserError with the count and first location unless ``allow``."""
    a = np.asarray(arr)
    if np.isfinite(a).all():  # the common case: one flat pass
        return None
    fin = np.isfinite(a) if a.ndim == 1 else np.isfinite(a).all(axis=1)
    bad = np.flatnonzero(~fin)
    if not allow:
        i = int(bad[0])
        loc = where(i)
        raise UserError(
            expected=f"finite values of the face array {name!r}",
            got=f"{bad.size} non-finite (NaN/inf) value(s) of {a.shape[0]}; first at face {i}, centroid "
                f"({loc[0]:.6g}, {loc[1]:.6g}, {loc[2]:.6g}) m",
            key=name,
            fix="check the solution for divergence; --allow-nonfinite skips those faces (their load is left out)",
        )
    return ~fin


# --------------------------------------------------------------------------- kernel

# Layout of the accumulated sums (per part): Σ p S (3), Σ p c × S (3), Σ τ|S| (3),
# Σ c × τ|S| (3), Σ |S| (1), Σ S (3).
_NSUM = 16
_FEW_RUNS = 64  # a chunk whose part ids change fewer times is summed run by run (else by bincount)


def _dot(a: np.ndarray, b: np.ndarray) -> float:
    """Σ a_i b_i of 1-D float64 arrays without a temporary. Not BLAS: a threaded
    BLAS dot waits for a second core, which costs milliseconds per call on a busy machine."""
    return np.einsum("i,i->", a, b)


def _sums(Sx, Sy, Sz, cx, cy, cz, mag, pc, T) -> np.ndarray:
    """The _NSUM sums of one run of faces (float64, dot products: no per-face arrays
    of moments). M = Σ c × F component-wise: M_x = c_y·F_z − c_z·F_y."""
    out = np.empty(_NSUM)
    dot = _dot
    qx, qy, qz = pc * Sx, pc * Sy, pc * Sz
    out[0], out[1], out[2] = dot(pc, Sx), dot(pc, Sy), dot(pc, Sz)
    out[3] = dot(cy, qz) - dot(cz, qy)
    out[4] = dot(cz, qx) - dot(cx, qz)
    out[5] = dot(cx, qy) - dot(cy, qx)
    if T is not None:
        tx, ty, tz = T
        mx, my, mz = cx * mag, cy * mag, cz * mag
        out[6], out[7], out[8] = dot(mag, tx), dot(mag, ty), dot(mag, tz)
        out[9] = dot(my, tz) - dot(mz, ty)
        out[10] = dot(mz, tx) - dot(mx, tz)
        out[11] = dot(mx, ty) - dot(my, tx)
    else:
        out[6:12] = 0.0
    out[12] = mag.sum()
    out[13], out[14], out[15] = Sx.sum(), Sy.sum(), Sz.sum()
    return out


def _sums_by_part(pa, n_parts, Sx, Sy, Sz, cx, cy, cz, mag, pc, T) -> np.ndarray:
    """(n_parts, _NSUM) sums of faces with interleaved part ids (bincount route)."""
    qx, qy, qz = pc * Sx, pc * Sy, pc * Sz
    terms = [qx, qy, qz, cy * qz - cz * qy, cz * qx - cx * qz, cx * qy - cy * qx]
    if T is not None:
        tx, ty, tz = T[0] * mag, T[1] * mag, T[2] * mag
        terms += [tx, ty, tz, cy * tz - cz * ty, cz * tx - cx * tz, cx * ty - cy * tx]
    else:
        terms += [None] * 6
    terms += [mag, Sx, Sy, Sz]
    out = np.zeros((n_parts, _NSUM))
    for i, t in enumerate(terms):
        if t is not None:
            out[:, i] = np.bincount(pa, t, minlength=n_parts)
    return out


@dataclass(frozen=True)
class ForceSettings:
    """How the face values are to be read (see the module doc).

    ``rho``: density ρ, kg/m³ (used only when ``kinematic``); ``p_ref``:
    reference pressure (Pa, static) subtracted before integration; ``about``:
    moment reference point r_0, m; ``normals``: ``"into_body"`` (the
    solver's) or ``"out_of_body"``, where the area vectors point;
    ``shear_on``: ``"fluid"`` (the solver's ``wallShearStress``) or
    ``"wall"``; ``kinematic``: whether pressure and shear are divided by ρ;
    ``allow_nonfinite``: skip faces whose values are NaN/inf instead of
    refusing; ``allow_degenerate``: accept zero-area faces (they carry no
    load)."""

    rho: float = 1.0
    p_ref: float = 0.0
    about: Sequence[float] = (0.0, 0.0, 0.0)
    normals: str = "into_body"
    shear_on: str = "fluid"
    kinematic: bool = True
    allow_nonfinite: bool = False
    allow_degenerate: bool = False

    def __post_init__(self) -> None:
        if self.normals not in NORMALS:
            raise UserError(expected=f"normals one of {NORMALS}", got=self.normals, key="normals")
        if self.shear_on not in SHEAR_ON:
            raise UserError(expected=f"shear_on one of {SHEAR_ON}", got=self.shear_on, key="shear_on")


@dataclass
class _Source:
    """The faces to integrate, from points and faces or from area vectors and
    centroids: their count, their groups, each chunk's geometry relative to
    the moment point (``geometry(group, lo, hi)`` → Sx, Sy, Sz, cx, cy, cz,
    |S|²), one face's centroid (``centroid_of(i)``, m) and the bounding box
    sides (m)."""

    m: int
    groups: list
    geometry: object
    centroid_of: object
    bb: np.ndarray


def _source(points, faces, area_vectors, centroids, r0: np.ndarray) -> _Source:
    if area_vectors is None:
        if points is None or faces is None:
            raise UserError(expected="points and faces, or area_vectors and centroids", got="neither", key="faces")
        fc = _Faces(faces)
        P = np.asarray(points)
        X, Y, Z = _coords(P, r0)  # coordinates relative to the moment point
        bb = np.array([v.max() - v.min() for v in (X, Y, Z)]) if P.size and fc.m else np.zeros(3)
        return _Source(fc.m, fc.groups, lambda g, lo, hi: _polygons(X, Y, Z, fc.rows(g, lo, hi)),
                       lambda i: np.array(_polygons(X, Y, Z, fc.face_rows(i))[3:6]).ravel() + r0, bb)
    S = np.asarray(area_vectors, dtype=np.float64)
    if centroids is None:
        raise UserError(expected="centroids together with area_vectors", got=None, key="centroids")
    C = np.asarray(centroids, dtype=np.float64)
    m = S.shape[0]

    def geometry(g, lo, hi):
        s, c = S[lo:hi], C[lo:hi]
        Sx, Sy, Sz = (np.ascontiguousarray(s[:, i]) for i in range(3))
        return Sx, Sy, Sz, c[:, 0] - r0[0], c[:, 1] - r0[1], c[:, 2] - r0[2], Sx * Sx + Sy * Sy + Sz * Sz

    bb = C.max(axis=0) - C.min(axis=0) if m else np.zeros(3)
    return _Source(m, [(0, m, None, None, None)], geometry, lambda i: C[i], bb)


def _face_values(pressure, shear, m: int) -> tuple[np.ndarray, np.ndarray | None]:
    """The pressure (M,) and shear (M, 3) arrays, checked against the face count."""
    if pressure is None:
        raise UserError(expected="a face pressure array", got=None, key="pressure")
    p = np.asarray(pressure)
    if p.shape != (m,):
        raise UserError(expected=f"one pressure value per face ({m},)", got=f"shape {p.shape}", key="pressure",
                        fix="use face (cell) data, not point data")
    tau = None if shear is None else np.asarray(shear)
    if tau is not None and tau.shape != (m, 3):
        raise UserError(expected=f"one shear vector per face ({m}, 3)", got=f"shape {tau.shape}", key="shear",
                        fix="use face (cell) data, not point data")
    if m == 0:
        raise UserError(expected="at least one face", got="an empty surface", key="faces",
                        fix="check the patch selection")
    return p, tau


def _parts(part_ids, part_names, m: int) -> tuple[np.ndarray | None, int, list[str]]:
    """(part id per face or None, number of parts, their names)."""
    if part_ids is None:
        return None, 1, []
    part = np.asarray(part_ids).astype(np.int64, copy=False)
    if part.shape != (m,) or (part.size and part.min() < 0):
        raise UserError(expected=f"non-negative part ids, one per face ({m},)", got=f"shape {part.shape}", key="part_ids")
    n_parts = int(part.max()) + 1 if part.size else 0
    names = list(part_names) if part_names is not None else [f"part{i}" for i in range(n_parts)]
    return part, max(n_parts, len(names)), names


def _accumulate(src: _Source, p, tau, skip, part, n_parts: int, scale: float, p_ref: float,
                tiny_area: float) -> tuple[np.ndarray, int, tuple | None]:
    """The (n_parts, _NSUM) sums over every face, chunk by chunk (float64),
    with the count of degenerate faces and the first one (index, centroid
    relative to the moment point)."""
    split = part is not None and n_parts > 1  # else every face is in part 0
    acc = np.zeros((n_parts, _NSUM))
    n_degenerate, first_degenerate = 0, None
    for g in src.groups:
        n, index = g[1], g[2]
        for lo in range(0, n, CHUNK):
            hi = min(lo + CHUNK, n)
            sel = slice(lo, hi) if index is None else index[lo:hi]
            Sx, Sy, Sz, cx, cy, cz, W = src.geometry(g, lo, hi)
            mag = np.sqrt(W)
            deg = mag <= tiny_area
            if deg.any():
                i = int(np.flatnonzero(deg)[0])
                i_in = lo + i if index is None else int(index[lo + i])
                if first_degenerate is None or i_in < first_degenerate[0]:
                    first_degenerate = (i_in, np.array([cx[i], cy[i], cz[i]]))
                n_degenerate += int(deg.sum())
            pc = p[sel].astype(np.float64) * scale - p_ref  # gauge pressure, Pa (a new array)
            # τ as a new contiguous (3, n) float64 array
            T = None if tau is None else np.array(tau[sel].T, dtype=np.float64, order="C")
            if skip is not None:
                msk = skip[sel]
                pc[msk] = 0.0
                if T is not None:
                    T[:, msk] = 0.0
            args = (Sx, Sy, Sz, cx, cy, cz, mag, pc, T)
            if not split:
                acc[0] += _sums(*args)
                continue
            pa = part[sel]
            runs = np.flatnonzero(pa[1:] != pa[:-1]) + 1
            if runs.size < _FEW_RUNS:
                bounds = [0, *runs.tolist(), hi - lo]
                for a, b in zip(bounds[:-1], bounds[1:]):
                    acc[pa[a]] += _sums(*(None if v is None else v[..., a:b] for v in args))
            else:
                acc += _sums_by_part(pa, n_parts, *args)
    return acc, n_degenerate, first_degenerate


def integrate_forces(
    points: np.ndarray | None = None,
    faces=None,
    pressure: np.ndarray | None = None,
    shear: np.ndarray | None = None,
    settings: ForceSettings = ForceSettings(),
    *,
    area_vectors: np.ndarray | None = None,
    centroids: np.ndarray | None = None,
    part_ids: np.ndarray | None = None,
    part_names: Sequence[str] | None = None,
) -> ForceResult:
    """Force and moment on a body from face pressure and wall shear stress.

    Parameters
    ----------
    points : (N, 3) vertex coordinates, m (any float dtype).
    faces : (M, k) vertex indices or ``(offsets, connectivity)``; the vertex
        order gives each face's area vector by the right-hand rule. Instead of
        ``points``/``faces``, give ``area_vectors`` (M, 3, m²) and
        ``centroids`` (M, 3, m).
    pressure : (M,) face pressure: kinematic p/ρ (m²/s²) when
        ``settings.kinematic``, else static (Pa). Face (cell) data, not point data.
    shear : (M, 3) face wall shear stress, same form as the pressure, or None
        (inviscid: no viscous force).
    settings : :class:`ForceSettings` (density, reference pressure, moment
        point, orientation conventions, what to accept).
    part_ids : (M,) non-negative ints; per-part results are returned under
        the names ``part_names`` (default ``part0``, ``part1`` …).

    Returns
    -------
    ForceResult, forces in N and moments in N·m about ``settings.about``, in
    the axes of ``points``. Moments use the face centroids (second-order
    accurate).

    Formula: F = Σ_f [−(p_f − p_ref) n̂_out,f + τ_wall,f] |S_f|,
    M = Σ_f (c_f − r_0) × dF_f (midpoint rule on the faces). Valid for any
    polygonal surface; closed or open (see the module notes on p_ref).
    Faces are processed grouped by vertex count (triangles, quads, then each
    larger polygon size) in cache-sized chunks; sums are float64.
    """
    st = settings
    r0 = np.asarray(st.about, dtype=np.float64).reshape(3)
    src = _source(points, faces, area_vectors, centroids, r0)
    m = src.m
    p, tau = _face_values(pressure, shear, m)
    skip = _check_finite("pressure", p, src.centroid_of, st.allow_nonfinite)
    if tau is not None:
        s2 = _check_finite("shear", tau, src.centroid_of, st.allow_nonfinite)
        skip = s2 if skip is None else (skip | s2 if s2 is not None else skip)
    part, n_parts, names = _parts(part_ids, part_names, m)
    scale = float(st.rho) if st.kinematic else 1.0
    acc, n_degenerate, first_degenerate = _accumulate(src, p, tau, skip, part, n_parts, scale, st.p_ref,
                                                      DEGENERATE_REL_AREA * float(src.bb @ src.bb))
    if n_degenerate and not st.allow_degenerate:
        i, ci = first_degenerate
        ci = ci + r0
        raise UserError(
            expected="faces of non-zero area", got=f"{n_degenerate} zero-area (degenerate) face(s) of {m}; "
            f"first at face {i}, centroid ({ci[0]:.6g}, {ci[1]:.6g}, {ci[2]:.6g}) m",
            key="faces", fix="clean the surface (merge duplicate points, drop collapsed faces) before integrating")
    acc[:, 0:6] *= 1.0 if st.normals == "into_body" else -1.0   # S·sgn points into the body
    acc[:, 6:12] *= scale * (-1.0 if st.shear_on == "fluid" else 1.0)  # τ·sgn acts on the wall
    Fp, Mp, Fv, Mv, A = acc[:, 0:3], acc[:, 3:6], acc[:, 6:9], acc[:, 9:12], acc[:, 12]
    total_area = float(np.sum(A))
    opening = float(np.linalg.norm(acc[:, 13:16].sum(axis=0)) / total_area) if total_area > 0 else 1.0

    def make(fp, mp, fv, mv, area, n):
        return ForceResult(force=fp + fv, force_pressure=fp.copy(), force_viscous=fv.copy(), moment=mp + mv,
                           moment_pressure=mp.copy(), moment_viscous=mv.copy(), area=float(area), about=r0.copy(),
                           n_faces=n, open_fraction=opening)

    if part is None:
        return make(Fp[0], Mp[0], Fv[0], Mv[0], A[0], m)
    counts = np.bincount(part, minlength=n_parts)
    parts = {names[i]: make(Fp[i], Mp[i], Fv[i], Mv[i], A[i], int(counts[i])) for i in range(n_parts)}
    total = make(Fp.sum(0), Mp.sum(0), Fv.sum(0), Mv.sum(0), A.sum(), m)
    return ForceResult(**{**total.__dict__, "parts": parts})
