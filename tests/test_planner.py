"""Planner: placement, clearance, domain, wheels, yaw modes, CLI (caseprep.planning.planner, caseprep.cli)."""
from __future__ import annotations

import importlib.util
import json
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from caseprep.contract import frames as fr
from caseprep.cli import main
from caseprep.config.load import load_config
from caseprep.planning.domain import decomposition_split
from caseprep.contract.errors import UserError
from caseprep.geometry.stl import read_stl
from caseprep.planning.planner import check, plan, plan_all, table_rows
from caseprep.planning.wheels import rolling_omega as wheel_omega
from planning_helpers import BASE_TOML, box_triangles, convex_body, write_binary_stl, write_config

EXAMPLES = Path(__file__).resolve().parent.parent / "example_cases"
FLOOR = EXAMPLES / "floor_study" / "sweep.toml"


def _replace_sweep(text: str, sweep: str) -> str:
    head, tail = text.split("[sweep]")
    return head + "[sweep]\n" + sweep + "\n\n[mesh]" + tail.split("[mesh]")[1]


@pytest.fixture(scope="module")
def floor_cases():
    return plan(load_config(FLOOR))


def test_demo_plans(floor_cases):
    assert len(floor_cases) == 12
    for c in floor_cases:
        assert 5_000 < c.estimated_cells < 80_000  # smoke: tens of thousands of cells
        assert c.domain.blockage < 0.01
        assert c.geometry == f"{c.variant}.stl" and Path(c.extra["geometry_source"]).is_file()
        json.dumps(c.record(f"cases/{c.case_id}").to_dict())  # manifest-ready
    assert floor_cases[-1].geometry_solid_names == ("body", "strake_left", "strake_right")


@pytest.mark.parametrize("seed", range(8))
def test_reference_points_land_where_asked(tmp_path, seed):
    rng = np.random.default_rng(seed)
    body = convex_body(rng.normal(size=(80, 3)) * [0.5, 0.2, 0.1] + [0.5, 0, 0.1])
    write_binary_stl(tmp_path / "car.stl", body)
    f = [rng.uniform(0.1, 0.3), rng.normal() * 0.02, rng.uniform(-0.4, -0.3)]
    r = [rng.uniform(0.7, 0.9), rng.normal() * 0.02, rng.uniform(-0.4, -0.3)]
    h = rng.uniform(0.5, 0.6)  # far below the body: the reference points are placed, the body is well clear
    th = rng.uniform(-1.5, 1.5)
    mode = fr.YAW_MODES[seed % 2]
    text = (BASE_TOML.replace("ride_height_point_front = [0.1, 0.0, 0.0]", f"ride_height_point_front = {f}")
            .replace("ride_height_point_rear = [0.9, 0.0, 0.0]", f"ride_height_point_rear = {r}"))
    text = _replace_sweep(text, f"yaw_mode = \"{mode}\"\nride_height = [{h!r}]\npitch_deg = [{th!r}]\nyaw_deg = [3.0]")
    (tmp_path / "sweep.toml").write_text(text)
    (c,) = plan(load_config(tmp_path / "sweep.toml"))
    P = c.placement
    hf, hr = c.params["ride_height_front"], c.params["ride_height_rear"]
    # the placement solves the two heights exactly (frames.place_body); 1e-9 m is round-off margin
    np.testing.assert_allclose(P.height_above_ground(np.array([f, r])), [hf, hr], atol=1e-9)
    assert P.height_above_ground(np.array(f)) == pytest.approx(h, abs=1e-9)  # pivot = front point
    assert np.degrees(P.pitch) == pytest.approx(th, abs=1e-9)


