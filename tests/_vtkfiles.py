"""Write our test surfaces as VTK files (legacy, XML, multiblock like the solver's export)."""
from __future__ import annotations

from pathlib import Path

import numpy as np


def polydata(points, faces, cell_arrays=None, point_arrays=None, dtype=np.float32):
    import vtk
    from vtkmodules.util.numpy_support import numpy_to_vtk, numpy_to_vtkIdTypeArray

    pd = vtk.vtkPolyData()
    pts = vtk.vtkPoints()
    pts.SetData(numpy_to_vtk(np.ascontiguousarray(points, dtype=dtype), deep=True))
    pd.SetPoints(pts)
    faces = np.asarray(faces)
    off = np.arange(0, faces.size + 1, faces.shape[1], dtype=np.int64)
    ca = vtk.vtkCellArray()
    ca.SetData(numpy_to_vtkIdTypeArray(off, deep=True), numpy_to_vtkIdTypeArray(faces.ravel().astype(np.int64), deep=True))
    pd.SetPolys(ca)
    for name, a in (cell_arrays or {}).items():
        arr = numpy_to_vtk(np.ascontiguousarray(a, dtype=dtype), deep=True)
        arr.SetName(name)
        pd.GetCellData().AddArray(arr)
    for name, a in (point_arrays or {}).items():
        arr = numpy_to_vtk(np.ascontiguousarray(a, dtype=dtype), deep=True)
        arr.SetName(name)
        pd.GetPointData().AddArray(arr)
    return pd


def write(ds, path: Path) -> Path:
    import vtk

    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    ext = path.suffix
    if ext == ".vtp":
        w = vtk.vtkXMLPolyDataWriter()
    elif ext == ".vtu":
        f = vtk.vtkAppendFilter()
        f.AddInputData(ds)
        f.Update()
        ds = f.GetOutput()
        w = vtk.vtkXMLUnstructuredGridWriter()
    elif ext == ".vtk":
        w = vtk.vtkPolyDataWriter()
        w.SetFileTypeToBinary()
    else:
        raise ValueError(ext)
    w.SetInputData(ds)
    w.SetFileName(str(path))
    w.Write()
    return path


def write_solver_like_export(case: Path, patches: dict, time: int = 100, name: str = "demo") -> Path:
    """``case/VTK/<name>_<time>.vtm`` + ``<name>_<time>/boundary/<patch>.vtp`` like the converter writes."""
    vtk_dir = case / "VTK"
    rel = f"{name}_{time}"
    for pname, ds in patches.items():
        write(ds, vtk_dir / rel / "boundary" / f"{pname}.vtp")
    blocks = "\n".join(f"      <DataSet name='{p}' file='{rel}/boundary/{p}.vtp' />" for p in patches)
    vtm = vtk_dir / f"{rel}.vtm"
    vtm.write_text(f"""<?xml version='1.0'?>
<!-- time='{time}' -->
<VTKFile type='vtkMultiBlockDataSet' version='1.0' byte_order='LittleEndian' header_type='UInt64'>
  <vtkMultiBlockDataSet>
    <DataSet name='internal' file='{rel}/internal.vtu' />
    <Block name='boundary'>
{blocks}
    </Block>
  </vtkMultiBlockDataSet>
</VTKFile>
""")
    return vtm
