"""Readers of the solver's VTK export and of plain VTK surfaces (I/O layer).

A registry keyed by file extension turns a file into a :class:`SurfaceMesh`
(polygonal faces, face data, part ids). Known formats:

``.vtm``  XML multiblock as the solver's converter writes it:
          ``VTK/<case>_<time>.vtm`` naming ``<case>_<time>/internal.vtu`` and
          ``<case>_<time>/boundary/<patch>.vtp``. Only the selected patches
          are read (the volume file is never opened for forces).
``.vtp``  XML polydata (one surface).
``.vtu``  XML unstructured grid holding polygonal cells.
``.vtk``  legacy VTK (polydata or unstructured grid of polygons).

Patches are selected by name or shell-style glob (``body*``, ``wheel_*``); a
pattern that matches nothing is a :class:`UserError` listing what exists.
Coordinates are in the file's frame (for underfloor cases the body frame).
Arrays keep their stored dtype (the solver writes Float32); the kernels
accumulate in float64.
"""
from __future__ import annotations

import fnmatch
import os
import re
import xml.etree.ElementTree as ET
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable, Iterable, Sequence

import numpy as np

from caseprep.contract.errors import UserError, did_you_mean
from postproc.io.isolation import UnreadableFile, isolated
from caseprep.contract.limits import MAX_JSON_BYTES, MAX_VTM_BLOCKS
from caseprep.contract.untrusted import confined

_POLY_TYPES = {5, 7, 9}  # VTK_TRIANGLE, VTK_POLYGON, VTK_QUAD
_SURFACE_TYPES = _POLY_TYPES | {8}  # plus VTK_PIXEL (reordered below)


@dataclass(frozen=True)
class SurfaceMesh:
    """Polygonal faces with face (cell) data.

    points (N, 3) m; offsets (M+1,) and connectivity: VTK ≥ 9 polygon layout;
    cell_data: face arrays by name (those loaded); point_arrays: names of point
    data present (not loaded); part_ids (M,) index into part_names; source:
    file path; cell_arrays: names of all face arrays present (loaded or not).
    """

    points: np.ndarray
    offsets: np.ndarray
    connectivity: np.ndarray
    cell_data: dict[str, np.ndarray]
    point_arrays: tuple[str, ...]
    part_ids: np.ndarray
    part_names: tuple[str, ...]
    source: str
    time: float | None = None
    notes: tuple[str, ...] = field(default_factory=tuple)
    cell_arrays: tuple[str, ...] = ()

    @property
    def n_faces(self) -> int:
        return int(self.offsets.size - 1)

    @property
    def faces(self) -> tuple[np.ndarray, np.ndarray]:
        """``(offsets, connectivity)`` as :func:`postproc.kernels.forces.face_geometry` takes it."""
        return self.offsets, self.connectivity

    def array(self, name: str) -> np.ndarray:
        """A face array by name; a missing one is a UserError naming what exists."""
        if name in self.cell_data:
            return self.cell_data[name]
        extra = ""
        present = sorted(set(self.cell_arrays) | set(self.cell_data))
        if name in present:
            raise KeyError(f"face array {name!r} of {self.source} was not loaded (read_surface(arrays=...))")
        if name in self.point_arrays:
            extra = f" ({name!r} exists only as point data; forces need face (cell) data)"
        raise UserError(
            expected=f"a face (cell) data array {name!r}" + extra,
            got="face arrays: " + (", ".join(present) or "none")
                + "; point arrays: " + (", ".join(sorted(self.point_arrays)) or "none"),
            file=self.source, key=name,
            fix="name the array with --pressure-field/--shear-field (or --no-shear for an inviscid result)"
                + did_you_mean(name, present),
        )


# --------------------------------------------------------------------------- vtk plumbing

