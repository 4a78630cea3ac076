"""Volume centroids and volumes of unstructured cells (any VTK volume cell
type, polyhedra included). Pure numpy: points and a
:class:`postproc.kernels.gradients.CellTopology` in, arrays out.

Axes and units: the mesh frame (for underfloor meshes the body frame: x
rearward, y right, z up), metres; volumes in m³.

Why not the vertex mean: the solver stores cell values at the volume
centroid. For a hexahedron split at a refinement interface (written as a
polyhedron with extra vertices on the faces towards the finer cells) the
vertex mean moves towards those faces by a sizeable fraction of the cell,
which biases least-squares gradients there.

Method (the standard decomposition of a polyhedron into pyramids; e.g.
Ferziger & Perić, *Computational Methods for Fluid Dynamics*, 3rd ed. 2002,
§8.6 (from memory)):

1. each face is split into triangles fanning from the face's vertex mean
   m_f; with triangle area vectors a_t = ½ (v_k − m_f) × (v_k+1 − m_f) and
   centroids c_t, the face area vector is S_f = Σ a_t and the face centre
   C_f = Σ |a_t| c_t / Σ |a_t|;
2. with x_e the mean of the cell's face centres, the cell is split into
   pyramids of apex x_e over each face, centroid ¾ C_f + ¼ x_e;
3. cell volume V = Σ V_f, centroid Σ V_f (¾ C_f + ¼ x_e) / V, with signed
   pyramid volumes V_f = S_f·(C_f − x_e)/3 for outward faces (the VTK
   face order), so that non-convex cells come out right too; a cell whose
   faces all point inwards gives the same centroid and |V|.

Exact for cells with planar faces; for warped faces it is the centroid of
the fan-triangulated surface (the same decomposition the solver uses for
its own cell centres: checked against its cell-centre and cell-volume
output in the solver tests).
"""
from __future__ import annotations

import numpy as np

from postproc.kernels.meshtopo import CELL_FACES, VTK_POLYHEDRON, CellTopology, auto_chunk


def _cross(ax, ay, az, bx, by, bz):
    return ay * bz - az * by, az * bx - ax * bz, ax * by - ay * bx


def _fan(verts: list[tuple[np.ndarray, np.ndarray, np.ndarray]]):
    """Area vector and centre of n faces with the same vertex count, given
    as a list (in order around the face) of vertex coordinate columns
    (x, y, z), each (n,). Returns (Sx, Sy, Sz, Cx, Cy, Cz). Triangles are
    taken as they are; larger polygons fan from their vertex mean."""
    nv = len(verts)
    if nv == 3:
        (ax, ay, az), (bx, by, bz), (cx, cy, cz) = verts
        sx, sy, sz = _cross(bx - ax, by - ay, bz - az, cx - ax, cy - ay, cz - az)
        return 0.5 * sx, 0.5 * sy, 0.5 * sz, (ax + bx + cx) / 3, (ay + by + cy) / 3, (az + bz + cz) / 3
    mx = sum(v[0] for v in verts) / nv
    my = sum(v[1] for v in verts) / nv
    mz = sum(v[2] for v in verts) / nv
    rel = [(v[0] - mx, v[1] - my, v[2] - mz) for v in verts]
    Sx = Sy = Sz = 0.0
    Cx = Cy = Cz = 0.0
    W = 0.0
    for k in range(nv):
        a, b = rel[k], rel[(k + 1) % nv]
        tx, ty, tz = _cross(*a, *b)
        w = np.sqrt(tx * tx + ty * ty + tz * tz)
        Sx, Sy, Sz = Sx + tx, Sy + ty, Sz + tz
        # triangle centroid relative to m: (a + b)/3
        Cx, Cy, Cz = Cx + w * (a[0] + b[0]), Cy + w * (a[1] + b[1]), Cz + w * (a[2] + b[2])
        W = W + w
    with np.errstate(invalid="ignore", divide="ignore"):
        inv = np.where(W > 0, 1.0 / (3.0 * W), 0.0)
    return 0.5 * Sx, 0.5 * Sy, 0.5 * Sz, mx + Cx * inv, my + Cy * inv, mz + Cz * inv


