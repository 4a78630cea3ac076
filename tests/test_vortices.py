"""Vortex cores, tracks and 3D regions against analytic vortices; the
`postproc vortices` command and its user errors; input immutability of all
flow kernels."""
from __future__ import annotations

import json
import warnings

import numpy as np
import pytest
from click.testing import CliRunner
from scipy.optimize import brentq

from postproc.kernels import diffuser as dif
from postproc.io import flow as flowio
from postproc.pipelines import case_flow as flowreport
from postproc.kernels import gradients as G
from postproc.kernels import meshtopo
from postproc.kernels import underbody as ub
from postproc.kernels import vortices as vx
from postproc.kernels import wallchecks as wc
from postproc.cli import main

from flow_meshes import box_grid, lamb_oseen

warnings.filterwarnings("ignore", category=DeprecationWarning)

GAMMA, RC = 1.0, 0.2
H = 2.0 / 40  # cell size of the meshes below (m)


def q_zero_radius_ratio() -> float:
    """Lamb–Oseen (Lamb 1932, Hydrodynamics §334a; Oseen 1912): Q = (u_θ/r)
    du_θ/dr vanishes where du_θ/dr = 0. With η = r²/rc² and
    u_θ ∝ (1 − e^{−η})/r this is (1 + 2η) e^{−η} = 1; solve numerically."""
    eta = brentq(lambda e: (1 + 2 * e) * np.exp(-e) - 1, 0.1, 5.0)
    return float(np.sqrt(eta))


@pytest.fixture(scope="module")
def single():
    g = box_grid(12, 40, 40, (0, 1, -1, 1, -1, 1), kind="mixed", perturb=0.3, seed=2)
    X = flowio.cell_centres(g)
    g.cell_data["U"] = lamb_oseen(X, -GAMMA, RC, axial=1.0, axial_deficit=0.3).astype(np.float32)
    return flowio.flow_case_from_grid(g)


def test_q_zero_radius_is_1_121_rc():
    # Lamb 1932 / Oseen 1912: radius of peak swirl (and Q = 0) ≈ 1.1209 rc (from memory, solved here)
    assert q_zero_radius_ratio() == pytest.approx(1.1209, abs=1e-4)


def test_lamb_oseen_core(single):
    res = flowreport.analyse_vortices(single, stations=[0.25, 0.5, 0.75], q_star=0.0, speed=1.0, length=1.0)
    r0 = q_zero_radius_ratio() * RC
    for cores in res.cores:
        assert len(cores) == 1
        c = cores[0]
        # centre within one cell of the axis (y = z = 0)
        assert np.hypot(c.centre[1], c.centre[2]) < H
        # sense: Γ < 0 about +x → −1
        assert c.sense == -1
        # Lamb 1932: circulation inside r0 is Γ(1 − e^{−(r0/rc)²}); the region's
        # edge is resolved to about half a cell, giving a few % (measured ~1.5 %)
        assert abs(c.circulation) == pytest.approx(GAMMA * (1 - np.exp(-(r0 / RC) ** 2)), rel=0.05)
        # equivalent radius of the Q > 0 region vs r0 = 1.121 rc, within half a cell
        assert c.radius == pytest.approx(r0, abs=0.5 * H)
        # peak Q at the axis: Q(0) = (Γ/(2π rc²))² (solid-body core); cell
        # averaging over h = rc/4 lowers it by ~10 %
        assert c.peak_q == pytest.approx((GAMMA / (2 * np.pi * RC**2)) ** 2, rel=0.15)
        # axial deficit 0.3 U∞ on the axis (prescribed); nearest cell within h of it
        assert c.axial_excess == pytest.approx(-0.3, abs=0.02)
    assert len(res.tracks) == 1 and res.tracks[0].end == "last-station"
    # 3D region: one tube of cross-section ≈ π r0² along the 1 m domain; its
    # equivalent radius √(V/(π L)) within half a cell of r0 (whole cells counted)
    assert len(res.regions) == 1
    assert np.sqrt(res.regions[0].volume / np.pi) == pytest.approx(r0, abs=0.5 * H)
    assert res.regions[0].sense == -1


