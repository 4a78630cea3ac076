"""Coefficients, axes, axle loads, balance and centres of pressure."""
from __future__ import annotations

import numpy as np
import pytest

from _surfaces import plate
from caseprep.contract import frames as fr
from caseprep.contract.errors import UserError
from caseprep.contract.frames import axes_rotations, axle_axes
from postproc.kernels.coefficients import ReferenceValues, balance, coefficients
from postproc.kernels.forces import ForceResult, ForceSettings, integrate_forces


def point_load(F, at, about=(0.0, 0.0, 0.0)) -> ForceResult:
    """A single force F (N) acting at the point ``at`` (m), as a ForceResult."""
    F = np.asarray(F, float)
    a = np.asarray(about, float)
    M = np.cross(np.asarray(at, float) - a, F)
    z = np.zeros(3)
    return ForceResult(force=F, force_pressure=F, force_viscous=z, moment=M, moment_pressure=M, moment_viscous=z,
                       area=1.0, about=a, n_faces=1)


def car_ref(**kw) -> ReferenceValues:
    base = dict(area=1.2, length=2.5, rho=1.2, speed=40.0, moment_point=(1.25, 0.0, 0.0), wheelbase=2.5,
                front_axle=(0.0, 0.0, 0.3), rear_axle=(2.5, 0.0, 0.3), cog=(1.1, 0.0, 0.35))
    base.update(kw)
    return ReferenceValues(**base)


@pytest.mark.parametrize("seed", range(12))
def test_coefficients_match_hand_rotation(seed):
    rng = np.random.default_rng(seed)
    theta = np.radians(rng.uniform(-3, 3))
    beta = np.radians(rng.uniform(-15, 15))
    mode = fr.YAW_MODES[seed % 2]
    dx = 2.5
    P = fr.place_body([0, 0, 0], [dx, 0, 0], 0.05, 0.05 - dx * np.sin(theta), beta, mode)
    w_body = P.vector_to_body(fr.wind_direction_ground(beta, mode))
    F = rng.normal(size=3) * 100
    ref = car_ref()
    r = point_load(F, rng.normal(size=3), about=ref.moment_point)
    c = coefficients(r, ref, axes_rotations(P, w_body))
    qA = ref.q * ref.area
    # hand rotation: R = R_z(ψ) R_y(θ) with ψ = −β (yawed model) or 0 (crosswind), written out
    psi = -beta if mode == "yawed-model" else 0.0
    ct, st, cp, sp = np.cos(P.pitch), np.sin(P.pitch), np.cos(psi), np.sin(psi)
    Ry = np.array([[ct, 0, st], [0, 1, 0], [-st, 0, ct]])
    Rz = np.array([[cp, -sp, 0], [sp, cp, 0], [0, 0, 1]])
    FG = Rz @ Ry @ F
    np.testing.assert_allclose(c.by_axes["ground"].c_force, FG / qA, atol=1e-12)
    wg = np.array([np.cos(beta), np.sin(beta), 0.0]) if mode == "crosswind" else np.array([1.0, 0, 0])
    side_dir = np.array([-wg[1], wg[0], 0.0])
    assert c.drag == pytest.approx(FG @ wg / qA, abs=1e-12)
    assert c.side == pytest.approx(FG @ side_dir / qA, abs=1e-12)
    assert c.lift == pytest.approx(FG[2] / qA, abs=1e-12)
    assert c.downforce == -c.lift
    np.testing.assert_allclose(c.by_axes["body"].c_force, F / qA, atol=1e-12)
    M = r.moment
    MG = Rz @ Ry @ M
    assert c.pitching == pytest.approx(MG @ side_dir / (qA * ref.length), abs=1e-12)
    assert c.yawing == pytest.approx(MG[2] / (qA * ref.length), abs=1e-12)
    # magnitudes agree in every axes set
    for a in ("wind", "ground"):
        assert np.linalg.norm(c.by_axes[a].force) == pytest.approx(np.linalg.norm(F))


def test_positive_yaw_gives_positive_side_force_in_wind_axes():
    # a symmetric plate along x seen by air arriving at +β pushes to +y (frames.py convention)
    beta = np.radians(5)
    R = axes_rotations(None, [np.cos(beta), np.sin(beta), 0])["wind"]
    assert (R @ [0, 1.0, 0])[1] > 0
    assert (R @ [np.cos(beta), np.sin(beta), 0]) == pytest.approx([1, 0, 0])