def _run_reader(reader, path: Path, arrays: Sequence[str] | None = None) -> tuple[object, tuple | None]:
    """Run a vtk reader on ``path``; any vtk error becomes a UserError.

    XML readers load only the face arrays named in ``arrays`` (None: all) and
    no point arrays; returns the dataset and, for those readers, the names of
    all face and point arrays in the file (else None)."""
    import vtk

    from vtkmodules.vtkCommonCore import vtkCommand

    msgs: list[str] = []

    def on_error(obj, event, calldata=None):
        msgs.append(str(calldata) if calldata else event)

    on_error.CallDataType = vtk.VTK_STRING  # type: ignore[attr-defined]
    for ev in (vtkCommand.ErrorEvent, vtkCommand.WarningEvent):  # a premature end of file is only a warning
        reader.AddObserver(ev, on_error)
        ex = reader.GetExecutive() if hasattr(reader, "GetExecutive") else None
        if ex is not None:
            ex.AddObserver(ev, on_error)
    reader.SetFileName(str(path))
    logger = vtk.vtkLogger
    old = logger.GetCurrentVerbosityCutoff()
    logger.SetStderrVerbosity(logger.VERBOSITY_OFF)
    names = None
    try:
        if hasattr(reader, "GetCellDataArraySelection"):
            reader.UpdateInformation()
            cs, ps = reader.GetCellDataArraySelection(), reader.GetPointDataArraySelection()
            names = (tuple(cs.GetArrayName(i) for i in range(cs.GetNumberOfArrays())),
                     tuple(ps.GetArrayName(i) for i in range(ps.GetNumberOfArrays())))
            if arrays is not None:
                for n in names[0]:
                    if n not in arrays:
                        cs.DisableArray(n)
            ps.DisableAllArrays()  # point data are never used (forces need face data)
        reader.Update()
    finally:
        logger.SetStderrVerbosity(old)
    out = reader.GetOutputDataObject(0)
    if msgs or out is None:
        first = (msgs[0].strip().splitlines() or ["unreadable"])[-1] if msgs else "no output"
        raise UnreadableFile(
            expected=f"a readable VTK file ({path.suffix})",
            got=f"a file the VTK reader rejects ({first[:200]})",
            file=str(path),
            fix="the file may be truncated or not VTK; re-export it with the solver's converter (foamToVTK)",
        )
    return out, names


def _np(vtk_array) -> np.ndarray:
    from vtkmodules.util.numpy_support import vtk_to_numpy

    return vtk_to_numpy(vtk_array)


def _cell_arrays(ds) -> tuple[dict[str, np.ndarray], tuple[str, ...]]:
    cd = ds.GetCellData()
    cells = {}
    for i in range(cd.GetNumberOfArrays()):
        a = cd.GetArray(i)
        if a is not None and a.GetName():
            cells[a.GetName()] = _np(a)
    pd = ds.GetPointData()
    pts = tuple(pd.GetArrayName(i) for i in range(pd.GetNumberOfArrays()) if pd.GetArrayName(i))
    return cells, pts


def _points(ds, path: Path) -> np.ndarray:
    pts = ds.GetPoints()
    if pts is None or ds.GetNumberOfPoints() == 0:
        return np.zeros((0, 3))
    return _np(pts.GetData())


def _from_polydata(ds, path: Path) -> tuple[np.ndarray, np.ndarray, np.ndarray, dict, tuple]:
    if ds.GetNumberOfStrips():
        raise UserError(expected="polygons (triangles, quads, polygons)", got="triangle strips", file=str(path),
                        fix="triangulate the surface (vtkTriangleFilter) and save it again")
    if ds.GetNumberOfPolys() == 0 and ds.GetNumberOfCells() > 0:
        raise UserError(expected="a surface with polygonal faces", got="only lines/points", file=str(path))
    polys = ds.GetPolys()
    off = _np(polys.GetOffsetsArray()).astype(np.int64, copy=False)
    conn = _np(polys.GetConnectivityArray()).astype(np.int64, copy=False)
    cells, pts = _cell_arrays(ds)
    n_skip = ds.GetNumberOfVerts() + ds.GetNumberOfLines()  # cell data order: verts, lines, polys
    if n_skip:
        cells = {k: v[n_skip:n_skip + off.size - 1] for k, v in cells.items()}
    return _points(ds, path), off, conn, cells, pts


