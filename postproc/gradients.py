"""Cell-data gradients on unstructured (polyhedral) meshes, and the
velocity-gradient quantities built from them: vorticity, Q-criterion, λ2.

Pure numpy/scipy kernels: arrays in, arrays/dataclasses out. Reading meshes
is done in :mod:`postproc.flowio`, which hands over the topology as plain
integer arrays.

Axes: whatever frame the cell centres are given in (underfloor meshes are in
the body frame: x rearward, y right, z up, metres). Gradients are in 1/m times
the field's unit; the velocity-gradient tensor is ``J[i, m, k] = ∂u_m/∂x_k``
(1/s for u in m/s).

Method
------
1. **Face adjacency.** Every cell's faces (from the standard VTK cell face
   tables, or the polyhedron face lists) are keyed by two order-independent
   64-bit hashes of their vertex ids (sums of two different integer mixers
   over the face's vertices, modulo 2⁶⁴). Sorting the keys puts the two copies
   of each interior face side by side; a pair matches only when both hashes
   agree (a false match needs two simultaneous 64-bit collisions). This works
   for any mix of tetrahedra, pyramids, wedges, hexahedra and polyhedra, and
   needs neither the face table nor a point→cell map in memory.
2. **Weighted least squares** (e.g. Blazek, *Computational Fluid Dynamics:
   Principles and Applications*, 3rd ed. 2015, §5.3.4; Mavriplis 2003, AIAA
   2003-3986). For cell i with stencil neighbours j, d_ij = x_j − x_i and
   w_ij = 1/|d_ij|², the gradient minimises Σ_j w_ij (φ_j − φ_i − d_ij·g)²:

       g_i = M_i⁻¹ Σ_j w_ij d_ij (φ_j − φ_i),    M_i = Σ_j w_ij d_ij d_ijᵀ.

   The coefficients c_ij = w_ij M_i⁻¹ d_ij are assembled once into sparse
   matrices C_k (k = x, y, z) sharing one sparsity pattern, and the gradient
   of any cell field is a sparse product:  ∂φ/∂x_k = C_k φ − s_k ∘ φ with
   s_k = C_k 1 (row sums).

   *Exactness for linear fields.* If φ = a + g·x then φ_j − φ_i = d_ijᵀ g for
   every neighbour, so Σ_j w_ij d_ij (φ_j − φ_i) = M_i g and the formula
   returns g exactly whenever M_i is invertible (three non-coplanar
   neighbour directions). Hence solid-body rotation, pure shear and pure
   strain give their exact Q on any mesh, up to floating-point round-off.
3. **Boundary cells.** A cell with fewer than ``min_neighbours`` face
   neighbours, or whose M_i is nearly singular, gets its stencil widened by
   the next face-neighbour layer (neighbours of neighbours), up to
   ``max_layers`` layers. Cells still singular after that (isolated cells)
   get a zero gradient and are counted in ``n_degenerate``.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

# VTK cell type ids and their faces (local point ids). Orientation does not
# matter here: faces are matched by vertex set. From the VTK file-format
# documentation (cell type figures); checked in tests against VTK's own
# vtkCell.GetFace on each type.
VTK_TETRA, VTK_VOXEL, VTK_HEXAHEDRON, VTK_WEDGE, VTK_PYRAMID, VTK_POLYHEDRON = 10, 11, 12, 13, 14, 42
CELL_FACES: dict[int, tuple[tuple[int, ...], ...]] = {
    VTK_TETRA: ((0, 1, 3), (1, 2, 3), (2, 0, 3), (0, 2, 1)),
    VTK_VOXEL: ((0, 2, 6, 4), (1, 3, 7, 5), (0, 1, 5, 4), (2, 3, 7, 6), (0, 1, 3, 2), (4, 5, 7, 6)),
    VTK_HEXAHEDRON: ((0, 4, 7, 3), (1, 2, 6, 5), (0, 1, 5, 4), (3, 7, 6, 2), (0, 3, 2, 1), (4, 5, 6, 7)),
    VTK_WEDGE: ((0, 1, 2), (3, 5, 4), (0, 3, 4, 1), (1, 4, 5, 2), (2, 5, 3, 0)),
    VTK_PYRAMID: ((0, 3, 2, 1), (0, 1, 4), (1, 2, 4), (2, 3, 4), (3, 0, 4)),
}
VOLUME_CELL_TYPES = frozenset(CELL_FACES) | {VTK_POLYHEDRON}


@dataclass(frozen=True)
class CellTopology:
    """Plain-array description of an unstructured volume mesh.

    ``celltypes`` (N,) VTK type ids; ``offsets`` (N+1,) and ``connectivity``
    point ids of each cell (VTK layout). Polyhedra (type 42) also need
    ``poly_face_offsets``/``poly_face_connectivity`` (the face polygons) and
    ``poly_loc_offsets``/``poly_loc_connectivity`` (for each cell, the ids of
    its faces; rows of non-polyhedral cells are empty).
    """

    celltypes: np.ndarray
    offsets: np.ndarray
    connectivity: np.ndarray
    n_points: int
    poly_face_offsets: np.ndarray | None = None
    poly_face_connectivity: np.ndarray | None = None
    poly_loc_offsets: np.ndarray | None = None
    poly_loc_connectivity: np.ndarray | None = None

    @property
    def n_cells(self) -> int:
        return int(self.celltypes.shape[0])


def _mix64(x: np.ndarray, seed: int) -> np.ndarray:
    """splitmix64 finaliser (Steele, Lea & Flood 2014, "Fast splittable
    pseudorandom number generators", OOPSLA) of integers ``x`` + seed: a
    well-spread 64-bit hash per point id."""
    with np.errstate(over="ignore"):
        z = x.astype(np.uint64) + np.uint64(seed)
        z = (z ^ (z >> np.uint64(30))) * np.uint64(0xBF58476D1CE4E5B9)
        z = (z ^ (z >> np.uint64(27))) * np.uint64(0x94D049BB133111EB)
        return z ^ (z >> np.uint64(31))


def auto_chunk(total: int, chunk: int, floor: int = 8_192) -> int:
    """Block size for a pass over ``total`` items: at most ``chunk``, and
    about an eighth of the total for small meshes so that the temporaries
    of one block stay small next to the mesh itself (at least ``floor``)."""
    return int(max(1, min(chunk, max(floor, total // 8))))


def _face_keys(topo: CellTopology, n_faces: np.ndarray, present: np.ndarray, h1: np.ndarray, h2: np.ndarray,
               chunk: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Two order-independent 64-bit keys and the owner cell of every (cell,
    face) slot. Standard cells: one gather of the point hashes per cell
    vertex (a chunk of cells at a time), then one sum per face of the table.
    Polyhedra: one segmented sum over the face stream."""
    ct = np.asarray(topo.celltypes)
    off = np.asarray(topo.offsets)
    conn = np.asarray(topo.connectivity)
    total = int(n_faces.sum(dtype=np.int64))
    k1 = np.empty(total, dtype=np.uint64)
    k2 = np.empty(total, dtype=np.uint64)
    own = np.empty(total, dtype=np.int32)
    pos = 0
    for t in present:
        t = int(t)
        if t == VTK_POLYHEDRON:
            continue
        faces = CELL_FACES[t]
        npt = max(max(f) for f in faces) + 1
        cells = np.flatnonzero(ct == t).astype(np.int32) if present.size > 1 else None
        nc = int(cells.size) if cells is not None else int(ct.size)
        nf = len(faces)
        for s in range(0, nc, chunk):
            e = min(nc, s + chunk)
            c = cells[s:e] if cells is not None else np.arange(s, e, dtype=np.int32)
            start = np.take(off, c).astype(np.int64)
            if np.any(np.take(off, c + 1) - start != npt):
                raise ValueError(f"cells of VTK type {t} with a point count other than {npt}")
            # one 1-D take per cell vertex (contiguous columns), then one sum per face
            ids = [np.take(conn, start + v) for v in range(npt)]
            with np.errstate(over="ignore"):
                for key, h in ((k1, h1), (k2, h2)):
                    hp = [np.take(h, iv) for iv in ids]
                    for f, face in enumerate(faces):
                        acc = hp[face[0]] + hp[face[1]]
                        for v in face[2:]:
                            acc += hp[v]
                        key[pos + f * nc + s:pos + f * nc + e] = acc
                    del hp
            del ids
            for f in range(nf):
                own[pos + f * nc + s:pos + f * nc + e] = c
        pos += nf * nc
    if np.any(ct == VTK_POLYHEDRON):
        fo = np.asarray(topo.poly_face_offsets, dtype=np.int64)
        fc = np.asarray(topo.poly_face_connectivity)
        lo = np.asarray(topo.poly_loc_offsets, dtype=np.int64)
        lc = np.asarray(topo.poly_loc_connectivity)
        nonempty = fo[1:] > fo[:-1]
        with np.errstate(over="ignore"):
            for key, h in ((k1, h1), (k2, h2)):
                f = np.zeros(fo.size - 1, dtype=np.uint64)
                if fc.size:
                    f[nonempty] = np.add.reduceat(np.take(h, fc), fo[:-1][nonempty])
                key[pos:pos + lc.size] = np.take(f, lc)
                del f
        counts = np.diff(lo)
        own[pos:pos + lc.size] = np.repeat(np.arange(counts.size, dtype=np.int32), counts)
        pos += lc.size
    return k1, k2, own


def _match_keys(k1: np.ndarray, k2: np.ndarray, own: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Pairs of slots with equal keys (k1, k2) and different owners.

    One in-place sort of 64-bit words: the high bits of k1 with the slot
    number packed into the low bits (so no argsort and no gathered copies of
    the keys). Slots whose high bits agree sit side by side; a run of two is
    confirmed with k2, runs of three or more (high-bit collisions of different
    faces, or a non-conforming face shared by more than two cells) are sorted
    again by the full keys. ``k1`` is overwritten.
    """
    total = k1.size
    b = max(1, int(total - 1).bit_length())
    low = np.uint64((1 << b) - 1)
    k1 &= ~low
    for s in range(0, total, 1 << 22):
        e = min(total, s + (1 << 22))
        k1[s:e] |= np.arange(s, e, dtype=np.uint64)
    k1.sort()
    # slot numbers and "equal high bits as the next word", a block at a time (no full-size uint64 temporaries)
    slot = np.empty(total, dtype=np.int64 if total > 2**31 - 1 else np.int32)
    same = np.empty(max(total - 1, 0), dtype=bool)
    for s in range(0, total, 1 << 22):
        e = min(total, s + (1 << 22))
        slot[s:e] = k1[s:e] & low
        e1 = min(total - 1, e)
        if e1 > s:
            same[s:e1] = (k1[s + 1:e1 + 1] ^ k1[s:e1]) <= low
    idx = np.flatnonzero(same).astype(slot.dtype)
    del same
    if idx.size == 0:
        return np.zeros(0, np.int32), np.zeros(0, np.int32)
    # runs of exactly two slots: idx not adjacent to another idx
    adj = idx[1:] == idx[:-1] + 1
    single = ~(np.concatenate([[False], adj]) | np.concatenate([adj, [False]]))
    del adj
    multi = idx[~single]
    pos = np.unique(np.concatenate([multi, multi + 1])) if multi.size else None
    hi = k1[pos] & ~low if multi.size else None
    del k1
    i2 = idx[single]
    del idx, single
    a_parts, b_parts = [], []
    for s in range(0, i2.size, 1 << 22):
        sa, sb = np.take(slot, i2[s:s + (1 << 22)]), np.take(slot, i2[s:s + (1 << 22)] + 1)
        ok = np.take(k2, sa) == np.take(k2, sb)
        oa, ob = np.take(own, sa[ok]), np.take(own, sb[ok])
        diff = oa != ob
        a_parts.append(oa[diff])
        b_parts.append(ob[diff])
    del i2
    a = np.concatenate(a_parts) if a_parts else np.zeros(0, np.int32)
    b_ = np.concatenate(b_parts) if b_parts else np.zeros(0, np.int32)
    del a_parts, b_parts
    if multi.size:
        # the slots of the longer runs, paired exactly by (high bits of k1, k2)
        sl = slot[pos]
        order = np.lexsort((own[sl], k2[sl], hi))
        sl, hi = sl[order], hi[order]
        eq = (hi[1:] == hi[:-1]) & (k2[sl[1:]] == k2[sl[:-1]]) & (own[sl[1:]] != own[sl[:-1]])
        j = np.flatnonzero(eq)
        if j.size > 1:
            chain = np.concatenate([[False], j[1:] == j[:-1] + 1])
            j = j[~chain]
        a = np.concatenate([a, own[sl[j]]])
        b_ = np.concatenate([b_, own[sl[j + 1]]])
    return a, b_


def face_pairs(topo: CellTopology, *, chunk: int = 65_536) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Interior faces of the mesh as cell pairs.

    Returns ``(a, b, n_faces)``: int32 arrays of the two cells sharing each
    interior face, and the number of faces of every cell (N,). Faces seen
    only once are boundary faces. Raises ValueError on cell types without a
    face table (2D cells, lines, higher-order cells). ``chunk``: cells
    hashed at a time (bounds the temporary memory).
    """
    ct = np.asarray(topo.celltypes)
    pid = np.arange(topo.n_points, dtype=np.uint64)
    h1, h2 = _mix64(pid, 0x9E3779B97F4A7C15), _mix64(pid, 0x632BE59BD9B4E019)
    del pid
    n_faces = np.zeros(ct.shape[0], dtype=np.int32)
    present = np.unique(ct)
    unknown = [int(t) for t in present if int(t) not in VOLUME_CELL_TYPES]
    if unknown:
        raise ValueError(f"expected volume cells (VTK types {sorted(VOLUME_CELL_TYPES)}), got cell types {unknown}")
    for t in present:
        t = int(t)
        if t != VTK_POLYHEDRON:
            n_faces[ct == t] = len(CELL_FACES[t])
    if VTK_POLYHEDRON in present:
        if topo.poly_face_offsets is None:
            raise ValueError("polyhedral cells without their face lists")
        lo = np.asarray(topo.poly_loc_offsets, dtype=np.int64)
        is_poly = ct == VTK_POLYHEDRON
        n_faces[is_poly] = np.diff(lo)[is_poly]
    k1, k2, own = _face_keys(topo, n_faces, present, h1, h2, auto_chunk(ct.shape[0], chunk))
    del h1, h2
    a, b = _match_keys(k1, k2, own)
    return a, b, n_faces


def adjacency_matrix(a: np.ndarray, b: np.ndarray, n_cells: int) -> sp.csr_matrix:
    """Symmetric cell adjacency (CSR, int32 indices, data 1) from cell pairs,
    without self-loops and duplicate entries."""
    rows = np.concatenate([a, b]).astype(np.int32)
    cols = np.concatenate([b, a]).astype(np.int32)
    A = sp.csr_matrix((np.ones(rows.size, dtype=np.int8), (rows, cols)), shape=(n_cells, n_cells))
    A.sum_duplicates()
    A.data[:] = 1
    return A


def cell_adjacency(topo: CellTopology) -> tuple[sp.csr_matrix, np.ndarray]:
    """Face adjacency (CSR) of a volume mesh and the number of boundary
    faces of each cell (faces without a neighbour)."""
    a, b, n_faces = face_pairs(topo)
    A = adjacency_matrix(a, b, topo.n_cells)
    n_boundary = n_faces - np.diff(A.indptr).astype(np.int32)
    return A, n_boundary


@dataclass(frozen=True)
class GradientOperator:
    """Least-squares cell gradient as sparse matrices.

    ``coeffs[k]`` is the CSR matrix C_k (k = 0, 1, 2 for x, y, z; 1/m),
    ``row_sums[k]`` = C_k 1. The gradient of a cell field φ along x_k is
    ``C_k φ − row_sums[k] φ``. ``n_extended``: cells whose stencil was widened
    beyond their face neighbours; ``n_degenerate``: cells left with a zero
    gradient (no well-posed stencil).
    """

    coeffs: tuple[sp.csr_matrix, sp.csr_matrix, sp.csr_matrix]
    row_sums: np.ndarray
    n_extended: int
    n_degenerate: int

    @property
    def n_cells(self) -> int:
        return int(self.row_sums.shape[1])

    def matrix(self, k: int) -> sp.csr_matrix:
        """The full sparse matrix G_k = C_k − diag(s_k) (so ∂φ/∂x_k = G_k φ)."""
        return (self.coeffs[k] - sp.diags(self.row_sums[k])).tocsr()

    def gradient_rows(self, field64: np.ndarray, start: int, stop: int) -> np.ndarray:
        """Gradient (stop−start, m, 3) of a float64 field (N, m) on the cells
        start…stop−1 only (bounded memory for derived quantities)."""
        out = np.empty((stop - start, field64.shape[1], 3))
        for k in range(3):
            res = self.coeffs[k][start:stop] @ field64
            out[:, :, k] = res - self.row_sums[k][start:stop, None] * field64[start:stop]
        return out

    def gradient(self, field: np.ndarray) -> np.ndarray:
        """Gradient of a cell field. ``field`` (N,) → (N, 3); (N, m) → (N, m, 3)
        with ``out[i, c, k] = ∂field_c/∂x_k``. Computed in float64; the input
        is not modified."""
        f = np.asarray(field)
        if f.shape[0] != self.n_cells:
            raise ValueError(f"expected a field with {self.n_cells} cell values, got {f.shape[0]}")
        f64 = f.astype(np.float64, copy=False)
        out = np.empty(f.shape + (3,), dtype=np.float64)
        for k in range(3):
            s = self.row_sums[k]
            res = self.coeffs[k] @ f64
            out[..., k] = res - (s[:, None] * f64 if f.ndim == 2 else s * f64)
        return out


def _sym3_inverse(xx, yy, zz, xy, xz, yz) -> tuple[tuple[np.ndarray, ...], np.ndarray]:
    """Inverse of symmetric 3×3 matrices given by their 6 unique entries
    (arrays, adjugate / determinant), returned in the same order (xx, yy, zz,
    xy, xz, yz), and a scale-free conditioning measure det/(trace/3)³ ∈ [0, 1]
    (1 for an isotropic stencil, 0 when singular)."""
    a00 = yy * zz - yz * yz
    a01 = xz * yz - xy * zz
    a02 = xy * yz - xz * yy
    a11 = xx * zz - xz * xz
    a12 = xy * xz - xx * yz
    a22 = xx * yy - xy * xy
    det = xx * a00 + xy * a01 + xz * a02
    tr = (xx + yy + zz) / 3.0
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        quality = np.where(tr > 0, det / tr**3, 0.0)
        inv_det = 1.0 / det
        inv = tuple(a * inv_det for a in (a00, a11, a22, a01, a02, a12))
    return inv, np.nan_to_num(quality)


def _lsq_rows(Xc: tuple[np.ndarray, np.ndarray, np.ndarray], indptr: np.ndarray, indices: np.ndarray,
              cells: np.ndarray | tuple[int, int], dtype,
              degenerate_limit: float) -> tuple[list[np.ndarray], np.ndarray, np.ndarray, np.ndarray]:
    """LSQ coefficients of a block of stencil rows.

    ``Xc``: the x, y, z cell-centre coordinates as three contiguous arrays (m).
    Row r (cell ``cells[r]``, or cell r0 + r when ``cells`` is a range
    (r0, r1)) has the neighbours ``indices[indptr[r]:indptr[r+1]]``
    (``indptr`` starts at 0). Returns the coefficients (3 arrays of nnz) in
    ``dtype`` (c_ij = w_ij M_i⁻¹ d_ij, 1/m), their row sums (3, rows) taken
    over the stored (rounded) values, the conditioning measure of every M_i
    and the degenerate rows (zero coefficients). Column-wise 1-D takes and
    repeats (no fancy indexing of 2-D arrays); memory is proportional to the
    block.
    """
    deg = np.diff(indptr)
    if isinstance(cells, tuple):
        own = [x[cells[0]:cells[1]] for x in Xc]
    else:
        own = [np.take(x, cells) for x in Xc]
    nr = deg.size
    r = np.repeat(np.arange(nr, dtype=np.int32), deg)
    d = []
    for x, xo in zip(Xc, own):
        dk = np.take(x, indices)
        dk -= np.repeat(xo, deg)
        d.append(dk)
    dist2 = d[0] * d[0]
    dist2 += d[1] * d[1]
    dist2 += d[2] * d[2]
    np.maximum(dist2, 1e-300, out=dist2)
    w = np.reciprocal(dist2, out=dist2)
    wd = [w * dk for dk in d]
    del w
    M = [np.bincount(r, weights=wd[a] * d[b], minlength=nr)
         for a, b in ((0, 0), (1, 1), (2, 2), (0, 1), (0, 2), (1, 2))]
    del d
    Minv, q = _sym3_inverse(*M)
    del M
    bad = ~(q >= degenerate_limit)
    for m in Minv:
        bad |= ~np.isfinite(m)
    rep = []
    for m in Minv:
        m[bad] = 0.0
        rep.append(np.repeat(m, deg))
    del Minv
    c = []
    sums = np.empty((3, nr))
    for k, (i0, i1, i2) in enumerate(((0, 3, 4), (3, 1, 5), (4, 5, 2))):
        ck = rep[i0] * wd[0]
        ck += rep[i1] * wd[1]
        ck += rep[i2] * wd[2]
        ck = ck.astype(dtype, copy=False)
        sums[k] = np.bincount(r, weights=ck, minlength=nr)
        c.append(ck)
    return c, sums, q, bad


def _row_blocks(indptr: np.ndarray, chunk: int) -> list[tuple[int, int]]:
    """Row ranges [r0, r1) holding about ``chunk`` stencil entries each."""
    n = indptr.size - 1
    nnz = int(indptr[-1])
    cuts = np.searchsorted(indptr, np.arange(chunk, nnz, chunk), side="right") - 1
    b = np.unique(np.concatenate([[0], cuts, [n]]))
    return [(int(b[i]), int(b[i + 1])) for i in range(b.size - 1)]


def _next_layer(indptr: np.ndarray, indices: np.ndarray, rows: np.ndarray, Rp: np.ndarray,
                Ri: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """One more face-neighbour layer for the stencil rows (Rp, Ri) of the
    cells ``rows``: the union of each row with the face neighbours of its
    entries, without the row's own cell, sorted and without duplicates.
    Work proportional to the rows' entries (no product with the whole
    adjacency)."""
    n = indptr.size - 1
    er = np.repeat(np.arange(rows.size, dtype=np.int64), np.diff(Rp))
    L = (indptr[Ri + 1] - indptr[Ri]).astype(np.int64)
    first = np.cumsum(L) - L
    pos = np.repeat(indptr[Ri].astype(np.int64) - first, L) + np.arange(int(L.sum()), dtype=np.int64)
    cols = np.concatenate([Ri.astype(np.int64), indices[pos].astype(np.int64)])
    rr = np.concatenate([er, np.repeat(er, L)])
    keep = cols != rows[rr]
    key = np.unique(rr[keep] * n + cols[keep])
    rr, cols = key // n, key % n
    Rp = np.concatenate([[0], np.cumsum(np.bincount(rr, minlength=rows.size))])
    return Rp, cols.astype(np.int32)


def _widen(indptr: np.ndarray, indices: np.ndarray, Xc: tuple, bad: np.ndarray, min_neighbours: int,
           max_layers: int, quality_limit: float, degenerate_limit: float
           ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Wider stencils for the cells ``bad`` (sorted): add face-neighbour
    layers until the row has ``min_neighbours`` cells and a well-posed M, up
    to ``max_layers`` layers. Returns (cells, row lengths, indices) of the
    final rows, cells sorted, each row's indices sorted."""
    done = []
    rows = bad
    Rp = np.concatenate([[0], np.cumsum(indptr[bad + 1] - indptr[bad])])
    Ri = indices[np.repeat(indptr[bad] - Rp[:-1], np.diff(Rp)) + np.arange(int(Rp[-1]))]
    for layer in range(max_layers - 1):
        Rp, Ri = _next_layer(indptr, indices, rows, Rp, Ri)
        rdeg = np.diff(Rp)
        if layer == max_layers - 2:
            still = np.zeros(rows.size, dtype=bool)
        else:
            _, _, q, _ = _lsq_rows(Xc, Rp, Ri, rows, np.float64, degenerate_limit)
            still = (rdeg < min_neighbours) | (q < quality_limit)
        ends = np.repeat(~still, rdeg)
        done.append((rows[~still], rdeg[~still], Ri[ends]))
        rows = rows[still]
        if rows.size == 0:
            break
        Ri = Ri[~ends]
        Rp = np.concatenate([[0], np.cumsum(rdeg[still])])
    cells = np.concatenate([x[0] for x in done])
    deg = np.concatenate([x[1] for x in done])
    ind = np.concatenate([x[2] for x in done])
    # rows in cell order; a stable sort by the owning cell keeps each row's entries together and in order
    take = np.argsort(np.repeat(cells, deg), kind="stable")
    order = np.argsort(cells, kind="stable")
    return cells[order], deg[order], ind[take]


def _splice_rows(indptr: np.ndarray, arrays: list, cells: np.ndarray, new_deg_rows: np.ndarray,
                 new_rows: list) -> tuple[np.ndarray, list]:
    """Replace the CSR rows ``cells`` (sorted) of the entry arrays ``arrays``
    (indices and/or data, all in the pattern ``indptr``) by ``new_rows`` (in
    cell order, lengths ``new_deg_rows``). Kept entries keep their order, the
    new rows fill the gaps (boolean masks, no index arrays); one array is
    replaced at a time, so the old one is freed before the next is copied."""
    n = indptr.size - 1
    deg = np.diff(indptr)
    is_w = np.zeros(n, dtype=bool)
    is_w[cells] = True
    new_deg = deg.copy()
    new_deg[cells] = new_deg_rows
    keep = np.repeat(~is_w, deg)
    dest = np.repeat(~is_w, new_deg)
    fill = ~dest
    new_nnz = int(new_deg.sum())
    for i in range(len(arrays)):
        out = np.empty(new_nnz, dtype=arrays[i].dtype)
        out[dest] = arrays[i][keep]
        out[fill] = new_rows[i]
        arrays[i] = out
        del out
    return np.concatenate([[0], np.cumsum(new_deg)]), arrays


def lsq_gradient_operator(
    centres: np.ndarray,
    adjacency: sp.csr_matrix,
    *,
    min_neighbours: int = 4,
    max_layers: int = 3,
    quality_limit: float = 1e-6,
    dtype: type = np.float64,
    chunk: int = 262_144,
) -> GradientOperator:
    """Assemble the weighted least-squares gradient operator (see module
    docstring for the formula, exactness for linear fields and citations).

    Parameters
    ----------
    centres : (N, 3) cell centres (m, mesh frame; the points where the cell
        values live).
    adjacency : (N, N) symmetric face adjacency (:func:`cell_adjacency`).
    min_neighbours : cells with fewer face neighbours get a wider stencil.
    max_layers : widest stencil, in face-neighbour layers.
    quality_limit : stencils whose det(M)/(tr(M)/3)³ is below this are
        treated as ill-posed and widened.
    dtype : storage type of the coefficients (float64 keeps linear
        exactness to round-off; float32 halves the memory for very large
        meshes whose data are single precision anyway).
    chunk : number of stencil entries processed at a time (bounds memory).

    Assembly: the stencil entries are processed a block of rows at a time:
    moments M_i by bincount over the entries, all 3×3 inverses at once in
    closed form (adjugate/determinant), coefficients written straight into
    the CSR data arrays in the adjacency's own pattern (int32 indices shared
    by the three matrices). Only the few rows that need a wider stencil are
    rebuilt with sparse products and spliced in.

    Valid for any conforming mesh of volume cells; the gradient is first-order
    accurate on irregular meshes and exact for linear fields.
    """
    X = np.asarray(centres, dtype=np.float64)
    n = X.shape[0]
    if adjacency.shape != (n, n):
        raise ValueError(f"expected an adjacency of shape ({n}, {n}), got {adjacency.shape}")
    a_ptr = np.asarray(adjacency.indptr, dtype=np.int64)
    a_ind = np.asarray(adjacency.indices, dtype=np.int32)
    indptr, indices = a_ptr, a_ind  # the operator's pattern: face neighbours, then widened rows
    deg_limit = quality_limit * 1e-3
    Xc = tuple(np.ascontiguousarray(X[:, k]) for k in range(3))
    # 1. cells with too few face neighbours: wider pattern first (few rows)
    widened = np.zeros(n, dtype=bool)
    few = np.flatnonzero(np.diff(indptr) < min_neighbours)
    if few.size and max_layers > 1:
        cells, wdeg, wind = _widen(a_ptr, a_ind, Xc, few, min_neighbours, max_layers, quality_limit, deg_limit)
        indptr, (indices,) = _splice_rows(indptr, [indices], cells, wdeg, [wind])
        widened[cells] = True
    # 2. all rows, a block at a time, straight into the CSR data arrays
    nnz = int(indptr[-1])
    data = [np.empty(nnz, dtype=dtype) for _ in range(3)]
    row_sums = np.empty((3, n))
    ill = np.zeros(n, dtype=bool)
    degenerate = np.zeros(n, dtype=bool)
    for r0, r1 in _row_blocks(indptr, auto_chunk(nnz, chunk, 32_768)):
        s, e = int(indptr[r0]), int(indptr[r1])
        c, rs, q, degenerate[r0:r1] = _lsq_rows(Xc, indptr[r0:r1 + 1] - s, indices[s:e], (r0, r1), dtype,
                                                deg_limit)
        for k in range(3):
            data[k][s:e] = c[k]
        row_sums[:, r0:r1] = rs
        ill[r0:r1] = q < quality_limit
        del c, rs, q
    # 3. ill-posed face stencils (rare): widen, recompute those rows, splice
    ill = np.flatnonzero(ill & ~widened)
    if ill.size and max_layers > 1:
        cells, wdeg, wind = _widen(a_ptr, a_ind, Xc, ill, min_neighbours, max_layers, quality_limit, deg_limit)
        wp = np.concatenate([[0], np.cumsum(wdeg)])
        c, rs, _, dg = _lsq_rows(Xc, wp, wind, cells, dtype, deg_limit)
        indptr, arrays = _splice_rows(indptr, [indices] + data, cells, wdeg, [wind] + c)
        indices, data = arrays[0], arrays[1:]
        del arrays, c
        row_sums[:, cells] = rs
        degenerate[cells] = dg
        widened[cells] = True
    n_ext = int(widened.sum()) if max_layers > 1 else int(few.size + ill.size)
    ip = indptr.astype(np.int32) if indptr[-1] < 2**31 - 1 else indptr
    ind = indices if ip.dtype == np.int32 else indices.astype(np.int64)
    del indptr, a_ptr
    coeffs = tuple(sp.csr_matrix((data[k], ind, ip), shape=(n, n), copy=False) for k in range(3))
    del data
    return GradientOperator(coeffs=coeffs, row_sums=row_sums, n_extended=n_ext, n_degenerate=int(degenerate.sum()))


# ---------------------------------------------------------------------------
# velocity-gradient quantities
# ---------------------------------------------------------------------------

def vorticity(J: np.ndarray) -> np.ndarray:
    """Vorticity ω = ∇×u (1/s), (N, 3), from J[i, m, k] = ∂u_m/∂x_k (1/s)."""
    return np.stack([J[:, 2, 1] - J[:, 1, 2], J[:, 0, 2] - J[:, 2, 0], J[:, 1, 0] - J[:, 0, 1]], axis=1)


def q_criterion(J: np.ndarray) -> np.ndarray:
    """Q-criterion (1/s²): Q = ½(‖Ω‖² − ‖S‖²) = −½ J_mk J_km, with S and Ω the
    symmetric and antisymmetric parts of J[i, m, k] = ∂u_m/∂x_k.

    Hunt, Wray & Moin 1988, "Eddies, streams and convergence zones in
    turbulent flows", CTR Report CTR-S88, p. 193. Q > 0 where rotation
    dominates strain (a vortex core, in incompressible flow also a pressure
    minimum in the cross-section). Valid for any velocity field; exact-zero
    on pure shear, Ω² on solid-body rotation at rate Ω, negative on pure strain.
    """
    J = np.asarray(J, dtype=np.float64)
    return -0.5 * np.einsum("imk,ikm->i", J, J)


def _sym3_eigvals(a: np.ndarray) -> np.ndarray:
    """Sorted eigenvalues (n, 3) of symmetric 3×3 matrices (n, 3, 3), closed
    form (Smith 1961, "Eigenvalues of a symmetric 3×3 matrix", Commun. ACM
    4(4):168)."""
    a11, a22, a33 = a[:, 0, 0], a[:, 1, 1], a[:, 2, 2]
    a12, a13, a23 = a[:, 0, 1], a[:, 0, 2], a[:, 1, 2]
    p1 = a12**2 + a13**2 + a23**2
    q = (a11 + a22 + a33) / 3.0
    p2 = (a11 - q) ** 2 + (a22 - q) ** 2 + (a33 - q) ** 2 + 2.0 * p1
    p = np.sqrt(p2 / 6.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        inv_p = np.where(p > 0, 1.0 / p, 0.0)
    b11, b22, b33 = (a11 - q) * inv_p, (a22 - q) * inv_p, (a33 - q) * inv_p
    b12, b13, b23 = a12 * inv_p, a13 * inv_p, a23 * inv_p
    r = 0.5 * (b11 * (b22 * b33 - b23 * b23) - b12 * (b12 * b33 - b23 * b13) + b13 * (b12 * b23 - b22 * b13))
    phi = np.arccos(np.clip(r, -1.0, 1.0)) / 3.0
    e1 = q + 2.0 * p * np.cos(phi)
    e3 = q + 2.0 * p * np.cos(phi + 2.0 * np.pi / 3.0)
    e2 = 3.0 * q - e1 - e3
    return np.stack([e3, e2, e1], axis=1)


def lambda2(J: np.ndarray, chunk: int = 65_536) -> np.ndarray:
    """λ2 criterion (1/s²): the middle eigenvalue of S² + Ω² (S, Ω the
    symmetric/antisymmetric parts of J[i, m, k] = ∂u_m/∂x_k).

    Jeong & Hussain 1995, "On the identification of a vortex", J. Fluid Mech.
    285:69–94. λ2 < 0 inside a vortex core. Eigenvalues in closed form
    (Smith 1961).
    """
    J = np.asarray(J, dtype=np.float64)
    out = np.empty(J.shape[0])
    for s in range(0, J.shape[0], chunk):
        j = J[s:s + chunk]
        S = 0.5 * (j + j.transpose(0, 2, 1))
        W = 0.5 * (j - j.transpose(0, 2, 1))
        A = S @ S + W @ W
        out[s:s + chunk] = _sym3_eigvals(A)[:, 1]
    return out


@dataclass(frozen=True)
class VelocityGradientFields:
    """Velocity-gradient quantities per cell (body frame).

    ``vorticity`` (N, 3) 1/s; ``q`` (N,) 1/s²; ``lambda2`` (N,) 1/s² (or None
    when not asked for); ``q_star`` = Q/(V/L)² (dimensionless, None without
    reference values).
    """

    vorticity: np.ndarray
    q: np.ndarray
    lambda2: np.ndarray | None
    q_star: np.ndarray | None


def normalised_q(q: np.ndarray, speed: float, length: float) -> np.ndarray:
    """Q* = Q / (V/L)² (dimensionless) with V the reference speed (m/s) and L
    the reference length (m): the Q-criterion in units of the vehicle's
    convective time scale squared (common practice, no source)."""
    if not (speed > 0 and length > 0):
        raise ValueError(f"expected a positive reference speed and length, got {speed}, {length}")
    return np.asarray(q, dtype=np.float64) / (speed / length) ** 2


def velocity_gradient_fields(op: GradientOperator, velocity: np.ndarray, *, speed: float | None = None,
                             length: float | None = None, with_lambda2: bool = True,
                             chunk: int = 262_144) -> VelocityGradientFields:
    """Vorticity, Q, λ2 and Q* of a cell velocity field (N, 3) in m/s.

    The velocity gradient is computed with ``op`` (1/s), a chunk of cells at a
    time for the derived quantities. ``speed`` (m/s) and ``length`` (m) give
    Q* = Q/(V/L)². The input is not modified.
    """
    U = np.asarray(velocity)
    if U.ndim != 2 or U.shape[1] != 3:
        raise ValueError(f"expected a velocity array of shape (N, 3), got {U.shape}")
    if U.shape[0] != op.n_cells:
        raise ValueError(f"expected a velocity with {op.n_cells} cell values, got {U.shape[0]}")
    U64 = U.astype(np.float64, copy=False)
    n = U.shape[0]
    w = np.empty((n, 3))
    q = np.empty(n)
    l2 = np.empty(n) if with_lambda2 else None
    chunk = auto_chunk(n, chunk)
    for s in range(0, n, chunk):
        j = op.gradient_rows(U64, s, min(n, s + chunk))
        w[s:s + chunk] = vorticity(j)
        q[s:s + chunk] = q_criterion(j)
        if l2 is not None:
            l2[s:s + chunk] = lambda2(j)
    qs = normalised_q(q, speed, length) if speed is not None and length is not None else None
    return VelocityGradientFields(vorticity=w, q=q, lambda2=l2, q_star=qs)
