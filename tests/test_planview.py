"""The underside seen from below on a plan grid (postproc.kernels.planview):
lowest-surface rasterisation, linear interpolation, the common grid of two
rasters, area integrals and streak lines. Exact geometry; no outside source
needed (plane geometry and the midpoint rule)."""
from __future__ import annotations

import numpy as np
import pytest

from postproc.kernels.planview import (PlanGrid, difference, plan_streaks, point_average, rasterise_lowest)
from postproc.kernels.underbody import underside_integrals


def quad_plate(x0, x1, y0, y1, nx, ny, z_of_xy):
    """A structured plate of quads with heights z(x, y) at the points."""
    xs, ys = np.linspace(x0, x1, nx + 1), np.linspace(y0, y1, ny + 1)
    X, Y = np.meshgrid(xs, ys, indexing="ij")
    P = np.stack([X.ravel(), Y.ravel(), z_of_xy(X.ravel(), Y.ravel())], axis=1)

    def nid(i, j):
        return i * (ny + 1) + j

    q = np.array([[nid(i, j), nid(i + 1, j), nid(i + 1, j + 1), nid(i, j + 1)] for i in range(nx) for j in range(ny)])
    return P, np.arange(0, 4 * len(q) + 1, 4), q.ravel()


def test_grid_is_aligned_to_multiples_of_the_spacing():
    g = PlanGrid.covering(0.013, 0.207, -0.05, 0.05, 0.01)
    assert (g.i0, g.i1, g.j0, g.j1) == (1, 21, -5, 5)
    assert g.x[0] == pytest.approx(0.015) and g.y[0] == pytest.approx(-0.045)
    with pytest.raises(ValueError):
        PlanGrid.covering(0, 1, 0, 1, 0.0)


def test_tilted_plane_height_and_linear_field_exact():
    # a plane is reproduced exactly by linear interpolation over its triangles
    P, off, conn = quad_plate(0.0, 1.0, -0.2, 0.2, 13, 7, lambda x, y: 0.1 + 0.05 * x - 0.02 * y)
    g = PlanGrid.covering(0.0, 1.0, -0.2, 0.2, 0.02)
    f = 3.0 - 2.0 * P[:, 0] + 5.0 * P[:, 1]
    r = rasterise_lowest(P, off, conn, g, point_values={"f": f})
    X, Y = np.meshgrid(g.x, g.y, indexing="ij")
    assert r.covered.all()
    np.testing.assert_allclose(r.height, 0.1 + 0.05 * X - 0.02 * Y, atol=1e-12)
    np.testing.assert_allclose(r.values["f"], 3.0 - 2.0 * X + 5.0 * Y, atol=1e-12)


def test_lowest_of_two_stacked_surfaces_wins():
    P1, o1, c1 = quad_plate(0, 1, 0, 1, 4, 4, lambda x, y: np.full_like(x, 0.3))
    P2, o2, c2 = quad_plate(0.25, 0.75, 0, 1, 2, 4, lambda x, y: np.full_like(x, 0.1))
    P = np.concatenate([P1, P2])
    off = np.concatenate([o1, o2[1:] + o1[-1]])
    conn = np.concatenate([c1, c2 + len(P1)])
    vals = np.concatenate([np.full(16, 1.0), np.full(8, 2.0)])
    g = PlanGrid.covering(0, 1, 0, 1, 0.05)
    r = rasterise_lowest(P, off, conn, g, {"v": vals})
    inside = (g.x > 0.25) & (g.x < 0.75)
    assert np.all(r.values["v"][inside] == 2.0) and np.all(r.height[inside] == pytest.approx(0.1))
    assert np.all(r.values["v"][~inside & ((g.x < 0.24) | (g.x > 0.76))] == 1.0)


def test_difference_on_the_common_grid_and_integrals():
    P, off, conn = quad_plate(0.0, 1.0, 0.0, 0.5, 10, 5, lambda x, y: np.zeros_like(x))
    Q, offq, connq = quad_plate(0.2, 1.2, 0.0, 0.5, 10, 5, lambda x, y: np.zeros_like(x))
    g1 = PlanGrid.covering(0.0, 1.0, 0.0, 0.5, 0.05)
    g2 = PlanGrid.covering(0.2, 1.2, 0.0, 0.5, 0.05)
    a = rasterise_lowest(P, off, conn, g1, {"cp": np.full(50, -1.0)})
    b = rasterise_lowest(Q, offq, connq, g2, {"cp": np.full(50, -0.25)})
    d = difference(a, b, "cp")
    assert d.grid.shape == (24, 10)
    ok = np.isfinite(d.values["cp"])
    # overlap 0.2 … 1.0 m: 16 columns, everywhere −1 − (−0.25)
    assert ok.sum() == 16 * 10 and np.allclose(d.values["cp"][ok], -0.75)
    # area integrals by the midpoint rule: a constant is exact
    u = underside_integrals(a.values["cp"], a.grid.spacing)
    assert u.plan_area == pytest.approx(0.5) and u.suction_area_integral == pytest.approx(0.5)
    assert u.cp_mean == pytest.approx(-1.0)
    with pytest.raises(ValueError):
        difference(a, rasterise_lowest(P, off, conn, PlanGrid.covering(0, 1, 0, 0.5, 0.04), {"cp": np.zeros(50)}), "cp")


def test_point_average_of_face_values():
    P, off, conn = quad_plate(0, 2, 0, 1, 2, 1, lambda x, y: np.zeros_like(x))
    v = point_average(len(P), off, conn, np.array([1.0, 3.0]))
    # the two middle points share both faces
    assert sorted(v.tolist()) == [1.0, 1.0, 2.0, 2.0, 3.0, 3.0]


def test_streaks_follow_a_uniform_field_and_stop_at_reversal():
    P, off, conn = quad_plate(0.0, 1.0, -0.2, 0.2, 20, 8, lambda x, y: np.zeros_like(x))
    c = P[conn.reshape(-1, 4)].mean(axis=1)
    tau = np.column_stack([np.ones(len(c)), np.zeros(len(c)), np.zeros(len(c))])
    g = PlanGrid.covering(0.0, 1.0, -0.2, 0.2, 0.01)
    r = rasterise_lowest(P, off, conn, g, {"shear": tau})
    lines = plan_streaks(r, "shear", spacing_cells=8)
    assert len(lines) >= 4
    for q in lines:  # straight along x at constant y, over the whole plate
        assert np.ptp(q[:, 1]) < 1e-12 and np.ptp(q[:, 0]) > 0.9
    # reversed shear behind x = 0.6: lines from the front stop at the reversal line
    tau2 = tau.copy()
    tau2[c[:, 0] > 0.6, 0] = -1.0
    r2 = rasterise_lowest(P, off, conn, g, {"shear": tau2})
    front = [q for q in plan_streaks(r2, "shear", spacing_cells=8, rakes=(0.02,))]
    assert front and all(q[:, 0].max() <= 0.6 + 0.011 for q in front)
