"""The aerodynamic platform: where the car rides at speed on its springs.

Model (quasi-static heave and pitch; SI units): the front and rear ride
heights h = (h_f, h_r) (m) at the ride-height reference points, springs of
rates k = (k_f, k_r) (N/m, wheel rates referred to those points, linear),
static ride heights h₀ (m, with the car's weight already on the springs),
and the aerodynamic axle loads of the fitted maps

    D_f(h, V) = −C_LF(h) · q · A,   D_r(h, V) = −C_LR(h) · q · A,   q = ½ ρ V²

(N, downforce positive; forces scale with V² at fixed coefficients, i.e.
Reynolds-number effects neglected; the axle loads are applied at the
ride-height points). Equilibrium solves

    G(h) = k ∘ (h₀ − h) − D(h, V) = 0,  i.e.  h = h₀ − D(h, V)/k

by damped Newton iteration with the Jacobian J = −diag(k) − ∂D/∂h (central
differences of the maps, step 1 µm), continued in speed from h₀ at V = 0 so
that the branch the car actually reaches is followed. The equilibrium is
statically stable when S = diag(k) + ∂D/∂h has det S > 0 and tr S > 0 (both
eigenvalues of the linearised stiffness positive; a non-symmetric 2×2 case);
where det S reaches 0 the solution folds and the floor is pulled down
(static divergence, ``bottoming_mode`` "divergence"). Contact: a ride height
reaching 0 (``bottoming_mode`` "contact").

Heave aerodynamic derivative: ∂F_z/∂h along h_f = h_r + const (both ride
heights moved together), F_z = (C_LF + C_LR) q A the aerodynamic lift (N, up
positive). It is positive while lowering the car adds downforce (the
attached regime) and negative past the downforce peak (stall); a sign
change with speed means the equilibrium has crossed the peak. See Katz,
*Race Car Aerodynamics*, Bentley 1995, ch. 6 (ground effect and ride-height
sensitivity; from memory), and Zhang, Toet & Zerihan, Appl. Mech. Rev. 59
(2006) for the force reduction below the peak.

Validity: the maps are only known inside the tested ride heights; states
outside them are flagged ``extrapolated`` (a bottoming speed is nearly
always an extrapolation and says so).
"""
from __future__ import annotations

from dataclasses import asdict, dataclass, field
from typing import Callable

import numpy as np

from .terms import BottomingMode, PlatformState

Coef = Callable[[float, float], float]
STEP = 1e-6          # m, finite-difference step of the map derivatives
MAX_NEWTON = 60


@dataclass(frozen=True)
class Platform:
    """Static ride heights (m) and linear rates (N/m) at the ride-height points."""

    static_front: float
    static_rear: float
    rate_front: float
    rate_rear: float

    def __post_init__(self) -> None:
        if not (self.static_front > 0 and self.static_rear > 0 and self.rate_front > 0 and self.rate_rear > 0):
            raise ValueError(f"expected positive static ride heights and rates, got {self}")

    @property
    def h0(self) -> np.ndarray:
        return np.array([self.static_front, self.static_rear])

    @property
    def k(self) -> np.ndarray:
        return np.array([self.rate_front, self.rate_rear])


@dataclass(frozen=True)
class AxleLoads:
    """The aerodynamic side: axle lift coefficient maps C_LF(h_f, h_r),
    C_LR(h_f, h_r) (dimensionless), reference area (m²), air density
    (kg/m³) and an optional test ``extrapolated(h_f, h_r) → bool``."""

    clf: Coef
    clr: Coef
    area: float
    rho: float
    extrapolated: Callable[[float, float], bool] | None = field(default=None, compare=False)

    def downforce(self, h: np.ndarray, speed: float) -> np.ndarray:
        """(D_f, D_r) in N, downforce positive."""
        qa = 0.5 * self.rho * speed**2 * self.area
        return -qa * np.array([float(self.clf(h[0], h[1])), float(self.clr(h[0], h[1]))])

    def jacobian(self, h: np.ndarray, speed: float) -> np.ndarray:
        """∂D/∂h (N/m), rows (D_f, D_r), columns (h_f, h_r)."""
        cols = []
        for j in range(2):
            e = np.zeros(2)
            e[j] = STEP
            cols.append((self.downforce(h + e, speed) - self.downforce(h - e, speed)) / (2 * STEP))
        return np.stack(cols, axis=1)

    def heave_derivative(self, h: np.ndarray, speed: float) -> float:
        """∂F_z/∂h along (1, 1) (N/m), F_z = aerodynamic lift (up positive)."""
        e = np.array([STEP, STEP])
        lift = lambda x: -float(np.sum(self.downforce(x, speed)))  # noqa: E731
        return (lift(h + e) - lift(h - e)) / (2 * STEP)


