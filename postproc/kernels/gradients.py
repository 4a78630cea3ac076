"""Cell-data gradients on unstructured (polyhedral) meshes, and the
velocity-gradient quantities built from them: vorticity, Q-criterion, λ2.

Pure numpy/scipy kernels: arrays in, arrays/dataclasses out. Reading meshes
is done in :mod:`postproc.io.flow`, which hands over the topology as plain
integer arrays.

Axes: whatever frame the cell centres are given in (underfloor meshes are in
the body frame: x rearward, y right, z up, metres). Gradients are in 1/m times
the field's unit; the velocity-gradient tensor is ``J[i, m, k] = ∂u_m/∂x_k``
(1/s for u in m/s).

Method
------
1. **Face adjacency** by vertex-set keys (:mod:`postproc.kernels.meshtopo`):
   any mix of tetrahedra, pyramids, wedges,
   hexahedra and polyhedra.
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
3. **Boundary cells.** Boundary-face centres with their face values may
   join the stencils of the cells that own them (then every field needs its
   boundary values too). A cell with fewer than ``min_neighbours`` stencil
   points, or whose M_i is nearly singular, gets its stencil widened by the
   next face-neighbour layer (neighbours of neighbours), up to
   ``max_layers`` layers. Cells still singular after that (isolated cells)
   get a zero gradient and are counted in ``n_degenerate``.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from postproc.kernels.meshtopo import auto_chunk


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
    boundary_index: np.ndarray | None = None
    n_boundary_given: int = 0

    @property
    def n_cells(self) -> int:
        return int(self.row_sums.shape[1])

    @property
    def n_boundary(self) -> int:
        """Boundary points in the stencils (columns after the N cells)."""
        return int(self.coeffs[0].shape[1]) - self.n_cells

    def matrix(self, k: int) -> sp.csr_matrix:
        """The full sparse matrix G_k = C_k − diag(s_k), shape (N, N + B), so
        that ∂φ/∂x_k = G_k [φ; φ_b] (cell values, then boundary values)."""
        return (self.coeffs[k] - sp.diags(self.row_sums[k], shape=self.coeffs[k].shape)).tocsr()

    def extend(self, field64: np.ndarray, boundary: np.ndarray | None) -> np.ndarray:
        """[cell values; boundary values] as the operator's columns expect:
        ``boundary`` holds one value per boundary point given at assembly
        (B_given, ...) or is None for an operator without boundary points."""
        if self.n_boundary == 0:
            return field64
        if boundary is None:
            raise ValueError(f"expected the values at the {self.n_boundary_given} boundary points this operator "
                             "was assembled with, got none")
        b = np.asarray(boundary, dtype=np.float64)
        if b.shape[0] != self.n_boundary_given or b.shape[1:] != field64.shape[1:]:
            raise ValueError(f"expected boundary values of shape {(self.n_boundary_given,) + field64.shape[1:]}, "
                             f"got {b.shape}")
        return np.concatenate([field64, b[self.boundary_index]])

    def gradient_rows(self, field64: np.ndarray, start: int, stop: int) -> np.ndarray:
        """Gradient (stop−start, m, 3) of a float64 field (N [+ B], m), already
        :meth:`extend`-ed, on the cells start…stop−1 only (bounded memory for
        derived quantities)."""
        out = np.empty((stop - start, field64.shape[1], 3))
        for k in range(3):
            res = self.coeffs[k][start:stop] @ field64
            out[:, :, k] = res - self.row_sums[k][start:stop, None] * field64[start:stop]
        return out

    def gradient(self, field: np.ndarray, boundary: np.ndarray | None = None) -> np.ndarray:
        """Gradient of a cell field. ``field`` (N,) → (N, 3); (N, m) → (N, m, 3)
        with ``out[i, c, k] = ∂field_c/∂x_k``. ``boundary``: the field's values
        at the boundary points the operator was assembled with (needed then).
        Computed in float64; the inputs are not modified."""
        f = np.asarray(field)
        if f.shape[0] != self.n_cells:
            raise ValueError(f"expected a field with {self.n_cells} cell values, got {f.shape[0]}")
        f64 = f.astype(np.float64, copy=False)
        fx = self.extend(f64, boundary)
        out = np.empty(f.shape + (3,), dtype=np.float64)
        for k in range(3):
            s = self.row_sums[k]
            res = self.coeffs[k] @ fx
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
    boundary_points: np.ndarray | None = None,
    boundary_owner: np.ndarray | None = None,
) -> GradientOperator:
    """Assemble the weighted least-squares gradient operator (see module
    docstring for the formula, exactness for linear fields and citations).

    Long because: the assembly is one pass over memory-bounded row blocks
    (stencil, widening of ill-posed stencils, splicing of the wider rows,
    coefficients) whose intermediate arrays are shared between the steps;
    cut into functions they would have to be handed over whole, doubling
    the peak memory on large meshes. Each step is a helper above.

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
    boundary_points, boundary_owner : (B, 3) boundary-face centres (m) and
        the cell owning each face (−1: not used). Each owning cell gets its
        boundary faces as extra stencil points (d_ib = x_b − x_i), so that
        wall-adjacent cells see the boundary values (no-slip wall velocity,
        inflow value) instead of extrapolating one-sidedly (Blazek 2015,
        §5.3.4). The operator then needs the B face values with every field
        (``boundary`` argument of :meth:`GradientOperator.gradient`).

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
    bidx, bo, bptr, bcol = None, np.zeros(0, np.int32), None, None
    Xb = np.zeros((0, 3))
    if boundary_points is not None:
        bo_all = np.asarray(boundary_owner, dtype=np.int64)
        bidx = np.flatnonzero((bo_all >= 0) & (bo_all < n))
        bo = bo_all[bidx].astype(np.int32)
        Xb = np.asarray(boundary_points, dtype=np.float64)[bidx]
        # boundary points of each cell as a CSR (cell → column n + b)
        order = np.argsort(bo, kind="stable")
        bptr = np.concatenate([[0], np.cumsum(np.bincount(bo, minlength=n))]).astype(np.int64)
        bcol = (n + order).astype(np.int32)
    nb = Xb.shape[0]
    Xc = tuple(np.ascontiguousarray(np.concatenate([X[:, k], Xb[:, k]])) for k in range(3))
    bdeg = np.diff(bptr) if bptr is not None else np.zeros(n, dtype=np.int64)

    def with_boundary(cells, wdeg, wind):
        """Append the cells' own boundary points to their (widened) rows."""
        if nb == 0:
            return wdeg, wind
        k = bdeg[cells]
        pos = np.repeat(bptr[cells] - (np.cumsum(k) - k), k) + np.arange(int(k.sum()))
        rows = np.concatenate([np.repeat(np.arange(cells.size), wdeg), np.repeat(np.arange(cells.size), k)])
        cols = np.concatenate([wind, bcol[pos]])
        o = np.lexsort((cols, rows))
        return wdeg + k, cols[o].astype(np.int32)

    # 1. cells with too few stencil points: wider pattern first (few rows)
    widened = np.zeros(n, dtype=bool)
    few = np.flatnonzero(np.diff(indptr) + bdeg < min_neighbours)
    if few.size and max_layers > 1:
        cells, wdeg, wind = _widen(a_ptr, a_ind, Xc, few, min_neighbours, max_layers, quality_limit, deg_limit)
        indptr, (indices,) = _splice_rows(indptr, [indices], cells, wdeg, [wind])
        widened[cells] = True
    if nb:
        # every row with its own boundary points (columns n + b, after the cells)
        allc = np.arange(n)
        deg2, ind2 = with_boundary(allc, np.diff(indptr), indices)
        indptr, indices = np.concatenate([[0], np.cumsum(deg2)]), ind2
        del allc, deg2, ind2
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
        wdeg, wind = with_boundary(cells, wdeg, wind)
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
    coeffs = tuple(sp.csr_matrix((data[k], ind, ip), shape=(n, n + nb), copy=False) for k in range(3))
    del data
    return GradientOperator(coeffs=coeffs, row_sums=row_sums, n_extended=n_ext, n_degenerate=int(degenerate.sum()),
                            boundary_index=bidx,
                            n_boundary_given=0 if boundary_points is None else int(len(boundary_points)))


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
                             chunk: int = 262_144, boundary: np.ndarray | None = None) -> VelocityGradientFields:
    """Vorticity, Q, λ2 and Q* of a cell velocity field (N, 3) in m/s.

    The velocity gradient is computed with ``op`` (1/s), a chunk of cells at a
    time for the derived quantities. ``speed`` (m/s) and ``length`` (m) give
    Q* = Q/(V/L)². ``boundary`` (B, 3): the velocity at the operator's
    boundary points (m/s), needed when it was assembled with them. The
    inputs are not modified.
    """
    U = np.asarray(velocity)
    if U.ndim != 2 or U.shape[1] != 3:
        raise ValueError(f"expected a velocity array of shape (N, 3), got {U.shape}")
    if U.shape[0] != op.n_cells:
        raise ValueError(f"expected a velocity with {op.n_cells} cell values, got {U.shape[0]}")
    U64 = op.extend(U.astype(np.float64, copy=False), boundary)
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
