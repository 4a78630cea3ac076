"""Volume and patch I/O for the flow-structure tools (the only flow module
that touches pyvista/VTK).

Reads the solver converter's output: ``VTK/<case>_<time>.vtm`` (a multiblock
with ``internal`` → ``internal.vtu`` and ``boundary`` → one ``<patch>.vtp``
per patch), a bare ``.vtu`` internal mesh, or a case folder (the newest
``VTK/*.vtm``). Hands the kernels plain numpy arrays: topology
(:class:`postproc.kernels.gradients.CellTopology`), cell centres, cell data, plane
sections (:class:`postproc.kernels.sections.PlaneSection`) and surface patches
(:class:`postproc.kernels.sections.SurfacePatch`).

Axes: the mesh frame, which for underfloor cases is the body frame (x
rearward, y right, z up, m). Pressure arrays from the incompressible solver
are kinematic (m²/s²).
"""
from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from caseprep.contract.errors import UserError
from caseprep.contract.manifest import CaseRecord, find_case_manifest
from postproc.io.exports import latest_export, time_from_name

from postproc.kernels.meshtopo import VOLUME_CELL_TYPES, VTK_POLYHEDRON, CellTopology
from postproc.kernels.sections import PlaneSection, SurfacePatch



@dataclass
class FlowCase:
    """A loaded result: internal mesh (pyvista grid, kept private to the I/O
    layer), boundary patches as :class:`SurfacePatch`, the case record from the
    sweep manifest when there is one, and where it came from."""

    grid: object
    patches: dict[str, SurfacePatch]
    source: Path
    record: CaseRecord | None = None
    time: float | None = None
    extra: dict = field(default_factory=dict)

    @property
    def n_cells(self) -> int:
        return int(self.grid.n_cells)

    def cell_array_names(self) -> list[str]:
        return list(self.grid.cell_data.keys())

    def cell_array(self, name: str, *, where: str | None = None) -> np.ndarray:
        """A cell-data array of the internal mesh (a view, do not modify)."""
        if name not in self.grid.cell_data:
            names = ", ".join(self.cell_array_names()) or "none"
            raise UserError(
                expected=f"a cell-data array {name!r} in the internal mesh",
                got=f"arrays: {names}",
                file=str(where or self.source),
                key=name,
                fix="write the field with the solver's VTK converter (it must be in the time folder), "
                    "or name the array with the matching option",
            )
        return np.asarray(self.grid.cell_data[name])


def resolve_result(path: str | Path) -> tuple[Path, Path | None]:
    """(result file, case folder or None) for a case folder, a .vtm or a .vtu."""
    p = Path(path)
    if not p.exists():
        raise UserError(expected="an existing case folder, .vtm or .vtu file", got=str(path),
                        fix="check the path")
    if p.is_dir():
        return latest_export(p), p
    if p.suffix.lower() not in (".vtm", ".vtu"):
        raise UserError(expected="a volume result (.vtm multiblock or .vtu internal mesh) or a case folder",
                        got=p.name, file=str(p),
                        fix="surface files (.vtp, .stl) hold no volume data; pass the case's .vtm")
    case_dir = p.parent.parent if p.parent.name == "VTK" else None
    return p, case_dir


def _surface_from_polydata(pd, name: str) -> SurfacePatch:
    import pyvista as pv

    if not isinstance(pd, pv.PolyData):
        pd = pd.extract_surface()
    pts = np.asarray(pd.points, dtype=np.float64)
    faces = pd.faces
    off, conn = _polys_offsets(pd)
    cd = {k: np.asarray(pd.cell_data[k]) for k in pd.cell_data.keys()}
    pdd = {k: np.asarray(pd.point_data[k]) for k in pd.point_data.keys()}
    del faces
    return SurfacePatch(name=name, points=pts, offsets=off, connectivity=conn, cell_data=cd, point_data=pdd)


def _polys_offsets(pd) -> tuple[np.ndarray, np.ndarray]:
    polys = pd.GetPolys()
    from vtkmodules.util.numpy_support import vtk_to_numpy

    off = vtk_to_numpy(polys.GetOffsetsArray()).astype(np.int64)
    conn = vtk_to_numpy(polys.GetConnectivityArray()).astype(np.int64)
    return off, conn


