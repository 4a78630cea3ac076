"""Mesh topology as plain arrays, and face adjacency of unstructured
volume meshes by vertex-set hashing (any mix of tetrahedra, pyramids,
wedges, hexahedra and polyhedra). Pure numpy/scipy; the I/O layer
(:mod:`postproc.io.flow`) hands over the arrays.

Method: every cell's faces (from the standard VTK cell face tables, or the
polyhedron face lists) are keyed by two order-independent 64-bit hashes of
their vertex ids (sums of two different integer mixers over the face's
vertices, modulo 2⁶⁴). One in-place sort of 64-bit words — the high bits of
the first key with the slot number packed into the low bits — puts the
copies of each interior face side by side; a pair is confirmed by the second
key (a false match needs two simultaneous 64-bit collisions). Faces seen
once are boundary faces; boundary polygons given separately (the patches of
a solver result, in the mesh's point ids) are matched to their owner cells
by the same keys.
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


@dataclass(frozen=True)
class BoundaryKeys:
    """Keys of the faces seen only once (boundary faces): the high bits of
    the first key (``hi``, masked by ``~low``), the second key and the owner
    cell, for matching boundary polygons to their cells."""

    hi: np.ndarray
    k2: np.ndarray
    owner: np.ndarray
    low: np.uint64
    n_points: int


def _match_keys(k1: np.ndarray, k2: np.ndarray, own: np.ndarray, want_boundary: bool = False):
    """Pairs of slots with equal keys (k1, k2) and different owners.

    One in-place sort of 64-bit words: the high bits of k1 with the slot
    number packed into the low bits (so no argsort and no gathered copies of
    the keys). Slots whose high bits agree sit side by side; a run of two is
    confirmed with k2, runs of three or more (high-bit collisions of different
    faces, or a non-conforming face shared by more than two cells) are sorted
    again by the full keys. ``k1`` is overwritten. With ``want_boundary``
    also returns (high bits of k1, k2, owner, low-bit mask) of the slots
    left unpaired.
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
    matched = np.zeros(total, dtype=bool) if want_boundary else None
    # runs of exactly two slots: idx not adjacent to another idx
    if idx.size:
        adj = idx[1:] == idx[:-1] + 1
        single = ~(np.concatenate([[False], adj]) | np.concatenate([adj, [False]]))
        del adj
    else:
        single = np.zeros(0, dtype=bool)
    multi = idx[~single]
    pos = np.unique(np.concatenate([multi, multi + 1])) if multi.size else None
    hi = k1[pos] & ~low if multi.size else None
    if not want_boundary:
        del k1
    i2 = idx[single]
    del idx, single
    a_parts, b_parts = [], []
    for s in range(0, i2.size, 1 << 22):
        sa, sb = np.take(slot, i2[s:s + (1 << 22)]), np.take(slot, i2[s:s + (1 << 22)] + 1)
        ok = np.take(k2, sa) == np.take(k2, sb)
        if matched is not None:
            matched[sa[ok]] = True
            matched[sb[ok]] = True
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
        if matched is not None:
            matched[sl[j]] = True
            matched[sl[j + 1]] = True
    if matched is None:
        return a, b_
    p = np.flatnonzero(~np.take(matched, slot))
    sb_ = np.take(slot, p)
    return a, b_, (k1[p] & ~low, np.take(k2, sb_), np.take(own, sb_), low)


def face_pairs(topo: CellTopology, *, chunk: int = 65_536, with_boundary: bool = False):
    """Interior faces of the mesh as cell pairs.

    Returns ``(a, b, n_faces)``: int32 arrays of the two cells sharing each
    interior face, and the number of faces of every cell (N,). Faces seen
    only once are boundary faces. Raises ValueError on cell types without a
    face table (2D cells, lines, higher-order cells). ``chunk``: cells
    hashed at a time (bounds the temporary memory). ``with_boundary``: also
    return the :class:`BoundaryKeys` of the boundary faces.
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
    if not with_boundary:
        a, b = _match_keys(k1, k2, own)
        return a, b, n_faces
    a, b, (hi, k2b, ownb, low) = _match_keys(k1, k2, own, want_boundary=True)
    return a, b, n_faces, BoundaryKeys(hi=hi, k2=k2b, owner=ownb, low=low, n_points=int(topo.n_points))


def polygon_owners(keys: BoundaryKeys, offsets: np.ndarray, point_ids: np.ndarray) -> np.ndarray:
    """Owner cell (int32, −1 when none) of each boundary polygon given in
    the volume mesh's point ids (VTK layout: ``offsets`` (F+1,), ``point_ids``),
    matched to the mesh's boundary faces by the same two vertex-set keys."""
    off = np.asarray(offsets, dtype=np.int64)
    ids = np.asarray(point_ids, dtype=np.int64)
    nf = off.size - 1
    out = np.full(nf, -1, dtype=np.int32)
    if nf == 0 or keys.owner.size == 0:
        return out
    cnt = np.diff(off)
    ok = cnt > 0
    q1 = np.zeros(nf, dtype=np.uint64)
    q2 = np.zeros(nf, dtype=np.uint64)
    with np.errstate(over="ignore"):
        for q, seed in ((q1, 0x9E3779B97F4A7C15), (q2, 0x632BE59BD9B4E019)):
            q[ok] = np.add.reduceat(_mix64(ids, seed), off[:-1][ok])
    q1 &= ~keys.low
    order = np.lexsort((keys.k2, keys.hi))
    hs, ks = keys.hi[order], keys.k2[order]
    # first boundary face with the same high bits, then step over equal high bits for k2
    i = np.searchsorted(hs, q1)
    found = np.zeros(nf, dtype=bool)
    for _ in range(4):  # runs of equal high bits longer than a few do not occur in practice
        inb = (i < hs.size) & ~found & ok
        j = np.where(inb, i, 0)
        hit = inb & (hs[j] == q1) & (ks[j] == q2)
        out[hit] = keys.owner[order[j[hit]]]
        found |= hit
        i = i + 1
    return out


def adjacency_matrix(a: np.ndarray, b: np.ndarray, n_cells: int) -> sp.csr_matrix:
    """Symmetric cell adjacency (CSR, int32 indices, data 1) from cell pairs,
    without self-loops and duplicate entries."""
    rows = np.concatenate([a, b]).astype(np.int32)
    cols = np.concatenate([b, a]).astype(np.int32)
    A = sp.csr_matrix((np.ones(rows.size, dtype=np.int8), (rows, cols)), shape=(n_cells, n_cells))
    A.sum_duplicates()
    A.data[:] = 1
    return A


def cell_adjacency(topo: CellTopology, *, boundary_polygons: tuple[np.ndarray, np.ndarray] | None = None):
    """Face adjacency (CSR) of a volume mesh and the number of boundary
    faces of each cell (faces without a neighbour). With
    ``boundary_polygons`` = (offsets, point ids in the mesh's numbering)
    also returns the owner cell of each polygon (−1 when it is not a
    boundary face of the mesh): ``(A, n_boundary, owners)``."""
    if boundary_polygons is None:
        a, b, n_faces = face_pairs(topo)
    else:
        a, b, n_faces, keys = face_pairs(topo, with_boundary=True)
    A = adjacency_matrix(a, b, topo.n_cells)
    n_boundary = n_faces - np.diff(A.indptr).astype(np.int32)
    if boundary_polygons is None:
        return A, n_boundary
    return A, n_boundary, polygon_owners(keys, *boundary_polygons)
