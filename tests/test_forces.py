"""Force integration kernel against analytic flows (sources beside each check)."""
from __future__ import annotations

import numpy as np
import pytest

from _surfaces import icosphere, plate
from caseprep.contract.errors import UserError
from postproc.kernels.forces import ForceSettings, integrate_forces
from postproc.kernels.polygons import closure, face_geometry

MU, U, A_S = 1.8e-5, 0.01, 0.5   # our invented Stokes set-up: μ Pa·s, U m/s, radius m


def stokes_face_data(X, F):
    """Exact creeping-flow surface data on a sphere (Stokes 1851; Batchelor,
    An Introduction to Fluid Dynamics, §4.9): p − p∞ = −(3μU/2a) n_x and the
    traction on the wall t = (3μU/2a)(x̂ − n_x n̂) beside the pressure, at the
    face centroids' radial directions. Returns static p (Pa) and τ on the wall."""
    S, C = face_geometry(X, F)
    n = C / np.linalg.norm(C, axis=1)[:, None]
    k = 1.5 * MU * U / A_S
    p = -k * n[:, 0]
    tau = k * (np.array([1.0, 0, 0]) - n[:, [0]] * n)
    return p, tau


def test_stokes_sphere_drag_split_and_second_order():
    errs = []
    for nsub in (2, 3, 4):
        X, F = icosphere(A_S, nsub)
        p, tau = stokes_face_data(X, F)
        r = integrate_forces(X, F, p, tau, ForceSettings(kinematic=False, normals="out_of_body", shear_on="wall"))
        d = 6 * np.pi * MU * U * A_S  # Stokes 1851: drag = 6πμUa
        errs.append(abs(r.force[0] - d) / d)
        # Batchelor §4.9: one third from pressure, two thirds from shear (discretisation error O(h²), < 1 % here)
        assert r.force_pressure[0] / r.force[0] == pytest.approx(1 / 3, rel=2e-2)
        assert r.force_viscous[0] / r.force[0] == pytest.approx(2 / 3, rel=2e-2)
        assert np.abs(r.force[1:]).max() < 1e-12 * d  # symmetry of the icosphere
        assert np.abs(r.moment).max() < 1e-12 * d * A_S
    orders = np.log2(np.array(errs[:-1]) / np.array(errs[1:]))
    # second order: h halves per subdivision, the faceted area error is O(h²)
    assert errs[-1] < 2e-3
    assert orders.min() > 1.9 and orders.max() < 2.1, orders


@pytest.mark.parametrize("p0", [0.0, 101325.0, -5e4])
@pytest.mark.parametrize("p_ref", [0.0, 101325.0, 7.0])
def test_archimedes_hydrostatic_sphere_static_and_kinematic(p0, p_ref):
    rho, g = 998.0, 9.81
    X, F = icosphere(0.3, 3, center=(1.0, -2.0, -0.7))
    S, C = face_geometry(X, F)
    vol = np.einsum("ij,ij->", C, S) / 3.0  # the polyhedron's volume (divergence theorem)
    p = p0 - rho * g * C[:, 2]
    r = integrate_forces(X, F, p, None, ForceSettings(kinematic=False, p_ref=p_ref, normals="out_of_body"))
    # Archimedes: buoyancy = ρ g V upward; exact for a linear field on planar faces (midpoint rule) → round-off
    np.testing.assert_allclose(r.force, [0, 0, rho * g * vol], atol=1e-9 * rho * g * vol * (1 + abs(p0 - p_ref) / (rho * g)))
    assert vol == pytest.approx(4 / 3 * np.pi * 0.3**3, rel=2e-2)  # faceted volume, O(h²)
    rk = integrate_forces(X, F, p / rho, None, ForceSettings(rho=rho, kinematic=True, p_ref=p_ref, normals="out_of_body"))
    np.testing.assert_allclose(rk.force, r.force, rtol=1e-12, atol=1e-9 * rho * g * vol * (1 + abs(p0 - p_ref) / (rho * g)))
    # buoyancy acts through the centre of buoyancy: zero moment about the sphere centre
    assert np.abs(r.moment_about((1.0, -2.0, -0.7))).max() < 1e-9 * rho * g * vol * (1 + abs(p0) / (rho * g))


