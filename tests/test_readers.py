"""Readers: formats, patch selection, latest export, bad files; and the kernel
against VTK's own integration (vtkIntegrateAttributes, a reference library)."""
from __future__ import annotations

import numpy as np
import pytest

from _surfaces import icosphere
from _vtkfiles import polydata, write, write_solver_like_export
from caseprep.contract.errors import UserError
from postproc.kernels.forces import ForceSettings, integrate_forces
from postproc.io.exports import latest_export
from postproc.io.surfaces import known_extensions, read_surface, select_patches


def sphere_pd(seed=0, radius=0.5, nsub=2, center=(0, 0, 0)):
    X, F = icosphere(radius, nsub, center)
    rng = np.random.default_rng(seed)
    p = rng.normal(size=len(F))
    tau = rng.normal(size=(len(F), 3))
    return X, F, p, tau, polydata(X, F, {"p": p, "wallShearStress": tau}, {"p": rng.normal(size=len(X))})


@pytest.mark.parametrize("ext", [".vtp", ".vtu", ".vtk"])
def test_single_file_formats_round_trip(tmp_path, ext):
    X, F, p, tau, pd = sphere_pd()
    s = read_surface(write(pd, tmp_path / f"wing{ext}"))
    assert s.n_faces == len(F) and s.part_names == ("wing",)
    assert s.cell_data["p"].dtype == np.float32  # stored dtype kept; the kernel accumulates in float64
    np.testing.assert_array_equal(s.cell_data["p"], p.astype(np.float32))
    r1 = integrate_forces(s.points, s.faces, s.array("p"), s.array("wallShearStress"), ForceSettings(rho=1.2))
    r2 = integrate_forces(X.astype(np.float32), F, p.astype(np.float32), tau.astype(np.float32), ForceSettings(rho=1.2))
    np.testing.assert_allclose(r1.force, r2.force, rtol=1e-12, atol=1e-12)


def test_multiblock_patch_globs_and_latest(tmp_path):
    parts = {name: sphere_pd(i, center=(2.0 * i, 0, 0))[4] for i, name in enumerate(["body", "wheel_fl", "wheel_fr", "inlet"])}
    write_solver_like_export(tmp_path, parts, time=50)
    newest = write_solver_like_export(tmp_path, parts, time=200)
    write_solver_like_export(tmp_path, parts, time=100)
    assert latest_export(tmp_path) == newest
    s = read_surface(newest, ["body", "wheel_*"])
    assert s.part_names == ("body", "wheel_fl", "wheel_fr") and s.time == 200.0
    assert s.n_faces == 3 * 320
    assert np.bincount(s.part_ids).tolist() == [320, 320, 320]
    # each part's faces point at its own points
    c = s.points[s.connectivity[s.offsets[:-1][s.part_ids == 2][0]]]
    assert c[0] > 3.0
    with pytest.raises(UserError, match=r"(?s)got 'wing\*'.*patches present: body, wheel_fl, wheel_fr, inlet"):
        read_surface(newest, ["wing*"])
    with pytest.raises(UserError, match="choice of body patches"):
        read_surface(newest, None)


def test_select_patches_commas_and_order():
    assert select_patches(["a", "b1", "b2"], ["b*,a"]) == ["a", "b1", "b2"]
    with pytest.raises(UserError, match="Did you mean 'body'"):
        select_patches(["body", "ground"], ["bdy"])


def test_unknown_extension_lists_known(tmp_path):
    f = tmp_path / "x.stl"
    f.write_text("solid")
    with pytest.raises(UserError, match=", ".join(known_extensions()).replace(".", r"\.")):
        read_surface(f)


def test_missing_array_names_what_exists(tmp_path):
    *_, pd = sphere_pd()
    f = write(pd, tmp_path / "s.vtp")
    s = read_surface(f)
    with pytest.raises(UserError, match=r"(?s)'pMean'.*face arrays: p, wallShearStress"):
        s.array("pMean")
    pd2 = polydata(*icosphere(0.5, 1), {}, {"p": np.zeros(42)})
    s2 = read_surface(write(pd2, tmp_path / "pointonly.vtp"))
    with pytest.raises(UserError, match="only as point data"):
        s2.array("p")


