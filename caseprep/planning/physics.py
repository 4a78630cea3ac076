"""Air properties, near-wall mesh sizing and inlet turbulence (pure numeric kernels).

All functions take and return SI values (K, Pa, kg/m³, Pa s, m²/s, m, m/s)
and accept numpy arrays where noted. Nothing here reads files or prints.

Sources
-------
- ISO 2533:1975, *Standard Atmosphere* (troposphere, 0–11 km geopotential):
  T0 = 288.15 K, p0 = 101 325 Pa, lapse rate 0.0065 K/m, g0 = 9.80665 m/s²,
  specific gas constant of dry air R = 287.05287 J/(kg K), Sutherland
  constants β_s = 1.458e-6 kg/(m s K^0.5), S = 110.4 K.
- Sutherland, W. (1893), "The viscosity of gases and molecular force",
  Phil. Mag. 36, 507–531.
- Schlichting, H., *Boundary-Layer Theory* (7th ed., McGraw-Hill 1979),
  turbulent flat-plate skin friction, local coefficient
  C_f = (2 log10(Re_x) − 0.65)^−2.3, Re_x < 1e9.
- Wilcox, D. C., *Turbulence Modeling for CFD* (3rd ed., DCW Industries
  2006): k = 3/2 (U I)², ω = k^½ / (C_μ^¼ ℓ), ν_t = k/ω, C_μ = 0.09.
- Menter, F. R. (1994), "Two-equation eddy-viscosity turbulence models for
  engineering applications", AIAA J. 32(8), 1598–1605 (the k-ω SST model
  whose inlet values these are).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

R_AIR = 287.05287          # J/(kg K), ISO 2533
T0_ISA = 288.15            # K, ISO 2533 sea level
P0_ISA = 101325.0          # Pa, ISO 2533 sea level
LAPSE_ISA = 0.0065         # K/m, ISO 2533 troposphere
G0 = 9.80665               # m/s², ISO 2533
SUTHERLAND_BETA = 1.458e-6  # kg/(m s K^0.5), ISO 2533
SUTHERLAND_S = 110.4       # K, ISO 2533
C_MU = 0.09                # Wilcox 2006


def isa_troposphere(altitude):
    """Temperature (K) and pressure (Pa) of the ISO 2533 standard atmosphere.

    T = T0 − L h,  p = p0 (T/T0)^(g0/(R L)), h the geopotential altitude (m),
    T0 = 288.15 K, p0 = 101 325 Pa, L = 0.0065 K/m, g0 = 9.80665 m/s²,
    R = 287.05287 J/(kg K). Valid in the troposphere, −2 000 m ≤ h ≤ 11 000 m.
    Source: ISO 2533:1975. Accepts scalars or arrays; returns (T, p).
    """
    h = np.asarray(altitude, dtype=float)
    if np.any(h < -2000.0) or np.any(h > 11000.0):
        raise ValueError(f"expected an altitude in [-2000, 11000] m (ISO 2533 troposphere), got {altitude}")
    T = T0_ISA - LAPSE_ISA * h
    p = P0_ISA * (T / T0_ISA) ** (G0 / (R_AIR * LAPSE_ISA))
    if T.ndim == 0:
        return float(T), float(p)
    return T, p


def air_density(pressure, temperature):
    """Density of dry air, kg/m³, from the ideal-gas law ρ = p / (R T).

    ``pressure`` in Pa (absolute), ``temperature`` in K, R = 287.05287
    J/(kg K) (ISO 2533:1975). Valid for dry air at pressures and temperatures
    where air behaves as an ideal gas (well within 1 % for 150–400 K and
    p < 1 MPa).
    """
    p = np.asarray(pressure, dtype=float)
    T = np.asarray(temperature, dtype=float)
    if np.any(T <= 0) or np.any(p <= 0):
        raise ValueError(f"expected positive pressure and temperature, got p={pressure}, T={temperature}")
    rho = p / (R_AIR * T)
    return float(rho) if rho.ndim == 0 else rho


def sutherland_viscosity(temperature):
    """Dynamic viscosity of air, Pa s, from Sutherland's law.

    μ = β_s T^(3/2) / (T + S), β_s = 1.458e-6 kg/(m s K^½), S = 110.4 K,
    T in K. Constants of ISO 2533:1975; law of Sutherland (1893), Phil. Mag.
    36, 507–531. Valid for air from about 100 K to 1 900 K (independent of
    pressure for ordinary pressures).
    """
    T = np.asarray(temperature, dtype=float)
    if np.any(T <= 0):
        raise ValueError(f"expected a positive temperature (K), got {temperature}")
    mu = SUTHERLAND_BETA * T**1.5 / (T + SUTHERLAND_S)
    return float(mu) if mu.ndim == 0 else mu


def skin_friction_flat_plate(reynolds_x):
    """Local turbulent skin-friction coefficient of a smooth flat plate.

    C_f = (2 log10(Re_x) − 0.65)^−2.3 (dimensionless), Re_x = U x / ν the
    Reynolds number based on the distance x from the leading edge.
    Schlichting, *Boundary-Layer Theory* (7th ed., McGraw-Hill 1979),
    turbulent flat plate. Valid for fully turbulent flow, Re_x < 1e9; below
    about 5e5 the boundary layer would be laminar and the value is only an
    estimate for mesh sizing (it is still returned, since first-cell sizing
    only needs the order of magnitude).
    """
    re = np.asarray(reynolds_x, dtype=float)
    if np.any(re <= 1.0):
        raise ValueError(f"expected a Reynolds number > 1, got {reynolds_x}")
    cf = (2.0 * np.log10(re) - 0.65) ** -2.3
    return float(cf) if cf.ndim == 0 else cf


def friction_velocity_flat_plate(speed: float, length: float, nu: float) -> float:
    """Friction velocity u_τ (m/s) of a smooth flat plate at the running length.

    Re_x = U L / ν, C_f from :func:`skin_friction_flat_plate` (Schlichting,
    *Boundary-Layer Theory*, 7th ed., McGraw-Hill 1979), τ_w/ρ = ½ U² C_f and
    u_τ = U √(C_f/2). ``speed`` U (m/s, the local speed outside the boundary
    layer), ``length`` L (m, running length from the leading edge), ``nu``
    kinematic viscosity (m²/s). Valid for a turbulent flat plate, Re_x < 1e9.
    """
    if speed <= 0 or length <= 0 or nu <= 0:
        raise ValueError("expected positive speed, length and viscosity")
    cf = skin_friction_flat_plate(speed * length / nu)
    return float(speed * np.sqrt(cf / 2.0))


def first_cell_height(centre_yplus: float, speed: float, length: float, nu: float) -> float:
    """Wall-normal height (m) of the wall-adjacent cell whose **centre** sits
    at the target y+.

    h = 2 y+ ν / u_τ, the cell centre at h/2 (where the solver evaluates y+),
    u_τ from :func:`friction_velocity_flat_plate` at the local speed U and
    running length L: Re_x = U L/ν, C_f = (2 log10 Re_x − 0.65)^−2.3
    (Schlichting, *Boundary-Layer Theory*, 7th ed., McGraw-Hill 1979),
    u_τ = U √(C_f/2). ``centre_yplus`` dimensionless, ``speed`` U (m/s: the
    planner passes the underfloor speed, the road speed times
    ``air.underfloor_speed_factor``), ``length`` L (m, the body length),
    ``nu`` (m²/s). Valid where the flat-plate correlation is (turbulent,
    Re_x < 1e9); a flat-plate estimate, so y+ on a real body varies around it
    (stagnation and separation regions differ most).
    """
    if centre_yplus <= 0:
        raise ValueError("expected a positive y+")
    return float(2.0 * centre_yplus * nu / friction_velocity_flat_plate(speed, length, nu))


def centre_yplus(first_height: float, speed: float, length: float, nu: float) -> float:
    """y+ (dimensionless) at the centre of a wall-adjacent cell of height
    ``first_height`` (m): y+ = (h/2) u_τ/ν, the inverse of
    :func:`first_cell_height` (same flat-plate estimate, same validity)."""
    if first_height <= 0:
        raise ValueError("expected a positive first-cell height")
    return float(0.5 * first_height * friction_velocity_flat_plate(speed, length, nu) / nu)


GAMMA_AIR = 1.4            # ratio of specific heats of dry air (ISO 2533:1975 uses κ = 1.4)


def speed_of_sound(temperature) -> float:
    """Speed of sound in dry air, m/s: a = √(γ R T), γ = 1.4, R =
    287.05287 J/(kg K) (ISO 2533:1975), ``temperature`` T in K. Valid for
    air as an ideal gas with constant γ (about 150–1000 K)."""
    T = np.asarray(temperature, dtype=float)
    if np.any(T <= 0):
        raise ValueError(f"expected a positive temperature (K), got {temperature}")
    a = np.sqrt(GAMMA_AIR * R_AIR * T)
    return float(a) if a.ndim == 0 else a


def isentropic_density_ratio(mach) -> float:
    """ρ/ρ0 of an isentropic flow at Mach number M: (1 + (γ−1)/2 M²)^(−1/(γ−1)),
    γ = 1.4 (Anderson, *Modern Compressible Flow*, 3rd ed., McGraw-Hill 2003,
    §3.5, from memory). At M = 0.3 the density is 4.4 % below its stagnation
    value: the usual limit for treating the flow as incompressible. Valid for
    subsonic and supersonic isentropic flow of a perfect gas."""
    m = np.asarray(mach, dtype=float)
    r = (1.0 + 0.5 * (GAMMA_AIR - 1.0) * m**2) ** (-1.0 / (GAMMA_AIR - 1.0))
    return float(r) if r.ndim == 0 else r


def inlet_turbulence(speed: float, intensity: float, length_scale: float) -> tuple[float, float, float]:
    """Inlet turbulence for two-equation k-ω models: (k, ω, ν_t).

    k = 3/2 (U I)²  (m²/s²), ω = k^½ / (C_μ^¼ ℓ)  (1/s), ν_t = k / ω (m²/s),
    with ``speed`` U (m/s), ``intensity`` I (fraction, 0.01 = 1 %),
    ``length_scale`` ℓ (m, turbulence length scale), C_μ = 0.09.
    Wilcox, *Turbulence Modeling for CFD* (3rd ed., 2006); used for the
    k-ω SST model of Menter (1994), AIAA J. 32(8) 1598–1605. Valid for
    isotropic free-stream turbulence, 0 < I ≲ 0.2.
    """
    if speed <= 0 or intensity <= 0 or length_scale <= 0:
        raise ValueError("expected positive speed, intensity and length scale")
    k = 1.5 * (speed * intensity) ** 2
    omega = np.sqrt(k) / (C_MU**0.25 * length_scale)
    return float(k), float(omega), float(k / omega)


# The k-ω SST model's outer-layer (k-ε branch, F1 → 0 away from walls)
# destruction coefficients: Menter, F. R. (1994), AIAA J. 32(8), 1598–1605;
# the same numbers are the solver's kOmegaSST defaults (beta2, betaStar).
SST_BETA2 = 0.0828
SST_BETA_STAR = 0.09


@dataclass(frozen=True)
class FreeStreamTurbulence:
    """Free-stream turbulence at the inlet and where it reaches the model.

    k in m²/s², ω in 1/s, ν_t = k/ω in m²/s, intensity I = √(2k/3)/U
    (fraction), length scale ℓ = √k/(C_μ^¼ ω) (m); ``distance`` (m) from the
    inlet to the model along the wind, ``speed`` U (m/s)."""

    speed: float
    distance: float
    k_inlet: float
    omega_inlet: float
    nut_inlet: float
    intensity_inlet: float
    length_scale_inlet: float
    k_model: float
    omega_model: float
    nut_model: float
    intensity_model: float
    length_scale_model: float

    def to_dict(self) -> dict:
        return dict(self.__dict__)


def sst_decay(k0: float, omega0: float, distance: float, speed: float,
              beta: float = SST_BETA2, beta_star: float = SST_BETA_STAR) -> tuple[float, float]:
    """k (m²/s²) and ω (1/s) of uniform-flow turbulence after ``distance`` (m)
    of convection at ``speed`` U (m/s), from k0, ω0 at distance 0.

    With no mean-velocity gradient there is no production, and for slowly
    varying fields diffusion is negligible, so the k-ω SST equations (as
    written by the NASA Langley Turbulence Modeling Resource, "The Menter
    Shear Stress Transport Turbulence Model", looked up) reduce to
    U dk/dx = −β* ω k and U dω/dx = −β ω², whose solution is

        ω(x) = ω0 / (1 + β ω0 x/U),   k(x) = k0 (1 + β ω0 x/U)^(−β*/β).

    This algebraic decay of free-stream turbulence in two-equation models
    is the behaviour analysed by Spalart, P. R. and Rumsey, C. L. (2007),
    "Effective inflow conditions for turbulence models in aerodynamic
    calculations", AIAA J. 45(10), 2544–2553 (quoted from memory; the
    formula here is derived from the equations above). β = β2 = 0.0828 and
    β* = 0.09 (the SST outer branch, which holds away from walls where the
    blending function F1 → 0). Validity: uniform flow; the neglected
    cross-diffusion term 2(1−F1)σ_ω2 ∇k·∇ω/ω is 1.7 β* k/U² ≈ 0.23 I² of the ω
    destruction along this solution, and gradient diffusion is of the same
    small order, so the formula holds to well under 1 % for I ≤ 0.2.
    """
    if k0 <= 0 or omega0 <= 0 or distance < 0 or speed <= 0:
        raise ValueError("expected positive k0, omega0 and speed and a distance ≥ 0")
    s = 1.0 + beta * omega0 * distance / speed
    return float(k0 * s ** (-beta_star / beta)), float(omega0 / s)


def turbulence_at_model(speed: float, intensity: float, length_scale: float, distance: float,
                        beta: float = SST_BETA2, beta_star: float = SST_BETA_STAR) -> FreeStreamTurbulence:
    """Inlet k, ω that decay to the requested turbulence at the model.

    At the model: k_m = 3/2 (U I)², ω_m = √k_m/(C_μ^¼ ℓ) (:func:`inlet_turbulence`,
    Wilcox 2006). Inverting :func:`sst_decay` over the inlet-to-model
    ``distance`` x (m) at ``speed`` U (m/s), with a = β ω_m x/U:

        ω_in = ω_m / (1 − a),   k_in = k_m (1 − a)^(−β*/β),

    possible only for a < 1 (however large ω_in, ω cannot fall below
    U/(β x) over the distance: a smaller length scale at the model cannot be
    reached). Raises ValueError for a ≥ 1. ``intensity`` fraction,
    ``length_scale`` m. Same validity and sources as :func:`sst_decay`.
    """
    k_m, om_m, nut_m = inlet_turbulence(speed, intensity, length_scale)
    if distance < 0:
        raise ValueError("expected a distance ≥ 0")
    a = beta * om_m * distance / speed
    if not a < 1.0:
        ell_min = np.sqrt(k_m) * beta * distance / (C_MU**0.25 * speed)
        raise ValueError(f"a length scale of {length_scale:.4g} m at the model cannot be reached over {distance:.4g} m "
                         f"of decay at {speed:.4g} m/s: the turbulence decays to at least {ell_min:.4g} m whatever "
                         "the inlet values")
    om_in = om_m / (1.0 - a)
    k_in = k_m * (1.0 - a) ** (-beta_star / beta)
    return FreeStreamTurbulence(
        speed=float(speed), distance=float(distance),
        k_inlet=float(k_in), omega_inlet=float(om_in), nut_inlet=float(k_in / om_in),
        intensity_inlet=float(np.sqrt(2.0 * k_in / 3.0) / speed), length_scale_inlet=float(np.sqrt(k_in) / (C_MU**0.25 * om_in)),
        k_model=float(k_m), omega_model=float(om_m), nut_model=float(nut_m), intensity_model=float(intensity),
        length_scale_model=float(length_scale))


def layer_stack_thickness(first_height: float, n_layers: int, expansion: float) -> float:
    """Total thickness (m) of ``n_layers`` prism layers growing geometrically.

    T = h1 (r^n − 1)/(r − 1) for r ≠ 1 (T = n h1 for r = 1), ``first_height``
    h1 in m, ``expansion`` r the ratio between consecutive layers (geometric
    series, exact).
    """
    if n_layers <= 0:
        return 0.0
    if abs(expansion - 1.0) < 1e-12:
        return float(n_layers * first_height)
    return float(first_height * (expansion**n_layers - 1.0) / (expansion - 1.0))