def test_potential_flow_sphere_dalembert():
    # Potential flow past a sphere: Cp = 1 − 9/4 sin²θ (Batchelor §6.8; Anderson, Fundamentals of
    # Aerodynamics) → zero force and moment (d'Alembert's paradox).
    rng = np.random.default_rng(1)
    Q, _ = np.linalg.qr(rng.normal(size=(3, 3)))
    X, F = icosphere(1.2, 3)
    X = X @ Q.T  # any orientation: the icosphere is centrally symmetric, so is the load
    S, C = face_geometry(X, F)
    w = np.array([1.0, 0.3, -0.2]) / np.linalg.norm([1.0, 0.3, -0.2])
    cos = C @ w / np.linalg.norm(C, axis=1)
    q = 0.5 * 1.2 * 30.0**2
    p = q * (1 - 2.25 * (1 - cos**2))
    r = integrate_forces(X, F, p, None, ForceSettings(kinematic=False, normals="out_of_body"))
    scale = q * 4 * np.pi * 1.2**2
    assert np.abs(r.force).max() < 1e-12 * scale  # round-off
    assert np.abs(r.moment).max() < 1e-12 * scale * 1.2


def test_blasius_flat_plate_skin_friction():
    # Blasius 1908; Schlichting, Boundary-Layer Theory: τ_w = 0.332 ρU²/√Re_x → C_f = 1.328/√Re_L
    rho, Uinf, nu, L, b = 1.2, 20.0, 1.5e-5, 0.8, 0.3
    ReL = Uinf * L / nu
    cf_exact = 1.328 / np.sqrt(ReL)
    q = 0.5 * rho * Uinf**2
    # (a) exact face averages: ∫τ dx over [x0, x1] = 0.664 ρU² √(ν/U) (√x1 − √x0) → exact to round-off
    xs = np.linspace(0.0, L, 41)
    P, Q = plate(xs, np.linspace(0, b, 4))
    S, C = face_geometry(P, Q)
    x0 = P[Q[:, 0], 0]
    x1 = P[Q[:, 1], 0]
    tau_avg = 0.664 * rho * Uinf**2 * np.sqrt(nu / Uinf) * (np.sqrt(x1) - np.sqrt(x0)) / (x1 - x0)
    shear = np.column_stack([tau_avg, 0 * tau_avg, 0 * tau_avg])
    r = integrate_forces(P, Q, np.zeros(len(Q)), shear, ForceSettings(kinematic=False, shear_on="wall", normals="into_body"))
    assert r.force[0] / (q * b * L) == pytest.approx(cf_exact, rel=1e-12)
    # (b) centroid values on a mesh graded towards the 1/√x leading-edge singularity (x = L s⁴):
    # on a uniform mesh the first face alone misses (2 − √2)√h₁ of the exact 2√L (first-order-like
    # error); graded, 160 faces give 2e-4 (measured, the 1-D midpoint sum of x^-1/2): tolerance 5e-4
    xs = L * np.linspace(0, 1, 161) ** 4
    P, Q = plate(xs, np.linspace(0, b, 3))
    S, C = face_geometry(P, Q)
    tau = 0.332 * rho * Uinf**2 / np.sqrt(Uinf * C[:, 0] / nu)
    r = integrate_forces(P, Q, np.zeros(len(Q)), np.column_stack([-tau / rho, 0 * tau, 0 * tau]), ForceSettings(rho=rho, kinematic=True, shear_on="fluid"))
    assert r.force[0] / (q * b * L) == pytest.approx(cf_exact, rel=5e-4)
    assert r.force_pressure == pytest.approx([0, 0, 0])


def test_closed_body_independent_of_p_ref_open_patch_not():
    X, F = icosphere(0.4, 2)
    rng = np.random.default_rng(3)
    p = rng.normal(size=len(F))
    a = integrate_forces(X, F, p, None, ForceSettings(kinematic=False, normals="out_of_body", p_ref=0.0))
    b = integrate_forces(X, F, p, None, ForceSettings(kinematic=False, normals="out_of_body", p_ref=1e5))
    np.testing.assert_allclose(b.force, a.force, atol=1e-9 * 1e5)   # Gauss: ∮ n dS = 0
    np.testing.assert_allclose(b.moment, a.moment, atol=1e-9 * 1e5)  # ∮ r × n dS = 0
    # open patch: the force changes by −p_ref Σ S_into (exactly)
    P, Q = plate(np.linspace(0, 1, 5), np.linspace(0, 1, 5))
    S, _ = face_geometry(P, Q)
    assert closure(S) == pytest.approx(1.0)
    p = rng.normal(size=len(Q))
    a = integrate_forces(P, Q, p, None, ForceSettings(kinematic=False, p_ref=0.0))
    b = integrate_forces(P, Q, p, None, ForceSettings(kinematic=False, p_ref=250.0))
    np.testing.assert_allclose(b.force - a.force, -250.0 * S.sum(axis=0), rtol=1e-12)