def read_flow(path: str | Path, *, need_volume: bool = True) -> FlowCase:
    """Read a solver result for the flow-structure tools.

    ``path``: a case folder (newest ``VTK/*.vtm``), a ``.vtm`` multiblock or a
    ``.vtu`` internal mesh. The case record comes from the sweep manifest
    above the case folder when there is one. Raises :class:`UserError` for
    missing files, surface-only data where a volume is needed, and NaN/inf in
    the velocity or pressure.
    """
    import pyvista as pv

    f, case_dir = resolve_result(path)
    from postproc.io.surfaces import check_declared_sizes, vtm_blocks

    # every block inside the export's folder (raises naming the block), and no file declaring more data than it
    # holds (the reader would allocate for it and abort)
    for _, block in (vtm_blocks(f)[0] if f.suffix.lower() == ".vtm" else [("", f)]):
        if block.is_file():
            check_declared_sizes(block)
    try:
        data = pv.read(str(f))
    except Exception as exc:  # VTK reader errors
        raise UserError(expected="a readable VTK file", got=f"{type(exc).__name__}: {exc}", file=str(f),
                        fix="re-run the solver's VTK converter") from None
    grid, patches = None, {}
    if isinstance(data, pv.MultiBlock):
        names = [data.get_block_name(i) for i in range(data.n_blocks)]
        for i, nm in enumerate(names):
            blk = data[i]
            if blk is None:
                continue
            if isinstance(blk, pv.MultiBlock):
                for j in range(blk.n_blocks):
                    sub = blk[j]
                    if sub is not None and sub.n_cells:
                        patches[blk.get_block_name(j)] = _surface_from_polydata(sub, blk.get_block_name(j))
            elif isinstance(blk, pv.UnstructuredGrid) and grid is None and (nm or "").lower() in ("internal", "internalmesh", ""):
                grid = blk
            elif isinstance(blk, pv.UnstructuredGrid) and grid is None:
                grid = blk
            elif isinstance(blk, pv.PolyData) and blk.n_cells:
                patches[nm] = _surface_from_polydata(blk, nm)
    elif isinstance(data, pv.UnstructuredGrid):
        grid = data
    elif isinstance(data, pv.DataSet):
        if need_volume:
            raise UserError(expected="volume cells (an unstructured internal mesh)",
                            got=f"a {type(data).__name__}", file=str(f),
                            fix="pass the case's .vtm or internal.vtu, not a surface file")
    if grid is None and need_volume:
        raise UserError(expected="an internal (volume) mesh block", got="surface patches only", file=str(f),
                        fix="run the VTK converter without surface-only options so that internal.vtu is written")
    if grid is not None and need_volume:
        types = np.unique(np.asarray(grid.celltypes))
        vol = [t for t in types.tolist() if t in VOLUME_CELL_TYPES]
        if not vol:
            raise UserError(expected="volume cells (tetrahedra, hexahedra, wedges, pyramids, polyhedra)",
                            got=f"VTK cell types {types.tolist()} (2D/surface data)", file=str(f),
                            fix="pass the internal mesh, not a slice or a surface")
        if len(vol) != len(types):
            grid = grid.extract_cells(np.flatnonzero(np.isin(grid.celltypes, vol)))
    record = None
    if case_dir is not None:
        found = find_case_manifest(case_dir)
        if found is not None:
            record = found[1]
    return FlowCase(grid=grid, patches=patches, source=f, record=record, time=time_from_name(f))


def flow_case_from_grid(grid, patches: dict[str, SurfacePatch] | None = None, source: str = "<memory>",
                        record: CaseRecord | None = None) -> FlowCase:
    """Wrap an in-memory grid as a :class:`FlowCase` (tests, API users)."""
    return FlowCase(grid=grid, patches=dict(patches or {}), source=Path(source), record=record)


def surface_from_polydata(pd, name: str = "surface") -> SurfacePatch:
    """A pyvista PolyData as a plain-array :class:`SurfacePatch`."""
    return _surface_from_polydata(pd, name)


def surface_to_polydata(surface: SurfacePatch):
    """A :class:`SurfacePatch` as pyvista PolyData (with its cell and point data)."""
    import pyvista as pv

    counts = np.diff(surface.offsets)
    faces = np.insert(surface.connectivity, surface.offsets[:-1], counts) if counts.size else np.zeros(0, dtype=np.int64)
    pd = pv.PolyData(surface.points, faces=faces)
    for k, v in surface.cell_data.items():
        pd.cell_data[k] = v
    for k, v in surface.point_data.items():
        pd.point_data[k] = v
    return pd


