"""Wheels on the ground whatever the body does: placement, contact, rolling,
steering/camber, rotating zones and the bad inputs (caseprep.planning.wheels,
the planner, the writer, caseprep plan --json)."""
from __future__ import annotations

import json
import re
import shutil
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from caseprep.casefiles import foamdict as fd
from caseprep.casefiles.render import render_case
from caseprep.casefiles.writer import write_sweep
from caseprep.cli import main
from caseprep.config.load import load_config
from caseprep.contract.errors import UserError, UserErrors
from caseprep.contract.manifest import read_manifest
from caseprep.geometry.stl import read_stl
from caseprep.planning.planner import plan, plan_all
from planning_helpers import write_binary_stl

ROOT = Path(__file__).resolve().parents[1]
FLAT = ROOT / "example_cases" / "floor_study" / "geometry" / "flat.stl"
R, W = 0.08, 0.06  # m: wheel radius and width (DEMO, invented)
WHEELS = (("FL", 0.22, -0.30), ("FR", 0.22, 0.30), ("RL", 0.92, -0.30), ("RR", 0.92, 0.30))


def cylinder(c, r: float, w: float, n: int = 72) -> np.ndarray:
    """Closed, outward-oriented cylinder about the body y axis (a vertex at
    the bottom of each rim ring, so its lowest point is exactly r below c)."""
    ang = -np.pi / 2 + 2 * np.pi * np.arange(n) / n
    c = np.asarray(c, float)

    def ring(y):
        return np.stack([c[0] + r * np.cos(ang), np.full(n, y), c[2] + r * np.sin(ang)], 1)

    a, b = ring(c[1] - w / 2), ring(c[1] + w / 2)
    ca, cb = c + [0, -w / 2, 0], c + [0, w / 2, 0]
    T = []
    for i in range(n):
        j = (i + 1) % n
        T += [[a[i], b[j], b[i]], [a[i], a[j], b[j]], [ca, a[j], a[i]], [cb, b[i], b[j]]]
    T = np.array(T)
    nrm = np.cross(T[:, 1] - T[:, 0], T[:, 2] - T[:, 0])
    flip = np.einsum("ij,ij->i", nrm, T.mean(axis=1) - c) < 0
    T[flip] = T[flip][:, ::-1]
    return T


def config(tmp: Path, *, yaw_mode: str = "crosswind", ride_heights=(0.02, 0.045), pitch=(-1.0, 0.0, 0.7),
           yaws=(0.0, 4.0), wheel_extra: dict | None = None, centre_z: float = 0.05) -> Path:
    """DEMO: the example's flat floor (1.2 m) on four cylinder wheels beside
    it (radius 80 mm, width 60 mm), smoke fidelity."""
    shutil.copy(FLAT, tmp / "flat.stl")
    text = """
[study]
name = "wheels"
[air]
speed = 40.0
[body]
reference_length = 0.7
front_axle = [0.22, 0.0, 0.05]
rear_axle = [0.92, 0.0, 0.05]
ride_height_point_front = [0.15, 0.0, 0.0]
ride_height_point_rear = [0.80, 0.0, 0.0]
"""
    for name, x, y in WHEELS:
        write_binary_stl(tmp / f"{name}.stl", cylinder((x, y, centre_z), R, W))
        extra = "".join(f"{k} = {json.dumps(v)}\n" for k, v in (wheel_extra or {}).get(name, {}).items())
        text += f'[[body.wheels]]\nname = "{name}"\ncentre = [{x}, {y}, {centre_z}]\nradius = {R}\ngeometry = "{name}.stl"\n{extra}'
    text += f"""
[variants.flat]
geometry = "flat.stl"
[sweep]
yaw_mode = "{yaw_mode}"
ride_height = {list(ride_heights)}
pitch_deg = {list(pitch)}
yaw_deg = {list(yaws)}
[mesh]
fidelity = "smoke"
"""
    p = tmp / "sweep.toml"
    p.write_text(text)
    return p