def _from_unstructured(ds, path: Path) -> tuple[np.ndarray, np.ndarray, np.ndarray, dict, tuple]:
    types = _np(ds.GetCellTypes()) if ds.GetNumberOfCells() else np.zeros(0, np.uint8)
    ca = ds.GetCells()
    off = _np(ca.GetOffsetsArray()).astype(np.int64, copy=False)
    conn = _np(ca.GetConnectivityArray()).astype(np.int64, copy=False)
    cells, pts = _cell_arrays(ds)
    keep = np.isin(types, list(_SURFACE_TYPES))
    if not keep.all():
        if not keep.any():
            raise UserError(
                expected="a surface (triangles, quads, polygons)",
                got=f"{types.size} volume/line cells and no polygons",
                file=str(path),
                fix="point at a boundary patch (VTK/<case>_<time>/boundary/<patch>.vtp or the .vtm with --patches), "
                    "not the internal volume",
            )
        idx = np.flatnonzero(keep)
        sizes = np.diff(off)[idx]
        new_off = np.concatenate([[0], np.cumsum(sizes)])
        gather = np.repeat(off[:-1][idx], sizes) + (np.arange(new_off[-1]) - np.repeat(new_off[:-1], sizes))
        conn = conn[gather]
        off = new_off
        types = types[idx]
        cells = {k: v[idx] for k, v in cells.items()}
    pix = np.flatnonzero(types == 8)
    if pix.size:  # pixel order 0 1 3 2 → quad order 0 1 2 3
        conn = conn.copy()
        b = off[pix]
        conn[b + 2], conn[b + 3] = conn[b + 3].copy(), conn[b + 2].copy()
    return _points(ds, path), off, conn, cells, pts


def _dataset_to_parts(ds, path: Path):
    import vtk

    if isinstance(ds, vtk.vtkPolyData):
        return _from_polydata(ds, path)
    if isinstance(ds, vtk.vtkUnstructuredGrid):
        return _from_unstructured(ds, path)
    raise UserError(expected="polydata or an unstructured grid", got=ds.GetClassName(), file=str(path),
                    fix="export the surface as .vtp or legacy polydata")


def _validate(name: str, piece: tuple, source: str) -> None:
    P, off, conn, cells = piece[:4]
    m = off.size - 1
    bad = [k for k, v in cells.items() if v.shape[0] != m]
    if (conn.size and (conn.min() < 0 or conn.max() >= P.shape[0])) or off[-1] != conn.size or bad:
        raise UnreadableFile(expected="a consistent VTK surface (faces referring to existing points, one value per face)",
                        got="inconsistent sizes" + (f" of the arrays {', '.join(bad)}" if bad else ""),
                        file=source, key=name, fix="the file may be truncated; re-export it")


def _merge(pieces: Sequence[tuple[str, tuple]], source: str, time: float | None = None) -> SurfaceMesh:
    """Concatenate parts (name, (points, offsets, conn, cells, point_names, face_array_names))."""
    for name, piece in pieces:
        _validate(name, piece, source)
    if len(pieces) == 1:
        name, (P, off, conn, cells, pts, names) = pieces[0]
        return SurfaceMesh(points=P, offsets=off, connectivity=conn, cell_data=cells, point_arrays=pts,
                       part_ids=np.zeros(off.size - 1, np.int64), part_names=(name,), source=source, time=time,
                       cell_arrays=tuple(names))
    common = set.intersection(*(set(p[1][3]) for p in pieces))
    Ps, offs, conns, ids = [], [], [], []
    npts = 0
    nconn = 0
    for i, (name, (P, off, conn, cells, pts, _)) in enumerate(pieces):
        Ps.append(P)
        offs.append(off[:-1] + nconn if i < len(pieces) - 1 else off + nconn)
        conns.append(conn + npts)
        ids.append(np.full(off.size - 1, i, np.int64))
        npts += P.shape[0]
        nconn += conn.size
    cells = {k: np.concatenate([p[1][3][k] for p in pieces]) for k in common}
    pts = tuple(sorted(set.intersection(*(set(p[1][4]) for p in pieces))))
    missing = sorted(set.union(*(set(p[1][3]) for p in pieces)) - common)
    notes = (f"face arrays present on only some patches were dropped: {', '.join(missing)}",) if missing else ()
    return SurfaceMesh(points=np.concatenate(Ps), offsets=np.concatenate(offs), connectivity=np.concatenate(conns),
                   cell_data=cells, point_arrays=pts, part_ids=np.concatenate(ids),
                   part_names=tuple(p[0] for p in pieces), source=source, time=time, notes=notes,
                   cell_arrays=tuple(sorted(set.intersection(*(set(p[1][5]) for p in pieces)))))