@pytest.mark.parametrize("mode", fr.YAW_MODES)
def test_clearance_equals_brute_force(tmp_path, mode):
    surf = read_stl(EXAMPLES / "floor_study" / "geometry" / "diffuser14.stl")
    pts = surf.triangles.reshape(-1, 3)
    rng = np.random.default_rng(3)
    text = FLOOR.read_text().replace('geometry = "geometry/', f'geometry = "{FLOOR.parent.as_posix()}/geometry/')
    for _ in range(3):
        h, th, b = rng.uniform(0.02, 0.04), rng.uniform(-1.0, 0.5), rng.uniform(-6, 6)
        t2 = _replace_sweep(text, f'yaw_mode = "{mode}"\nvariants = ["diffuser14"]\nride_height = [{h!r}]\n'
                                  f"pitch_deg = [{th!r}]\nyaw_deg = [{b!r}]")
        (tmp_path / "sweep.toml").write_text(t2)
        (c,) = plan(load_config(tmp_path / "sweep.toml"))
        brute = c.placement.height_above_ground(pts)
        # the hull vertex is one of the vertices: equal to round-off
        assert c.min_clearance == pytest.approx(brute.min(), abs=1e-12)
        i = int(np.argmin(brute))
        assert c.placement.height_above_ground(np.array(c.min_clearance_at)) == pytest.approx(brute[i], abs=1e-12)


def test_penetration_refused_with_case_clearance_and_where(tmp_path):
    # reference points 50 mm above the floor: a 20 mm ride height puts the floor 30 mm under ground
    text = (BASE_TOML.replace("ride_height_point_front = [0.1, 0.0, 0.0]", "ride_height_point_front = [0.1, 0.0, 0.05]")
            .replace("ride_height_point_rear = [0.9, 0.0, 0.0]", "ride_height_point_rear = [0.9, 0.0, 0.05]")
            .replace("ride_height = [0.05]", "ride_height = [0.02, 0.08]"))
    cfg = load_config(write_config(tmp_path, text))
    r = plan_all(cfg)
    assert len(r.cases) == 1 and len(r.problems) == 1
    msg = str(r.problems[0])
    assert "touches or penetrates the ground" in msg and "-30.000 mm" in msg
    assert "base-" in msg and "sweep.ride_height[0]" in msg and "% of the length from the nose" in msg
    with pytest.raises(UserError):
        plan(cfg)


def test_thin_gap_refused(tmp_path):
    text = BASE_TOML.replace("ride_height = [0.05]", "ride_height = [0.004]").replace('fidelity = "smoke"', 'fidelity = "coarse"\nmax_level = 4')
    r = plan_all(load_config(write_config(tmp_path, text)))
    assert not r.cases
    msg = str(r.problems[0])
    assert "reference clearance 4.000 mm needs 12 cells across" in msg and "mesh.max_level" in msg


def test_blockage_warn_and_refuse(tmp_path):
    # box body 0.4 m × 0.25 m shadow = 0.1 m²; a 2 m × 2.5 m section → 2 %, 1.0 m × 0.5 m → 20 %
    text = BASE_TOML + "\n[domain]\nwidth = 2.5\nheight = 2.0\n"
    r = plan_all(load_config(write_config(tmp_path, text)))
    assert r.cases and r.cases[0].domain.blockage == pytest.approx(0.02, rel=1e-6)
    assert any("blockage 2.00 %" in w for w in r.warnings)
    text = BASE_TOML + "\n[domain]\nwidth = 1.0\nheight = 0.5\n"
    r = plan_all(load_config(write_config(tmp_path, text)))
    assert not r.cases and "above the limit of 5.00 %" in str(r.problems[0])
    text = BASE_TOML + "\n[domain]\nwidth = 1.0\nheight = 0.5\nmax_blockage = 0.25\n"
    assert plan_all(load_config(write_config(tmp_path, text))).cases


def test_domain_geometry(floor_cases):
    for c in floor_cases:
        P = c.placement
        box = c.domain.box
        corners = box.corners()
        # bottom face on the ground, top face above, axes e1 = horizontal wind, e3 = ground normal
        np.testing.assert_allclose(P.height_above_ground(corners[:4]), 0.0, atol=1e-12)
        e1, e2, e3 = np.asarray(box.axes)
        np.testing.assert_allclose(e3, P.ground_normal_body, atol=1e-12)
        w = np.asarray(c.flow.inlet_velocity) / c.flow.air_speed
        np.testing.assert_allclose(e1, w, atol=1e-12)  # wind is horizontal here
        # background cells are cubes of the base cell
        np.testing.assert_allclose(np.asarray(box.lengths) / np.asarray(c.domain.cells), c.mesh.base_cell, rtol=1e-12)
        # the location in the mesh is inside the domain, upstream of the body
        q = (np.asarray(c.mesh.location_in_mesh) - np.asarray(box.origin)) @ np.asarray(box.axes).T
        assert np.all(q > 0) and np.all(q < np.asarray(box.lengths))
        assert q[0] < 3.0 * 1.2
        # the location is not on a cell face of any refinement level up to 10
        for lvl in range(11):
            frac = (q / (np.asarray(box.lengths) / np.asarray(c.domain.cells)) * 2**lvl) % 1.0
            assert np.all(np.minimum(frac, 1 - frac) > 1e-6)


