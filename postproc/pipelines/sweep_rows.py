"""The rows of a sweep's results table: one :class:`CaseResult` per case.

A row holds the case's operating point and its coefficients (window means
of the runtime monitor, judged by the one convergence rule), with their
iterative spreads, reference area and density: with them ``results.csv`` is
a complete input of ``postproc analyse`` (the analysis that ranks the
variants, fits the maps and finds the peaks, :mod:`postproc.pipelines.analysis`).
"""
from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class CaseResult:
    """One row of the results table (one case).

    Ride heights in m, angles in degrees, speed in m/s; coefficients in the
    wind axes of caseprep.contract.frames (C_L positive up, C_D along the relative
    wind, C_S along +y_W); ``balance`` front share of downforce (fraction,
    None when undefined); ``stability_margin`` as a fraction of the wheelbase (None when undefined or
    no CG given); ``flags`` non-empty means the case is not usable (the
    analysis lists it, never compares on it).
    ``u_*``: the iterative spread (standard deviation over the settling
    window, coefficient units; NaN unknown) of each coefficient, whose window
    mean is the value; ``reference_area`` (m²) and ``air_density`` (kg/m³)
    of the coefficients.
    """

    case_id: str
    variant: str
    ride_height_front: float
    ride_height_rear: float
    pitch_deg: float
    yaw_deg: float
    cl: float
    cd: float
    cs: float = 0.0
    cl_front: float | None = None
    cl_rear: float | None = None
    balance: float | None = None
    stability_margin: float | None = None
    flags: tuple[str, ...] = ()
    speed: float = float("nan")
    mesh_level: int = 0
    reference_area: float = float("nan")
    air_density: float = float("nan")
    u_cl: float = float("nan")
    u_cd: float = float("nan")
    u_cs: float = float("nan")
    u_cl_front: float = float("nan")
    u_cl_rear: float = float("nan")