# --------------------------------------------------------------------------- patches

def select_patches(available: Sequence[str], patterns: Iterable[str] | None, source: str = "") -> list[str]:
    """Names of ``available`` matching any of ``patterns`` (names or globs),
    in the order of ``available``. None/empty patterns select everything.
    A pattern matching nothing is a UserError listing the patches that exist."""
    pats = [p.strip() for p in (patterns or []) for p in p.split(",") if p.strip()]
    if not pats:
        return list(available)
    chosen = set()
    for pat in pats:
        hit = fnmatch.filter(available, pat)
        if not hit:
            raise UserError(
                expected="a patch name or pattern that matches at least one patch",
                got=pat, file=source or None, key="--patches",
                fix="patches present: " + (", ".join(available) or "none") + did_you_mean(pat, available),
            )
        chosen.update(hit)
    return [a for a in available if a in chosen]


# --------------------------------------------------------------------------- formats

def _read_single(reader_factory: Callable[[], object]) -> Callable[..., SurfaceMesh]:
    def read(path: Path, patterns: Sequence[str] | None = None, arrays: Sequence[str] | None = None) -> SurfaceMesh:
        _check_file(path)
        ds, names = _run_reader(reader_factory(), path, arrays)
        P, off, conn, cells, pts = _dataset_to_parts(ds, path)
        if names is not None:
            pts = names[1]
        else:  # legacy reader: everything was loaded
            names = (tuple(cells),)
            if arrays is not None:
                cells = {k: v for k, v in cells.items() if k in arrays}
        name = path.stem
        select_patches([name], patterns, str(path))
        return _merge([(name, (P, off, conn, cells, pts, names[0]))], str(path))
    return read


def _check_file(path: Path) -> None:
    if not path.is_file():
        raise UserError(expected="an existing file", got=str(path), fix="check the path")
    if path.stat().st_size == 0:
        raise UnreadableFile(expected="a VTK file", got="an empty file", file=str(path), fix="re-export the results")
    check_declared_sizes(path)


#: Largest ratio of declared data to file size a compressed VTK file can
#: reach (zlib peaks near 1:1032, LZMA on constant data near 1:7000).
MAX_COMPRESSION = 10_000
_XML_SIZE_RE = re.compile(rb'NumberOf(Points|Cells|Polys|Verts|Lines|Strips)\s*=\s*"\s*(\d+)\s*"')
_LEGACY_RE = re.compile(rb"^(POINTS|POLYGONS|CELLS|CELL_TYPES|VERTICES|LINES|TRIANGLE_STRIPS)[ \t]+(\d+)(?:[ \t]+(\d+))?",
                        re.M)


