"""The sweep matrix: config → list of operating points with stable case ids.

Three ways to describe a sweep (see the README):

factorial
    ``variants × ride_height × pitch_deg × yaw_deg × speed × mesh_level``.
front/rear pairs
    ``variants × ride_heights_front_rear × yaw_deg × speed × mesh_level``:
    the way aero maps are drawn (front and rear ride height as the axes).
points
    an explicit list (``[[sweep.points]]``); a point without ``variant``
    is run for every variant.

Ride height definition
----------------------
Ride height is the height above the ground (m, along the ground normal) of
a body-frame reference point on the underside. The config names two of them,
``ride_height_point_front`` and ``ride_height_point_rear``, and the
``pitch_pivot`` (default: the front point). In the factorial mode,
``ride_height`` h is the height of the **pivot** and the body is pitched by
θ about it, so a body point p sits at

    z_G(p) = h + (R_y(θ) (p − pivot))_z

(:func:`caseprep.contract.frames.rot_y`, pitch positive nose-up). The front and rear
ride heights of every case follow exactly from that; placement then uses
:func:`caseprep.contract.frames.place_body` with those two heights, which reproduces θ
to round-off. In the pairs mode the two heights are given and θ follows.

Case ids
--------
``<variant>-<8 hex>`` where the hex digits are the start of the SHA-256 of the
point's canonical parameter set: variant, front and rear ride height (m,
rounded to 1 µm), yaw (deg, 1e-4), speed (m/s, 1e-4) and mesh level (and,
without a ground, the pitch in deg, 1e-4; with a ground the two ride heights
already fix it). The id
depends on the point alone, so adding a value to an axis adds cases without
renaming the existing ones, and the same physical point gets the same id in
the factorial and the pairs mode. Study-wide settings (air, mesh preset, yaw
mode) are not part of the id: write a changed study to a new sweep folder.
"""
from __future__ import annotations

import hashlib
import itertools
import json
from dataclasses import dataclass

import numpy as np

from caseprep.config.schema import Config
from caseprep.contract.errors import UserError, UserErrors
from caseprep.contract.frames import place_body, rot_y
from caseprep.contract.limits import MAX_CASES


@dataclass(frozen=True)
class SweepPoint:
    """One operating point. Heights in m (None without a ground), angles in
    degrees, speed (road speed V) in m/s. ``source`` names the config key the
    point came from (for messages)."""

    variant: str
    ride_height_front: float | None
    ride_height_rear: float | None
    pitch_deg: float
    yaw_deg: float
    speed: float
    mesh_level: int
    source: str

    @property
    def case_id(self) -> str:
        return case_id(self)

    def params(self) -> dict:
        """The manifest's ``params`` (SI, degrees)."""
        return {
            "ride_height_front": self.ride_height_front,
            "ride_height_rear": self.ride_height_rear,
            "pitch_deg": self.pitch_deg,
            "yaw_deg": self.yaw_deg,
            "speed": self.speed,
            "mesh_level": self.mesh_level,
        }


def _fmt(x: float | None, nd: int) -> str:
    if x is None:
        return "none"
    s = f"{x:.{nd}f}"
    return s[1:] if s.startswith("-") and float(s) == 0.0 else s


def canonical_parameters(p: SweepPoint) -> str:
    """The canonical, rounded text of a point's parameters (hashed for the id)."""
    d = {
        "variant": p.variant,
        "ride_height_front": _fmt(p.ride_height_front, 6),
        "ride_height_rear": _fmt(p.ride_height_rear, 6),
        "yaw_deg": _fmt(p.yaw_deg, 4),
        "speed": _fmt(p.speed, 4),
        "mesh_level": int(p.mesh_level),
    }
    if p.ride_height_front is None:  # no ground: the pitch is not implied by ride heights
        d["pitch_deg"] = _fmt(p.pitch_deg, 4)
    return json.dumps(d, sort_keys=True, separators=(",", ":"))