def test_mesh_level_refines_by_sqrt2(tmp_path):
    text = BASE_TOML.replace("pitch_deg = [0.0]", "pitch_deg = [0.0]\nmesh_level = [0, 1, 2]")
    cs = plan(load_config(write_config(tmp_path, text)))
    b = [c.mesh.base_cell for c in cs]
    assert b[0] / b[1] == pytest.approx(np.sqrt(2)) and b[0] / b[2] == pytest.approx(2.0)
    assert cs[0].estimated_cells < cs[1].estimated_cells < cs[2].estimated_cells


@pytest.mark.parametrize("mode", fr.YAW_MODES)
def test_yaw_modes_flow(tmp_path, mode):
    text = BASE_TOML.replace("pitch_deg = [0.0]", f"pitch_deg = [0.0]\nyaw_deg = [0.0, 8.0]\nyaw_mode = \"{mode}\"")
    cs = plan(load_config(write_config(tmp_path, text)))
    V = 30.0
    beta = np.radians(8.0)
    c = cs[1]
    U = V / np.cos(beta) if mode == "crosswind" else V
    assert c.flow.air_speed == pytest.approx(U) and c.reference.speed == pytest.approx(U)
    np.testing.assert_allclose(c.flow.inlet_velocity, U * np.array([np.cos(beta), np.sin(beta), 0.0]), atol=1e-12)
    g = np.asarray(c.flow.ground_velocity)
    if mode == "crosswind":
        np.testing.assert_allclose(g, [V, 0, 0], atol=1e-12)  # along the body's own x
    else:
        np.testing.assert_allclose(g, V * np.array([np.cos(beta), np.sin(beta), 0.0]), atol=1e-12)  # with the air
    assert cs[0].case_id != c.case_id


def test_wheel_omega_kernel():
    # a wheel on the road: centre 0.3 m up, axis +y, ground moving rearward (+x) at 30 m/s
    om = wheel_omega([1, 0, 0.3], [0, 1, 0], [1, 0, 0], [30, 0, 0])
    assert om == pytest.approx(-100.0)  # rolls forward: negative about +y (x rearward), |Ω| = V/r
    v = np.cross(om * np.array([0, 1, 0]), np.array([0, 0, -0.3]))
    np.testing.assert_allclose(v, [30, 0, 0], atol=1e-12)


def test_reference_area_auto_is_first_variant(floor_cases):
    from caseprep.geometry.body import analyse

    flat = analyse(read_stl(EXAMPLES / "floor_study" / "geometry" / "flat.stl"))
    assert {c.reference.area for c in floor_cases} == {flat.frontal_area}
    c = floor_cases[0]
    assert c.reference.moment_point == (0.57, 0.0, 0.0) and c.reference.wheelbase == pytest.approx(0.70)


def test_sphere_example():
    (c,) = plan(load_config(EXAMPLES / "sphere_re100" / "sweep.toml"))
    assert c.domain.ground == "none" and c.min_clearance is None and c.flow.model == "laminar"
    # Re = U D / nu = 1 × 0.1 / 1e-3 = 100
    assert c.flow.air_speed * c.reference.length / c.flow.nu == pytest.approx(100.0)
    np.testing.assert_allclose(c.domain.box.centre[1:], [0.0, 0.0], atol=1e-12)  # body centred across the wind


def test_decomposition_split():
    assert decomposition_split(1, np.array([10, 2, 1])) == (1, 1, 1)
    assert decomposition_split(4, np.array([10, 2, 1])) == (4, 1, 1)
    s = decomposition_split(12, np.array([10, 5, 2]))
    assert np.prod(s) == 12 and s[0] >= s[1] >= s[2]


