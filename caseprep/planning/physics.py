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


def first_cell_height(target_yplus: float, speed: float, length: float, nu: float) -> float:
    """Wall-normal height (m) of the first cell for a target y+.

    Re_x = V L / ν, C_f from :func:`skin_friction_flat_plate` (Schlichting),
    wall shear τ_w = ½ ρ V² C_f, friction velocity u_τ = V sqrt(C_f / 2),
    and y = y+ ν / u_τ. ``target_yplus`` dimensionless, ``speed`` V (m/s),
    ``length`` L (m, the running length: the body length), ``nu`` kinematic
    viscosity (m²/s). The height is the **full** first-cell height (the cell
    centre sits at half of it). Valid where the flat-plate correlation is,
    Re_x < 1e9; a flat-plate estimate, so y+ on a real body varies around it
    (stagnation and separation regions differ most).
    """
    if target_yplus <= 0 or speed <= 0 or length <= 0 or nu <= 0:
        raise ValueError("expected positive y+, speed, length and viscosity")
    re = speed * length / nu
    cf = skin_friction_flat_plate(re)
    u_tau = speed * np.sqrt(cf / 2.0)
    return float(target_yplus * nu / u_tau)


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