def test_axle_loads_point_load_statics():
    # statics of a beam on two supports (common practice, no source): a load W at a from the front
    # axle of a wheelbase ℓ puts W(ℓ−a)/ℓ on the front and W a/ℓ on the rear
    ref = car_ref()
    W, a, l = 1000.0, 0.8, 2.5
    r = point_load([0, 0, -W], [a, 0, 0.2], about=(0.3, 0.1, -0.2))
    b = balance(r, ref)
    assert -b.lift_front == pytest.approx(W * (l - a) / l, rel=1e-12)
    assert -b.lift_rear == pytest.approx(W * a / l, rel=1e-12)
    assert b.balance_front == pytest.approx((l - a) / l, rel=1e-12)
    assert b.cp_x == pytest.approx(a, rel=1e-12)
    assert b.cp_fraction == pytest.approx(a / l)
    assert b.balance_front == pytest.approx(1 - b.cp_fraction)
    np.testing.assert_allclose(b.cp_ground_point, [a, 0, 0], atol=1e-12)  # line of action meets z = 0
    qA = ref.q * ref.area
    assert b.c_lift_front == pytest.approx(b.c_lift / 2 + b.c_pitch_ground_mid)
    assert b.c_lift_rear == pytest.approx(b.c_lift / 2 - b.c_pitch_ground_mid)
    assert b.c_lift == pytest.approx(-W / qA)


def test_drag_above_ground_unloads_front_axle():
    # statics: a drag D (rearward, +x) acting at height h above the ground is reacted at the tyres,
    # the couple D h lifts the front by D h/ℓ and loads the rear by as much (common practice, no source)
    ref = car_ref()
    D, h = 300.0, 0.4
    b = balance(point_load([D, 0, 0], [1.0, 0, h]), ref)
    assert b.lift_front == pytest.approx(D * h / 2.5)
    assert b.lift_rear == pytest.approx(-D * h / 2.5)
    assert b.balance_front is None and b.cp_x is None  # no net lift: undefined, no division
    assert any("undefined" in n for n in b.notes)


def test_balance_undefined_for_pure_pitching_moment():
    ref = car_ref()
    r = point_load([0, 0, 0], [0, 0, 0])
    r = ForceResult(force=r.force, force_pressure=r.force, force_viscous=r.force, moment=np.array([0, 50.0, 0]),
                    moment_pressure=np.zeros(3), moment_viscous=np.zeros(3), area=1, about=np.zeros(3), n_faces=1)
    b = balance(r, ref)
    assert b.balance_front is None and b.side_cp_x is None
    assert b.lift_front == pytest.approx(20.0) and b.lift_rear == pytest.approx(-20.0)


def test_side_force_centre_of_pressure_and_stability_margin():
    # a side force Y at x_s behind the front axle: yawing moment about the front axle N = x_s Y
    # (x rearward, right-hand rule about +z) so x_cp = +N/Y (derivation in balance's docstring)
    ref = car_ref()
    for Y, xs in ((200.0, 1.7), (-150.0, 0.6)):
        b = balance(point_load([0, Y, -500.0], [xs, 0, 0.5]), ref)
        assert b.side_cp_x == pytest.approx(xs, rel=1e-12)
        assert b.side_cp_behind_cog == pytest.approx(xs - 1.1)
        assert b.stability_margin == pytest.approx((xs - 1.1) / 2.5)
    assert balance(point_load([0, 200.0, -500.0], [1.7, 0, 0.5]), ref).stability_margin > 0  # behind CG: stabilising
    b = balance(point_load([0, 200.0, 0], [1.7, 0, 0.5]), car_ref(cog=None))
    assert b.stability_margin is None and b.side_cp_x == pytest.approx(1.7)


def test_balance_with_pitched_placement_uses_ground_axes():
    # a nose-up body: the lift is measured along the ground normal at the ground-level wheelbase midpoint
    P = fr.place_body([0, 0, 0.3], [2.5, 0, 0.3], 0.05, 0.03, 0.0, "crosswind")
    ref = car_ref()
    zg = P.ground_normal_body
    W = 800.0
    front_g = P.to_body(P.to_ground(np.array([[0, 0, 0.3]]))[0] * [1, 1, 0])
    rear_g = P.to_body(P.to_ground(np.array([[2.5, 0, 0.3]]))[0] * [1, 1, 0])
    at = front_g + 0.25 * (rear_g - front_g) + 0.5 * zg  # a quarter of the way back, 0.5 m up
    b = balance(point_load(-W * zg, at), ref, axle_axes(P))
    assert -b.lift_front == pytest.approx(0.75 * W, rel=1e-9)
    assert b.balance_front == pytest.approx(0.75, rel=1e-9)


