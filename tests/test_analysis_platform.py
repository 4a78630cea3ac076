"""The platform under aerodynamic load (postproc.kernels.platform) against
hand calculations: linear maps and linear springs have closed-form
equilibria (statics, no outside source needed)."""
from __future__ import annotations

import math

import numpy as np
import pytest

from postproc.kernels.platform import AxleLoads, Platform, platform_response, state_at
from postproc.kernels.terms import BottomingMode, PlatformState

RHO, AREA = 1.2, 1.2
AF, BFF, BFR = -0.45, 6.0, 2.0      # C_LF = AF + BFF h_f + BFR h_r
AR, BRF, BRR = -0.60, 3.0, 9.0      # C_LR = AR + BRF h_f + BRR h_r
PLAT = Platform(static_front=0.030, static_rear=0.045, rate_front=60000.0, rate_rear=80000.0)


def _linear() -> AxleLoads:
    return AxleLoads(lambda f, r: AF + BFF * f + BFR * r, lambda f, r: AR + BRF * f + BRR * r, AREA, RHO)


def _qa(v: float) -> float:
    return 0.5 * RHO * v * v * AREA


@pytest.mark.parametrize("speed", [20.0, 45.0, 70.0])
def test_linear_equilibrium_is_the_hand_solved_2x2_system(speed):
    # k_f (h0f − h_f) = −Q (AF + BFF h_f + BFR h_r), same at the rear, Q = qA:
    # (k_f − Q BFF) h_f − Q BFR h_r = k_f h0f + Q AF
    # −Q BRF h_f + (k_r − Q BRR) h_r = k_r h0r + Q AR, solved by Cramer's rule.
    Q = _qa(speed)
    a11, a12, b1 = PLAT.rate_front - Q * BFF, -Q * BFR, PLAT.rate_front * PLAT.static_front + Q * AF
    a21, a22, b2 = -Q * BRF, PLAT.rate_rear - Q * BRR, PLAT.rate_rear * PLAT.static_rear + Q * AR
    det = a11 * a22 - a12 * a21
    hf, hr = (b1 * a22 - a12 * b2) / det, (a11 * b2 - b1 * a21) / det
    s = state_at(PLAT, _linear(), speed)
    assert s.state is PlatformState.EQUILIBRIUM and s.stable
    assert s.ride_height_front == pytest.approx(hf, abs=1e-9)
    assert s.ride_height_rear == pytest.approx(hr, abs=1e-9)
    assert s.downforce_front == pytest.approx(PLAT.rate_front * (PLAT.static_front - hf), rel=1e-6)
    # heave derivative of the lift: Q (BFF + BFR + BRF + BRR), exact for linear maps
    assert s.heave_aero_derivative == pytest.approx(Q * (BFF + BFR + BRF + BRR), rel=1e-6)


def test_bottoming_speed_matches_the_hand_calculation():
    # The front touches first (h_f = 0). Then k_f h0f = −Q (AF + BFR h_r) and
    # h_r = (k_r h0r + Q AR)/(k_r − Q BRR); eliminating h_r gives
    # (BFR AR − AF BRR) Q² + (AF k_r + BFR k_r h0r − k_f h0f BRR) Q + k_f h0f k_r = 0;
    # the smallest positive root is the contact, V = √(2Q/(ρA)).
    kf, kr, h0f, h0r = PLAT.rate_front, PLAT.rate_rear, PLAT.static_front, PLAT.static_rear
    roots = np.roots([BFR * AR - AF * BRR, AF * kr + BFR * kr * h0r - kf * h0f * BRR, kf * h0f * kr])
    Q = min(float(r.real) for r in roots if abs(r.imag) < 1e-12 and r.real > 0)
    hr = (kr * h0r + Q * AR) / (kr - Q * BRR)
    assert hr > 0                                  # the rear is still off the ground: front contact first
    v_hand = math.sqrt(2 * Q / (RHO * AREA))
    res = platform_response(PLAT, _linear(), [20.0, 40.0, 60.0], speed_max=200.0)
    assert res.bottoming_mode is BottomingMode.CONTACT
    assert res.bottoming_speed == pytest.approx(v_hand, rel=0.005)
    assert res.heave_sign_changes == () and not res.stall_crossing


def test_equilibrium_crossing_the_downforce_peak_is_flagged():
    # Front downforce peaks at h_f = 20 mm: C_LF = −(0.5 − 500 (h_f − 0.02)²),
    # rear constant. The heave derivative ∂F_z/∂h = Q·1000 (h_f − 0.02) changes
    # sign where the equilibrium reaches 20 mm: k_f (h0f − 0.02) = 0.5 Q.
    loads = AxleLoads(lambda f, r: -(0.5 - 500.0 * (f - 0.02) ** 2), lambda f, r: -0.3, AREA, RHO)
    plat = Platform(0.035, 0.045, 20000.0, 80000.0)
    res = platform_response(plat, loads, [30.0, 60.0], speed_max=90.0)
    assert res.stall_crossing and len(res.heave_sign_changes) == 1
    ch = res.heave_sign_changes[0]
    assert ch["from"] == "+" and ch["to"] == "-"
    assert ch["ride_height_front"] == pytest.approx(0.02, abs=1e-6)
    v_hand = math.sqrt(2 * (plat.rate_front * (0.035 - 0.02) / 0.5) / (RHO * AREA))
    assert ch["speed"] == pytest.approx(v_hand, rel=0.005)
    assert res.stall_crossing_speed == pytest.approx(v_hand, rel=0.005)


def test_fold_of_the_equilibrium_is_a_divergence_not_a_contact():
    # C_LF = −c/h_f: k (h0 − h) = Q c / h has solutions only while
    # Q ≤ k h0²/(4c); at the fold h = h0/2 > 0, so the floor is pulled down
    # without a contact of the equilibrium branch (static divergence).
    c = 0.01
    loads = AxleLoads(lambda f, r: -c / f, lambda f, r: -0.3, AREA, RHO)
    plat = Platform(0.03, 0.045, 20000.0, 80000.0)
    q_fold = plat.rate_front * plat.static_front**2 / (4 * c)
    v_fold = math.sqrt(2 * q_fold / (RHO * AREA))
    res = platform_response(plat, loads, [0.5 * v_fold, 1.1 * v_fold], speed_max=1.5 * v_fold)
    assert res.bottoming_mode is BottomingMode.DIVERGENCE
    assert res.bottoming_speed == pytest.approx(v_fold, rel=0.005)
    assert res.states[0].state is PlatformState.EQUILIBRIUM
    assert res.states[1].state is PlatformState.NO_EQUILIBRIUM


def test_platform_refuses_nonpositive_rates():
    with pytest.raises(ValueError, match="positive"):
        Platform(0.03, 0.04, 0.0, 1000.0)