def test_conventions_normals_shear_kinematic():
    X, F = icosphere(1.0, 2)
    rng = np.random.default_rng(4)
    p, tau = rng.normal(size=len(F)), rng.normal(size=(len(F), 3))
    rho = 1.225
    ref = integrate_forces(X, F, p, tau, ForceSettings(rho=rho, kinematic=True, normals="out_of_body", shear_on="fluid"))
    # reversed vertex order = normals into the body
    r2 = integrate_forces(X, F[:, ::-1], p, tau, ForceSettings(rho=rho, kinematic=True, normals="into_body", shear_on="fluid"))
    # shear on the wall = − shear on the fluid
    r3 = integrate_forces(X, F, p, -tau, ForceSettings(rho=rho, kinematic=True, normals="out_of_body", shear_on="wall"))
    # static = ρ × kinematic
    r4 = integrate_forces(X, F, rho * p, rho * tau, ForceSettings(kinematic=False, normals="out_of_body", shear_on="fluid"))
    for r in (r2, r3, r4):
        np.testing.assert_allclose(r.force, ref.force, rtol=1e-12, atol=1e-12)
        np.testing.assert_allclose(r.moment, ref.moment, rtol=1e-12, atol=1e-12)
    # signs: a positive pressure on a closed body pushes along −n_out; the solver's
    # shear on the fluid opposes the force on the body
    S, _ = face_geometry(X, F)
    one = np.zeros(len(F))
    one[0] = 1.0
    r = integrate_forces(X, F, one, None, ForceSettings(kinematic=False, normals="out_of_body"))
    np.testing.assert_allclose(r.force, -S[0], rtol=1e-12)
    t = np.zeros((len(F), 3))
    t[0] = [1, 0, 0]
    r = integrate_forces(X, F, 0 * one, t, ForceSettings(kinematic=False, normals="out_of_body", shear_on="fluid"))
    assert r.force_viscous[0] == pytest.approx(-np.linalg.norm(S[0]))


def test_parts_sum_to_total_and_mixed_polygons_match():
    X, F = icosphere(1.0, 2)
    rng = np.random.default_rng(5)
    p, tau = rng.normal(size=len(F)), rng.normal(size=(len(F), 3))
    ids = (np.arange(len(F)) % 3)
    r = integrate_forces(X, F, p, tau, ForceSettings(rho=1.2, about=(0.1, 0, 0)), part_ids=ids, part_names=["a", "b", "c"])
    assert set(r.parts) == {"a", "b", "c"}
    np.testing.assert_allclose(sum(v.force for v in r.parts.values()), r.force, atol=1e-13)
    np.testing.assert_allclose(sum(v.moment for v in r.parts.values()), r.moment, atol=1e-13)
    assert sum(v.area for v in r.parts.values()) == pytest.approx(r.area)
    # the same faces given as (offsets, connectivity) with mixed sizes: a plate of quads and triangles
    P, Q = plate(np.linspace(0, 1, 4), np.linspace(0, 2, 3))
    tri = np.vstack([Q[:2, [0, 1, 2]], Q[:2, [0, 2, 3]]])
    mixed = [list(f) for f in Q[2:]] + [list(f) for f in tri]
    off = np.concatenate([[0], np.cumsum([len(f) for f in mixed])])
    conn = np.concatenate(mixed)
    S1, C1 = face_geometry(P, (off, conn))
    S2, C2 = face_geometry(P, Q)
    np.testing.assert_allclose(S1.sum(0), S2.sum(0), rtol=1e-14)
    np.testing.assert_allclose((S1[:, 2:3] * C1).sum(0), (S2[:, 2:3] * C2).sum(0), rtol=1e-14)  # first moment of area


