"""`postproc forces`: output, manifest use, and one clear message per bad input (exit 2, no traceback)."""
from __future__ import annotations

import json

import numpy as np
import pytest
from click.testing import CliRunner

from _surfaces import icosphere, plate
from _vtkfiles import polydata, write, write_solver_like_export
from caseprep.contract import frames as fr
from caseprep.contract.manifest import CaseRecord, Manifest, Reference, write_manifest
from postproc.cli import main


def run(*args):
    res = CliRunner().invoke(main, ["forces", *map(str, args)])
    return res


def hydro_sphere(center=(1.0, 0.0, 0.3), radius=0.25, rho=1000.0, g=9.81):
    X, F = icosphere(radius, 3, center)
    c = X[F].mean(axis=1)
    p_kin = -g * c[:, 2]  # kinematic hydrostatic pressure p/ρ, m²/s²
    tau = np.zeros((len(F), 3))
    return X, F[:, ::-1], p_kin, tau  # reversed order: normals into the body, like the solver's


def test_json_keys_and_archimedes_through_the_cli(tmp_path):
    X, F, p, tau = hydro_sphere()
    f = write(polydata(X, F, {"p": p, "wallShearStress": tau}, dtype=np.float64), tmp_path / "ball.vtp")
    res = run(f, "--rho", 1000, "--json")
    assert res.exit_code == 0, res.output
    r = json.loads(res.output)
    assert {"force", "force_pressure", "force_viscous", "moment", "area"} <= set(r)
    from postproc.kernels.polygons import face_geometry
    S, C = face_geometry(X, F)
    vol = -np.einsum("ij,ij->", C, S) / 3.0
    # Archimedes: ρ g V upward, to round-off (linear pressure, midpoint rule exact)
    np.testing.assert_allclose(r["force"], [0, 0, 1000 * 9.81 * vol], atol=1e-9 * 1000 * 9.81 * vol)
    table = run(f, "--rho", 1000)
    assert table.exit_code == 0 and "force N" in table.output and "moment N·m" in table.output


def _sweep(tmp_path, p_ref=0.0):
    """A sweep folder with one case: a body (closed sphere) and one wheel (sphere), VTK export and manifest."""
    case = tmp_path / "sweep" / "cases" / "c1"
    parts = {}
    for name, ctr in (("body", (1.0, 0, 0.4)), ("wheel_fl", (0.2, 0.5, 0.15)), ("ground", (0, 0, -1))):
        X, F, p, tau = hydro_sphere(ctr, 0.1 if name != "body" else 0.3)
        p = p + 0.01 * X[F].mean(axis=1)[:, 0]
        parts[name] = polydata(X, F, {"p": p, "wallShearStress": tau + [0.001, 0, 0]}, dtype=np.float32)
    write_solver_like_export(case, parts, time=500, name="c1")
    P = fr.place_body([0, 0, 0.1], [2.5, 0, 0.1], 0.05, 0.06, np.radians(2), "crosswind")
    ref = Reference(area=1.1, length=2.5, wheelbase=2.5, front_axle=(0, 0, 0.15), rear_axle=(2.5, 0, 0.15),
                    moment_point=(1.25, 0, 0), rho=1.2, nu=1.5e-5, speed=30.0, p_ref=p_ref, cog=(1.2, 0, 0.3))
    rec = CaseRecord(case_id="c1", folder="cases/c1", variant="demo", params={}, yaw_mode="crosswind",
                     ground="moving", mesh_frame="body", placement=P,
                     wind_direction_body=tuple(P.vector_to_body(fr.wind_direction_ground(np.radians(2), "crosswind"))),
                     reference=ref, patches={"body": ["body"], "wheels": ["wheel_fl"], "ground": "ground"},
                     fidelity="smoke")
    write_manifest(Manifest(cases=(rec,), tool_version="0", config_file="demo.toml", config_hash="", created_utc="",
                            study="demo"), tmp_path / "sweep")
    return case


def test_case_folder_uses_the_manifest(tmp_path):
    case = _sweep(tmp_path)
    res = run(case, "--json")
    assert res.exit_code == 0, res.output
    r = json.loads(res.output)
    assert r["patches"] == ["body", "wheel_fl"]
    assert r["settings"]["rho"] == 1.2 and r["about"] == [1.25, 0, 0]
    assert set(r["parts"]) == {"body", "wheel_fl"}
    c = r["coefficients"]
    assert c["downforce"] == pytest.approx(-c["lift"])
    assert c["lift"] == pytest.approx(c["axes"]["wind"]["c_force"][2])
    b = r["balance"]
    assert b["c_lift_front"] + b["c_lift_rear"] == pytest.approx(b["c_lift"])
    assert b["balance_front"] == pytest.approx(b["c_lift_front"] / b["c_lift"])


