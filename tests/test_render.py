"""Rendering a CaseSpec into solver dictionaries (caseprep.casefiles.render + templates):
the generated files parse back and agree with the spec and with each other."""
from __future__ import annotations

import math
from dataclasses import replace

import jinja2
import numpy as np
import pytest

from caseprep.casefiles import foamdict as fd
from caseprep.contract import frames as fr
from caseprep.casefiles import render
from caseprep.contract.templating import environment
from uf_specs import demo_wheel, make_spec

BETA = 5.0  # deg


def parsed(files, rel):
    return fd.parse(files[rel].text, source=rel)


def mesh_patches(files) -> list[str]:
    """Patches the mesher will create: blockMesh boundary + snapped surface patches."""
    bm = parsed(files, "system/blockMeshDict")
    names = [n for n, _ in fd.named_items(bm["boundary"])]
    sh = parsed(files, "system/snappyHexMeshDict")
    for entry, g in sh["geometry"].items():
        if g["type"] != "triSurfaceMesh":
            continue
        if "regions" in g:
            names += [r["name"] for r in g["regions"].values()]
        else:
            names.append(entry)  # single-solid surface: the mesher names the patch after the entry
    return names


def block_vertices(files) -> np.ndarray:
    return np.array(parsed(files, "system/blockMeshDict")["vertices"], dtype=float)


def face_normal(files, patch) -> np.ndarray:
    bm = parsed(files, "system/blockMeshDict")
    v = block_vertices(files)
    faces = dict(fd.named_items(bm["boundary"]))[patch]["faces"]
    f = faces[0]
    n = np.cross(v[f[1]] - v[f[0]], v[f[2]] - v[f[0]])
    return n / np.linalg.norm(n)


SPECS = {
    "crosswind": lambda: make_spec("cw", beta_deg=BETA, yaw_mode="crosswind", wheels=(demo_wheel(),)),
    "yawed-model": lambda: make_spec("ym", beta_deg=BETA, yaw_mode="yawed-model", wheels=(demo_wheel(),)),
    "laminar": lambda: make_spec("lam", model="laminar", layers=False),
    "stationary": lambda: make_spec("st", ground="stationary"),
    "no-ground": lambda: make_spec("ng", ground="none"),
    "wheel-solid": lambda: make_spec("ws", wheels=(demo_wheel("wheel_rr", geometry=None),)),
}


@pytest.fixture(params=list(SPECS))
def case(request):
    spec = SPECS[request.param]()
    return spec, render.render_case(spec)


def test_every_dictionary_parses(case):
    spec, files = case
    for rel, f in files.items():
        if f.symlink or rel == "run.sh":
            continue
        d = fd.parse(f.text, source=rel)
        assert "FoamFile" in d, rel


def test_every_mesh_patch_has_a_condition_in_every_field(case):
    spec, files = case
    patches = mesh_patches(files)
    assert len(patches) == len(set(patches))
    assert sorted(patches) == sorted(render.all_patches(spec))
    fields = ["U", "p"] if spec.flow.model == "laminar" else ["U", "p", "k", "omega", "nut"]
    assert sorted(r for r in files if r.startswith("0/")) == sorted(f"0/{f}" for f in fields)
    for f in fields:
        bf = parsed(files, f"0/{f}")["boundaryField"]
        assert sorted(bf) == sorted(patches), f
        for p, bc in bf.items():
            assert "type" in bc, (f, p)


def test_manifest_patches_are_mesh_patches(case):
    spec, files = case
    rec = spec.record("cases/x")
    patches = set(mesh_patches(files))
    assert set(rec.patches["body"]) <= patches
    assert set(rec.patches["wheels"]) <= patches
    if rec.patches["ground"] is not None:
        assert rec.patches["ground"] in patches
    else:
        assert "ground" not in patches and "bottom" in patches
    # forces monitor covers exactly body + wheels
    fo = parsed(files, "system/controlDict")["functions"][render.FORCES_NAME]
    assert sorted(fo["patches"] if isinstance(fo["patches"], list) else [fo["patches"]]) == sorted(
        rec.patches["body"] + rec.patches["wheels"])