def case_id(p: SweepPoint) -> str:
    """``<variant>-<first 8 hex digits of sha256(canonical parameters)>``."""
    return f"{p.variant}-{hashlib.sha256(canonical_parameters(p).encode()).hexdigest()[:8]}"


def heights_from_pitch(ride_height: float, pitch_deg: float, ref_front, ref_rear, pivot) -> tuple[float, float]:
    """Front and rear ride heights (m) for the pivot at ``ride_height`` (m)
    and the pitch ``pitch_deg`` (degrees, nose-up positive).

    z_G(p) = h + (R_y(θ)(p − pivot))_z for p the front and rear reference
    points (body frame, m). Exact (no small-angle approximation).
    """
    R = rot_y(np.radians(pitch_deg))
    piv = np.asarray(pivot, dtype=float)
    hf = ride_height + float((R @ (np.asarray(ref_front, dtype=float) - piv))[2])
    hr = ride_height + float((R @ (np.asarray(ref_rear, dtype=float) - piv))[2])
    return hf, hr


def pitch_from_heights(ride_height_front: float, ride_height_rear: float, ref_front, ref_rear) -> float:
    """Pitch (degrees, nose-up positive) that puts the two reference points
    (body frame, m) at the given heights (m); exact, via
    :func:`caseprep.contract.frames.place_body`."""
    P = place_body(np.asarray(ref_front, float), np.asarray(ref_rear, float), ride_height_front, ride_height_rear)
    return float(np.degrees(P.pitch))


def expand(cfg: Config) -> list[SweepPoint]:
    """All points of the sweep, in a stable order (variants as listed, then
    the axes in config order). Raises UserError/UserErrors for impossible
    points (e.g. a pitch the reference points cannot reach, duplicates)."""
    pts, errs = expand_collect(cfg)
    if errs:
        raise errs[0] if len(errs) == 1 else UserErrors(errs)
    return pts


def case_count(cfg: Config) -> tuple[int, list[tuple[str, int]]]:
    """The number of points :func:`expand` makes (before duplicates are
    removed), by arithmetic alone, and its factors as (config key, count).
    Nothing is expanded: this is what bounds the expansion."""
    s = cfg.sweep
    has_ground = cfg.ground.mode != "none" and not cfg.empty_section
    n_var = len(s.variants) if s.variants else len(cfg.variants)
    var_key = "sweep.variants" if s.variants else "variants"
    if s.points is not None:
        n = sum(1 if pt.variant else n_var for pt in s.points)
        return n, [("sweep.points", len(s.points)), (var_key, n_var)]
    factors = [(var_key, n_var)]
    if s.ride_heights_front_rear is not None:
        factors.append(("sweep.ride_heights_front_rear", len(s.ride_heights_front_rear)))
    else:
        if has_ground:
            factors.append(("sweep.ride_height", len(s.ride_height or ())))
        factors.append(("sweep.pitch_deg", len(s.pitch_deg or (0.0,))))
    factors += [("sweep.yaw_deg", len(s.yaw_deg)), ("sweep.speed", len(s.speed) if s.speed is not None else 1),
                ("sweep.mesh_level", len(s.mesh_level))]
    n = 1
    for _, k in factors:
        n *= k
    return n, factors


def check_case_count(cfg: Config) -> UserError | None:
    """A UserError when the sweep would have more than :data:`MAX_CASES`
    cases, naming the count, its factors and the key with the most values."""
    n, factors = case_count(cfg)
    if n <= MAX_CASES.value:
        return None
    worst = max(factors, key=lambda f: f[1])[0]
    product = " × ".join(f"{k} {v}" for k, v in factors if v != 1 or k == worst)
    return UserError(expected=f"at most {int(MAX_CASES.value):,} cases in one sweep", got=f"{n:,} cases ({product})",
                     file=cfg.file, key=worst,
                     fix="fewer values per axis, or split the study into several sweep folders "
                         "(see the README: What the tool refuses)")