def check_declared_sizes(path: Path) -> None:
    """Refuse (UnreadableFile) a VTK file whose header declares more data
    than its size can hold — before a reader allocates for it. Each declared
    point needs at least 3 bytes and each cell 2 (one-byte values), times
    :data:`MAX_COMPRESSION` when the file is compressed."""
    size = path.stat().st_size
    with open(path, "rb") as fh:
        head = fh.read(1 << 20)
    cut = head.find(b"<AppendedData")
    head = head if cut < 0 else head[:cut]
    if path.suffix.lower() in (".vtp", ".vtu"):
        counts: dict[str, int] = {}
        for m in _XML_SIZE_RE.finditer(head):
            counts[m.group(1).decode()] = counts.get(m.group(1).decode(), 0) + int(m.group(2))
        need = 3 * counts.get("Points", 0) + 2 * sum(v for k, v in counts.items() if k != "Points")
        room = size * (MAX_COMPRESSION if b"compressor=" in head else 1)
    elif path.suffix.lower() == ".vtk":
        need = 0
        for m in _LEGACY_RE.finditer(head):
            n, total = int(m.group(2)), int(m.group(3) or 0)
            need += 3 * n if m.group(1) == b"POINTS" else max(n, total)
        room = size
    else:
        return
    if need > room:
        raise UnreadableFile(expected=f"a VTK file whose header matches its size ({size:,} bytes)",
                             got=f"a header declaring at least {need:,} bytes of data", file=str(path),
                             fix="the file is corrupt or truncated; re-export it with the solver's converter (foamToVTK)")


def _vtp_reader():
    from vtkmodules.vtkIOXML import vtkXMLPolyDataReader
    return vtkXMLPolyDataReader()


def _vtu_reader():
    from vtkmodules.vtkIOXML import vtkXMLUnstructuredGridReader
    return vtkXMLUnstructuredGridReader()


def _legacy_reader():
    from vtkmodules.vtkIOLegacy import vtkDataSetReader
    r = vtkDataSetReader()
    r.ReadAllScalarsOn()
    r.ReadAllVectorsOn()
    r.ReadAllFieldsOn()
    return r


def vtm_blocks(path: Path) -> tuple[list[tuple[str, Path]], float | None]:
    """Leaf datasets of an XML multiblock file: [(name, file)], time.

    Blocks under ``boundary`` keep their patch name; other leaves (the
    ``internal`` volume) keep theirs. Nested blocks elsewhere are named
    ``outer/inner``. Each block's ``file`` must be a relative path that stays
    inside the multiblock's folder (links followed); anything else is a
    UserError naming the block, and is never opened."""
    _check_file(path)
    if path.stat().st_size > MAX_JSON_BYTES.value:
        raise UserError(expected=f"a multiblock index of at most {int(MAX_JSON_BYTES.value):,} bytes",
                        got=f"{path.stat().st_size:,} bytes", file=str(path), fix="re-export with foamToVTK")
    try:
        root = ET.parse(path).getroot()
    except ET.ParseError as exc:
        raise UserError(expected="an XML multiblock (.vtm) file", got=f"unparsable XML ({exc})", file=str(path),
                        fix="the file may be truncated; re-export with foamToVTK") from None
    if root.tag != "VTKFile" or root.find("vtkMultiBlockDataSet") is None:
        raise UserError(expected="a VTKFile of type vtkMultiBlockDataSet", got=root.tag, file=str(path))
    out: list[tuple[str, Path]] = []

    stack = [(iter(root.find("vtkMultiBlockDataSet")), "")]
    while stack:  # document order, without recursion (a hostile file may nest deeply)
        it, prefix = stack[-1]
        child = next(it, None)
        if child is None:
            stack.pop()
            continue
        name = child.get("name") or child.get("index") or "?"
        if child.tag == "Block":
            stack.append((iter(child), name if prefix == "" else f"{prefix}/{name}"))
        elif child.tag == "DataSet" and child.get("file"):
            full = name if prefix in ("", "boundary") else f"{prefix}/{name}"
            out.append((full, confined(path.parent, child.get("file"), file=str(path), key=f"block {full[:80]!r} file",
                                       what="a block file")))
            if len(out) > MAX_VTM_BLOCKS.value:
                raise UserError(expected=f"at most {int(MAX_VTM_BLOCKS.value):,} blocks", got="more",
                                file=str(path), fix="re-export with foamToVTK")
    time = None
    with open(path, "rb") as fh:
        head = fh.read(400).decode("utf-8", errors="replace")
    m = re.search(r"time='([^']+)'", head)
    if m:
        try:
            time = float(m.group(1))
        except ValueError:
            time = None
    return out, time