def test_moment_about_and_shift_consistent():
    X, F = icosphere(1.0, 1)
    rng = np.random.default_rng(6)
    p, tau = rng.normal(size=len(F)), rng.normal(size=(len(F), 3))
    a = integrate_forces(X, F, p, tau, ForceSettings(about=(0, 0, 0)))
    b = integrate_forces(X, F, p, tau, ForceSettings(about=(1, 2, 3)))
    np.testing.assert_allclose(a.moment_about((1, 2, 3)), b.moment, atol=1e-12)
    np.testing.assert_allclose(a.shifted((1, 2, 3)).moment_viscous, b.moment_viscous, atol=1e-12)


def test_rigid_motion_invariance():
    X, F = icosphere(0.7, 2)
    rng = np.random.default_rng(7)
    p, tau = rng.normal(size=len(F)), rng.normal(size=(len(F), 3))
    ref = integrate_forces(X, F, p, tau, ForceSettings(about=(0.1, 0.2, 0.3)))
    for _ in range(5):
        Q, _ = np.linalg.qr(rng.normal(size=(3, 3)))
        t = rng.normal(size=3) * 10
        r = integrate_forces(X @ Q.T + t, F, p, tau @ Q.T, ForceSettings(about=Q @ [0.1, 0.2, 0.3] + t))
        np.testing.assert_allclose(r.force, Q @ ref.force, atol=1e-11)
        np.testing.assert_allclose(r.moment, Q @ ref.moment, atol=1e-10)
        assert np.linalg.norm(r.force) == pytest.approx(np.linalg.norm(ref.force), rel=1e-12)
        assert r.area == pytest.approx(ref.area, rel=1e-12)


def test_float32_inputs_accumulate_in_float64():
    X, F = icosphere(1.0, 3)
    p = np.ones(len(F), dtype=np.float32) * np.float32(1e5)
    r = integrate_forces(X.astype(np.float32), F, p, None, ForceSettings(kinematic=False, normals="out_of_body"))
    assert r.force.dtype == np.float64
    S, _ = face_geometry(X.astype(np.float32), F)
    # float64 sums of float32-exact values: the closed surface's Σ S vanishes to float64 round-off
    assert np.abs(r.force).max() < 1e-9 * 1e5 * np.linalg.norm(S, axis=1).sum()


def test_inputs_never_modified():
    X, F = icosphere(1.0, 2)
    rng = np.random.default_rng(8)
    p = rng.normal(size=len(F)).astype(np.float32)
    tau = rng.normal(size=(len(F), 3)).astype(np.float32)
    p[3] = np.nan
    ids = np.arange(len(F)) % 2
    copies = [a.copy() for a in (X, F, p, tau, ids)]
    integrate_forces(X, F, p, tau, ForceSettings(rho=1.2, p_ref=3.0, allow_nonfinite=True), part_ids=ids)
    S, C = face_geometry(X, F)
    s2, c2 = S.copy(), C.copy()
    integrate_forces(area_vectors=S, centroids=C, pressure=p, shear=tau, settings=ForceSettings(allow_nonfinite=True, kinematic=False))
    for a, b in zip((X, F, p, tau, ids, S, C), copies + [s2, c2]):
        np.testing.assert_array_equal(a, b)


def test_bad_input_errors():
    X, F = icosphere(1.0, 1)
    p = np.zeros(len(F))
    p[5] = np.inf
    with pytest.raises(UserError, match=r"1 non-finite.*face 5"):
        integrate_forces(X, F, p, None)
    r = integrate_forces(X, F, p, None, ForceSettings(allow_nonfinite=True))
    assert np.isfinite(r.force).all()
    X2 = X.copy()
    F2 = F.copy()
    F2[0] = [F2[0, 0], F2[0, 0], F2[0, 1]]  # collapsed triangle
    with pytest.raises(UserError, match="zero-area"):
        integrate_forces(X2, F2, np.zeros(len(F)), None)
    with pytest.raises(UserError, match="one pressure value per face"):
        integrate_forces(X, F, np.zeros(len(X)), None)
    with pytest.raises(UserError, match="normals"):
        integrate_forces(X, F, np.zeros(len(F)), None, ForceSettings(normals="outward"))