def test_bad_inputs_each_one_message_exit_2(tmp_path):
    X, F, p, tau = hydro_sphere()
    good = write(polydata(X, F, {"p": p, "wallShearStress": tau}), tmp_path / "ok.vtp")
    cases = []
    # missing array: names what exists
    cases.append(((good, "--rho", 1.2, "--pressure-field", "pMean"), "face arrays: p, wallShearStress"))
    # NaN/inf: count and location
    pn = p.copy()
    pn[[4, 9]] = [np.nan, np.inf]
    nanf = write(polydata(X, F, {"p": pn, "wallShearStress": tau}), tmp_path / "nan.vtp")
    cases.append(((nanf, "--rho", 1.2), "2 non-finite"))
    # zero-area faces
    F2 = F.copy()
    F2[0] = [F2[0, 0], F2[0, 0], F2[0, 0]]
    zf = write(polydata(X, F2, {"p": p, "wallShearStress": tau}), tmp_path / "zero.vtp")
    cases.append(((zf, "--rho", 1.2), "zero-area"))
    # empty patch list
    vtm = write_solver_like_export(tmp_path / "case", {"body": polydata(X, F, {"p": p, "wallShearStress": tau})})
    cases.append(((vtm, "--rho", 1.2, "--patches", ""), "non-empty patch names"))
    cases.append(((vtm, "--rho", 1.2, "--patches", "wing*"), "patches present: body"))
    cases.append(((vtm, "--rho", 1.2), "choice of body patches"))
    # open surface where closure matters (non-zero reference pressure)
    P, Q = plate(np.linspace(0, 1, 4), np.linspace(0, 1, 4))
    of = write(polydata(P, Q, {"p": np.ones(9), "wallShearStress": np.zeros((9, 3))}), tmp_path / "floor.vtp")
    cases.append(((of, "--rho", 1.2, "--p-ref", 100), "open surface"))
    # truncated file, not VTK, unknown extension, no density for kinematic data
    data = good.read_bytes()
    (tmp_path / "cut.vtp").write_bytes(data[: len(data) // 3])
    cases.append(((tmp_path / "cut.vtp", "--rho", 1.2), "truncated"))
    (tmp_path / "notvtk.vtp").write_text("hello")
    cases.append(((tmp_path / "notvtk.vtp", "--rho", 1.2), "rejects"))
    (tmp_path / "mesh.obj").write_text("v 0 0 0")
    cases.append(((tmp_path / "mesh.obj",), "one of the extensions .vtk, .vtm, .vtp, .vtu"))
    cases.append(((good,), "--rho"))
    cases.append(((tmp_path / "nothere.vtp",), "a VTK file or a case folder"))
    for args, needle in cases:
        res = run(*args)
        assert res.exit_code == 2, (args, res.output)
        assert needle in res.output, (args, res.output)
        assert "Traceback" not in res.output
        assert isinstance(res.exception, SystemExit)  # a clean exit, not an uncaught exception
    # the opt-outs work
    assert run(nanf, "--rho", 1.2, "--allow-nonfinite").exit_code == 0
    assert run(of, "--rho", 1.2, "--p-ref", 100, "--allow-open").exit_code == 0
    assert run(of, "--rho", 1.2).exit_code == 0  # gauge p_ref = 0: an open patch is fine


def test_static_and_out_of_body_options(tmp_path):
    X, F, p, tau = hydro_sphere()
    a = json.loads(run(write(polydata(X, F, {"p": p, "wallShearStress": tau}, dtype=np.float64), tmp_path / "a.vtp"),
                       "--rho", 1000, "--json").output)
    b = json.loads(run(write(polydata(X, F[:, ::-1], {"p": 1000 * p, "wallShearStress": tau}, dtype=np.float64),
                             tmp_path / "b.vtp"), "--static", "--normals", "out-of-body", "--json").output)
    np.testing.assert_allclose(a["force"], b["force"], rtol=1e-12, atol=1e-9)
