"""Air properties, first-cell height and inlet turbulence (caseprep.planning.physics)."""
from __future__ import annotations

import math

import numpy as np
import pytest

from caseprep.planning import physics as ph

fluids_atm = pytest.importorskip("fluids.atmosphere")


def test_sea_level_table_values():
    T, p = ph.isa_troposphere(0.0)
    assert T == 288.15 and p == 101325.0
    # ISO 2533:1975 table, sea level (from memory): rho = 1.2250 kg/m³, mu = 1.7894e-5 Pa s.
    # Table values carry 5 significant digits: tolerance half a unit in the last digit.
    assert ph.air_density(p, T) == pytest.approx(1.2250, abs=0.00005)
    assert ph.sutherland_viscosity(T) == pytest.approx(1.7894e-5, abs=0.00005e-5)


@pytest.mark.parametrize("T, mu_table", [
    # ISO 2533:1975 table (from memory): dynamic viscosity at these temperatures, 4 significant digits
    (216.65, 1.4216e-5),   # tropopause, 11 km
    (255.65, 1.6282e-5),   # 5 km
    (281.65, 1.7579e-5),   # 1 km
])
def test_viscosity_table_values(T, mu_table):
    # relative 2e-4: the table's rounding (4–5 digits) dominates
    assert ph.sutherland_viscosity(T) == pytest.approx(mu_table, rel=2e-4)


@pytest.mark.parametrize("h", [0.0, 500.0, 1000.0, 3000.0, 5000.0, 11000.0])
def test_standard_atmosphere_against_fluids(h):
    # Reference library: the fluids package, ATMOSPHERE_1976 (US Standard Atmosphere 1976,
    # identical to ISO 2533 below 32 km). fluids takes geometric altitude; convert our
    # geopotential h with the same Earth radius it uses (r0) so both describe one point.
    r0 = fluids_atm.r0
    z = h * r0 / (r0 - h)
    A = fluids_atm.ATMOSPHERE_1976(z)
    T, p = ph.isa_troposphere(h)
    # 1e-6 relative: both evaluate the same closed-form expressions; the residual is
    # fluids' slightly different gas-constant/molar-mass rounding.
    assert T == pytest.approx(A.T, rel=1e-6)
    assert p == pytest.approx(A.P, rel=1e-5)
    assert ph.air_density(p, T) == pytest.approx(A.rho, rel=1e-5)
    assert ph.sutherland_viscosity(T) == pytest.approx(A.mu, rel=1e-9)


@pytest.mark.parametrize("T", [200.0, 250.0, 300.0, 350.0, 400.0])
def test_sutherland_against_fluids(T):
    # the fluids package, ATMOSPHERE_1976.viscosity (same Sutherland constants): equal to round-off
    assert ph.sutherland_viscosity(T) == pytest.approx(fluids_atm.ATMOSPHERE_1976.viscosity(T), rel=1e-12)


def test_arrays_and_no_input_mutation():
    T = np.array([250.0, 300.0])
    p = np.array([9e4, 1e5])
    T0, p0 = T.copy(), p.copy()
    rho = ph.air_density(p, T)
    mu = ph.sutherland_viscosity(T)
    ph.isa_troposphere(np.array([0.0, 1000.0]))
    np.testing.assert_array_equal(T, T0)
    np.testing.assert_array_equal(p, p0)
    assert rho.shape == (2,) and mu.shape == (2,)


def test_skin_friction_schlichting():
    # Schlichting, Boundary-Layer Theory: C_f = (2 log10 Re_x − 0.65)^−2.3.
    # Worked step by step at Re_x = 1e7: 2·7 − 0.65 = 13.35; 13.35^−2.3 = exp(−2.3 ln 13.35)
    # = exp(−2.3 · 2.591516) = exp(−5.960488) = 2.57865e-3.
    assert ph.skin_friction_flat_plate(1e7) == pytest.approx(2.57865e-3, rel=1e-5)  # 6 digits carried


def test_first_cell_height_worked_example():
    # Worked step by step: V = 40 m/s, L = 1.2 m, nu = 1.5e-5 m²/s → Re_x = 3.2e6,
    # log10(3.2e6) = 6.505150, 2·6.505150 − 0.65 = 12.360300, ln 12.3603 = 2.514490,
    # C_f = exp(−2.3 · 2.514490) = exp(−5.783327) = 3.07846e-3 (Schlichting),
    # u_tau = 40 · sqrt(3.07846e-3 / 2) = 40 · 0.0392330 = 1.569320 m/s,
    # the cell centre sits at y+ = 30: y_c = y+ nu / u_tau = 30 · 1.5e-5 / 1.569320 = 2.86748e-4 m,
    # the whole first cell twice that: 5.73496e-4 m.
    y = ph.first_cell_height(30.0, 40.0, 1.2, 1.5e-5)
    assert y == pytest.approx(2 * 2.86748e-4, rel=1e-5)  # 6 digits carried through the steps
    assert ph.centre_yplus(y, 40.0, 1.2, 1.5e-5) == pytest.approx(30.0, rel=1e-12)  # the exact inverse