def topology(grid) -> CellTopology:
    """The mesh topology as plain arrays (int64/int32), for
    :func:`postproc.kernels.gradients.cell_adjacency`."""
    ct = np.asarray(grid.celltypes)
    off = np.asarray(grid.offset if not hasattr(grid, "cell_offsets") else grid.cell_offsets)
    conn = np.asarray(grid.cell_connectivity)
    kw = {}
    if np.any(ct == VTK_POLYHEDRON):
        kw = dict(
            poly_face_offsets=np.asarray(grid.polyhedron_face_offsets),
            poly_face_connectivity=np.asarray(grid.polyhedron_face_connectivity),
            poly_loc_offsets=np.asarray(grid.polyhedron_face_location_offsets),
            poly_loc_connectivity=np.asarray(grid.polyhedron_face_location_connectivity),
        )
    return CellTopology(celltypes=ct, offsets=off, connectivity=conn, n_points=int(grid.n_points), **kw)


@dataclass
class BoundaryFaces:
    """The boundary patches' polygons in the internal mesh's point numbering.

    ``offsets`` (F+1,), ``point_ids`` (volume-mesh point ids; −1 for a vertex
    with no volume-mesh point at the same place), ``centres`` (F, 3) face
    centres (m, mesh frame) and ``patches`` (patch name → slice of the faces).
    """

    offsets: np.ndarray
    point_ids: np.ndarray
    centres: np.ndarray
    patches: dict[str, slice]

    def values(self, case: "FlowCase", name: str) -> np.ndarray | None:
        """Face values of the array ``name`` on all patches, in face order;
        None when a patch does not carry it."""
        parts = []
        for pname, sl in self.patches.items():
            v = case.patches[pname].cell_values(name)
            if v is None or v.shape[0] != sl.stop - sl.start:
                return None
            parts.append(np.asarray(v, dtype=np.float64))
        return np.concatenate(parts) if parts else None


def boundary_faces(case: "FlowCase", *, rel_tol: float = 1e-7) -> BoundaryFaces | None:
    """The patch polygons of ``case`` with their vertices looked up among
    the internal mesh's points (nearest point within ``rel_tol`` × the mesh
    diagonal; the converter writes both from the same coordinates), or None
    without patches."""
    if not case.patches or case.grid is None:
        return None
    from scipy.spatial import cKDTree

    pts = np.asarray(case.grid.points, dtype=np.float64)
    b = np.asarray(case.grid.bounds, dtype=float)
    tol = rel_tol * float(np.linalg.norm(b[1::2] - b[0::2]))
    tree = cKDTree(pts)
    offs, ids, cens, slices = [np.zeros(1, dtype=np.int64)], [], [], {}
    nf = 0
    base = 0
    for name, s in case.patches.items():
        d, j = tree.query(np.asarray(s.points, dtype=np.float64), distance_upper_bound=tol)
        j = np.where(np.isfinite(d), j, -1).astype(np.int64)
        ids.append(j[np.asarray(s.connectivity, dtype=np.int64)])
        offs.append(np.asarray(s.offsets[1:], dtype=np.int64) + base)
        base += int(s.offsets[-1])
        cens.append(s.centroids)
        slices[name] = slice(nf, nf + s.n_cells)
        nf += s.n_cells
    return BoundaryFaces(offsets=np.concatenate(offs), point_ids=np.concatenate(ids),
                         centres=np.concatenate(cens), patches=slices)


def cell_centres(grid, *, kind: str = "centroid", chunk: int = 262_144) -> np.ndarray:
    """Cell centres (N, 3), m (mesh frame).

    ``kind="centroid"`` (default): volume centroids
    (:func:`postproc.kernels.cellgeom.cell_centroids`), the points where the solver
    stores its cell values. ``kind="vertex-mean"``: the mean of each cell's
    vertices (cheaper; off by up to ~0.2 of a cell on the polyhedra at
    refinement interfaces). Gradients taken with either are exact for fields
    that are linear in them.
    """
    if kind == "centroid":
        return cell_geometry(grid)[0]
    if kind != "vertex-mean":
        raise ValueError(f"expected kind 'centroid' or 'vertex-mean', got {kind!r}")
    pts = np.asarray(grid.points, dtype=np.float64)
    off = np.asarray(grid.offset if not hasattr(grid, "cell_offsets") else grid.cell_offsets).astype(np.int64)
    conn = np.asarray(grid.cell_connectivity)
    counts = np.diff(off)
    n = counts.size
    out = np.full((n, 3), np.nan)
    # a block of cells at a time: the gathered vertex coordinates stay small
    for c0 in range(0, n, chunk):
        c1 = min(n, c0 + chunk)
        cnt = counts[c0:c1]
        nz = np.flatnonzero(cnt > 0)
        if nz.size == 0:
            continue
        ids = conn[off[c0]:off[c1]]
        starts = off[c0:c1][nz] - off[c0]
        for k in range(3):
            out[c0 + nz, k] = np.add.reduceat(pts[ids, k], starts) / cnt[nz]
    return out


