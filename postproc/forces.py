"""Surface integration of pressure and wall shear into forces and moments.

Pure numeric kernel: numpy arrays in, a :class:`ForceResult` out. No file
I/O, no printing. Inputs are never modified.

Axes and units
--------------
All vectors are in the frame of the given points (for underfloor cases the
mesh frame, which is the **body frame** of :mod:`caseprep.frames`: x rearward,
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
Float32), chunk by chunk so the working memory stays a fraction of the
input arrays.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Literal, Sequence

import numpy as np

from caseprep.errors import UserError

Normals = Literal["into_body", "out_of_body"]
ShearOn = Literal["fluid", "wall"]
NORMALS: tuple[str, ...] = ("into_body", "out_of_body")
SHEAR_ON: tuple[str, ...] = ("fluid", "wall")

CHUNK = 262_144  # faces per chunk: bounds the temporary memory

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


# --------------------------------------------------------------------------- faces

def _as_faces(faces) -> tuple[np.ndarray | None, np.ndarray, np.ndarray | None]:
    """Normalise the face description.

    Accepts an (M, k) integer array (all faces with k vertices) or a pair
    ``(offsets, connectivity)`` with M+1 offsets (VTK ≥ 9 layout). Returns
    ``(block, connectivity, offsets)`` where ``block`` is the (M, k) view when
    all faces have the same size, else None.
    """
    if isinstance(faces, tuple) and len(faces) == 2:
        off = np.asarray(faces[0])
        conn = np.asarray(faces[1])
        if off.ndim != 1 or off.size < 1:
            raise ValueError("expected offsets as a 1-D array of M+1 entries")
        m = off.size - 1
        if m == 0:
            return np.zeros((0, 3), dtype=np.int64), conn, off
        sizes = np.diff(off)
        k = int(sizes[0])
        if np.all(sizes == k) and off[0] == 0 and conn.size == m * k:
            return conn.reshape(m, k), conn, off
        return None, conn, off
    arr = np.asarray(faces)
    if arr.ndim != 2:
        raise ValueError("expected faces as an (M, k) array or an (offsets, connectivity) pair")
    return arr, arr.reshape(-1), None


def _cross(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Row-wise cross product of (m, 3) arrays (faster than np.cross for large m)."""
    out = np.empty(np.broadcast_shapes(a.shape, b.shape))
    ax, ay, az = a[..., 0], a[..., 1], a[..., 2]
    bx, by, bz = b[..., 0], b[..., 1], b[..., 2]
    out[..., 0] = ay * bz - az * by
    out[..., 1] = az * bx - ax * bz
    out[..., 2] = ax * by - ay * bx
    return out


