"""The flow and solver settings of a case: the air (ISO 2533 atmosphere or
the config's values), the local Mach number under the floor, the
free-stream turbulence at the inlet that decays to the requested values at
the model, the relative wind and ground velocity of a placed point, the
flow block and the solver block (iterations, write interval, rank split).
SI units; vectors in the mesh frame = body frame (x rearward, y right,
z up).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from caseprep.config.schema import Config
from caseprep.contract.errors import UserError
from caseprep.contract.frames import Placement, air_speed, ground_velocity_ground, wind_direction_ground
from caseprep.planning.domain import decomposition_split
from caseprep.planning.physics import (air_density, isa_troposphere, isentropic_density_ratio, speed_of_sound,
                                      sutherland_viscosity, turbulence_at_model)
from caseprep.planning.points import SweepPoint
from caseprep.planning.spec import Flow, SolverSpec


def vec3(v) -> tuple[float, float, float]:
    return tuple(float(x) for x in v)



@dataclass(frozen=True)
class Air:
    """Resolved free-stream properties: T (K), p (Pa), ρ (kg/m³), μ (Pa s), ν (m²/s)."""

    temperature: float
    pressure: float
    rho: float
    mu: float
    nu: float


def air_properties(cfg: Config) -> Air:
    """T and p from the config (or ISO 2533 at ``air.altitude``, default sea
    level); ρ = p/(R T) and μ from Sutherland's law unless given; ν = μ/ρ
    unless ``air.kinematic_viscosity`` is given."""
    a = cfg.air
    T0, p0 = isa_troposphere(a.altitude or 0.0)
    T = a.temperature if a.temperature is not None else T0
    p = a.pressure if a.pressure is not None else p0
    rho = a.density if a.density is not None else air_density(p, T)
    mu = a.viscosity if a.viscosity is not None else sutherland_viscosity(T)
    nu = a.kinematic_viscosity if a.kinematic_viscosity is not None else mu / rho
    return Air(float(T), float(p), float(rho), float(mu), float(nu))


#: Local Mach number above which incompressible flow is questionable: the
#: isentropic density change reaches 4.4 % at M = 0.3 (common practice; see
#: :func:`caseprep.planning.physics.isentropic_density_ratio`).
MACH_WARNING = 0.3


def mach_note(cfg: Config, air: Air, speed: float) -> tuple[float, str | None]:
    """Local Mach number under the floor, M = f U / a (f =
    ``air.underfloor_speed_factor``, U the air speed in m/s, a = √(γ R T)
    at the config's temperature), and a warning above :data:`MACH_WARNING`."""
    f = cfg.air.underfloor_speed_factor
    M = f * speed / speed_of_sound(air.temperature)
    if M <= MACH_WARNING:
        return float(M), None
    drop = 100.0 * (1.0 - isentropic_density_ratio(M))
    return float(M), (f"local Mach number {M:.2f} under the floor ({f:g} × {speed:.4g} m/s, speed of sound "
                      f"{speed_of_sound(air.temperature):.1f} m/s) is above {MACH_WARNING:g}: the density there is "
                      f"{drop:.1f} % below its stagnation value and the incompressible solver ignores it; treat the "
                      "loads with care or use a compressible solver")


#: Default free-stream length scale at the model, as a fraction of the body
#: length (common practice, no source): large enough for the decay over the
#: default 5 body lengths upstream to stay mild (k at the inlet 1.3 × that at
#: the model at 0.5 % intensity, 1.9 × at 1 %).
LENGTH_SCALE_FRACTION = 0.02
#: Inlet k above this multiple of the model's: a strong decay, sensitive to the model constants.
STRONG_DECAY = 4.0


def flow_turbulence(cfg: Config, speed: float, body_length: float, distance: float,
                    file_key: str = "solver.turbulence_length_scale"):
    """Inlet k, ω that decay to the config's intensity and length scale at
    the model, ``distance`` (m) downstream of the inlet
    (:func:`caseprep.planning.physics.turbulence_at_model`); the length scale
    defaults to :data:`LENGTH_SCALE_FRACTION` × ``body_length`` (m). Raises
    UserError when the decay cannot deliver them."""
    ell = cfg.solver.turbulence_length_scale or LENGTH_SCALE_FRACTION * body_length
    try:
        return turbulence_at_model(speed, cfg.solver.turbulence_intensity, ell, distance)
    except ValueError as exc:
        raise UserError(expected="free-stream turbulence that can reach the model", got=str(exc), file=cfg.file,
                        key=file_key, fix="raise solver.turbulence_length_scale (or lower domain.upstream / "
                                          "solver.turbulence_intensity)") from None


def point_wind(cfg: Config, pt: SweepPoint, P: Placement) -> tuple[float, np.ndarray, np.ndarray]:
    """(resultant air speed m/s, relative-wind direction (unit) and ground
    velocity (m/s, zero unless the ground moves), both in body axes) of a
    point placed by ``P``."""
    beta, mode = float(np.radians(pt.yaw_deg)), cfg.sweep.yaw_mode
    U = air_speed(pt.speed, beta, mode)
    w_body = P.vector_to_body(wind_direction_ground(beta, mode))
    vg_body = P.vector_to_body(ground_velocity_ground(pt.speed, beta, mode)) if cfg.ground.mode == "moving" else np.zeros(3)
    return U, w_body, vg_body


def flow_spec(cfg: Config, air: Air, U: float, w_body: np.ndarray, vg_body: np.ndarray, turb) -> Flow:
    """The case's flow: inlet velocity U·w (m/s), ground velocity, air, model
    and the free-stream turbulence ``turb`` (:func:`flow_turbulence`: inlet
    k, ω, ν_t that decay to the requested values at the model)."""
    return Flow(inlet_velocity=vec3(U * w_body), ground_velocity=vec3(vg_body), air_speed=float(U), rho=air.rho,
                nu=air.nu, p_ref=0.0, model=cfg.solver.turbulence_model, intensity=turb.intensity_model,
                length_scale=turb.length_scale_model, k=turb.k_inlet, omega=turb.omega_inlet, nut=turb.nut_inlet,
                turbulence=turb.to_dict())


def solver_spec(cfg: Config, domain, preset_iterations: int) -> SolverSpec:
    """Iterations (the config's, else the preset's), write interval, the
    rank split of the domain box and the run economy (mesh reuse, warm
    start, stop rule)."""
    iters = cfg.solver.iterations or preset_iterations
    corners = domain.box.corners()
    split = decomposition_split(cfg.solver.ranks, corners.max(axis=0) - corners.min(axis=0))
    return SolverSpec(n_iterations=int(iters), write_interval=int(cfg.solver.write_interval or iters),
                      n_procs=int(cfg.solver.ranks), split=split, mesh_reuse=cfg.mesh.reuse,
                      warm_start=cfg.solver.warm_start, stop_rule=cfg.solver.stop_rule)