def cell_geometry(grid) -> tuple[np.ndarray, np.ndarray]:
    """Volume centroids (N, 3), m, and volumes (N,), m³, of all cells of the
    internal mesh (:func:`postproc.kernels.cellgeom.cell_centroids`; mesh frame)."""
    from postproc.kernels.cellgeom import cell_centroids

    return cell_centroids(np.asarray(grid.points), topology(grid))


def cell_volumes(grid, ids: np.ndarray | None = None) -> np.ndarray:
    """Cell volumes (m³) of all cells or of the cells ``ids``, by pyramid
    decomposition (:func:`postproc.kernels.cellgeom.cell_centroids`; VTK's own
    cell-size filter misjudges non-convex polyhedra)."""
    g = grid if ids is None else grid.extract_cells(np.asarray(ids))
    if g.n_cells == 0:
        return np.zeros(0)
    return cell_geometry(g)[1]


def vtk_cell_gradient(grid, name: str, *, q_criterion: bool = True) -> tuple[np.ndarray, np.ndarray | None]:
    """Reference: VTK's vtkGradientFilter on the cell array ``name``.

    Returns (gradient (N, 3, 3) with [i, m, k] = ∂u_m/∂x_k, Q (N,) or None).
    """
    import vtk
    from vtkmodules.util.numpy_support import vtk_to_numpy

    g = vtk.vtkUnstructuredGrid()
    g.ShallowCopy(grid)
    f = vtk.vtkGradientFilter()
    f.SetInputData(g)
    f.SetInputArrayToProcess(0, 0, 0, vtk.vtkDataObject.FIELD_ASSOCIATION_CELLS, name)
    f.SetResultArrayName("grad")
    f.SetComputeQCriterion(bool(q_criterion))
    f.SetQCriterionArrayName("Qvtk")
    f.Update()
    out = f.GetOutput()
    # VTK stores the gradient row-major as [du/dx du/dy du/dz dv/dx ...]
    grad = vtk_to_numpy(out.GetCellData().GetArray("grad")).reshape(-1, 3, 3).astype(np.float64)
    q = vtk_to_numpy(out.GetCellData().GetArray("Qvtk")).astype(np.float64) if q_criterion else None
    return grad, q


def slice_stations(grid, xs, arrays: dict[str, np.ndarray], *, axis: int = 0) -> list[PlaneSection]:
    """Cut the internal mesh by planes normal to ``axis`` at the positions
    ``xs`` (m) in one pass (VTK's vtkCutter with several values) and return
    one :class:`PlaneSection` per station, carrying the cell arrays
    ``arrays`` (name → (N,) or (N, c) cell values, piecewise constant on
    each cut cell) and the id of the cut cell of every polygon.
    """
    import vtk
    from vtkmodules.util.numpy_support import numpy_to_vtk, vtk_to_numpy

    g = vtk.vtkUnstructuredGrid()
    g.CopyStructure(grid)
    cd = g.GetCellData()
    keep = []
    for name, arr in arrays.items():
        a = np.ascontiguousarray(np.asarray(arr, dtype=np.float64))
        keep.append(a)
        va = numpy_to_vtk(a.reshape(a.shape[0], -1), deep=0)
        va.SetName(name)
        cd.AddArray(va)
    ids = np.arange(g.GetNumberOfCells(), dtype=np.int64)
    keep.append(ids)
    vid = numpy_to_vtk(ids, deep=0)
    vid.SetName("__cell")
    cd.AddArray(vid)
    plane = vtk.vtkPlane()
    n = [0.0, 0.0, 0.0]
    n[axis] = 1.0
    plane.SetOrigin(0.0, 0.0, 0.0)
    plane.SetNormal(*n)
    cut = vtk.vtkCutter()
    cut.SetCutFunction(plane)
    cut.SetInputData(g)
    xs = [float(x) for x in xs]
    cut.SetNumberOfContours(len(xs))
    for i, x in enumerate(xs):
        cut.SetValue(i, x)
    cut.GenerateTrianglesOff()
    cut.Update()
    out = cut.GetOutput()
    if out.GetNumberOfCells() == 0:
        return [PlaneSection.empty(x, axis, list(arrays)) for x in xs]
    pts = vtk_to_numpy(out.GetPoints().GetData()).astype(np.float64)
    polys = out.GetPolys()
    off = vtk_to_numpy(polys.GetOffsetsArray()).astype(np.int64)
    conn = vtk_to_numpy(polys.GetConnectivityArray()).astype(np.int64)
    ocd = out.GetCellData()
    data = {name: vtk_to_numpy(ocd.GetArray(name)).astype(np.float64) for name in arrays}
    src = vtk_to_numpy(ocd.GetArray("__cell")).astype(np.int64)
    # which station each polygon belongs to: its first vertex's coordinate
    first = pts[conn[off[:-1]], axis]
    xs_arr = np.asarray(xs)
    which = np.argmin(np.abs(first[:, None] - xs_arr[None, :]), axis=1)
    sections = []
    for i, x in enumerate(xs):
        sel = np.flatnonzero(which == i)
        sections.append(PlaneSection.from_polygons(x, axis, pts, off, conn, sel,
                                                   {k: v[sel] for k, v in data.items()}, src[sel]))
    del keep
    return sections