def expand_collect(cfg: Config) -> tuple[list[SweepPoint], list[UserError]]:
    """As :func:`expand`, returning (valid points, problems) instead of raising.
    A sweep over :data:`MAX_CASES` is refused before any point is made."""
    too_many = check_case_count(cfg)
    if too_many is not None:
        return [], [too_many]
    s = cfg.sweep
    b = cfg.body
    file = cfg.file
    # ride heights place a body over a ground; an empty test section has none
    has_ground = cfg.ground.mode != "none" and not cfg.empty_section
    variants = list(s.variants) if s.variants else list(cfg.variants)
    speeds = s.speed if s.speed is not None else (cfg.air.speed,)
    f = np.asarray(b.ride_height_point_front, float) if has_ground else None
    r = np.asarray(b.ride_height_point_rear, float) if has_ground else None
    pivot = np.asarray(b.pitch_pivot, float) if b.pitch_pivot is not None else f
    errs: list[UserError] = []
    pts: list[SweepPoint] = []

    def from_pitch(v, h, pitch, yaw, spd, lvl, src):
        if not has_ground:
            return SweepPoint(v, None, None, float(pitch), float(yaw), float(spd), int(lvl), src)
        hf, hr = heights_from_pitch(h, pitch, f, r, pivot)
        if hf <= 0 or hr <= 0:
            errs.append(UserError(
                expected="both reference points above the ground",
                got=f"front {hf * 1e3:.3f} mm, rear {hr * 1e3:.3f} mm for ride height {h} m at pitch {pitch} deg",
                file=file, key=src, fix="raise the ride height or reduce the pitch"))
            return None
        return SweepPoint(v, hf, hr, float(pitch), float(yaw), float(spd), int(lvl), src)

    def from_pair(v, hf, hr, yaw, spd, lvl, src):
        try:
            th = pitch_from_heights(hf, hr, f, r)
        except ValueError:
            errs.append(UserError(expected="a front/rear height difference smaller than the reference points' distance",
                                  got=f"{hf} m / {hr} m", file=file, key=src, fix="check the ride heights (m, not mm)"))
            return None
        return SweepPoint(v, float(hf), float(hr), th, float(yaw), float(spd), int(lvl), src)

    if s.points is not None:
        for i, pt in enumerate(s.points):
            src = f"sweep.points[{i}]"
            for v in ([pt.variant] if pt.variant else variants):
                spd = pt.speed if pt.speed is not None else cfg.air.speed
                if pt.ride_height_front is not None:
                    sp = from_pair(v, pt.ride_height_front, pt.ride_height_rear, pt.yaw_deg, spd, pt.mesh_level, src)
                else:
                    sp = from_pitch(v, pt.ride_height, pt.pitch_deg or 0.0, pt.yaw_deg, spd, pt.mesh_level, src)
                if sp is not None:
                    pts.append(sp)
    elif s.ride_heights_front_rear is not None:
        for v, (i, (hf, hr)), yaw, spd, lvl in itertools.product(
                variants, enumerate(s.ride_heights_front_rear), s.yaw_deg, speeds, s.mesh_level):
            sp = from_pair(v, hf, hr, yaw, spd, lvl, f"sweep.ride_heights_front_rear[{i}]")
            if sp is not None:
                pts.append(sp)
    else:
        heights = list(enumerate(s.ride_height)) if has_ground else [(0, None)]
        for v, (i, h), pitch, yaw, spd, lvl in itertools.product(
                variants, heights, s.pitch_deg or (0.0,), s.yaw_deg, speeds, s.mesh_level):
            sp = from_pitch(v, h, pitch, yaw, spd, lvl, f"sweep.ride_height[{i}]" if has_ground else "sweep.pitch_deg")
            if sp is not None:
                pts.append(sp)
    seen: dict[str, SweepPoint] = {}
    unique: list[SweepPoint] = []
    for p in pts:
        cid = p.case_id
        if cid in seen:
            errs.append(UserError(expected="each operating point once", got=f"{cid} twice ({seen[cid].source} and {p.source})",
                                  file=file, key=p.source, fix="remove the duplicate value or point"))
            continue
        seen[cid] = p
        unique.append(p)
    return unique, errs