@pytest.mark.parametrize("ext", [".vtp", ".vtk", ".vtu"])
def test_truncated_and_not_vtk_files(tmp_path, ext):
    *_, pd = sphere_pd(nsub=3)
    f = write(pd, tmp_path / f"s{ext}")
    data = f.read_bytes()
    t = tmp_path / f"trunc{ext}"
    t.write_bytes(data[: len(data) // 2])
    if ext == ".vtk":
        # the legacy reader accepts a file cut after its cells without a complaint: the loss shows up as a
        # missing face array (or collapsed faces) when the forces are computed — still one UserError
        from postproc.pipelines.case_forces import ForcesOptions, forces_report
        with pytest.raises(UserError, match="expected a face .cell. data array 'p'|zero-area|rejects"):
            forces_report(str(t), ForcesOptions(rho=1.2))
    else:
        with pytest.raises(UserError, match="rejects|truncated"):
            read_surface(t)
    j = tmp_path / f"junk{ext}"
    j.write_text("this is not a VTK file\n")
    with pytest.raises(UserError):
        read_surface(j)


def test_volume_only_vtu_refused(tmp_path):
    import vtk
    src = vtk.vtkImageData()
    src.SetDimensions(3, 3, 3)
    f = vtk.vtkAppendFilter()
    f.AddInputData(src)
    f.Update()
    w = vtk.vtkXMLUnstructuredGridWriter()
    w.SetInputData(f.GetOutput())
    w.SetFileName(str(tmp_path / "internal.vtu"))
    w.Write()
    with pytest.raises(UserError, match="not the internal volume"):
        read_surface(tmp_path / "internal.vtu")


def test_no_export_in_case_folder(tmp_path):
    with pytest.raises(UserError, match="foamToVTK"):
        latest_export(tmp_path)


def test_kernel_agrees_with_vtk_integrate_attributes():
    # Reference library: VTK's vtkIntegrateAttributes (with vtkPolyDataNormals cell normals) integrates
    # p·n and c×(p·n) over the same triangles; agreement to round-off (1e-12 of the magnitudes).
    import vtk
    from vtkmodules.util.numpy_support import numpy_to_vtk, vtk_to_numpy

    X, F, p, tau, _ = sphere_pd(seed=3, radius=0.8, nsub=3, center=(0.3, -0.1, 0.2))
    X = X * [1.0, 0.7, 1.3]  # an ellipsoid: not every face the same
    pd = polydata(X, F, {}, dtype=np.float64)
    nf = vtk.vtkPolyDataNormals()
    nf.SetInputData(pd)
    nf.ComputeCellNormalsOn()
    nf.ComputePointNormalsOff()
    nf.SplittingOff()
    nf.ConsistencyOff()
    nf.AutoOrientNormalsOff()
    nf.Update()
    out = nf.GetOutput()
    n = vtk_to_numpy(out.GetCellData().GetNormals())
    cc = vtk.vtkCellCenters()
    cc.SetInputData(out)
    cc.Update()
    c = vtk_to_numpy(cc.GetOutput().GetPoints().GetData())  # vertex average = centroid for triangles
    pn = p[:, None] * n + tau
    for name, a in (("pn", pn), ("m", np.cross(c, pn))):
        arr = numpy_to_vtk(np.ascontiguousarray(a), deep=True)
        arr.SetName(name)
        out.GetCellData().AddArray(arr)
    ia = vtk.vtkIntegrateAttributes()
    ia.SetInputData(out)
    ia.Update()
    res = ia.GetOutput()
    F_vtk = vtk_to_numpy(res.GetCellData().GetArray("pn"))[0]
    M_vtk = vtk_to_numpy(res.GetCellData().GetArray("m"))[0]
    area_vtk = vtk_to_numpy(res.GetCellData().GetArray("Area"))[0]
    r = integrate_forces(X, F, p, tau, ForceSettings(kinematic=False, normals="into_body", shear_on="wall"))
    scale = (np.abs(p).max() + np.abs(tau).max()) * area_vtk
    np.testing.assert_allclose(r.force, F_vtk, atol=1e-7 * scale)
    np.testing.assert_allclose(r.moment, M_vtk, atol=1e-7 * scale * 2)
    assert r.area == pytest.approx(area_vtk, rel=1e-13)