def heights_above_ground(tris: np.ndarray, placement) -> np.ndarray:
    return placement.height_above_ground(tris.reshape(-1, 3))


@pytest.mark.parametrize("yaw_mode", ["crosswind", "yawed-model"])
def test_every_wheel_touches_in_plan_and_written_geometry(tmp_path, yaw_mode):
    # ride height × pitch × yaw in both yaw modes: the body moves, every wheel stays on the ground with its lowest point
    # sunk by the flattening (2 % of r); contact gap = lowest point + flattening depth = 0 (exact geometry: a vertex sits
    # at the bottom of the cylinder)
    cfg = config(tmp_path, yaw_mode=yaw_mode)
    cases = plan(load_config(cfg))
    assert len(cases) == 2 * 3 * 2
    for c in cases:
        for f in c.extra["wheels"]:
            assert abs(f["contact_gap"]) < 1e-12
            assert f["centre_height"] == pytest.approx(R * (1 - 0.02), abs=2e-8)  # the loaded radius (float32 input)
            assert f["loaded_radius"] == pytest.approx(0.98 * R, rel=1e-12) and f["radius"] == R
    res = CliRunner().invoke(main, ["plan", "--json", str(cfg)])
    assert res.exit_code == 0, res.output
    js = json.loads(res.output[res.output.index("{"):])
    assert all(abs(w["contact_gap"]) < 1e-12 and w["centre_height"] == pytest.approx(0.0784) and w["radius"] == R
               for c in js["cases"] for w in c["wheels"])
    # the written geometry: each case's wheel files, read back, touch its ground to float32 precision (binary STL)
    out = tmp_path / "out"
    write_sweep(cases, out, cfg)
    man = read_manifest(out)
    for rec in man.cases:
        tri = out / rec.folder / "constant" / "triSurface"
        for name, _, _ in WHEELS:
            (f,) = [p for p in tri.iterdir() if p.name.startswith(f"wheel_{name}_")]
            h = heights_above_ground(read_stl(f).triangles, rec.placement)
            assert h.min() + 0.02 * R == pytest.approx(0.0, abs=2e-7)  # float32 coordinates of ~1 m: 1e-7 m
        body = read_stl(tri / "flat.stl")
        assert body.triangles.min() > -1.0  # the body file itself is the shared, unmoved copy


def test_ride_height_moves_the_body_not_the_wheels(tmp_path):
    # a 25 mm ride-height step moves the body 25 mm relative to the wheels (in the body frame the wheel moves down)
    cases = plan(load_config(config(tmp_path, ride_heights=(0.02, 0.045), pitch=(0.0,), yaws=(0.0,))))
    lo, hi = sorted(cases, key=lambda c: c.params["ride_height_front"])
    for a, b in zip(lo.wheels, hi.wheels):
        assert a.centre[2] - b.centre[2] == pytest.approx(0.025, abs=1e-12)


@pytest.mark.parametrize("yaw_mode", ["crosswind", "yawed-model"])
def test_surface_speed_at_contact_equals_ground_speed(tmp_path, yaw_mode):
    # rolling without slip (rigid-body kinematics): the written rotatingWallVelocity (origin, axis, omega) gives the tyre
    # surface at the contact the ground's velocity written for the ground patch. In yawed-model the belt runs with the
    # air at β to the unsteered wheels: the rolling-direction part matches, the axial part is the wheel's sideways slide.
    cases = plan(load_config(config(tmp_path, yaw_mode=yaw_mode, pitch=(-1.0,), yaws=(0.0, 5.0))))
    for c in cases:
        U = fd.parse(render_case(c)["0/U"].text)["boundaryField"]
        vg = np.array(U["ground"]["value"][1], float)
        for w, f in zip(c.wheels, c.extra["wheels"]):
            bc = U[w.patch]
            assert bc["type"] == "rotatingWallVelocity"
            o, a, om = np.array(bc["origin"], float), np.array(bc["axis"], float), float(bc["omega"])
            v = om * np.cross(a, np.array(f["contact"]) - o)
            if yaw_mode == "crosswind" or c.params["yaw_deg"] == 0.0:
                np.testing.assert_allclose(v, vg, atol=1e-9 * np.linalg.norm(vg))
            else:
                t = np.cross(a, np.array(f["contact"]) - o)
                t /= np.linalg.norm(t)
                assert v @ t == pytest.approx(vg @ t, rel=1e-9)
                assert abs(vg @ a) == pytest.approx(40.0 * np.sin(np.radians(5.0)), rel=1e-6)