def read_vtm(path: Path, patterns: Sequence[str] | None = None, arrays: Sequence[str] | None = None) -> SurfaceMesh:
    """Read the selected patches of an XML multiblock file (see module doc)."""
    blocks, time = vtm_blocks(path)
    surfaces = [(n, f) for n, f in blocks if f.suffix != ".vtu" or n != "internal"]
    names = [n for n, _ in surfaces]
    if not names:
        raise UserError(expected="boundary patches in the multiblock", got="none", file=str(path))
    if not patterns:
        raise UserError(
            expected="a choice of body patches (--patches)", got="none", file=str(path), key="--patches",
            fix="patches present: " + ", ".join(names) + "; e.g. --patches 'body*'",
        )
    chosen = select_patches(names, patterns, str(path))
    pieces = []
    for n, f in surfaces:
        if n in chosen:
            if not f.is_file():
                raise UserError(expected=f"the patch file named in the multiblock for {n!r}", got="a missing file",
                                file=str(f), fix="re-export the results; the VTK folder is incomplete")
            reader = _READERS.get(f.suffix.lower())
            if reader is None or f.suffix.lower() == ".vtm":
                raise UserError(expected="a .vtp/.vtu/.vtk block", got=f.suffix, file=str(f))
            sub = reader(f, None, arrays)
            pieces.append((n, (sub.points, sub.offsets, sub.connectivity, sub.cell_data, sub.point_arrays,
                               sub.cell_arrays)))
    return _merge(pieces, str(path), time)


_READERS: dict[str, Callable[..., SurfaceMesh]] = {
    ".vtm": read_vtm,
    ".vtp": _read_single(_vtp_reader),
    ".vtu": _read_single(_vtu_reader),
    ".vtk": _read_single(_legacy_reader),
}


def known_extensions() -> tuple[str, ...]:
    return tuple(sorted(_READERS))


def read_surface(path: str | os.PathLike, patches: Sequence[str] | None = None,
                 arrays: Sequence[str] | None = None) -> SurfaceMesh:
    """Read a VTK surface or multiblock into a :class:`SurfaceMesh` (by extension).

    ``patches``: names or globs (multiblocks: required; single files: matched
    against the file's stem, the one part name). ``arrays``: the face arrays
    to load (None: all); the names of the others stay listed in
    ``SurfaceMesh.cell_arrays``. Point data are not loaded (names only).

    The reading runs in a child process with a memory and a time limit
    (:func:`postproc.io.isolation.isolated`): a file that crashes the VTK
    reader raises :class:`~postproc.io.isolation.UnreadableFile` instead of
    ending this process."""
    pats = list(patches) if patches is not None else None
    arrs = list(arrays) if arrays is not None else None
    try:
        return isolated(_read_surface_here, path, pats, arrs, what=str(path))
    except UnreadableFile as whole:
        if Path(path).suffix.lower() != ".vtm" or "reader" not in str(whole):
            raise
        # a block crashed the reader: read the chosen blocks one by one to name it
        blocks, _ = vtm_blocks(Path(path))
        chosen = select_patches([n for n, _ in blocks], pats, str(path)) if pats else []
        for n, f in blocks:
            if n in chosen and f.suffix.lower() in (".vtp", ".vtu", ".vtk"):
                isolated(_read_surface_here, f, None, arrs, what=str(f))  # raises naming the block
        raise


def _read_surface_here(path: str | os.PathLike, patches: Sequence[str] | None = None,
                       arrays: Sequence[str] | None = None) -> SurfaceMesh:
    """:func:`read_surface` in this process."""
    p = Path(path)
    reader = _READERS.get(p.suffix.lower())
    if reader is None:
        raise UserError(expected="a VTK file with one of the extensions " + ", ".join(known_extensions()),
                        got=p.suffix or "no extension", file=str(p),
                        fix="export the results with foamToVTK, or give a case folder holding a VTK/ export")
    return reader(p, patches, arrays)