def test_speed_of_sound_and_density_ratio():
    # a = sqrt(1.4 · 287.05287 · 288.15) = 340.294 m/s: the ISO 2533 sea-level speed of sound (340.294 m/s, from memory)
    assert ph.speed_of_sound(288.15) == pytest.approx(340.294, abs=1e-3)
    # isentropic ρ/ρ0 = (1 + 0.2 M²)^-2.5; by hand at M = 0.3: 1.018^-2.5 = exp(-2.5 · 0.0178399) = 0.956380
    assert ph.isentropic_density_ratio(0.3) == pytest.approx(0.956380, rel=1e-6)


def test_sst_decay_closed_form():
    # U dk/dx = -β* ω k, U dω/dx = -β ω² (SST without production, NASA Langley Turbulence Modeling Resource
    # SST equations): integrate the ODEs numerically (RK4, 20 000 steps) and compare with the closed form.
    k0, w0, U, X = 0.2, 40.0, 30.0, 5.0
    y = np.array([k0, w0])
    f = lambda y: np.array([-ph.SST_BETA_STAR * y[1] * y[0], -ph.SST_BETA2 * y[1] ** 2]) / U
    n = 20000
    h = X / n
    for _ in range(n):
        a = f(y); b = f(y + 0.5 * h * a); c = f(y + 0.5 * h * b); d = f(y + h * c)
        y = y + h / 6 * (a + 2 * b + 2 * c + d)
    k, w = ph.sst_decay(k0, w0, X, U)
    assert k == pytest.approx(y[0], rel=1e-9) and w == pytest.approx(y[1], rel=1e-9)  # RK4 error ~ h^4


@pytest.mark.parametrize("U,I,ell,x", [(40.0, 0.005, 0.014, 6.0), (80.0, 0.01, 0.05, 24.0), (25.0, 0.02, 0.1, 2.0)])
def test_inlet_values_deliver_the_requested_turbulence_at_the_model(U, I, ell, x):
    # inverting the decay: the inlet values, decayed over x (Spalart & Rumsey 2007, AIAA J. 45(10) 2544-2553: two-equation
    # free-stream turbulence decays algebraically, k ~ (1 + β ω0 t)^(-β*/β)), give the requested intensity within 5 %
    t = ph.turbulence_at_model(U, I, ell, x)
    k, w = ph.sst_decay(t.k_inlet, t.omega_inlet, x, U)
    assert np.sqrt(2 * k / 3) / U == pytest.approx(I, rel=0.05)
    assert np.sqrt(k) / (ph.C_MU ** 0.25 * w) == pytest.approx(ell, rel=0.05)
    assert t.k_inlet > t.k_model and t.intensity_inlet > I  # turbulence decays on its way to the model


def test_unreachable_length_scale_is_refused():
    # ω cannot fall below U/(β x) over x: a 1 mm scale at 0.5 % and 40 m/s over 6 m needs ω_m = 224 1/s > 40/(0.0828·6)
    with pytest.raises(ValueError, match="cannot be reached"):
        ph.turbulence_at_model(40.0, 0.005, 0.001, 6.0)


def test_inlet_turbulence_textbook():
    # Wilcox, Turbulence Modeling for CFD: k = 3/2 (U I)², ω = k^½ / (C_μ^¼ ℓ), ν_t = k/ω, C_μ = 0.09.
    # By hand: U = 40, I = 0.01 → k = 1.5 · 0.16 = 0.24 m²/s²; C_μ^¼ = 0.5477226;
    # ℓ = 0.01 → ω = 0.4898979 / 0.005477226 = 89.44272 1/s; ν_t = 0.24 / 89.44272 = 2.683282e-3 m²/s.
    k, om, nut = ph.inlet_turbulence(40.0, 0.01, 0.01)
    assert k == pytest.approx(0.24, rel=1e-12)
    assert om == pytest.approx(89.44272, rel=1e-6)
    assert nut == pytest.approx(2.683282e-3, rel=1e-6)


def test_layer_stack_geometric_series():
    # exact geometric series: 1e-4 (1 + 1.2 + 1.44) = 3.64e-4 m
    assert ph.layer_stack_thickness(1e-4, 3, 1.2) == pytest.approx(3.64e-4, rel=1e-12)
    assert ph.layer_stack_thickness(1e-4, 3, 1.0) == pytest.approx(3e-4, rel=1e-12)
    assert ph.layer_stack_thickness(1e-4, 0, 1.2) == 0.0


def test_bad_inputs_raise():
    with pytest.raises(ValueError):
        ph.air_density(-1.0, 288.0)
    with pytest.raises(ValueError):
        ph.isa_troposphere(20000.0)
    with pytest.raises(ValueError):
        ph.first_cell_height(0.0, 40.0, 1.0, 1e-5)
    assert math.isfinite(ph.first_cell_height(1.0, 1.0, 0.1, 1e-3))