def test_steering_and_camber(tmp_path):
    # steering turns the axis about the ground normal (+ to the driver's left); camber tilts the top outward;
    # the contact stays closed: the lowest point is again sunk by the flattening
    extra = {"FL": {"steering_deg": 10.0, "camber_deg": -3.0}, "FR": {"steering_deg": 10.0, "camber_deg": -3.0}}
    (c,) = plan(load_config(config(tmp_path, ride_heights=(0.03,), pitch=(-1.0,), yaws=(0.0,), wheel_extra=extra)))
    P = c.placement
    for w, f in zip(c.wheels, c.extra["wheels"]):
        a_g = P.vector_to_ground(np.array(w.axis))
        assert abs(f["contact_gap"]) < 1e-12
        if w.name in ("FL", "FR"):
            # unit axis (0, ±1, 0) steered by 10° and cambered by 3°: |z| = sin 3°, horizontal part at 10° to y
            assert abs(a_g[2]) == pytest.approx(np.sin(np.radians(3.0)), rel=1e-9)
            h = a_g[:2] / np.linalg.norm(a_g[:2])
            assert abs(h[0]) == pytest.approx(np.sin(np.radians(10.0)), rel=1e-9)
            # a cambered cylinder reaches lowest at its rim edge: H = r cos γ + (w/2) sin γ − 0.02 r (geometry of the tilt)
            g = np.radians(3.0)
            assert f["centre_height"] == pytest.approx(R * np.cos(g) + 0.5 * W * np.sin(g) - 0.02 * R, abs=1e-6)
        else:
            np.testing.assert_allclose(a_g, [0, 1, 0], atol=1e-12)


def test_camber_sign_top_leans_out(tmp_path):
    # positive camber (SAE sign): the top of each wheel moves away from the body's centre plane
    extra = {n: {"camber_deg": 4.0} for n, _, _ in WHEELS}
    (c,) = plan(load_config(config(tmp_path, ride_heights=(0.03,), pitch=(0.0,), yaws=(0.0,), wheel_extra=extra)))
    for w in c.wheels:
        a = np.array(w.axis)  # level body, zero yaw: body = ground axes
        up = np.array([0.0, 0.0, 1.0])
        # the wheel's own "up" (the design z turned with the wheel) = ground z tilted about the rolling direction
        roll = np.cross(a, up)
        wheel_up = np.cross(roll, a)
        wheel_up /= np.linalg.norm(wheel_up)
        assert np.sign(wheel_up[1]) == np.sign(w.centre[1])


def test_rotating_zone_written_for_spoked_wheels(tmp_path):
    extra = {"RL": {"rotation": "zone", "zone_radius": 0.05}}
    (c,) = plan(load_config(config(tmp_path, ride_heights=(0.03,), pitch=(0.0,), yaws=(0.0,), wheel_extra=extra)))
    files = render_case(c)
    mrf = fd.parse(files["constant/MRFProperties"].text)
    z = mrf["RL_zone"]
    w = next(w for w in c.wheels if w.name == "RL")
    assert z["cellZone"] == "RL_zone" and z["active"] == "yes"
    np.testing.assert_allclose(z["origin"], w.centre, atol=1e-9)
    assert z["omega"] == pytest.approx(w.omega) and "RL" not in z["nonRotatingPatches"]
    assert "body" in z["nonRotatingPatches"] and "ground" in z["nonRotatingPatches"]
    shm = fd.parse(files["system/snappyHexMeshDict"].text)
    cyl = shm["geometry"]["RL_zone"]
    assert cyl["type"] == "searchableCylinder" and cyl["radius"] == pytest.approx(0.05)
    assert np.linalg.norm(np.subtract(cyl["point2"], cyl["point1"])) == pytest.approx(W, rel=1e-6)
    assert shm["castellatedMeshControls"]["refinementSurfaces"]["RL_zone"]["cellZoneInside"] == "inside"
    assert "constant/MRFProperties" not in render_case(replace_rotation(c))