def _aerofoil(load, n=400, c=1.0, span=1.0):
    """Flat-plate aerofoil along x ∈ [0, c] (cosine-spaced faces); ``load(x0, x1)`` gives the face
    average of ΔCp. Area vectors +z into the body: the pressure field is the lower-minus-upper load."""
    xs = c * 0.5 * (1 - np.cos(np.linspace(0, np.pi, n + 1)))
    P, Q = plate(xs, np.array([0.0, span]))
    x0, x1 = P[Q[:, 0], 0], P[Q[:, 1], 0]
    return P, Q, load(x0, x1)


def test_thin_aerofoil_lift_slope_and_quarter_chord():
    # Thin-aerofoil theory (Anderson, Fundamentals of Aerodynamics): ΔCp = 4α√((c−x)/x) →
    # C_L = 2πα, centre of pressure at c/4. Face averages from ∫√((c−x)/x)dx = √(x(c−x)) + c·asin√(x/c).
    alpha, c = np.radians(4.0), 1.0
    G = lambda x: np.sqrt(x * (c - x)) + c * np.arcsin(np.sqrt(x / c))  # noqa: E731
    P, Q, dcp = _aerofoil(lambda a, b: 4 * alpha * (G(b) - G(a)) / (b - a))
    q = 0.5 * 1.2 * 30**2
    r = integrate_forces(P, Q, dcp * q, None, ForceSettings(kinematic=False))
    ref = ReferenceValues(area=c, length=c, rho=1.2, speed=30.0, wheelbase=c, front_axle=(0, 0, 0), rear_axle=(c, 0, 0))
    co = coefficients(r, ref)
    assert co.lift == pytest.approx(2 * np.pi * alpha, rel=1e-12)  # exact face averages: round-off
    b = balance(r, ref)
    # centroid moments (second order) on 400 cosine-spaced faces with the 1/√x leading edge: measured 2e-5 c
    assert b.cp_x == pytest.approx(c / 4, abs=1e-4)


def test_uniform_and_linear_load_centres_of_pressure():
    # statics (common practice, no source): uniform load → mid-chord; load ∝ x → two thirds of the chord
    ref = ReferenceValues(area=1, length=1, rho=1.2, speed=10.0, wheelbase=1.0, front_axle=(0, 0, 0), rear_axle=(1, 0, 0))
    P, Q, p = _aerofoil(lambda a, b: np.ones_like(a), n=50)
    assert balance(integrate_forces(P, Q, p, None, ForceSettings(kinematic=False)), ref).cp_x == pytest.approx(0.5, rel=1e-12)
    P, Q, p = _aerofoil(lambda a, b: 0.5 * (a + b), n=50)  # exact face average of x
    # the centroid rule is exact for a linear load on each face's first moment? no: ∫x² needs O(h²) → 1e-3
    assert balance(integrate_forces(P, Q, p, None, ForceSettings(kinematic=False)), ref).cp_x == pytest.approx(2 / 3, rel=1e-3)


def test_reference_values_validated():
    with pytest.raises(UserError, match="positive reference area"):
        ReferenceValues(area=0.0, length=1, rho=1.2, speed=1)
    with pytest.raises(UserError, match="axle"):
        balance(point_load([0, 0, -1], [0, 0, 0]), ReferenceValues(area=1, length=1, rho=1, speed=1))


def test_coefficient_functions_do_not_modify_inputs():
    r = point_load([1.0, 2.0, -3.0], [0.5, 0.1, 0.2])
    snap = {k: np.array(getattr(r, k)).copy() for k in ("force", "moment", "about")}
    P = fr.place_body([0, 0, 0.3], [2.5, 0, 0.3], 0.05, 0.03, np.radians(3), "yawed-model")
    w = np.array([np.cos(0.05), np.sin(0.05), 0.0])
    w0, R0 = w.copy(), P.rotation.copy()
    coefficients(r, car_ref(), axes_rotations(P, w))
    balance(r, car_ref(), axle_axes(P))
    for k, v in snap.items():
        np.testing.assert_array_equal(getattr(r, k), v)
    np.testing.assert_array_equal(w, w0)
    np.testing.assert_array_equal(P.rotation, R0)
