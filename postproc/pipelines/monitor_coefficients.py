"""The runtime force monitor as coefficient series, judged by the
convergence rule in coefficient counts (``caseprep.contract.convergence``).

The monitor (``read_monitor``) gives the total force (N) and the moment
(N·m) about the manifest's moment point in the body (mesh) frame per
iteration. Each sample of the settling window is reduced exactly like the
VTK export (``postproc.kernels.coefficients``: wind-axes coefficients and the axle
lift coefficients from statics about the wheelbase midpoint at ground
level), so the window means are directly comparable with — and replace —
the last-iteration values.
"""
from __future__ import annotations

from typing import Mapping

import numpy as np

from caseprep.contract.convergence import DEFAULT_OPTIONS, ConvergenceOptions, judge_coefficients

from ..kernels import coefficients as co
from ..kernels.forces import ForceResult


def _result(force: np.ndarray, moment: np.ndarray, about: np.ndarray) -> ForceResult:
    z = np.zeros(3)
    return ForceResult(force=force, force_pressure=z, force_viscous=z, moment=moment, moment_pressure=z,
                       moment_viscous=z, area=0.0, about=about, n_faces=0)


def coefficient_series(monitor: Mapping[str, np.ndarray], ref: co.ReferenceValues,
                       rotations: Mapping[str, np.ndarray] | None = None, axle=None,
                       window: int | None = None) -> dict[str, np.ndarray]:
    """Coefficient series (``cl``, ``cd``, ``cs``, ``cn`` and, with ``axle``
    axes (:func:`caseprep.contract.frames.axle_axes`) and the axles in
    ``ref``, ``cl_front``, ``cl_rear``) of the last ``window`` monitor samples
    (all when None). ``rotations``: :func:`caseprep.contract.frames.axes_rotations`
    of the case (default: level body, zero yaw). Needs ``force.total_x/y/z``;
    without ``moment.total_*`` the moment-based series are left out. Raises
    KeyError when the forces are missing."""
    F = np.stack([np.asarray(monitor[f"force.total_{c}"], dtype=float) for c in "xyz"], axis=1)
    has_m = all(f"moment.total_{c}" in monitor for c in "xyz")
    M = np.stack([np.asarray(monitor[f"moment.total_{c}"], dtype=float) for c in "xyz"], axis=1) if has_m else None
    if window is not None:
        F = F[-window:]
        M = None if M is None else M[-window:]
    about = np.asarray(ref.moment_point, dtype=float)
    axles = has_m and axle is not None and ref.front_axle is not None and ref.rear_axle is not None
    names = ["cl", "cd", "cs"] + (["cn"] if has_m else []) + (["cl_front", "cl_rear"] if axles else [])
    out = {k: np.empty(len(F)) for k in names}
    for i in range(len(F)):
        r = _result(F[i], M[i] if M is not None else np.zeros(3), about)
        c = co.coefficients(r, ref, rotations)
        out["cl"][i], out["cd"][i], out["cs"][i] = c.lift, c.drag, c.side
        if "cn" in out:
            out["cn"][i] = c.yawing
        if "cl_front" in out:
            b = co.balance(r, ref, axle)
            out["cl_front"][i], out["cl_rear"][i] = b.c_lift_front, b.c_lift_rear
    return out


def judge_monitor(monitor: Mapping[str, np.ndarray], ref: co.ReferenceValues,
                  rotations: Mapping[str, np.ndarray] | None = None, axle=None, window: int | None = None,
                  options: ConvergenceOptions = DEFAULT_OPTIONS) -> dict:
    """The coefficient-count verdict of a monitor over ``window`` samples,
    with window means and spreads (``caseprep.contract.convergence``)."""
    return judge_coefficients(coefficient_series(monitor, ref, rotations, axle, window), options)