@pytest.mark.parametrize("co_rotating", [False, True])
def test_vortex_pair_tracks_follow_drift(co_rotating):
    # Two Lamb–Oseen vortices (Lamb 1932) whose centres drift linearly with x:
    # y = ±(0.4 + 0.2 x), z = 0.1 x (prescribed). Tracks must follow within a cell.
    g = box_grid(10, 50, 40, (0, 1, -1.25, 1.25, -1, 1), kind="tet", perturb=0.2, seed=4)
    X = flowio.cell_centres(g)
    U = np.zeros((len(X), 3))
    yc = 0.4 + 0.2 * X[:, 0]
    zc = 0.1 * X[:, 0]
    for side, gam in ((1, GAMMA), (-1, GAMMA if co_rotating else -GAMMA)):
        pts = X.copy()
        pts[:, 1] -= side * yc
        pts[:, 2] -= zc
        U += lamb_oseen(pts, gam, RC)
    U[:, 0] += 1.0
    g.cell_data["U"] = U
    case = flowio.flow_case_from_grid(g)
    xs = np.linspace(0.1, 0.9, 5)
    # threshold Q* = 1 (V = L = 1), well below Q(0) ≈ 16 1/s²
    res = flowreport.analyse_vortices(case, stations=xs, q_star=1.0, speed=1.0, length=1.0, regions=False)
    assert len(res.tracks) == 2
    for t in res.tracks:
        assert len(t.members) == 5
        side = np.sign(t.centres[0, 1])
        expect_y = side * (0.4 + 0.2 * xs)
        np.testing.assert_allclose(t.centres[:, 1], expect_y, atol=H)
        np.testing.assert_allclose(t.centres[:, 2], 0.1 * xs, atol=H)
        expect_sense = 1 if (side > 0 or co_rotating) else -1
        assert t.sense == expect_sense


def _core(x, y, sense=1):
    return vx.VortexCore(station=x, centre=(x, y, 0.0), sense=sense, circulation=float(sense), radius=0.1,
                         area=0.03, peak_q=1.0, peak_q_at=(x, y, 0.0), axial_velocity=None, axial_excess=None, n_cells=5)


def test_track_linking_merge_and_birth():
    # common practice, no source: two tracks converging into one core → one 'merged' end
    cores = [[_core(0.0, -0.2), _core(0.0, 0.2)], [_core(0.1, -0.05), _core(0.1, 0.06)], [_core(0.2, 0.0)],
             [_core(0.3, 0.0), _core(0.3, 0.9)]]
    tr = vx.link_tracks(cores, max_jump=0.2)
    ends = sorted(t.end for t in tr)
    assert ends == ["last-station", "last-station", "merged"]
    born = [t for t in tr if t.birth_x == pytest.approx(0.3)]
    assert len(born) == 1 and born[0].centres[0, 1] == pytest.approx(0.9)


# ---------------------------------------------------------------------------
# command line
# ---------------------------------------------------------------------------

@pytest.fixture(scope="module")
def vtu(tmp_path_factory, single):
    d = tmp_path_factory.mktemp("vx")
    p = d / "internal.vtu"
    single.grid.save(str(p))
    return p


def test_cli_vortices_json(vtu):
    r = CliRunner().invoke(main, ["vortices", str(vtu), "--stations", "0.3,0.6", "--threshold", "0",
                                  "--speed", "1", "--length", "1", "--json"])
    assert r.exit_code == 0, r.output
    d = json.loads(r.output)
    assert [s["x"] for s in d["stations"]] == [0.3, 0.6]
    c = d["stations"][0]["cores"][0]
    assert set(["centre", "sense", "circulation", "radius", "peak_q"]) <= set(c)
    assert c["sense"] == -1 and len(c["centre"]) == 3


def _assert_user_error(r, *words):
    assert r.exit_code == 2, r.output
    assert "Traceback" not in r.output and r.exception is None or isinstance(r.exception, SystemExit)
    for w in words:
        assert w in r.output


def test_cli_errors(tmp_path, vtu, single):
    run = CliRunner().invoke
    # no velocity array: the message lists what exists
    r = run(main, ["vortices", str(vtu), "--velocity", "Umean", "--speed", "1", "--length", "1"])
    _assert_user_error(r, "Umean", "U")
    # stations outside the domain
    r = run(main, ["vortices", str(vtu), "--stations", "-3,0.5", "--speed", "1", "--length", "1"])
    _assert_user_error(r, "inside the domain")
    # surface data where a volume is needed
    surf = tmp_path / "floor.vtp"
    single.grid.extract_surface(algorithm='dataset_surface').save(str(surf))
    r = run(main, ["vortices", str(surf), "--speed", "1", "--length", "1"])
    _assert_user_error(r, "volume")
    # 2D cells in a .vtu
    flat = tmp_path / "flat.vtu"
    single.grid.extract_surface(algorithm='dataset_surface').cast_to_unstructured_grid().save(str(flat))
    r = run(main, ["vortices", str(flat), "--speed", "1", "--length", "1"])
    _assert_user_error(r, "2D/surface")
    # NaN in the field
    g = single.grid.copy()
    u = np.asarray(g.cell_data["U"]).copy()
    u[5] = np.nan
    g.cell_data["U"] = u
    bad = tmp_path / "nan.vtu"
    g.save(str(bad))
    r = run(main, ["vortices", str(bad), "--speed", "1", "--length", "1"])
    _assert_user_error(r, "NaN")
    # no reference values without a manifest
    r = run(main, ["vortices", str(vtu)])
    _assert_user_error(r, "--speed")
    # malformed station list
    r = run(main, ["vortices", str(vtu), "--stations", "a,b", "--speed", "1", "--length", "1"])
    _assert_user_error(r, "--stations")