@dataclass(frozen=True)
class State:
    """The car at one speed (m, N, N/m)."""

    speed: float
    state: PlatformState
    ride_height_front: float
    ride_height_rear: float
    downforce_front: float
    downforce_rear: float
    heave_aero_derivative: float
    stable: bool
    extrapolated: bool

    @property
    def clearance(self) -> float:
        return min(self.ride_height_front, self.ride_height_rear)

    def to_dict(self) -> dict:
        d = asdict(self)
        d["state"] = str(self.state)
        d["clearance"] = self.clearance
        return d


def _newton(p: Platform, a: AxleLoads, speed: float, h_start: np.ndarray) -> tuple[np.ndarray, bool]:
    """Solve G(h) = 0 from ``h_start``; returns (h, converged)."""
    h = np.array(h_start, dtype=float)
    scale = float(np.max(p.k * p.h0))
    g = p.k * (p.h0 - h) - a.downforce(h, speed)
    for _ in range(MAX_NEWTON):
        J = -np.diag(p.k) - a.jacobian(h, speed)
        try:
            step = -np.linalg.solve(J, g)
        except np.linalg.LinAlgError:
            return h, False
        lam = 1.0
        while lam > 1e-4:
            h_new = h + lam * step
            g_new = p.k * (p.h0 - h_new) - a.downforce(h_new, speed)
            if np.linalg.norm(g_new) < np.linalg.norm(g) or np.linalg.norm(g_new) < 1e-12 * scale:
                break
            lam *= 0.5
        else:
            return h, False
        h, g = h_new, g_new
        if np.linalg.norm(g) <= 1e-10 * scale and np.max(np.abs(lam * step)) < 1e-9:
            return h, True
    return h, bool(np.linalg.norm(g) <= 1e-8 * scale)


def state_at(p: Platform, a: AxleLoads, speed: float, h_start: np.ndarray | None = None) -> State:
    """Equilibrium at one speed (m/s), continued from ``h_start`` (default h₀)."""
    h, ok = _newton(p, a, speed, p.h0 if h_start is None else h_start)
    S = np.diag(p.k) + a.jacobian(h, speed)
    stable = bool(np.linalg.det(S) > 0 and np.trace(S) > 0)
    if not ok:
        st = PlatformState.NO_EQUILIBRIUM
    elif min(h) <= 0:
        st = PlatformState.ON_GROUND
    else:
        st = PlatformState.EQUILIBRIUM if stable else PlatformState.NO_EQUILIBRIUM
    d = a.downforce(h, speed)
    ex = bool(a.extrapolated(h[0], h[1])) if a.extrapolated is not None else False
    return State(float(speed), st, float(h[0]), float(h[1]), float(d[0]), float(d[1]),
                 a.heave_derivative(h, speed), stable, ex)


@dataclass(frozen=True)
class PlatformResult:
    """The platform over speed: ``states`` at the requested speeds (m/s);
    ``bottoming_speed`` (m/s, None when the floor stays off the ground up to
    ``speed_max``) with its ``bottoming_mode`` and whether the maps were
    extrapolated there; ``heave_sign_changes`` the speeds (m/s) where the
    heave aerodynamic derivative at equilibrium changes sign, with the signs
    before and after; ``stall_crossing`` True when it turns negative (the
    equilibrium passes the downforce peak)."""

    states: tuple[State, ...]
    speed_max: float
    bottoming_speed: float | None
    bottoming_mode: BottomingMode | None
    bottoming_extrapolated: bool
    heave_sign_changes: tuple[dict, ...]
    stall_crossing: bool
    stall_crossing_speed: float | None

    def to_dict(self) -> dict:
        return {"states": [s.to_dict() for s in self.states], "speed_max": self.speed_max,
                "bottoming_speed": self.bottoming_speed,
                "bottoming_mode": None if self.bottoming_mode is None else str(self.bottoming_mode),
                "bottoming_extrapolated": self.bottoming_extrapolated,
                "heave_sign_changes": list(self.heave_sign_changes), "stall_crossing": self.stall_crossing,
                "stall_crossing_speed": self.stall_crossing_speed}