def _quads(P: np.ndarray, block: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Quads: S = ½ (p2 − p0) × (p3 − p1) (exact vector area); centroid of the
    two triangles (p0 p1 p2), (p0 p2 p3) weighted by their area projected on S."""
    f64 = np.float64
    p0, p1, p2, p3 = (P[block[:, j]].astype(f64) for j in range(4))
    d02 = p2 - p0
    S = 0.5 * _cross(d02, p3 - p1)
    A1 = 0.5 * _cross(p1 - p0, d02)
    W = np.einsum("ij,ij->i", S, S)
    w1 = np.einsum("ij,ij->i", A1, S)
    with np.errstate(invalid="ignore", divide="ignore"):
        f1 = w1 / W
    bad = ~np.isfinite(f1)
    if bad.any():
        f1[bad] = 0.5
    p0 += p2
    p0 /= 3.0
    c = p0 + (f1[:, None] * p1 + (1.0 - f1)[:, None] * p3) / 3.0
    if bad.any():  # zero-area faces: vertex average
        c[bad] = 0.25 * (P[block[bad]].astype(f64).sum(axis=1))
    return S, c


def _fan_block(P: np.ndarray, block: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Area vectors and centroids of faces given as an (m, k) index block."""
    k = block.shape[1]
    f64 = np.float64
    p0 = P[block[:, 0]].astype(f64)
    if k == 4:
        return _quads(P, block)
    if k == 3:
        p1, p2 = P[block[:, 1]].astype(f64), P[block[:, 2]].astype(f64)
        S = 0.5 * _cross(p1 - p0, p2 - p0)
        return S, (p0 + p1 + p2) / 3.0
    tri_S = []
    tri_c = []
    S = np.zeros_like(p0)
    for j in range(1, k - 1):
        p1, p2 = P[block[:, j]].astype(f64), P[block[:, j + 1]].astype(f64)
        a = 0.5 * _cross(p1 - p0, p2 - p0)
        S += a
        tri_S.append(a)
        tri_c.append(p1 + p2)  # centroid = (p0 + p1 + p2)/3; p0 added below
    n = S / np.maximum(np.linalg.norm(S, axis=1), np.finfo(float).tiny)[:, None]
    wsum = np.zeros(len(block))
    c = np.zeros_like(p0)
    for a, cc in zip(tri_S, tri_c):
        w = np.einsum("ij,ij->i", a, n)
        wsum += w
        c += w[:, None] * (p0 + cc)
    with np.errstate(invalid="ignore", divide="ignore"):
        c = c / (3.0 * wsum[:, None])
    bad = ~np.isfinite(c).all(axis=1)
    if bad.any():  # zero-area faces: vertex average
        c[bad] = P[block[bad]].astype(f64).mean(axis=1)
    return S, c


def _fan_general(P: np.ndarray, conn: np.ndarray, off: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Area vectors and centroids of mixed polygons (offsets/connectivity)."""
    m = off.size - 1
    sizes = np.diff(off).astype(np.int64)
    if np.any(sizes < 3):
        bad = int(np.flatnonzero(sizes < 3)[0])
        raise UserError(
            expected="faces with at least 3 vertices", got=f"{int((sizes < 3).sum())} face(s) with fewer (first: face {bad})",
            key="faces", fix="give a polygonal surface (lines and points carry no area)")
    ntri = sizes - 2
    face = np.repeat(np.arange(m), ntri)
    first = np.cumsum(ntri) - ntri
    j = np.arange(face.size) - np.repeat(first, ntri) + 1
    base = off[:-1].astype(np.int64)[face]
    p0 = P[conn[base]].astype(np.float64)
    p1 = P[conn[base + j]].astype(np.float64)
    p2 = P[conn[base + j + 1]].astype(np.float64)
    a = 0.5 * np.cross(p1 - p0, p2 - p0)
    S = np.column_stack([np.bincount(face, a[:, i], minlength=m) for i in range(3)])
    n = S / np.maximum(np.linalg.norm(S, axis=1), np.finfo(float).tiny)[:, None]
    w = np.einsum("ij,ij->i", a, n[face])
    tc = (p0 + p1 + p2) / 3.0
    wsum = np.bincount(face, w, minlength=m)
    c = np.column_stack([np.bincount(face, w * tc[:, i], minlength=m) for i in range(3)])
    with np.errstate(invalid="ignore", divide="ignore"):
        c = c / wsum[:, None]
    bad = ~np.isfinite(c).all(axis=1)
    if bad.any():
        vs = np.column_stack([np.bincount(face, tc[:, i], minlength=m) for i in range(3)])
        c[bad] = vs[bad] / np.maximum(ntri[bad], 1)[:, None]
    return S, c


def _geometry_slice(P, block, conn, off, lo: int, hi: int) -> tuple[np.ndarray, np.ndarray]:
    """Area vectors and centroids (float64) of faces lo…hi−1."""
    if block is not None:
        return _fan_block(P, block[lo:hi])
    o = off[lo:hi + 1]
    return _fan_general(P, conn[o[0]:o[-1]], o - o[0])


def face_geometry(points: np.ndarray, faces) -> tuple[np.ndarray, np.ndarray]:
    """Area vectors (M×3, m², orientation from the vertex order by the
    right-hand rule) and centroids (M×3, m) of polygonal faces, float64.

    ``faces``: (M, k) vertex indices or ``(offsets, connectivity)``.
    The area vector is exact for any polygon (½ Σ p_i × p_{i+1}); the centroid
    is exact for planar polygons.
    """
    P = np.asarray(points)
    block, conn, off = _as_faces(faces)
    if block is not None:
        if block.shape[1] < 3:
            raise UserError(expected="faces with at least 3 vertices", got=f"{block.shape[1]}-vertex faces", key="faces",
                            fix="give a polygonal surface (lines and points carry no area)")
        return _fan_block(P, block)
    return _fan_general(P, conn, off)


def closure(area_vectors: np.ndarray) -> float:
    """How open a surface is: |Σ S| / Σ |S| (dimensionless, 0 for a closed
    surface, up to 1 for a flat patch). A closed surface's integral of a
    uniform pressure vanishes (Gauss's divergence theorem)."""
    S = np.asarray(area_vectors, dtype=np.float64)
    tot = float(np.linalg.norm(S, axis=1).sum())
    return float(np.linalg.norm(S.sum(axis=0)) / tot) if tot > 0 else 1.0


# --------------------------------------------------------------------------- checks

def _check_finite(name: str, arr: np.ndarray, where, allow: bool) -> np.ndarray | None:
    """Mask of faces with non-finite values (None if all finite). Raises
    UserError with the count and first location unless ``allow``."""
    a = np.asarray(arr)
    fin = np.isfinite(a) if a.ndim == 1 else np.isfinite(a).all(axis=1)
    if fin.all():
        return None
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

def _sums(dF: np.ndarray, r: np.ndarray, part: np.ndarray | None, n_parts: int) -> tuple[np.ndarray, np.ndarray]:
    """Force and moment sums (float64), total (3,) or per part (n_parts, 3)."""
    dM = _cross(r, dF)
    if part is None:
        ones = np.ones(dF.shape[0])
        return ones @ dF, ones @ dM  # BLAS: much faster than a strided sum over axis 0
    F = np.column_stack([np.bincount(part, dF[:, i], minlength=n_parts) for i in range(3)])
    M = np.column_stack([np.bincount(part, dM[:, i], minlength=n_parts) for i in range(3)])
    return F, M


def integrate_forces(
    points: np.ndarray | None = None,
    faces=None,
    pressure: np.ndarray | None = None,
    shear: np.ndarray | None = None,
    *,
    area_vectors: np.ndarray | None = None,
    centroids: np.ndarray | None = None,
    rho: float = 1.0,
    p_ref: float = 0.0,
    about: Sequence[float] = (0.0, 0.0, 0.0),
    normals: str = "into_body",
    shear_on: str = "fluid",
    kinematic: bool = True,
    part_ids: np.ndarray | None = None,
    part_names: Sequence[str] | None = None,
    allow_nonfinite: bool = False,
    allow_degenerate: bool = False,
) -> ForceResult:
    """Force and moment on a body from face pressure and wall shear stress.

    Parameters
    ----------
    points : (N, 3) vertex coordinates, m (any float dtype).
    faces : (M, k) vertex indices or ``(offsets, connectivity)``; the vertex
        order gives each face's area vector by the right-hand rule. Instead of
        ``points``/``faces``, give ``area_vectors`` (M, 3, m²) and
        ``centroids`` (M, 3, m).
    pressure : (M,) face pressure: kinematic p/ρ (m²/s²) when ``kinematic``,
        else static (Pa). Face (cell) data, not point data.
    shear : (M, 3) face wall shear stress, same form as the pressure, or None
        (inviscid: no viscous force).
    rho : density ρ, kg/m³ (used only when ``kinematic``).
    p_ref : reference pressure (Pa, static) subtracted before integration.
    about : moment reference point r_0, m.
    normals : ``"into_body"`` (the solver's) or ``"out_of_body"``: where the
        area vectors point.
    shear_on : ``"fluid"`` (the solver's ``wallShearStress``) or ``"wall"``.
    kinematic : whether ``pressure`` and ``shear`` are divided by ρ.
    part_ids : (M,) non-negative ints; per-part results are returned under
        the names ``part_names`` (default ``part0``, ``part1`` …).
    allow_nonfinite : skip faces whose values are NaN/inf instead of refusing.
    allow_degenerate : accept zero-area faces (they carry no load).

    Returns
    -------
    ForceResult, forces in N and moments in N·m about ``about``, in the axes
    of ``points``. Moments use the face centroids (second-order accurate).

    Formula: F = Σ_f [−(p_f − p_ref) n̂_out,f + τ_wall,f] |S_f|,
    M = Σ_f (c_f − r_0) × dF_f (midpoint rule on the faces). Valid for any
    polygonal surface; closed or open (see the module notes on p_ref).
    """
    if normals not in NORMALS:
        raise UserError(expected=f"normals one of {NORMALS}", got=normals, key="normals")
    if shear_on not in SHEAR_ON:
        raise UserError(expected=f"shear_on one of {SHEAR_ON}", got=shear_on, key="shear_on")
    if pressure is None:
        raise UserError(expected="a face pressure array", got=None, key="pressure")
    if area_vectors is None:
        if points is None or faces is None:
            raise UserError(expected="points and faces, or area_vectors and centroids", got="neither", key="faces")
        block, conn, off = _as_faces(faces)
        m = block.shape[0] if block is not None else off.size - 1
        if block is not None and block.shape[1] < 3 and m:
            raise UserError(expected="faces with at least 3 vertices", got=f"{block.shape[1]}-vertex faces", key="faces",
                            fix="give a polygonal surface (lines and points carry no area)")
    else:
        S = np.asarray(area_vectors, dtype=np.float64)
        if centroids is None:
            raise UserError(expected="centroids together with area_vectors", got=None, key="centroids")
        C = np.asarray(centroids, dtype=np.float64)
        m = S.shape[0]
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

    if area_vectors is None:
        P = np.asarray(points)
        lo_hi_geom = lambda lo, hi: _geometry_slice(P, block, conn, off, lo, hi)  # noqa: E731
        bb = P.max(axis=0).astype(np.float64) - P.min(axis=0) if P.size else np.zeros(3)
    else:
        lo_hi_geom = lambda lo, hi: (S[lo:hi], C[lo:hi])  # noqa: E731
        bb = C.max(axis=0) - C.min(axis=0) if m else np.zeros(3)
    tiny_area = DEGENERATE_REL_AREA * float(bb @ bb)

    skip = _check_finite("pressure", p, lambda i: lo_hi_geom(i, i + 1)[1][0], allow_nonfinite)
    if tau is not None:
        s2 = _check_finite("shear", tau, lambda i: lo_hi_geom(i, i + 1)[1][0], allow_nonfinite)
        skip = s2 if skip is None else (skip | s2 if s2 is not None else skip)

    scale = float(rho) if kinematic else 1.0
    sgn_n = 1.0 if normals == "into_body" else -1.0   # S·sgn_n points into the body
    sgn_t = -1.0 if shear_on == "fluid" else 1.0       # τ·sgn_t acts on the wall
    r0 = np.asarray(about, dtype=np.float64).reshape(3)

    if part_ids is not None:
        part = np.asarray(part_ids).astype(np.int64, copy=False)
        if part.shape != (m,) or (part.size and part.min() < 0):
            raise UserError(expected=f"non-negative part ids, one per face ({m},)", got=f"shape {part.shape}", key="part_ids")
        n_parts = int(part.max()) + 1 if part.size else 0
        names = list(part_names) if part_names is not None else [f"part{i}" for i in range(n_parts)]
        n_parts = max(n_parts, len(names))
    else:
        part, n_parts, names = None, 1, []

    shape = (n_parts, 3) if part is not None else (3,)
    Fp, Mp, Fv, Mv = (np.zeros(shape) for _ in range(4))
    A = np.zeros(n_parts) if part is not None else 0.0
    S_sum = np.zeros(3)
    n_degenerate, first_degenerate = 0, None
    for lo in range(0, m, CHUNK):
        hi = min(lo + CHUNK, m)
        s, c = lo_hi_geom(lo, hi)
        mag = np.sqrt(np.einsum("ij,ij->i", s, s))
        deg = mag <= tiny_area
        if deg.any():
            if first_degenerate is None:
                i = int(np.flatnonzero(deg)[0])
                first_degenerate = (lo + i, c[i])
            n_degenerate += int(deg.sum())
        S_sum += np.ones(s.shape[0]) @ s
        r = c - r0
        pc = p[lo:hi].astype(np.float64) * scale - p_ref
        pc *= sgn_n
        msk = None if skip is None else skip[lo:hi]
        if msk is not None:
            pc[msk] = 0.0
        pa = part[lo:hi] if part is not None else None
        f, mo = _sums(s * pc[:, None], r, pa, n_parts)
        Fp += f
        Mp += mo
        if tau is not None:
            t = tau[lo:hi].astype(np.float64) * (scale * sgn_t)
            t *= mag[:, None]
            if msk is not None:
                t[msk] = 0.0
            f, mo = _sums(t, r, pa, n_parts)
            Fv += f
            Mv += mo
        if part is not None:
            A += np.bincount(pa, mag, minlength=n_parts)
        else:
            A += float(mag.sum())
    if n_degenerate and not allow_degenerate:
        i, ci = first_degenerate
        raise UserError(
            expected="faces of non-zero area", got=f"{n_degenerate} zero-area (degenerate) face(s) of {m}; "
            f"first at face {i}, centroid ({ci[0]:.6g}, {ci[1]:.6g}, {ci[2]:.6g}) m",
            key="faces", fix="clean the surface (merge duplicate points, drop collapsed faces) before integrating")
    total_area = float(np.sum(A))
    opening = float(np.linalg.norm(S_sum) / total_area) if total_area > 0 else 1.0

    def make(fp, mp, fv, mv, area, n):
        return ForceResult(force=fp + fv, force_pressure=fp.copy(), force_viscous=fv.copy(), moment=mp + mv,
                           moment_pressure=mp.copy(), moment_viscous=mv.copy(), area=float(area), about=r0.copy(),
                           n_faces=n, open_fraction=opening)

    if part is None:
        return make(Fp, Mp, Fv, Mv, A, m)
    counts = np.bincount(part, minlength=n_parts)
    parts = {names[i]: make(Fp[i], Mp[i], Fv[i], Mv[i], A[i], int(counts[i])) for i in range(n_parts)}
    total = make(Fp.sum(0), Mp.sum(0), Fv.sum(0), Mv.sum(0), A.sum(), m)
    return ForceResult(**{**total.__dict__, "parts": parts})