@pytest.mark.parametrize("mode", ["crosswind", "yawed-model"])
def test_velocities_match_yaw_mode(mode):
    # Expected vectors from caseprep.contract.frames (the project's convention module).
    V = 20.0
    beta = math.radians(BETA)
    spec = make_spec("v", beta_deg=BETA, yaw_mode=mode, speed=V, wheels=(demo_wheel(),))
    files = render.render_case(spec)
    U = parsed(files, "0/U")["boundaryField"]
    P = spec.placement
    u_in = np.array(U["inlet"]["value"][1], dtype=float)
    u_g = np.array(U["ground"]["value"][1], dtype=float)
    # 12 significant digits written: agreement to 1e-9 relative (common practice, no source)
    np.testing.assert_allclose(u_in, spec.flow.inlet_velocity, rtol=1e-10, atol=1e-9)
    np.testing.assert_allclose(u_g, spec.flow.ground_velocity, rtol=1e-10, atol=1e-9)
    exp_in = fr.air_speed(V, beta, mode) * P.vector_to_body(fr.wind_direction_ground(beta, mode))
    np.testing.assert_allclose(u_in, exp_in, atol=1e-9)
    np.testing.assert_allclose(u_g, P.vector_to_body(fr.ground_velocity_ground(V, beta, mode)), atol=1e-9)
    # in body axes the relative wind is at +β about z (pitch only tilts it)
    w_level = fr.rot_y(P.pitch) @ (u_in / np.linalg.norm(u_in))
    assert math.degrees(math.atan2(w_level[1], w_level[0])) == pytest.approx(BETA, abs=1e-9)
    if mode == "crosswind":
        # ground along the body's own x (pitched): no y component; air speed V/cos β
        assert abs(u_g[1]) < 1e-12
        assert np.linalg.norm(u_in) == pytest.approx(V / math.cos(beta), rel=1e-10)
    else:
        # belt moves with the air at V
        np.testing.assert_allclose(u_g, u_in, atol=1e-9)
        assert np.linalg.norm(u_in) == pytest.approx(V, rel=1e-10)
    # geometry of the written block: the ground velocity is tangential to the
    # ground face, the inlet velocity enters through the inlet face
    n_ground = face_normal(files, "ground")
    assert abs(u_g @ n_ground) < 1e-9 * V
    n_in = face_normal(files, "inlet")
    assert u_in @ n_in == pytest.approx(-np.linalg.norm(u_in), rel=1e-9)
    # wheel: rotating wall with the spec's centre, axis and speed
    w = spec.wheels[0]
    wb = U[w.patch]
    assert wb["type"] == "rotatingWallVelocity"
    np.testing.assert_allclose(wb["origin"], w.centre)
    np.testing.assert_allclose(wb["axis"], w.axis)
    assert wb["omega"] == pytest.approx(w.omega, rel=1e-11)


def test_block_faces_point_outwards():
    spec = make_spec(beta_deg=BETA, yaw_mode="yawed-model")
    files = render.render_case(spec)
    v = block_vertices(files)
    centre = v.mean(axis=0)
    bm = parsed(files, "system/blockMeshDict")
    for name, p in fd.named_items(bm["boundary"]):
        for f in p["faces"]:
            n = np.cross(v[f[1]] - v[f[0]], v[f[2]] - v[f[0]])
            assert n @ (v[f].mean(axis=0) - centre) > 0, name
    np.testing.assert_allclose(v, spec.domain.box.corners(), rtol=1e-11, atol=1e-11)
    assert parsed(files, "system/blockMeshDict")["blocks"][2] == list(spec.domain.cells)


def test_ground_kinds():
    U = parsed(render.render_case(make_spec(ground="stationary")), "0/U")["boundaryField"]
    assert U["ground"]["type"] == "noSlip"
    files = render.render_case(make_spec(ground="none"))
    U = parsed(files, "0/U")["boundaryField"]
    assert U["bottom"]["type"] == "slip" and "ground" not in U
    bm = dict(fd.named_items(parsed(files, "system/blockMeshDict")["boundary"]))
    assert bm["bottom"]["type"] == "patch"


def test_inlet_turbulence_and_walls():
    spec = make_spec()
    files = render.render_case(spec)
    k = parsed(files, "0/k")["boundaryField"]
    om = parsed(files, "0/omega")["boundaryField"]
    nut = parsed(files, "0/nut")["boundaryField"]
    assert k["inlet"]["value"][1] == pytest.approx(spec.flow.k, rel=1e-11)
    assert om["inlet"]["value"][1] == pytest.approx(spec.flow.omega, rel=1e-11)
    assert nut["inlet"]["value"][1] == pytest.approx(spec.flow.nut, rel=1e-11)
    for p in ("body", "floor", "ground"):
        assert k[p]["type"] == "kqRWallFunction"
        assert om[p]["type"] == "omegaWallFunction"
        assert nut[p]["type"] == "nutUSpaldingWallFunction"  # Spalding's law: valid through the buffer region
    assert parsed(files, "0/p")["boundaryField"]["outlet"] == {"type": "fixedValue", "value": ["uniform", 0]}


def test_laminar_selects_no_turbulence_fields():
    files = render.render_case(make_spec(model="laminar"))
    assert parsed(files, "constant/turbulenceProperties")["simulationType"] == "laminar"
    assert "0/k" not in files and "0/nut" not in files
    fv = parsed(files, "system/fvSolution")
    assert "(k|omega)" not in fv["relaxationFactors"]["equations"]


