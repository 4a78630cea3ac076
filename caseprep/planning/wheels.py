"""Wheels on the ground: placement independent of the body, contact, rolling.

The body is placed by its ride heights, pitch and yaw
(:func:`caseprep.contract.frames.place_body`); the wheels are not carried
along with it. A wheel keeps its horizontal position on the car (its design
centre, placed with the body) but stands on the ground: its axis lies in the
ground plane (the design axis levelled, turned with the model yaw, then by
the optional steering and camber angles), and it is lowered until its lowest
point is ``flattening × radius`` below the ground. The ground cuts that part
away, leaving a flat contact patch the mesher can resolve (a tangent contact
leaves a zero-angle wedge of fluid). With no camber the centre then sits at
the loaded radius r (1 − f) above the ground.

Flattening f = 0.02 by default: a contact patch 2 r √(2f − f²) ≈ 0.4 r long
(common practice, no source; real tyres deflect by several percent under
load).

Frames: design quantities (``centre``, ``axis``, the wheel's geometry) are in
the body frame as drawn (x rearward, y right, z up, m); the results are in
the mesh frame = body frame of the placed body (:mod:`caseprep.contract.frames`).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from caseprep.contract.frames import Placement, model_yaw, rot_z

#: Default depth of the contact flattening, fraction of the radius (common practice, no source).
DEFAULT_FLATTENING = 0.02


def rotation_about(axis, angle: float) -> np.ndarray:
    """Rotation matrix (3×3) by ``angle`` (rad) about the unit vector
    ``axis`` (right-hand rule), Rodrigues' formula
    R = I + sin θ K + (1 − cos θ) K², K the cross-product matrix of the axis.
    Elementary (e.g. Goldstein, *Classical Mechanics*, 3rd ed. 2002, §4.9,
    from memory)."""
    u = np.asarray(axis, dtype=float)
    n = float(np.linalg.norm(u))
    if n == 0.0:
        return np.eye(3)
    u = u / n
    K = np.array([[0.0, -u[2], u[1]], [u[2], 0.0, -u[0]], [-u[1], u[0], 0.0]])
    return np.eye(3) + np.sin(angle) * K + (1.0 - np.cos(angle)) * (K @ K)


def level_rotation(axis) -> np.ndarray:
    """The smallest rotation taking the unit ``axis`` (body frame) to its
    horizontal projection (z = 0), i.e. the wheel set upright. Raises
    ValueError for a vertical axis."""
    a = np.asarray(axis, dtype=float)
    a = a / np.linalg.norm(a)
    h = np.array([a[0], a[1], 0.0])
    nh = float(np.linalg.norm(h))
    if nh < 1e-6:
        raise ValueError("expected a wheel axis with a horizontal component, got a vertical axis")
    h /= nh
    c = float(np.clip(a @ h, -1.0, 1.0))
    u = np.cross(a, h)
    if np.linalg.norm(u) < 1e-15:
        return np.eye(3)
    return rotation_about(u, float(np.arccos(c)))


@dataclass(frozen=True)
class WheelPlacement:
    """A placed wheel. ``rotation`` (3×3) and ``offset`` (3, m) take the
    wheel's geometry from its design pose (body frame as drawn) to the mesh
    frame: p_mesh = rotation @ p + offset. ``centre``, ``contact`` (the
    ground point under the centre) in the mesh frame (m); ``axis`` unit,
    mesh frame; ``centre_height`` above the ground (m); ``radius`` as
    configured (m); ``loaded_radius`` = radius − flattening depth (m);
    ``flattening`` the depth (m) of the lowest point below the ground;
    ``contact_gap`` (m) the lowest point's height plus that depth (zero by
    construction: the wheel touches); ``geometry_radius`` (m) the wheel's
    own radius measured on its geometry (upright); ``width`` (m) its extent
    along the axis."""

    rotation: np.ndarray
    offset: np.ndarray
    centre: np.ndarray
    axis: np.ndarray
    contact: np.ndarray
    centre_height: float
    radius: float
    loaded_radius: float
    flattening: float
    contact_gap: float
    geometry_radius: float
    width: float

    def to_dict(self) -> dict:
        return {"centre": self.centre.tolist(), "axis": self.axis.tolist(), "contact": self.contact.tolist(),
                "centre_height": self.centre_height, "radius": self.radius, "loaded_radius": self.loaded_radius,
                "flattening_depth": self.flattening, "contact_gap": self.contact_gap,
                "geometry_radius": self.geometry_radius, "width": self.width}


def wheel_rotation(placement: Placement, centre, axis, steering_deg: float = 0.0, camber_deg: float = 0.0) -> np.ndarray:
    """Rotation (3×3) of a wheel from its design pose (body frame as drawn)
    to the ground frame: R_camber · R_steer · R_z(ψ) · R_level, with
    R_level setting the design axis upright (:func:`level_rotation`), ψ the
    model yaw (−β in ``yawed-model``, 0 in ``crosswind``), R_steer a turn by
    the steering angle about the ground normal (right-hand rule: positive
    turns the front of the wheel, body −x, to the driver's left) and
    R_camber a tilt by the camber angle about the rolling direction
    (positive: the top of the wheel leans away from the body's centre plane
    y = 0, the SAE sign of camber). Angles in degrees."""
    a_lvl = level_rotation(axis)
    Ry = rot_z(model_yaw(placement.beta, placement.yaw_mode))
    Rs = rot_z(np.radians(steering_deg))
    R0 = Rs @ Ry @ a_lvl
    a = R0 @ (np.asarray(axis, float) / np.linalg.norm(axis))
    side = 1.0 if float(centre[1]) >= 0.0 else -1.0
    y_body = Rs @ Ry @ np.array([0.0, 1.0, 0.0])
    o = a * (side if a @ y_body >= 0 else -side)  # horizontal, pointing away from the centre plane
    u = np.cross(np.array([0.0, 0.0, 1.0]), o)
    return rotation_about(u, np.radians(camber_deg)) @ R0


def place_wheel(placement: Placement, centre, axis, radius: float, points, flattening: float = DEFAULT_FLATTENING,
                steering_deg: float = 0.0, camber_deg: float = 0.0) -> WheelPlacement:
    """Place a wheel on the ground (module docstring).

    ``centre``, ``axis`` the design centre and rotation axis (body frame as
    drawn, m); ``radius`` r (m, its rolling radius unloaded); ``points``
    (N, 3) points of the wheel's geometry in the same frame (its convex-hull
    vertices suffice: the lowest point of a rotated surface is a hull
    vertex); ``flattening`` f (fraction of r); angles in degrees.

    Ground frame: the centre's horizontal position is that of the design
    centre on the placed body; its height H puts the lowest rotated point at
    −f r: H = −min_p (R (p − c))_z − f r. The transform to the mesh frame is
    p_mesh = Rᵀ (R_w (p − c) + C − t), with (R, t) the body placement.
    """
    c = np.asarray(centre, dtype=float)
    a = np.asarray(axis, dtype=float) / np.linalg.norm(axis)
    P = np.asarray(points, dtype=float).reshape(-1, 3)
    Rw = wheel_rotation(placement, c, a, steering_deg, camber_deg)
    rel = P - c
    z_low = float((rel @ Rw.T)[:, 2].min())
    depth = float(flattening) * float(radius)
    H = -z_low - depth
    cg = placement.to_ground(c[None, :])[0]
    C = np.array([cg[0], cg[1], H])
    R, t = placement.rotation, placement.translation
    Rm = R.T @ Rw
    offset = R.T @ (C - t) - Rm @ c
    centre_m = R.T @ (C - t)
    contact_m = R.T @ (np.array([C[0], C[1], 0.0]) - t)
    upright = rel @ level_rotation(a).T
    geo_r = float(-upright[:, 2].min())
    width = float(np.ptp(rel @ a))
    gap = float(z_low + H + depth)
    return WheelPlacement(rotation=Rm, offset=offset, centre=centre_m, axis=Rm @ a, contact=contact_m,
                          centre_height=float(H), radius=float(radius), loaded_radius=float(radius) - depth,
                          flattening=depth, contact_gap=gap, geometry_radius=geo_r, width=width)


def rolling_omega(centre, axis, contact, ground_velocity) -> float:
    """Spin Ω (rad/s, right-hand rule about the unit ``axis``) that makes the
    wheel's surface at the contact point move with the ground: Ω a × r =
    v_g with r = contact − centre, solved in least squares for the part of
    v_g the wheel can produce (perpendicular to the axis):
    Ω = v_g · (a × r)/|a × r|². Points in m, velocity in m/s, one frame.
    Rolling without slip (rigid-body kinematics); a wheel whose rolling
    direction differs from the ground's motion (a yawed model over a belt
    running with the air) still slides sideways by the axial part of v_g."""
    a = np.asarray(axis, float)
    a = a / np.linalg.norm(a)
    r = np.asarray(contact, float) - np.asarray(centre, float)
    tv = np.cross(a, r)
    den = float(tv @ tv)
    if den == 0.0:
        raise ValueError("expected the contact point off the wheel axis")
    return float(np.asarray(ground_velocity, float) @ tv / den)
