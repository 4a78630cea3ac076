"""Plain-array plane sections and surface patches, with their geometry
(polygon areas, centroids, normals: :func:`postproc.kernels.polygons.face_geometry`)
and connectivity. Pure numpy/scipy.

Axes: the mesh frame (underfloor: body frame, x rearward, y right, z up, m).
A station is the plane ``x_axis = value``; its polygons are the cut cells,
each carrying its cell's (piecewise-constant) values.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import scipy.sparse as sp
from scipy.sparse.csgraph import connected_components

from postproc.kernels.polygons import face_geometry


def polygon_components(offsets: np.ndarray, conn: np.ndarray, mask: np.ndarray, n_points: int) -> tuple[int, np.ndarray]:
    """Connected components of the polygons where ``mask`` is True, two
    polygons being connected when they share a vertex. Returns (count,
    labels) with labels −1 for polygons outside the mask."""
    m = offsets.size - 1
    labels = np.full(m, -1, dtype=np.int64)
    sel = np.flatnonzero(mask)
    if sel.size == 0:
        return 0, labels
    counts = np.diff(offsets)[sel]
    rows = np.repeat(np.arange(sel.size), counts)
    starts = offsets[sel]
    cum = np.concatenate([[0], np.cumsum(counts)])
    idx = conn[np.repeat(starts - cum[:-1], counts) + np.arange(cum[-1])]
    inc = sp.csr_matrix((np.ones(rows.size, dtype=np.float32), (rows, idx)), shape=(sel.size, n_points))
    adj = (inc @ inc.T).tocsr()
    n, lab = connected_components(adj, directed=False)
    labels[sel] = lab
    return int(n), labels


@dataclass
class PlaneSection:
    """Polygons of a plane cut through the volume mesh at ``x_axis = value``.

    ``points`` (P, 3) m; ``offsets``/``connectivity`` polygons (VTK layout);
    ``data`` name → per-polygon values (the cut cell's values);
    ``cells`` the cut cell id of each polygon. ``areas`` (m²) and
    ``centroids`` (m) are computed on construction.
    """

    value: float
    axis: int
    points: np.ndarray
    offsets: np.ndarray
    connectivity: np.ndarray
    data: dict[str, np.ndarray]
    cells: np.ndarray
    areas: np.ndarray = field(init=False)
    centroids: np.ndarray = field(init=False)

    def __post_init__(self) -> None:
        avec, cen = face_geometry(self.points, (self.offsets, self.connectivity))
        self.areas = np.abs(avec[:, self.axis]) if avec.size else np.zeros(0)
        self.centroids = cen

    @property
    def n_polygons(self) -> int:
        return int(self.offsets.size - 1)

    @classmethod
    def empty(cls, value: float, axis: int, names) -> "PlaneSection":
        return cls(value=float(value), axis=axis, points=np.zeros((0, 3)), offsets=np.zeros(1, dtype=np.int64),
                   connectivity=np.zeros(0, dtype=np.int64), data={k: np.zeros(0) for k in names},
                   cells=np.zeros(0, dtype=np.int64))

    @classmethod
    def from_polygons(cls, value, axis, points, offsets, conn, sel, data, cells) -> "PlaneSection":
        """The polygons ``sel`` of a larger polygon set, with compact point ids."""
        sel = np.asarray(sel, dtype=np.int64)
        counts = np.diff(offsets)[sel]
        new_off = np.concatenate([[0], np.cumsum(counts)]).astype(np.int64)
        if sel.size:
            starts = offsets[sel]
            gather = np.repeat(starts - new_off[:-1], counts) + np.arange(new_off[-1])
            old = conn[gather]
        else:
            old = np.zeros(0, dtype=np.int64)
        uniq, inv = np.unique(old, return_inverse=True)
        return cls(value=float(value), axis=axis, points=points[uniq], offsets=new_off,
                   connectivity=inv.astype(np.int64), data=data, cells=np.asarray(cells, dtype=np.int64))

    def components(self, mask: np.ndarray) -> tuple[int, np.ndarray]:
        """Connected regions of the masked polygons (shared vertices)."""
        return polygon_components(self.offsets, self.connectivity, np.asarray(mask, bool), self.points.shape[0])

    def subset(self, mask: np.ndarray) -> "PlaneSection":
        sel = np.flatnonzero(mask)
        return PlaneSection.from_polygons(self.value, self.axis, self.points, self.offsets, self.connectivity, sel,
                                          {k: v[sel] for k, v in self.data.items()}, self.cells[sel])


@dataclass
class SurfacePatch:
    """A boundary patch as plain arrays: points (P, 3) m, polygons (VTK
    layout), cell data and point data by name. ``areas`` (m²), ``normals``
    (unit, polygon winding orientation) and ``centroids`` (m) are computed on
    construction."""

    name: str
    points: np.ndarray
    offsets: np.ndarray
    connectivity: np.ndarray
    cell_data: dict[str, np.ndarray]
    point_data: dict[str, np.ndarray]
    areas: np.ndarray = field(init=False)
    normals: np.ndarray = field(init=False)
    centroids: np.ndarray = field(init=False)

    def __post_init__(self) -> None:
        avec, cen = face_geometry(self.points, (self.offsets, self.connectivity))
        a = np.linalg.norm(avec, axis=1)
        self.areas = a
        with np.errstate(invalid="ignore", divide="ignore"):
            self.normals = np.where(a[:, None] > 0, avec / a[:, None], 0.0)
        self.centroids = cen

    @property
    def n_cells(self) -> int:
        return int(self.offsets.size - 1)

    def array_names(self) -> list[str]:
        return sorted(set(self.cell_data) | set(self.point_data))

    def cell_values(self, name: str) -> np.ndarray | None:
        """Per-face values of ``name``: the cell array, or the mean of the
        point array over each face's vertices; None when absent."""
        if name in self.cell_data:
            return np.asarray(self.cell_data[name])
        if name in self.point_data:
            v = np.asarray(self.point_data[name], dtype=np.float64)
            counts = np.diff(self.offsets)
            s = np.add.reduceat(v[self.connectivity], self.offsets[:-1], axis=0)
            return s / (counts[:, None] if v.ndim == 2 else counts)
        return None
