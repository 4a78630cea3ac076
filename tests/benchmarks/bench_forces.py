"""Benchmark of `postproc forces` (a script, not a test): prints the ratios.

1. force + moment integration on a 2 M-face surface: our kernel vs the VTK
   filter route (vtkPolyDataNormals cell normals, vtkCellSizeFilter areas,
   vtkCellCenters, vtkIntegrateAttributes), side by side in one run; target ≥ 3×.
2. the whole `postproc forces` on a file vs merely reading that file; target ≤ 1.3×.
3. peak extra memory of the integration (tracemalloc) vs the loaded arrays; target < 3×.

The two sides of each comparison run interleaved, 3 repeats each, and the
medians are compared (the machine may be shared; the minimum is printed too).

    python tests/benchmarks/bench_forces.py [--faces 2000000]
"""
from __future__ import annotations

import argparse
import sys
import tempfile
import time
import tracemalloc
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from postproc.pipelines.case_forces import ForcesOptions, forces_report  # noqa: E402
from postproc.kernels.forces import ForceSettings, integrate_forces  # noqa: E402
from postproc.io.surfaces import read_surface  # noqa: E402


def quad_torus(n_faces: int):
    """A closed quad torus (invented test body) with about n_faces quads, float32 like the solver's export."""
    nu = int(np.sqrt(n_faces / 2))
    nv = n_faces // nu
    u = np.linspace(0, 2 * np.pi, nu, endpoint=False)
    v = np.linspace(0, 2 * np.pi, nv, endpoint=False)
    U, V = np.meshgrid(u, v, indexing="ij")
    R, r = 2.0, 0.6
    pts = np.column_stack([((R + r * np.cos(V)) * np.cos(U)).ravel(), ((R + r * np.cos(V)) * np.sin(U)).ravel(),
                           (r * np.sin(V)).ravel()]).astype(np.float32)
    idx = np.arange(nu * nv).reshape(nu, nv)
    a = idx
    b = np.roll(idx, -1, axis=0)
    c = np.roll(np.roll(idx, -1, axis=0), -1, axis=1)
    d = np.roll(idx, -1, axis=1)
    quads = np.column_stack([a.ravel(), b.ravel(), c.ravel(), d.ravel()])
    return pts, quads


def to_polydata(pts, quads, p, tau):
    import vtk
    from vtkmodules.util.numpy_support import numpy_to_vtk, numpy_to_vtkIdTypeArray

    pd = vtk.vtkPolyData()
    vp = vtk.vtkPoints()
    vp.SetData(numpy_to_vtk(pts, deep=True))
    pd.SetPoints(vp)
    ca = vtk.vtkCellArray()
    off = np.arange(0, quads.size + 1, 4, dtype=np.int64)
    ca.SetData(numpy_to_vtkIdTypeArray(off, deep=True), numpy_to_vtkIdTypeArray(quads.ravel().astype(np.int64), deep=True))
    pd.SetPolys(ca)
    for name, arr in (("p", p), ("wallShearStress", tau)):
        a = numpy_to_vtk(np.ascontiguousarray(arr), deep=True)
        a.SetName(name)
        pd.GetCellData().AddArray(a)
    return pd


def vtk_route(pd, rho):
    """Force and moment with VTK filters only (plus numpy for the integrand arrays)."""
    import vtk
    from vtkmodules.util.numpy_support import numpy_to_vtk, vtk_to_numpy

    nf = vtk.vtkPolyDataNormals()
    nf.SetInputData(pd)
    nf.ComputeCellNormalsOn()
    nf.ComputePointNormalsOff()
    nf.SplittingOff()
    nf.ConsistencyOff()
    nf.AutoOrientNormalsOff()
    nf.Update()
    out = nf.GetOutput()
    cs = vtk.vtkCellSizeFilter()
    cs.SetInputData(out)
    cs.ComputeAreaOn()
    cs.Update()
    cc = vtk.vtkCellCenters()
    cc.SetInputData(out)
    cc.Update()
    n = vtk_to_numpy(out.GetCellData().GetNormals()).astype(np.float64)
    c = vtk_to_numpy(cc.GetOutput().GetPoints().GetData()).astype(np.float64)
    p = vtk_to_numpy(out.GetCellData().GetArray("p")).astype(np.float64)
    tau = vtk_to_numpy(out.GetCellData().GetArray("wallShearStress")).astype(np.float64)
    dF = rho * (p[:, None] * n - tau)
    for name, a in (("dF", dF), ("dM", np.cross(c, dF))):
        arr = numpy_to_vtk(np.ascontiguousarray(a), deep=True)
        arr.SetName(name)
        out.GetCellData().AddArray(arr)
    ia = vtk.vtkIntegrateAttributes()
    ia.SetInputData(out)
    ia.Update()
    res = ia.GetOutput().GetCellData()
    return vtk_to_numpy(res.GetArray("dF"))[0], vtk_to_numpy(res.GetArray("dM"))[0]