def _polygon_faces(P: np.ndarray, fo: np.ndarray, fc: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Area vectors and centres of polygons of any vertex count given as a
    face stream (offsets ``fo``, point ids ``fc``): one triangle per polygon
    edge, segmented sums with reduceat (no loop over faces)."""
    nf = fo.size - 1
    cnt = np.diff(fo)
    S = np.zeros((nf, 3))
    C = np.zeros((nf, 3))
    ok = cnt > 0
    if not fc.size:
        return S, C
    starts = fo[:-1][ok]
    X = P[fc]
    m = np.zeros((nf, 3))
    m[ok] = np.add.reduceat(X, starts, axis=0) / cnt[ok, None]
    face_of = np.repeat(np.arange(nf), cnt)
    nxt = np.arange(1, fc.size + 1)
    nxt[fo[1:][ok] - 1] = starts  # the last vertex of each face closes to its first
    mv = m[face_of]
    a = X - mv
    b = X[nxt] - mv
    at = 0.5 * np.cross(a, b)
    w = np.sqrt(np.einsum("ij,ij->i", at, at))
    ct = (X + X[nxt] + mv) / 3.0
    S[ok] = np.add.reduceat(at, starts, axis=0)
    W = np.zeros(nf)
    W[ok] = np.add.reduceat(w, starts)
    C[ok] = np.add.reduceat(ct * w[:, None], starts, axis=0)
    with np.errstate(invalid="ignore", divide="ignore"):
        C = np.where(W[:, None] > 0, C / np.maximum(W, 1e-300)[:, None], m)
    return S, C


def _pyramids(owner: np.ndarray, S: np.ndarray, C: np.ndarray, n: int) -> tuple[np.ndarray, np.ndarray]:
    """Cell volumes (n,) and volume-weighted centroid sums (n, 3) from the
    faces (area vectors S, centres C) of the cells ``owner``."""
    nfc = np.bincount(owner, minlength=n)
    xe = np.stack([np.bincount(owner, weights=C[:, k], minlength=n) for k in range(3)], axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        xe /= np.maximum(nfc, 1)[:, None]
    xo = xe[owner]
    vp = np.einsum("ij,ij->i", S, C - xo) / 3.0
    cp = 0.75 * C + 0.25 * xo
    V = np.bincount(owner, weights=vp, minlength=n)
    VC = np.stack([np.bincount(owner, weights=vp * cp[:, k], minlength=n) for k in range(3)], axis=1)
    return V, VC


def cell_centroids(points: np.ndarray, topo: CellTopology, *, chunk: int = 131_072
                   ) -> tuple[np.ndarray, np.ndarray]:
    """Volume centroids (N, 3), m, and volumes (N,), m³, of all cells.

    ``points`` (P, 3) in m (mesh frame), ``topo`` the cell topology (VTK
    layout; polyhedra from their face lists). Cells are processed a chunk at a
    time (bounded memory). Cells of zero volume get their vertex mean and
    volume 0; volumes are returned positive. Raises ValueError for cell types without a face table. The input
    arrays are not modified.
    """
    P = np.asarray(points, dtype=np.float64)
    ct = np.asarray(topo.celltypes)
    off = np.asarray(topo.offsets).astype(np.int64)
    conn = np.asarray(topo.connectivity)
    n = ct.size
    chunk = auto_chunk(n, chunk)
    cols = [np.ascontiguousarray(P[:, k]) for k in range(3)]
    cen = np.empty((n, 3))
    vol = np.zeros(n)
    present = [int(t) for t in np.unique(ct)]
    for t in present:
        if t != VTK_POLYHEDRON and t not in CELL_FACES:
            raise ValueError(f"expected volume cells, got VTK cell type {t}")
    for t in present:
        if t == VTK_POLYHEDRON:
            continue
        faces = CELL_FACES[t]
        npt = max(max(f) for f in faces) + 1
        cells = np.flatnonzero(ct == t)
        for s in range(0, cells.size, chunk):
            c = cells[s:s + chunk]
            start = np.take(off, c)
            V = []
            for v in range(npt):
                ids = np.take(conn, start + v)
                V.append(tuple(np.take(col, ids) for col in cols))
            F = [_fan([V[v] for v in face]) for face in faces]
            # pyramids from the mean of the face centres
            ex = sum(f[3] for f in F) / len(F)
            ey = sum(f[4] for f in F) / len(F)
            ez = sum(f[5] for f in F) / len(F)
            vv = 0.0
            gx = gy = gz = 0.0
            for sx, sy, sz, cx, cy, cz in F:
                vp = (sx * (cx - ex) + sy * (cy - ey) + sz * (cz - ez)) / 3.0
                vv = vv + vp
                gx, gy, gz = gx + vp * (0.75 * cx + 0.25 * ex), gy + vp * (0.75 * cy + 0.25 * ey), gz + vp * (0.75 * cz + 0.25 * ez)
            with np.errstate(invalid="ignore", divide="ignore"):
                ok = vv != 0
                inv = np.where(ok, 1.0 / np.where(ok, vv, 1.0), 0.0)
            mean = [sum(V[v][k] for v in range(npt)) / npt for k in range(3)]
            for k, gk in enumerate((gx, gy, gz)):
                cen[c, k] = np.where(ok, gk * inv, mean[k])
            vol[c] = np.abs(vv)
    if VTK_POLYHEDRON in present:
        fo = np.asarray(topo.poly_face_offsets).astype(np.int64)
        fc = np.asarray(topo.poly_face_connectivity)
        lo = np.asarray(topo.poly_loc_offsets).astype(np.int64)
        lc = np.asarray(topo.poly_loc_connectivity)
        cells = np.flatnonzero(ct == VTK_POLYHEDRON)
        pchunk = max(256, chunk // 8)  # a polyhedron has ~5× the face vertices of a hexahedron
        for s in range(0, cells.size, pchunk):
            c = cells[s:s + pchunk]
            cnt = np.take(lo, c + 1) - np.take(lo, c)
            # the faces of these cells, in cell order
            fpos = np.repeat(np.take(lo, c) - (np.cumsum(cnt) - cnt), cnt) + np.arange(int(cnt.sum()))
            fids = np.take(lc, fpos)
            fcnt = np.take(fo, fids + 1) - np.take(fo, fids)
            sub_fo = np.concatenate([[0], np.cumsum(fcnt)])
            vpos = np.repeat(np.take(fo, fids) - sub_fo[:-1], fcnt) + np.arange(int(sub_fo[-1]))
            S, C = _polygon_faces(P, sub_fo, np.take(fc, vpos))
            owner = np.repeat(np.arange(c.size), cnt)
            vv, vc = _pyramids(owner, S, C, c.size)
            ncell_pts = np.take(off, c + 1) - np.take(off, c)
            cpos = np.repeat(np.take(off, c) - (np.cumsum(ncell_pts) - ncell_pts), ncell_pts) + np.arange(int(ncell_pts.sum()))
            cp = P[np.take(conn, cpos)]
            mean = np.zeros((c.size, 3))
            nz = ncell_pts > 0
            if cp.size:
                mean[nz] = np.add.reduceat(cp, (np.cumsum(ncell_pts) - ncell_pts)[nz], axis=0) / ncell_pts[nz, None]
            with np.errstate(invalid="ignore", divide="ignore"):
                cen[c] = np.where(vv[:, None] != 0, vc / np.where(vv != 0, vv, 1.0)[:, None], mean)
            vol[c] = np.abs(vv)
    return cen, vol