def test_controls_and_monitors():
    spec = make_spec(n_iterations=1000)
    spec = replace(spec, solver=replace(spec.solver, write_interval=300))
    files = render.render_case(spec)
    cd = parsed(files, "system/controlDict")
    assert cd["endTime"] == 1000
    assert cd["writeInterval"] == 250  # largest divisor of 1000 not above 300
    fo = cd["functions"][render.FORCES_NAME]
    assert fo["type"] == "forces" and fo["rho"] == "rhoInf"
    assert fo["rhoInf"] == pytest.approx(spec.flow.rho)
    np.testing.assert_allclose(fo["CofR"], spec.reference.moment_point)
    kinds = {v["type"] for v in cd["functions"].values()}
    assert {"forces", "solverInfo", "wallShearStress", "yPlus"} <= kinds
    fv = parsed(files, "system/fvSolution")
    assert fv["SIMPLE"]["consistent"] == "yes"
    assert fv["relaxationFactors"]["fields"]["p"] == 1
    assert fv["relaxationFactors"]["equations"]["U"] == pytest.approx(0.9)
    assert fv["relaxationFactors"]["equations"]["(k|omega)"] == pytest.approx(0.7)
    tp = parsed(files, "constant/turbulenceProperties")
    assert tp["RAS"]["RASModel"] == "kOmegaSST"
    assert parsed(files, "constant/transportProperties")["nu"] == pytest.approx(spec.flow.nu)
    dp = parsed(files, "system/decomposeParDict")
    assert dp["method"] == "ptscotch" and dp["numberOfSubdomains"] == spec.solver.n_procs


@pytest.mark.parametrize("n,w,exp", [(20, 20, 20), (20, 15, 10), (1000, 300, 250), (997, 300, 997), (100, 1, 1),
                                     (10, 50, 10)])
def test_effective_write_interval(n, w, exp):
    assert render.effective_write_interval(n, w) == exp
    assert n % exp == 0


def test_mesher_settings_match_spec():
    spec = make_spec(beta_deg=BETA, yaw_mode="crosswind")
    files = render.render_case(spec)
    sh = parsed(files, "system/snappyHexMeshDict")
    r = spec.mesh.regions[0]
    g = sh["geometry"][r.box.name]
    assert g["type"] == "searchableRotatedBox"
    np.testing.assert_allclose(g["origin"], r.box.origin, atol=1e-11)
    np.testing.assert_allclose(g["span"], r.box.lengths, atol=1e-11)
    np.testing.assert_allclose(g["e1"], r.box.axes[0], atol=1e-11)
    np.testing.assert_allclose(g["e3"], r.box.axes[2], atol=1e-11)
    assert sh["castellatedMeshControls"]["refinementRegions"][r.box.name]["levels"] == [[1e15, r.level]]
    np.testing.assert_allclose(sh["castellatedMeshControls"]["locationInMesh"], spec.mesh.location_in_mesh)
    al = sh["addLayersControls"]
    assert al["relativeSizes"] == "false"
    assert al["firstLayerThickness"] == pytest.approx(spec.mesh.layers.first_cell_height)
    assert al["expansionRatio"] == pytest.approx(spec.mesh.layers.expansion)
    assert set(al["layers"]) == {"body", "floor"}
    feats = sh["castellatedMeshControls"]["features"]
    assert feats[0]["file"] == "body.eMesh" and feats[0]["level"] == spec.mesh.feature_level
    sfe = parsed(files, "system/surfaceFeatureExtractDict")
    assert sfe["body.stl"]["includedAngle"] == pytest.approx(spec.mesh.feature_angle_deg)
    assert files["constant/triSurface/body.stl"] == render.CaseFile("../../../../geometry/body.stl", 0o777, True)


def test_wheel_solid_listed_twice_is_refused():
    spec = make_spec(wheels=(demo_wheel("floor", geometry=None),))
    with pytest.raises(ValueError, match="counts as body and wheel"):
        render.render_case(spec)


def test_templates_are_strict():
    env = environment()
    assert env.undefined is jinja2.StrictUndefined
    with pytest.raises(jinja2.UndefinedError):
        render._env().get_template("case/system/controlDict.j2").render({})


def test_rendering_is_deterministic_and_pure():
    spec = make_spec(beta_deg=BETA)
    box0 = spec.domain.box.corners().copy()
    a = render.render_case(spec)
    b = render.render_case(spec)
    assert a == b
    np.testing.assert_array_equal(spec.domain.box.corners(), box0)


def test_unsafe_case_id_is_refused():
    with pytest.raises(ValueError):
        render.render_case(make_spec("../evil"))