def slice_surface(surface: SurfacePatch, axis: int, value: float) -> tuple[np.ndarray, np.ndarray, dict[str, np.ndarray]]:
    """Cut a surface patch by the plane x_axis = value.

    Returns (segments (S, 2, 3) m, source polygon ids (S,), cell data of the
    cut polygons). Empty arrays when the plane misses the patch.
    """
    import pyvista as pv
    import vtk
    from vtkmodules.util.numpy_support import vtk_to_numpy

    pd = surface_to_polydata(surface)
    pd.cell_data["__cell"] = np.arange(pd.n_cells, dtype=np.int64)
    plane = vtk.vtkPlane()
    n = [0.0, 0.0, 0.0]
    n[axis] = 1.0
    o = [0.0, 0.0, 0.0]
    o[axis] = float(value)
    plane.SetOrigin(*o)
    plane.SetNormal(*n)
    cut = vtk.vtkCutter()
    cut.SetCutFunction(plane)
    cut.SetInputData(pd)
    cut.Update()
    out = pv.wrap(cut.GetOutput())
    if out.n_cells == 0:
        return np.zeros((0, 2, 3)), np.zeros(0, dtype=np.int64), {}
    lines = out.GetLines()
    off = vtk_to_numpy(lines.GetOffsetsArray()).astype(np.int64)
    conn = vtk_to_numpy(lines.GetConnectivityArray()).astype(np.int64)
    pts = np.asarray(out.points, dtype=np.float64)
    # polylines → segments
    a_idx, b_idx, owner = [], [], []
    counts = np.diff(off)
    for c in np.unique(counts):
        rows = np.flatnonzero(counts == c)
        base = off[rows]
        for s in range(c - 1):
            a_idx.append(conn[base + s])
            b_idx.append(conn[base + s + 1])
            owner.append(rows)
    a = np.concatenate(a_idx)
    b = np.concatenate(b_idx)
    own = np.concatenate(owner)
    segs = np.stack([pts[a], pts[b]], axis=1)
    cd = {k: np.asarray(out.cell_data[k])[own] for k in out.cell_data.keys() if k != "__cell"}
    return segs, np.asarray(out.cell_data["__cell"])[own], cd


def q_isosurface(grid, q_norm: np.ndarray, vorticity_x: np.ndarray, level: float,
                 cell_ids: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray] | None:
    """Iso-surface Q_norm = level through the cells ``cell_ids`` (and their
    values interpolated to the points), with the sign of ω_x per face:
    (points (N, 3) m, offsets, connectivity (triangles), sense (F,) ±1), or
    None when the level is not crossed. ``q_norm`` and ``vorticity_x`` are
    cell values of the whole ``grid`` (VTK's contour filter on the point
    values averaged from the cells)."""
    if cell_ids.size == 0:
        return None
    sub = grid.extract_cells(cell_ids)
    sub.clear_data()
    sub.cell_data["q"] = np.asarray(q_norm, dtype=float)[cell_ids]
    sub.cell_data["wx"] = np.asarray(vorticity_x, dtype=float)[cell_ids]
    pts = sub.cell_data_to_point_data()
    iso = pts.contour([level], scalars="q")
    if iso.n_cells == 0:
        return None
    iso = iso.triangulate()
    wx = iso.point_data["wx"]
    faces = iso.faces.reshape(-1, 4)[:, 1:]
    sense = np.where(wx[faces].mean(axis=1) >= 0, 1.0, -1.0)
    off = np.arange(0, 3 * faces.shape[0] + 1, 3, dtype=np.int64)
    return np.asarray(iso.points, dtype=float), off, faces.ravel().astype(np.int64), sense