def replace_rotation(c):
    from dataclasses import replace
    return replace(c, wheels=tuple(replace(w, rotation="wall") for w in c.wheels))


def _problems(path: Path) -> list[str]:
    try:
        r = plan_all(load_config(path))
    except UserErrors as e:
        return [str(x) for x in e.errors]
    except UserError as e:
        return [str(e)]
    return [str(p) for p in r.problems]


@pytest.mark.parametrize("extra,key,what", [
    ({"steering_deg": 60.0}, "body.wheels[0].steering_deg", "steering angle"),
    ({"camber_deg": 15.0}, "body.wheels[0].camber_deg", "camber angle"),
    ({"rotation": "zone", "zone_radius": 0.09}, "body.wheels[0].zone_radius", "rotating-zone radius"),
    ({"flattening": 0.3}, "body.wheels[0].flattening", "flattening"),
])
def test_bad_wheel_angles_and_sizes_are_refused(tmp_path, extra, key, what):
    msgs = _problems(config(tmp_path, ride_heights=(0.03,), pitch=(0.0,), yaws=(0.0,), wheel_extra={"FL": extra}))
    assert any(key in m and what in m for m in msgs), msgs


def test_zero_radius_is_refused(tmp_path):
    p = config(tmp_path, ride_heights=(0.03,), pitch=(0.0,), yaws=(0.0,))
    p.write_text(p.read_text().replace(f"radius = {R}", "radius = 0.0", 1))
    msgs = _problems(p)
    assert any("body.wheels[0].radius" in m and "got 0.0" in m for m in msgs), msgs


def test_wheel_centre_inside_the_body_is_refused(tmp_path):
    p = config(tmp_path, ride_heights=(0.03,), pitch=(0.0,), yaws=(0.0,))
    # the front-left centre moved to the body's middle (x = 0.6 m, y = 0, z = 0.05 m: inside the closed flat body)
    p.write_text(p.read_text().replace("centre = [0.22, -0.3, 0.05]", "centre = [0.6, 0.0, 0.05]", 1))
    msgs = _problems(p)
    assert any("body.wheels[0].centre" in m and "inside the body" in m for m in msgs), msgs


@pytest.mark.solver
def test_wheels_on_the_ground_mesh(tmp_path):
    # the flattened contact meshes: the example's flat floor on four cylinder wheels at smoke fidelity, the mesher and
    # the mesh checker of the solver package (a tangent contact would leave a zero-angle wedge of fluid)
    from caseprep.run import runner

    cfg = config(tmp_path, ride_heights=(0.02,), pitch=(-0.6,), yaws=(0.0,))
    cases = plan(load_config(cfg))
    write_sweep(cases, tmp_path / "sweep", cfg)
    (rec,) = runner.run_sweep(tmp_path / "sweep", stages=["mesh"])
    assert rec.status == "ok" and rec.mesh_ok, (rec.status, rec.mesh_ok, rec.log_tail)
    assert "mesh-checks-failed" not in rec.flags and "mesh-illegal-faces" not in rec.flags
    boundary = (tmp_path / "sweep" / man_folder(tmp_path / "sweep") / "constant" / "polyMesh" / "boundary").read_text()
    for name, _, _ in WHEELS:
        # every wheel is a patch of the mesh with faces on it
        m = re.search(rf"\b{name}\s*\{{[^}}]*nFaces\s+(\d+);", boundary)
        assert m and int(m.group(1)) > 100, name


def man_folder(sweep: Path) -> str:
    return read_manifest(sweep).cases[0].folder