def test_table_rows(floor_cases):
    rows = table_rows(floor_cases)
    assert rows[0]["rh_front_mm"] == pytest.approx(20.0) and rows[0]["pitch_deg"] == -0.6
    assert rows[0]["clearance_mm"] is not None and 0 <= rows[0]["at_x_pct"] <= 100


def test_example_script_reproduces_committed_geometry(tmp_path):
    for folder in ("floor_study", "sphere_re100"):
        spec = importlib.util.spec_from_file_location(f"gen_{folder}", EXAMPLES / folder / "make_geometry.py")
        m = importlib.util.module_from_spec(spec)
        spec.loader.exec_module(m)
        for p in m.main(tmp_path / folder):
            new = read_stl(p)
            old = read_stl(EXAMPLES / folder / "geometry" / p.name)
            assert new.solid_names == old.solid_names
            np.testing.assert_allclose(new.triangles, old.triangles, atol=1e-9)  # 10 significant digits written


# ------------------------------------------------------------------ CLI


def test_cli_plan_prints_table():
    res = CliRunner().invoke(main, ["plan", str(FLOOR)])
    assert res.exit_code == 0, res.output
    assert "flat-" in res.output and "clearance_mm" in res.output and "cells_est" in res.output
    assert res.output.count("diffuser14-") == 4


def test_cli_check_ok():
    res = CliRunner().invoke(main, ["check", str(EXAMPLES / "sphere_re100" / "sweep.toml")])
    assert res.exit_code == 0 and "OK, 1 cases" in res.output


def test_cli_check_reports_all_problems(tmp_path):
    text = (BASE_TOML.replace("speed = 30.0", "sped = 30.0").replace('[sweep]', '[sweep]\nyaw_mode = "crosswnd"'))
    p = write_config(tmp_path, text)
    res = CliRunner().invoke(main, ["check", str(p)])
    assert res.exit_code == 2
    assert "Traceback" not in res.output
    assert res.exception is None or isinstance(res.exception, SystemExit)
    assert "3 problems found" in res.output
    assert "Did you mean 'speed'" in res.output and "Did you mean 'crosswind'" in res.output


def test_cli_check_bad_geometry_and_case(tmp_path):
    # an open STL (one triangle missing) and a penetrating case: both reported, exit 2
    write_binary_stl(tmp_path / "car.stl", box_triangles([0.0, -0.2, -0.05], [1.0, 0.2, 0.25])[:-1])
    (tmp_path / "sweep.toml").write_text(BASE_TOML)
    res = CliRunner().invoke(main, ["check", str(tmp_path / "sweep.toml")])
    assert res.exit_code == 2 and "Traceback" not in res.output
    assert "closed surface" in res.output and "penetrates the ground" in res.output
    res = CliRunner().invoke(main, ["plan", str(tmp_path / "sweep.toml")])
    assert res.exit_code == 2 and "Traceback" not in res.output and "closed surface" in res.output


def test_cli_missing_config():
    res = CliRunner().invoke(main, ["plan", "/nonexistent/sweep.toml"])
    assert res.exit_code == 2 and "existing config file" in res.output and "Traceback" not in res.output


def test_kernels_do_not_modify_inputs():
    from caseprep.planning.points import heights_from_pitch

    c, a, p, v = (np.array([1.0, 0, 0.3]), np.array([0.0, 1, 0]), np.array([1.0, 0, 0]), np.array([30.0, 0, 0]))
    arrays = [c, a, p, v]
    copies = [x.copy() for x in arrays]
    wheel_omega(c, a, p, v)
    heights_from_pitch(0.03, -0.5, c, p, a)
    decomposition_split(6, v)
    for x, y in zip(arrays, copies):
        np.testing.assert_array_equal(x, y)


def test_half_model_refused(tmp_path):
    write_binary_stl(tmp_path / "car.stl", box_triangles([0.0, 0.0, 0.0], [1.0, 0.2, 0.25]))
    (tmp_path / "sweep.toml").write_text(BASE_TOML)
    r = check(tmp_path / "sweep.toml")
    assert "symmetry plane" in str(r.problems[0])