def _good(s: State) -> bool:
    return s.state is PlatformState.EQUILIBRIUM


def _bisect(p: Platform, a: AxleLoads, lo: State, hi_speed: float, test: Callable[[State], bool],
            iters: int = 50) -> State:
    """Last state (from ``lo``, where ``test`` holds) before ``test`` fails on
    the way to ``hi_speed``; bisection in speed, continued from the good side."""
    for _ in range(iters):
        mid = 0.5 * (lo.speed + hi_speed)
        s = state_at(p, a, mid, np.array([lo.ride_height_front, lo.ride_height_rear]))
        if test(s):
            lo = s
        else:
            hi_speed = mid
        if hi_speed - lo.speed <= 1e-9 * max(hi_speed, 1.0):
            break
    return lo


def _walk(p: Platform, a: AxleLoads, grid: np.ndarray) -> tuple[list[State], float | None]:
    """Continuation along ``grid`` (m/s, ascending, > 0) until the first
    state that is not a clean equilibrium; returns the good states and the
    first failing speed (None when none failed). A jump of the ride heights
    much larger than the previous step is treated as a fold."""
    h = p.h0.copy()
    good: list[State] = []
    last_step = 0.0
    for v in grid:
        s = state_at(p, a, float(v), h)
        h_new = np.array([s.ride_height_front, s.ride_height_rear])
        step = float(np.max(np.abs(h_new - h)))
        if not _good(s) or (good and step > 10 * last_step + 5e-4):
            return good, float(v)
        good.append(s)
        last_step, h = step, h_new
    return good, None


def platform_response(p: Platform, a: AxleLoads, speeds, speed_max: float | None = None,
                      n_steps: int = 200) -> PlatformResult:
    """Equilibria at ``speeds`` (m/s), bottoming speed and heave-derivative
    sign changes up to ``speed_max`` (default 1.5 × the largest speed),
    following the branch from rest on ``n_steps`` speed steps (module
    docstring)."""
    speeds = sorted(float(v) for v in speeds)
    if not speeds or speeds[0] <= 0:
        raise ValueError(f"expected positive speeds, got {speeds}")
    vmax = float(speed_max) if speed_max else 1.5 * speeds[-1]
    grid = np.union1d(np.linspace(0.0, vmax, n_steps + 1)[1:], speeds)
    good, v_fail = _walk(p, a, grid)
    bottom = mode = None
    bottom_ex = False
    if v_fail is not None:
        start = good[-1] if good else state_at(p, a, 0.0)
        last = _bisect(p, a, start, v_fail, _good)
        nxt = state_at(p, a, min(last.speed * (1 + 1e-9) + 1e-12, v_fail),
                       np.array([last.ride_height_front, last.ride_height_rear]))
        bottom = last.speed
        mode = BottomingMode.CONTACT if (nxt.state is PlatformState.ON_GROUND or last.clearance < 1e-6) \
            else BottomingMode.DIVERGENCE
        bottom_ex = last.extrapolated or nxt.extrapolated
        good = [s for s in good if s.speed <= bottom]
    changes, crossing = [], None
    for s0, s1 in zip(good, good[1:]):
        if np.sign(s0.heave_aero_derivative) != np.sign(s1.heave_aero_derivative) and s0.heave_aero_derivative != 0:
            sgn = np.sign(s0.heave_aero_derivative)
            at = _bisect(p, a, s0, s1.speed, lambda s, sgn=sgn: np.sign(s.heave_aero_derivative) == sgn)
            changes.append({"speed": at.speed, "from": "+" if sgn > 0 else "-", "to": "-" if sgn > 0 else "+",
                            "ride_height_front": at.ride_height_front, "ride_height_rear": at.ride_height_rear})
            if sgn > 0 and crossing is None:
                crossing = at.speed
    by_speed = {s.speed: s for s in good}
    nan = float("nan")
    states = tuple(by_speed[v] if v in by_speed else
                   State(v, PlatformState.ON_GROUND if mode is BottomingMode.CONTACT else PlatformState.NO_EQUILIBRIUM,
                         nan, nan, nan, nan, nan, False, True) for v in speeds)
    return PlatformResult(states, vmax, bottom, mode, bottom_ex, tuple(changes), crossing is not None, crossing)