def interleaved(fa, fb, repeat=3):
    """Run fa and fb alternately ``repeat`` times: (times of a, times of b, last outputs)."""
    ta, tb = [], []
    for _ in range(repeat):
        for f, t in ((fa, ta), (fb, tb)):
            t0 = time.perf_counter()
            out = f()
            t.append(time.perf_counter() - t0)
            if f is fa:
                out_a = out
            else:
                out_b = out
    return np.array(ta), np.array(tb), out_a, out_b


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--faces", type=int, default=2_000_000)
    args = ap.parse_args()
    import vtk

    pts, quads = quad_torus(args.faces)
    rng = np.random.default_rng(0)
    m = len(quads)
    p = rng.normal(size=m).astype(np.float32)
    tau = (0.01 * rng.normal(size=(m, 3))).astype(np.float32)
    pd = to_polydata(pts, quads, p, tau)
    with tempfile.TemporaryDirectory() as td:
        f = Path(td) / "body.vtp"
        w = vtk.vtkXMLPolyDataWriter()
        w.SetDataModeToBinary()  # inline base64, uncompressed, as the solver's converter writes
        w.SetCompressorTypeToNone()
        w.SetInputData(pd)
        w.SetFileName(str(f))
        w.Write()
        s = read_surface(f)
        t_vtk, t_ours, (F_vtk, M_vtk), r = interleaved(
            lambda: vtk_route(pd, 1.2),
            lambda: integrate_forces(s.points, s.faces, s.array("p"), s.array("wallShearStress"), ForceSettings(rho=1.2)))
        err = np.abs(r.force - F_vtk).max() / np.abs(F_vtk).max()
        err_m = np.abs(r.moment - M_vtk).max() / np.abs(M_vtk).max()
        print(f"faces: {m}")
        print(f"integration (median of 3, interleaved): ours {np.median(t_ours):.3f} s (min {t_ours.min():.3f}), "
              f"VTK filters {np.median(t_vtk):.3f} s (min {t_vtk.min():.3f}), "
              f"speed-up {np.median(t_vtk) / np.median(t_ours):.2f}x (target >= 3); "
              f"max rel. difference of the force {err:.1e}, of the moment {err_m:.1e}")
        t_read, t_cmd, _, _ = interleaved(lambda: read_surface(f), lambda: forces_report(str(f), ForcesOptions(rho=1.2)))
        print(f"whole command (median of 3, interleaved): {np.median(t_cmd):.3f} s (min {t_cmd.min():.3f}), "
              f"read only {np.median(t_read):.3f} s (min {t_read.min():.3f}), "
              f"ratio {np.median(t_cmd) / np.median(t_read):.2f} (target <= 1.3)")
        loaded = sum(a.nbytes for a in (s.points, s.offsets, s.connectivity, s.array("p"), s.array("wallShearStress")))
        tracemalloc.start()
        integrate_forces(s.points, s.faces, s.array("p"), s.array("wallShearStress"), ForceSettings(rho=1.2))
        _, peak = tracemalloc.get_traced_memory()
        tracemalloc.stop()
        print(f"peak memory of the integration {peak / 1e6:.0f} MB, loaded arrays {loaded / 1e6:.0f} MB, "
              f"ratio {peak / loaded:.2f} (target < 3)")


if __name__ == "__main__":
    main()