# ---------------------------------------------------------------------------
# no kernel modifies its inputs
# ---------------------------------------------------------------------------

def test_kernels_do_not_modify_inputs():
    g = box_grid(4, 4, 4, kind="mixed", perturb=0.2, seed=1)
    topo = flowio.topology(g)
    before_topo = [a.copy() for a in (topo.celltypes, topo.offsets, topo.connectivity)]
    A, nb = meshtopo.cell_adjacency(topo)
    X = flowio.cell_centres(g)
    Xc, Ac = X.copy(), A.copy()
    op = G.lsq_gradient_operator(X, A)
    U = lamb_oseen(X, 1.0, 0.3, axial=1.0).astype(np.float32)
    Uc = U.copy()
    f = G.velocity_gradient_fields(op, U)
    J = op.gradient(U)
    Jc = J.copy()
    G.q_criterion(J), G.lambda2(J), G.vorticity(J)
    for a, b in zip(before_topo, (topo.celltypes, topo.offsets, topo.connectivity)):
        np.testing.assert_array_equal(a, b)
    np.testing.assert_array_equal(X, Xc)
    assert (A != Ac).nnz == 0
    np.testing.assert_array_equal(U, Uc)
    np.testing.assert_array_equal(J, Jc)
    # sections, cores, regions
    secs = flowio.slice_stations(g, [0.5], {"Q": f.q, "vorticity": f.vorticity, "U": U})
    s = secs[0]
    snap = {k: v.copy() for k, v in s.data.items()}
    pts = s.points.copy()
    vx.find_cores(s, 0.0, free_stream=np.array([1.0, 0, 0]))
    for k in snap:
        np.testing.assert_array_equal(snap[k], s.data[k])
    np.testing.assert_array_equal(pts, s.points)
    q = f.q.copy()
    vx.q_regions(A, f.q, 0.0, X, np.ones(len(X)), f.vorticity)
    np.testing.assert_array_equal(q, f.q)
    # diffuser, underbody, wallchecks
    areas, p, u = np.ones(5), np.arange(5.0), np.tile([1.0, 0, 0], (5, 1))
    ac, pc, uc = areas.copy(), p.copy(), u.copy()
    dif.station_average(0.0, areas, p, u, 1.2)
    segs = np.array([[[0, 0, 0.1], [0.1, 0, 0.1]], [[0.1, 0, 0.1], [0.2, 0, 0.12]]], float)
    sc = segs.copy()
    dif.floor_heights(segs, np.array([0.0]), np.zeros(3), np.array([0, 0, 1.0]))
    ub.underside_line(0.0, segs, p[:2], np.zeros(3), np.array([0, 0, 1.0]))
    ub.pressure_coefficient(p, 10.0)
    tau = np.tile([0.5, 0.1, 0.0], (5, 1))
    tc = tau.copy()
    wc.yplus(tau, areas, 1.5e-5)
    wc.yplus_stats("w", p, areas, (30, 300))
    wc.shear_reversals(p, p - 2, 1)
    wc.field_flags("p", p, np.zeros((5, 3)), lower=1.0)
    for a, b in ((areas, ac), (p, pc), (u, uc), (segs, sc), (tau, tc)):
        np.testing.assert_array_equal(a, b)


def test_wall_shear_cells_are_not_core_cells():
    # Kinematic vorticity number ‖Ω‖/‖S‖ (Truesdell 1953): simple shear
    # u = (γ z, 0, 0) has ‖Ω‖ = ‖S‖ (Q = 0; a few per cent of discretisation
    # error can make it positive), solid-body rotation has S = 0 (analytic).
    g = 100.0
    J_shear = np.array([[0, 0, g], [0, 0, 0], [0, 0, 0]], float) * 1.02  # slightly rotation-heavy shear
    J_shear[2, 0] = -0.02 * g  # small extra rotation: Q > 0 but ‖Ω‖ ≈ 1.02‖S‖
    om = 50.0
    J_rot = np.array([[0, 0, 0], [0, 0, -om], [0, om, 0]], float)
    J = np.stack([J_shear, J_rot, J_shear])
    q = G.q_criterion(J)
    w = G.vorticity(J)
    assert q[0] > 0 and q[1] == pytest.approx(om**2)
    at_wall = np.array([True, True, False])
    mask = vx.wall_shear_cells(q, w, at_wall, 1.5)
    assert mask.tolist() == [True, False, False]  # the wall shear cell only; rotation and off-wall cells stay
