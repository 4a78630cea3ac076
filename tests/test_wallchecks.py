"""y+ statistics, wall-shear reversals and field flags."""
from __future__ import annotations

import json
import warnings

import numpy as np
import pytest
import pyvista as pv
from click.testing import CliRunner

from postproc.io import flow as flowio
from postproc.pipelines import case_flow as flowreport
from postproc.kernels import wallchecks as wc
from postproc.cli import main

from flow_meshes import box_grid, box_patch

warnings.filterwarnings("ignore", category=DeprecationWarning)
N = 10  # cells per side of the unit box: first cell centre 0.05 m from each wall
NU = 1.5e-5


def tau_x(x):
    # streamwise shear with reversed flow between x = 0.3 and 0.7 (prescribed)
    return 0.5 * (x - 0.3) * (x - 0.7)


def case(with_yplus=False):
    g = box_grid(N, N, N, (0, 1, -0.5, 0.5, 0, 1), kind="hex")
    X = flowio.cell_centres(g)
    g.cell_data["U"] = np.tile([20.0, 0, 0], (g.n_cells, 1))
    g.cell_data["p"] = np.zeros(g.n_cells)
    k = np.full(g.n_cells, 0.1)
    k[7] = -0.2
    g.cell_data["k"] = k
    top, bottom = box_patch(g, N, N, N, "top"), box_patch(g, N, N, N, "bottom")
    for s in (top, bottom):
        c = s.cell_centers().points
        t = np.zeros((s.n_cells, 3))
        t[:, 0] = tau_x(c[:, 0])
        t[:, 1] = 0.01
        s.cell_data["wallShearStress"] = t
        if with_yplus:
            s.cell_data["yPlus"] = np.full(s.n_cells, 42.0)
    patches = {"floor": flowio.surface_from_polydata(top, "floor"),
               "ground": flowio.surface_from_polydata(bottom, "ground")}
    return flowio.flow_case_from_grid(g, patches)


def test_yplus_hand_formula():
    # y+ = y u_τ/ν, u_τ = √(τ_w/ρ) (Pope, Turbulent Flows, 2000, §7.1.2):
    # τ/ρ = 0.64 m²/s², y = 1 mm, ν = 1.5e-5 m²/s → u_τ = 0.8 m/s, y+ = 53.33
    assert wc.yplus(np.array([[0.64, 0.0, 0.0]]), np.array([1e-3]), 1.5e-5)[0] == pytest.approx(53.3333333, rel=1e-9)
    assert wc.friction_velocity(np.array([[0.36, 0.48, 0.0]]))[0] == pytest.approx(np.sqrt(0.6))


def test_yplus_from_wall_shear_and_wall_distance():
    c = case()
    d = flowreport.analyse_walls(c, nu=NU, target=(30, 300))
    s = c.patches["floor"]
    # hand formula per face with the wall distance of the first cell centre, 0.05 m
    t = s.cell_values("wallShearStress")
    expect = 0.05 * np.sqrt(np.linalg.norm(t, axis=1)) / NU
    st = d["yplus"]["floor"]
    assert st["source"].startswith("wallShearStress")
    assert st["min"] == pytest.approx(expect.min(), rel=1e-9)
    assert st["max"] == pytest.approx(expect.max(), rel=1e-9)
    assert st["median"] == pytest.approx(np.median(expect), rel=1e-9)
    assert st["share_in_target"] == pytest.approx(np.mean((expect >= 30) & (expect <= 300)), rel=1e-9)


def test_yplus_array_used_when_present():
    d = flowreport.analyse_walls(case(with_yplus=True), nu=NU, target=(30, 300))
    st = d["yplus"]["ground"]
    assert st["source"] == "yPlus" and st["median"] == 42.0 and st["share_in_target"] == 1.0


def test_shear_reversals_on_floor_line():
    c = case()
    d = flowreport.analyse_walls(c, nu=NU, floor_lines=[0.05])
    rev = d["shear_reversals"][0]
    # attached sign: + (60 % of the floor has τ_x > 0); zeros of τ_x at 0.3 and
    # 0.7 located by linear interpolation between face centres 0.1 m apart:
    # error ≤ h²|τ''|/(8|τ'|) ≈ 0.0125 m
    assert rev["attached_sign"] == 1
    kinds = [(r["kind"], r["x"]) for r in rev["reversals"]]
    assert [k for k, _ in kinds] == ["separation", "reattachment"]
    assert kinds[0][1] == pytest.approx(0.3, abs=0.013)
    assert kinds[1][1] == pytest.approx(0.7, abs=0.013)
    assert rev["reversed_share_patch"] == pytest.approx(0.4, abs=1e-9)


def test_field_flags():
    c = case()
    d = flowreport.analyse_walls(c, nu=NU, speed=20.0)
    flags = {f["name"]: f for f in d["field_flags"]}
    assert flags["k"]["n_below"] == 1 and flags["k"]["worst_value"] == pytest.approx(-0.2)
    assert flags["U"]["n_above"] == 0
    f = wc.field_flags("p", np.array([1.0, np.nan, 3.0]), np.zeros((3, 3)), upper=2.0)
    assert f.n_nonfinite == 1 and f.n_above == 1


def test_cli_walls(tmp_path):
    c = case()
    mb = pv.MultiBlock()
    mb["internal"] = c.grid
    b = pv.MultiBlock()
    for n, s in c.patches.items():
        b[n] = flowio.surface_to_polydata(s)
    mb["boundary"] = b
    p = tmp_path / "VTK" / "box_50.vtm"
    p.parent.mkdir()
    mb.save(str(p))
    r = CliRunner().invoke(main, ["walls", str(tmp_path), "--nu", str(NU), "--json", "--yplus-range", "1,500"])
    assert r.exit_code == 0, r.output
    d = json.loads(r.output)
    assert d["yplus"]["floor"]["target"] == [1.0, 500.0]
    r = CliRunner().invoke(main, ["walls", str(tmp_path)])
    assert r.exit_code == 2 and "--nu" in r.output
