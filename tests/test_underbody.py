"""Underbody Cp lines and the ground footprint against a prescribed
pressure field on the synthetic channel (floor patch = body)."""
from __future__ import annotations

import json
import warnings

import numpy as np
import pytest
from click.testing import CliRunner

from postproc.pipelines import case_flow as flowreport
from postproc.kernels import underbody as ub
from postproc.cli import main

from test_diffuser import QV, W, XT, channel, h_of_x, vtm  # noqa: F401  (fixture re-used)

warnings.filterwarnings("ignore", category=DeprecationWarning)
V = 40.0


def cp_exact(x):
    # the prescribed kinematic pressure p = 10 − ½u², u = QV/(W h(x)); Cp = p/(½V²)
    return (10.0 - 0.5 * (QV / (W * h_of_x(x))) ** 2) / (0.5 * V**2)


def test_pressure_coefficient_hand_value():
    # Cp = (p − p_ref)/(½ρV²) (Anderson, Fundamentals of Aerodynamics, §3.6), kinematic form
    assert ub.pressure_coefficient(np.array([-400.0]), 40.0)[0] == pytest.approx(-0.5)
    assert ub.pressure_coefficient(np.array([100.0]), 40.0, 100.0)[0] == pytest.approx(0.0)


def test_floor_line_cp_and_suction_integral():
    case = channel()
    d = flowreport.analyse_underbody(case, lines=[0.03], speed=V)
    line = d["lines"][0]
    x = np.array(line["x"])
    # segment midpoints coincide with face centroids: the face values are exact
    np.testing.assert_allclose(line["cp"], cp_exact(x), rtol=1e-9)
    np.testing.assert_allclose(line["height"], h_of_x(x), atol=1e-12)
    assert line["cp_min"] == pytest.approx(cp_exact(0.0), rel=1e-9)
    assert line["x_cp_min"] <= XT
    # ∫Cp dx over the sampled range, trapezoid on 40 samples of a piecewise
    # smooth curve vs a 20001-point reference: within 0.5 %
    xf = np.linspace(x[0], x[-1], 20001)
    assert line["cp_integral"] == pytest.approx(np.trapezoid(cp_exact(xf), xf), rel=5e-3)
    assert line["suction_integral"] == pytest.approx(-line["cp_integral"], rel=1e-9)  # Cp < 0 everywhere here


def test_ground_footprint():
    case = channel()
    g = case.patches["ground"]
    cp = ub.pressure_coefficient(g.cell_values("p"), V)
    fp = ub.ground_footprint(g.centroids, g.areas, cp, (0.0, 1.0, -W / 2, W / 2), nx=20, ny=4)
    xf = np.linspace(0, 1, 20001)
    # ∫Cp dA = W ∫Cp dx (midpoint rule on 40 faces vs fine trapezoid): within 0.5 %
    assert fp.cp_area_integral == pytest.approx(W * np.trapezoid(cp_exact(xf), xf), rel=5e-3)
    assert fp.cp_min == pytest.approx(cp_exact(0.0), rel=1e-9)
    assert fp.at[0] <= XT
    assert fp.cp_map.shape == (20, 4)
    np.testing.assert_allclose(fp.cp_map[:, 0], fp.cp_map[:, 3], rtol=1e-12)  # spanwise-uniform field


def test_cli_underbody_json(vtm):  # noqa: F811
    r = CliRunner().invoke(main, ["underbody", str(vtm), "--lines", "0.03,-0.1", "--speed", "40", "--json"])
    assert r.exit_code == 0, r.output
    d = json.loads(r.output)
    assert len(d["lines"]) == 2 and d["lines"][0]["cp_min"] == pytest.approx(cp_exact(0.0), rel=1e-6)
    assert d["ground"]["cp_min"] == pytest.approx(cp_exact(0.0), rel=1e-6)
    r = CliRunner().invoke(main, ["underbody", str(vtm)])
    assert r.exit_code == 2 and "--speed" in r.output
