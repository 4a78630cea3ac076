"""Coefficients, axes transforms, axle loads, aero balance, centre of pressure
and directional stability margin (pure numeric kernel).

Frames and signs are those of :mod:`caseprep.contract.frames` (the single source of
truth): the case mesh frame is the **body frame** (x rearward, y right, z up);
the ground frame has z up with the ground at z = 0; the wind frame has x along
the (horizontal) relative wind and z up. Forces N, moments N·m, lengths m,
dynamic pressure Pa, coefficients dimensionless.

Coefficients (in any axes set a ∈ {body, wind, ground})
    C_F,a = F_a / (q A),  C_M,a = M_a / (q A L),  q = ½ ρ V²,
with the reference area A (m²), length L (m), density ρ (kg/m³) and air
speed V (m/s) of the case (the manifest's ``reference``). Named wind-axes
coefficients: drag C_D = C_x,W, side force C_S = C_y,W, lift C_L = C_z,W
(downforce coefficient −C_L), rolling C_l = C_Mx,W, pitching C_m = C_My,W
(positive nose-up), yawing C_n = C_Mz,W, moments about the reference moment
point. These definitions are the usual vehicle-aerodynamics ones (SAE J1594
terminology, from memory), with underfloor's axes.

Axle axes (for loads, balance and centres of pressure)
    z_A = ground normal (up), x_A = body x projected on the ground plane
    (rearward along the vehicle), y_A = z_A × x_A. With zero pitch and
    ``crosswind`` yaw they are the ground axes. Loads on the axles are taken
    along z_A; the pitching moment about the wheelbase midpoint *at ground
    level* includes the drag's lever arm to the ground, so the axle loads are
    the loads the tyres feel.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Mapping

import numpy as np

from caseprep.contract.errors import UserError

from postproc.kernels.forces import ForceResult

#: A load component smaller than this fraction of the resultant is treated as
#: zero when it would be a divisor (balance, centres of pressure).
UNDEFINED_REL = 1e-6

#: Axes of a body level on the ground at zero yaw: every axes set is the body's.
LEVEL_ROTATIONS: dict[str, np.ndarray] = {"body": np.eye(3), "ground": np.eye(3), "wind": np.eye(3)}
#: (x_A, y_A, z_A, ground point): axle axes as unit vectors in body axes and a
#: point of the ground plane (body frame, m), see
#: :func:`caseprep.contract.frames.axle_axes`.
AxleAxes = tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]
#: Axle axes of a body level on the ground (the plane z_B = 0).
LEVEL_AXLE: AxleAxes = (np.eye(3)[0], np.eye(3)[1], np.eye(3)[2], np.zeros(3))


@dataclass(frozen=True)
class ReferenceValues:
    """Reference values for coefficients (SI). Points are body-frame, m.

    ``wheelbase``, axles and ``cog`` are needed only for axle loads, balance,
    centres of pressure and the stability margin."""

    area: float
    length: float
    rho: float
    speed: float
    moment_point: tuple[float, float, float] = (0.0, 0.0, 0.0)
    wheelbase: float | None = None
    front_axle: tuple[float, float, float] | None = None
    rear_axle: tuple[float, float, float] | None = None
    cog: tuple[float, float, float] | None = None

    def __post_init__(self) -> None:
        for k in ("area", "length", "rho", "speed"):
            v = getattr(self, k)
            if not (np.isfinite(v) and v > 0):
                raise UserError(expected=f"a positive reference {k}", got=v, key=k,
                                fix="give the reference values (area m², length m, rho kg/m³, speed m/s)")

    @property
    def q(self) -> float:
        """Dynamic pressure ½ρV², Pa."""
        return 0.5 * self.rho * self.speed**2

    @classmethod
    def from_reference(cls, ref) -> "ReferenceValues":
        """From a :class:`caseprep.contract.manifest.Reference`."""
        return cls(area=ref.area, length=ref.length, rho=ref.rho, speed=ref.speed, moment_point=tuple(ref.moment_point),
                   wheelbase=ref.wheelbase, front_axle=tuple(ref.front_axle), rear_axle=tuple(ref.rear_axle),
                   cog=tuple(ref.cog) if ref.cog is not None else None)


# --------------------------------------------------------------------------- axes

@dataclass(frozen=True)
class AxesLoads:
    """Force (N) and moment (N·m, about the reference moment point) in one
    axes set, with their coefficients (F/(qA), M/(qAL))."""

    axes: str
    force: np.ndarray
    moment: np.ndarray
    c_force: np.ndarray
    c_moment: np.ndarray

    def to_dict(self) -> dict:
        return {"force": self.force.tolist(), "moment": self.moment.tolist(),
                "c_force": self.c_force.tolist(), "c_moment": self.c_moment.tolist()}


@dataclass(frozen=True)
class Coefficients:
    """Loads and coefficients in body, wind and ground axes (see module doc)."""

    by_axes: dict[str, AxesLoads]
    q: float
    area: float
    length: float
    moment_point: np.ndarray

    @property
    def drag(self) -> float:
        return float(self.by_axes["wind"].c_force[0])

    @property
    def side(self) -> float:
        return float(self.by_axes["wind"].c_force[1])

    @property
    def lift(self) -> float:
        return float(self.by_axes["wind"].c_force[2])

    @property
    def downforce(self) -> float:
        return -self.lift

    @property
    def rolling(self) -> float:
        return float(self.by_axes["wind"].c_moment[0])

    @property
    def pitching(self) -> float:
        return float(self.by_axes["wind"].c_moment[1])

    @property
    def yawing(self) -> float:
        return float(self.by_axes["wind"].c_moment[2])

    def to_dict(self) -> dict:
        return {
            "q": self.q, "area": self.area, "length": self.length, "moment_point": self.moment_point.tolist(),
            "drag": self.drag, "side": self.side, "lift": self.lift, "downforce": self.downforce,
            "rolling": self.rolling, "pitching": self.pitching, "yawing": self.yawing,
            "axes": {k: v.to_dict() for k, v in self.by_axes.items()},
        }


def coefficients(result: ForceResult, ref: ReferenceValues,
                 rotations: Mapping[str, np.ndarray] | None = None) -> Coefficients:
    """Force and moment coefficients in body, wind and ground axes.

    ``rotations``: the 3×3 rotations taking body-axes vectors to each axes
    set (:func:`caseprep.contract.frames.axes_rotations` of the case's
    placement); None: the body level on the ground at zero yaw (all three
    the identity).

    ``result`` holds body-frame loads (the case mesh frame); the moment is
    moved to ``ref.moment_point`` (body frame, m) first. Formulas: see the
    module doc (C_F = F/(qA), C_M = M/(qAL), q = ½ρV²). Valid for any
    attitude; the wind axes need a relative wind with a horizontal part."""
    mp = np.asarray(ref.moment_point, dtype=float)
    F = np.asarray(result.force, dtype=float)
    M = result.moment_about(mp)
    q = ref.q
    out = {}
    for name, Q in (rotations or LEVEL_ROTATIONS).items():
        f, m = Q @ F, Q @ M
        out[name] = AxesLoads(name, f, m, f / (q * ref.area), m / (q * ref.area * ref.length))
    return Coefficients(by_axes=out, q=q, area=ref.area, length=ref.length, moment_point=mp)


# --------------------------------------------------------------------------- axle loads, balance, CoP

@dataclass(frozen=True)
class Balance:
    """Axle loads, aero balance, centres of pressure, stability margin.

    All along the axle axes (module doc). Lengths m, positions measured
    rearward from the front axle along x_A; loads N (positive up = lift);
    coefficients on q·A. ``None`` marks an undefined value, with the reason
    in ``notes``.
    """

    wheelbase: float
    c_lift: float
    c_pitch_ground_mid: float
    c_lift_front: float
    c_lift_rear: float
    lift_front: float
    lift_rear: float
    balance_front: float | None
    cp_x: float | None
    cp_fraction: float | None
    cp_ground_point: np.ndarray | None
    side_force: float
    yaw_moment_front: float
    side_cp_x: float | None
    side_cp_behind_cog: float | None
    stability_margin: float | None
    notes: tuple[str, ...]

    def to_dict(self) -> dict:
        d = {k: getattr(self, k) for k in self.__dataclass_fields__}
        d["cp_ground_point"] = None if self.cp_ground_point is None else self.cp_ground_point.tolist()
        d["notes"] = list(self.notes)
        d["downforce_front"] = -self.lift_front
        d["downforce_rear"] = -self.lift_rear
        return d


def balance(result: ForceResult, ref: ReferenceValues, axle: AxleAxes | None = None) -> Balance:
    """Axle loads, aero balance, centres of pressure and stability margin.

    Axle loads (statics of a rigid beam on two supports): with the lift
    L = F·z_A (N) and the pitching moment M (N·m, positive nose-up, about y_A)
    taken about the wheelbase midpoint at ground level,
        L_F = L/2 + M/ℓ,  L_R = L/2 − M/ℓ    (ℓ the wheelbase, m),
    i.e. C_LF = C_L/2 + C_M, C_LR = C_L/2 − C_M with C_M = M/(q A ℓ).
    Derivation: a lift L_F at the front axle (x = −ℓ/2 from the midpoint, x
    rearward) gives the moment (−ℓ/2 x̂) × (L_F ẑ) = +ℓ/2 L_F ŷ (nose-up);
    L_R at +ℓ/2 gives −ℓ/2 L_R ŷ; so M = ℓ/2 (L_F − L_R) and L = L_F + L_R.

    Aero balance = front share of the downforce = L_F / L (the same for lift
    and downforce). **Undefined** (None) when |L| ≤ 1e-6 · max(|F|, |L_F| + |L_R|):
    with no net downforce a share has no meaning; no division happens.

    Centre of pressure (pitch): the point on the ground, under the vehicle's
    centre plane, about which the pitching moment vanishes: s = −M/L from
    the midpoint, reported as ``cp_x`` = ℓ/2 + s rearward of the front axle
    and ``cp_fraction`` = cp_x/ℓ (0 at the front axle, 1 at the rear). It is
    where the resultant's line of action, projected on the x_A–z_A plane,
    meets the ground, and balance_front = 1 − cp_fraction. ``cp_ground_point``
    is where the full 3-D line of action (the central axis of the force
    system, r = r_0 + F × M_0/|F|² + tF) meets the ground plane (body frame,
    m). Both undefined when L ≈ 0 as above.

    Side-force centre of pressure (yaw): a side force Y ŷ_A acting at x x̂_A
    from a point P gives about P the moment (x x̂_A) × (Y ŷ_A) = xY ẑ_A, so
    the yawing moment is N = xY and **x_cp = +N/Y** rearward of P in these
    axes (x rearward, N positive nose-left). (In axes with x forward the
    same point is x = −N/Y ahead — the sign flips with the x axis, not with
    the physics.) P is the front axle at ground level; ``side_cp_x`` is m
    rearward of the front axle; ``side_cp_behind_cog`` is x_cp − x_cog (m,
    positive when the CoP is behind the centre of gravity); the directional
    stability margin is that distance over the wheelbase, positive =
    stabilising (the side force then yaws the nose back into the wind;
    common practice for high-speed vehicles, no source). The drag's own
    yawing moment (from a lateral offset of the drag) is counted in N, as in
    any measured yawing moment. Undefined when |Y| ≤ 1e-6 · |F| or no CG.

    The wheelbase ℓ (m, also the reference length of C_M) is the axles'
    distance along x_A once both are projected on the ground; it equals the
    manifest's ``wheelbase`` at zero pitch and is 1 − cos θ shorter when
    pitched (statics needs the distance between the tyre contacts).
    Needs ``ref.front_axle``, ``ref.rear_axle`` (body frame, m);
    ``ref.cog`` for the margin.
    """
    if ref.front_axle is None or ref.rear_axle is None:
        raise UserError(expected="front and rear axle positions and a wheelbase", got="missing reference values",
                        key="reference", fix="give --front-axle, --rear-axle (body frame, m) or use a case with a manifest")
    xA, yA, zA, g = axle if axle is not None else LEVEL_AXLE
    fa = np.asarray(ref.front_axle, dtype=float)
    ra = np.asarray(ref.rear_axle, dtype=float)
    on_ground = lambda p: p - np.dot(p - g, zA) * zA  # noqa: E731
    fa_g, ra_g = on_ground(fa), on_ground(ra)
    mid = 0.5 * (fa_g + ra_g)
    wb_geom = float(np.dot(ra_g - fa_g, xA))
    if not wb_geom > 0:
        raise UserError(expected="a rear axle behind the front axle (larger body x)", got=f"{wb_geom:.6g} m apart",
                        key="reference.rear_axle", fix="check the axle positions (body frame, x rearward)")
    wb = wb_geom
    qA = ref.q * ref.area
    F = np.asarray(result.force, dtype=float)
    fmag = float(np.linalg.norm(F))
    L = float(F @ zA)
    M = float(result.moment_about(mid) @ yA)
    LF, LR = L / 2 + M / wb, L / 2 - M / wb
    notes = []
    tiny = UNDEFINED_REL * max(fmag, abs(LF) + abs(LR))
    if abs(L) <= tiny or fmag == 0.0:
        bal = cp_x = cp_frac = None
        cp_pt = None
        notes.append("no net lift/downforce: aero balance and the pitch centre of pressure are undefined")
    else:
        bal = LF / L
        s = -M / L
        cp_x = wb_geom / 2 + s
        cp_frac = cp_x / wb_geom
        M0 = result.moment
        r0 = result.about + np.cross(F, M0) / fmag**2
        t = -np.dot(r0 - g, zA) / L
        cp_pt = r0 + t * F
    Y = float(F @ yA)
    N = float(result.moment_about(fa_g) @ zA)
    if fmag == 0.0 or abs(Y) <= UNDEFINED_REL * fmag:
        side_x = behind = margin = None
        notes.append("no side force: the side-force centre of pressure is undefined")
    else:
        side_x = N / Y
        if ref.cog is None:
            behind = margin = None
            notes.append("no centre of gravity given: no stability margin")
        else:
            x_cog = float(np.dot(np.asarray(ref.cog, dtype=float) - fa_g, xA))
            behind = side_x - x_cog
            margin = behind / wb
    return Balance(
        wheelbase=wb, c_lift=L / qA, c_pitch_ground_mid=M / (qA * wb), c_lift_front=LF / qA, c_lift_rear=LR / qA,
        lift_front=LF, lift_rear=LR, balance_front=bal, cp_x=cp_x, cp_fraction=cp_frac, cp_ground_point=cp_pt,
        side_force=Y, yaw_moment_front=N, side_cp_x=side_x, side_cp_behind_cog=behind, stability_margin=margin,
        notes=tuple(notes),
    )
