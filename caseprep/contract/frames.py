"""Frames, axes and sign conventions shared by caseprep and postproc.

This is the one place where the axes are defined. caseprep writes every case's
transforms into the manifest using these functions; postproc reads them back
and never guesses.

Frames (all right-handed, all in metres)
----------------------------------------
Body frame B
    Fixed to the geometry as the geometry file gives it (after the
    ``length_unit`` scaling). x points **rearward** (nose to tail), y to the
    driver's **right**, z **up**. This is the axis orientation of SAE J1594
    (vehicle aerodynamics terminology), quoted from memory. The geometry file
    must be drawn in this orientation.

Ground frame G
    z is the ground normal (up) and the ground is the plane z = 0. x is the
    direction in which the road moves relative to the vehicle (rearward along
    the direction of travel), y = z × x. With zero pitch and zero model yaw,
    the body axes are parallel to the ground axes.

Wind frame W
    x along the relative wind (the free-stream velocity direction seen from
    the vehicle), z the ground normal (up), y = z × x. Drag is positive along
    +x_W, side force along +y_W, lift along +z_W (downforce = −lift).

Mesh frame
    The frame in which the solver's case is built. underfloor builds every
    case in the **body frame**: the geometry file is shared unchanged by all
    cases, and ride height, pitch and yaw are expressed by placing the ground
    plane, the domain box and the velocity vectors in body coordinates. The
    manifest records ``mesh_frame = "body"`` and the body → ground transform.

Angles (radians in every function; configs and manifests carry degrees,
keys ending in ``_deg``)
------------------------------------------------------------------------
pitch θ
    Rotation of the body about the ground y axis (the pivot's y axis).
    **Positive nose-up** (the right-hand rule about +y turns +x, the tail,
    downwards). Race-car *rake* (rear higher than front) is negative pitch:
    ``rake = -pitch``.
yaw β (relative-wind yaw angle)
    Angle of the relative wind to the body x axis, measured about +z.
    Positive β: the air moves towards the body's +y (it arrives from the
    driver's left). In body axes the relative wind direction is
    (cos β, sin β, 0) for zero pitch. A positive β therefore gives a positive
    side force on a symmetric body.

Yaw modes
---------
``crosswind``
    A car on the road in a side gust: the body is not yawed relative to the
    ground; the ground moves along the body's own x axis at the vehicle speed;
    the air arrives at angle β. The resultant air speed is V / cos β (the
    road speed V plus a crosswind V tan β).
``yawed-model``
    A model turned on a turntable in a tunnel: the body is yawed by −β about
    the ground z axis, the ground moves with the air (along x_W) at the air
    speed V, the air speed is V.

Moments
-------
Moments are about a stated point, components in the stated axes, positive by
the right-hand rule: rolling moment about +x, pitching moment about +y
(positive **nose-up**), yawing moment about +z (positive turns the nose to the
driver's left, the tail to the right).

Transforms
----------
A point in body coordinates ``p_B`` sits in ground coordinates at
``p_G = R @ p_B + t`` where ``R = R_z(ψ) @ R_y(θ)`` (ψ the model yaw, −β in the
``yawed-model`` mode and 0 otherwise) and ``t`` places the pitch pivot so that
the ride-height reference points land at their requested heights. A free
vector (force, velocity, normal) transforms with ``R`` alone.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Sequence

import numpy as np

YAW_MODES: tuple[str, ...] = ("crosswind", "yawed-model")


def rot_y(theta: float) -> np.ndarray:
    """Rotation matrix about +y by ``theta`` radians (right-hand rule).

    Positive ``theta`` turns +x towards −z: with x rearward, the tail goes
    down and the nose up, i.e. positive pitch is nose-up.
    """
    c, s = np.cos(theta), np.sin(theta)
    return np.array([[c, 0.0, s], [0.0, 1.0, 0.0], [-s, 0.0, c]])


def rot_z(psi: float) -> np.ndarray:
    """Rotation matrix about +z by ``psi`` radians (right-hand rule).

    Positive ``psi`` turns +x towards +y.
    """
    c, s = np.cos(psi), np.sin(psi)
    return np.array([[c, -s, 0.0], [s, c, 0.0], [0.0, 0.0, 1.0]])


def model_yaw(beta: float, yaw_mode: str) -> float:
    """Yaw of the body relative to the ground, radians, for a wind yaw ``beta``.

    ``crosswind``: 0 (the body runs straight along the ground).
    ``yawed-model``: −β (the body is turned so the tunnel-axis wind meets it
    at β in body axes).
    """
    if yaw_mode == "crosswind":
        return 0.0
    if yaw_mode == "yawed-model":
        return -beta
    raise ValueError(f"expected yaw mode one of {YAW_MODES}, got {yaw_mode!r}")


def body_to_ground_rotation(theta: float, beta: float, yaw_mode: str) -> np.ndarray:
    """Rotation ``R`` (3×3) taking body-axes vectors to ground axes.

    ``R = R_z(ψ) @ R_y(θ)`` with θ the pitch (rad, nose-up positive) and
    ψ = :func:`model_yaw` (β, yaw_mode).
    """
    return rot_z(model_yaw(beta, yaw_mode)) @ rot_y(theta)


def wind_direction_ground(beta: float, yaw_mode: str) -> np.ndarray:
    """Unit relative-wind direction in ground axes.

    ``crosswind``: (cos β, sin β, 0), the air arrives at β to the road.
    ``yawed-model``: (1, 0, 0), the air runs along the tunnel/ground x axis.
    """
    if yaw_mode == "crosswind":
        return np.array([np.cos(beta), np.sin(beta), 0.0])
    if yaw_mode == "yawed-model":
        return np.array([1.0, 0.0, 0.0])
    raise ValueError(f"expected yaw mode one of {YAW_MODES}, got {yaw_mode!r}")


def ground_velocity_ground(speed: float, beta: float, yaw_mode: str) -> np.ndarray:
    """Velocity of the moving ground relative to the vehicle, m/s, ground axes.

    ``speed`` is the road speed V (m/s). ``crosswind``: V along ground x (the
    body's own axis). ``yawed-model``: the belt moves with the air, V along
    ground x, which is the wind direction in that mode.
    """
    return np.array([speed, 0.0, 0.0])


def air_speed(speed: float, beta: float, yaw_mode: str) -> float:
    """Resultant relative air speed, m/s, used for the dynamic pressure.

    ``crosswind``: V / cos β (road speed plus crosswind V tan β).
    ``yawed-model``: V.
    Valid for |β| < 90°.
    """
    if yaw_mode == "crosswind":
        return float(speed / np.cos(beta))
    if yaw_mode == "yawed-model":
        return float(speed)
    raise ValueError(f"expected yaw mode one of {YAW_MODES}, got {yaw_mode!r}")


def ground_to_wind_rotation(wind_dir_ground: np.ndarray) -> np.ndarray:
    """Rotation (3×3) taking ground-axes vectors to wind axes.

    Rows are the wind axes expressed in ground axes: x_W = horizontal part of
    the wind direction (normalised), z_W = ground normal, y_W = z_W × x_W.
    """
    w = np.asarray(wind_dir_ground, dtype=float).copy()
    w[2] = 0.0
    n = np.linalg.norm(w)
    if n == 0.0:
        raise ValueError("expected a wind direction with a horizontal component, got a vertical or zero vector")
    xw = w / n
    zw = np.array([0.0, 0.0, 1.0])
    yw = np.cross(zw, xw)
    return np.vstack([xw, yw, zw])


@dataclass(frozen=True)
class Placement:
    """Rigid placement of the body on the ground.

    ``rotation`` (3×3) and ``translation`` (3, m) give ``p_G = R @ p_B + t``.
    ``pitch`` and ``beta`` are radians; ``yaw_mode`` as in :data:`YAW_MODES`.
    """

    rotation: np.ndarray
    translation: np.ndarray
    pitch: float
    beta: float
    yaw_mode: str

    def to_ground(self, points_body: np.ndarray) -> np.ndarray:
        """Points (N×3, body frame, m) → ground frame (m). Input untouched."""
        p = np.asarray(points_body, dtype=float)
        return p @ self.rotation.T + self.translation

    def to_body(self, points_ground: np.ndarray) -> np.ndarray:
        """Points (N×3, ground frame, m) → body frame (m). Input untouched."""
        p = np.asarray(points_ground, dtype=float)
        return (p - self.translation) @ self.rotation

    def vector_to_ground(self, v_body: np.ndarray) -> np.ndarray:
        """Free vectors (…×3) body axes → ground axes."""
        return np.asarray(v_body, dtype=float) @ self.rotation.T

    def vector_to_body(self, v_ground: np.ndarray) -> np.ndarray:
        """Free vectors (…×3) ground axes → body axes."""
        return np.asarray(v_ground, dtype=float) @ self.rotation

    @property
    def ground_normal_body(self) -> np.ndarray:
        """Unit ground normal (up) in body axes."""
        return self.vector_to_body(np.array([0.0, 0.0, 1.0]))

    @property
    def ground_point_body(self) -> np.ndarray:
        """A point of the ground plane (z_G = 0) in body coordinates, m."""
        return self.to_body(np.zeros(3))

    def height_above_ground(self, points_body: np.ndarray) -> np.ndarray:
        """Height z_G (m) above the ground of body-frame points."""
        return self.to_ground(points_body)[..., 2]

    def to_dict(self) -> dict:
        """JSON-ready form (the manifest's ``frames`` entry)."""
        return {
            "rotation_body_to_ground": self.rotation.tolist(),
            "translation_body_to_ground": self.translation.tolist(),
            "pitch_deg": float(np.degrees(self.pitch)),
            "yaw_deg": float(np.degrees(self.beta)),
            "yaw_mode": self.yaw_mode,
        }

    @classmethod
    def from_dict(cls, d: dict) -> "Placement":
        """Inverse of :meth:`to_dict`."""
        return cls(
            rotation=np.asarray(d["rotation_body_to_ground"], dtype=float).reshape(3, 3),
            translation=np.asarray(d["translation_body_to_ground"], dtype=float).reshape(3),
            pitch=float(np.radians(d["pitch_deg"])),
            beta=float(np.radians(d["yaw_deg"])),
            yaw_mode=str(d["yaw_mode"]),
        )


def place_body(
    ref_front_body: np.ndarray,
    ref_rear_body: np.ndarray,
    ride_height_front: float,
    ride_height_rear: float,
    beta: float = 0.0,
    yaw_mode: str = "crosswind",
) -> Placement:
    """Place the body so its two ride-height reference points sit at the
    requested heights above the ground.

    Parameters
    ----------
    ref_front_body, ref_rear_body : (3,) body-frame points (m) on the
        underside where ride height is measured (front and rear).
    ride_height_front, ride_height_rear : heights (m) above the ground.
    beta : relative-wind yaw angle (rad).
    yaw_mode : ``crosswind`` or ``yawed-model``.

    Returns the :class:`Placement`. The pitch is the rotation about y that
    gives the requested height difference over the reference points' x
    distance: sin(θ) Δx_B + cos(θ) Δz_B = −Δh, solved exactly (Δ = rear −
    front), so that the reference points land at the heights to round-off.
    The pivot is the front reference point; the translation then lifts it to
    ``ride_height_front`` and puts it at ground x = y = 0 before yaw.
    """
    f = np.asarray(ref_front_body, dtype=float)
    r = np.asarray(ref_rear_body, dtype=float)
    d = r - f
    dh = ride_height_rear - ride_height_front
    # z_G(r) - z_G(f) = (R_y d)_z = -sin(θ) dx + cos(θ) dz = dh
    a, b = -d[0], d[2]
    rho = np.hypot(a, b)
    if rho == 0.0 or abs(dh) > rho:
        raise ValueError(
            f"expected ride heights whose difference ({dh:.6g} m) is smaller than the distance "
            f"between the reference points ({rho:.6g} m in the x-z plane)"
        )
    # a sin θ + b cos θ = dh  →  ρ sin(θ + φ) = dh with φ = atan2(b, a)
    phi = np.arctan2(b, a)
    s = np.arcsin(dh / rho)
    candidates = [(c + np.pi) % (2 * np.pi) - np.pi for c in (s - phi, np.pi - s - phi)]
    theta = min(candidates, key=abs)  # the small-angle solution, not the upside-down one
    R = body_to_ground_rotation(theta, beta, yaw_mode)
    t = np.array([0.0, 0.0, ride_height_front]) - R @ f
    return Placement(rotation=R, translation=t, pitch=float(theta), beta=float(beta), yaw_mode=yaw_mode)


# --------------------------------------------------------------------------- axes sets of a placed body

def axes_rotations(placement: Placement | None, wind_direction_body: Sequence[float] | None = None) -> dict[str, np.ndarray]:
    """Rotations (3×3) taking body-axes vectors to each axes set.

    body: I; ground: R (``placement.rotation``, p_G = R p_B + t); wind:
    ``ground_to_wind_rotation(R w_B) @ R`` with w_B the relative-wind direction
    in body axes (default: along body +x, i.e. zero yaw). Without a placement
    the body is taken level on the ground with zero yaw (R = I)."""
    R = np.eye(3) if placement is None else np.asarray(placement.rotation, dtype=float)
    w_b = np.array([1.0, 0.0, 0.0]) if wind_direction_body is None else np.asarray(wind_direction_body, dtype=float)
    W = ground_to_wind_rotation(R @ w_b)
    return {"body": np.eye(3), "ground": R, "wind": W @ R}


def axle_axes(placement: Placement | None) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """(x_A, y_A, z_A, g): axle axes as unit vectors in body axes and a point
    of the ground plane (body frame, m). z_A = ground normal (up), x_A = body
    x projected on the ground plane (rearward), y_A = z_A × x_A. Without a
    placement: body axes and the plane z_B = 0."""
    if placement is None:
        return np.eye(3)[0], np.eye(3)[1], np.eye(3)[2], np.zeros(3)
    z = placement.ground_normal_body
    x = np.array([1.0, 0.0, 0.0]) - z[0] * z
    x /= np.linalg.norm(x)
    return x, np.cross(z, x), z, placement.ground_point_body
