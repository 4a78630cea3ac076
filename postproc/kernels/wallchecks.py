"""Wall checks: y+ statistics per patch, streamwise wall-shear reversals
(separation and reattachment lines) on the floor, and cells with
non-finite or absurd values. Pure numpy/scipy.

Axes: body frame (x rearward, y right, z up, m). The incompressible solver's
wall shear stress is kinematic (τ_w/ρ, m²/s²).

y+ = y u_τ / ν with the friction velocity u_τ = √(τ_w/ρ) = √|τ_kin| and y the
distance of the wall-adjacent cell centre from the wall (m), ν the kinematic
viscosity (m²/s) (Pope, *Turbulent Flows*, 2000, §7.1.2; Schlichting &
Gersten, *Boundary-Layer Theory*, 9th ed. 2017, §17.2). The intended band
of each wall treatment is declared once, in ``caseprep.contract.walls``;
the callers pass it in (``target``).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

ABSURD_YPLUS = 1.0e4


def friction_velocity(wall_shear_kinematic: np.ndarray) -> np.ndarray:
    """u_τ = √|τ_w/ρ| (m/s) from the kinematic wall shear stress, m²/s²:
    vectors (N, 3), or magnitudes (N,) — a 1-D array is read as magnitudes."""
    t = np.asarray(wall_shear_kinematic, dtype=np.float64)
    mag = np.linalg.norm(t, axis=-1) if t.ndim >= 2 and t.shape[-1] == 3 else np.abs(t)
    return np.sqrt(mag)


def yplus(wall_shear_kinematic: np.ndarray, wall_distance: np.ndarray, nu: float) -> np.ndarray:
    """y+ = y u_τ/ν (dimensionless): kinematic wall shear (m²/s²), wall
    distance y of the first cell centre (m), kinematic viscosity ν (m²/s).
    Citation in the module docstring."""
    if not nu > 0:
        raise ValueError(f"expected a positive kinematic viscosity (m²/s), got {nu}")
    return np.asarray(wall_distance, dtype=np.float64) * friction_velocity(wall_shear_kinematic) / nu


def wall_distance(face_centres: np.ndarray, face_normals: np.ndarray, cell_centres: np.ndarray,
                  tree: "cKDTree | None" = None) -> np.ndarray:
    """Distance (m) of the wall-adjacent cell centre from each wall face,
    measured along the face normal: |(x_c − x_f)·n| with x_c the cell centre
    nearest the face centre x_f (on prism-layer meshes the nearest centre
    is the owner cell's)."""
    from scipy.spatial import cKDTree  # here: importing it costs ~0.4 s that the sweep does not need

    t = tree or cKDTree(np.asarray(cell_centres, dtype=np.float64))
    f = np.asarray(face_centres, dtype=np.float64)
    _, idx = t.query(f)
    d = np.asarray(cell_centres, dtype=np.float64)[idx] - f
    return np.abs(np.einsum("ij,ij->i", d, np.asarray(face_normals, dtype=np.float64)))


@dataclass(frozen=True)
class YPlusStats:
    """y+ statistics of one patch: min/median/p95/max (face values),
    area-weighted mean, the area share inside ``target`` (lo, hi), counts of
    negative, non-finite and absurd (> 1e4) values."""

    patch: str
    n_faces: int
    min: float
    median: float
    p95: float
    max: float
    mean_area: float
    target: tuple[float, float]
    share_in_target: float
    share_below: float
    share_above: float
    n_negative: int
    n_nonfinite: int
    n_absurd: int
    source: str

    def to_dict(self) -> dict:
        d = dict(self.__dict__)
        d["target"] = list(self.target)
        return d


def yplus_stats(patch: str, yp: np.ndarray, areas: np.ndarray, target: tuple[float, float],
                source: str = "yPlus") -> YPlusStats:
    """Statistics of the y+ values ``yp`` on faces of ``areas`` (m²) against
    the intended range ``target``. Input not modified."""
    v = np.asarray(yp, dtype=np.float64).ravel()
    a = np.asarray(areas, dtype=np.float64).ravel()
    fin = np.isfinite(v)
    vf, af = v[fin], a[fin]
    lo, hi = target
    A = af.sum()
    if vf.size == 0:
        nan = float("nan")
        return YPlusStats(patch, int(v.size), nan, nan, nan, nan, nan, (lo, hi), nan, nan, nan, 0, int((~fin).sum()), 0, source)
    return YPlusStats(
        patch=patch, n_faces=int(v.size), min=float(vf.min()), median=float(np.median(vf)),
        p95=float(np.percentile(vf, 95)), max=float(vf.max()),
        mean_area=float(np.dot(vf, af) / A) if A > 0 else float(vf.mean()),
        target=(float(lo), float(hi)),
        share_in_target=float(af[(vf >= lo) & (vf <= hi)].sum() / A) if A > 0 else float("nan"),
        share_below=float(af[vf < lo].sum() / A) if A > 0 else float("nan"),
        share_above=float(af[vf > hi].sum() / A) if A > 0 else float("nan"),
        n_negative=int((vf < 0).sum()), n_nonfinite=int((~fin).sum()), n_absurd=int((vf > ABSURD_YPLUS).sum()),
        source=source,
    )


@dataclass(frozen=True)
class ShearReversal:
    """Where the streamwise wall shear changes sign along a line (body x, m):
    ``kind`` is ``"separation"`` (attached → reversed) or ``"reattachment"``."""

    x: float
    kind: str

    def to_dict(self) -> dict:
        return {"x": self.x, "kind": self.kind}


def attached_sign(tau_x: np.ndarray, areas: np.ndarray) -> int:
    """The sign of the streamwise wall shear of attached flow on a patch,
    taken as the sign of its area-weighted total (the floor is mostly
    attached; common practice, no source). +1 or −1."""
    s = float(np.dot(np.asarray(tau_x, dtype=np.float64), np.asarray(areas, dtype=np.float64)))
    return 1 if s >= 0 else -1


def shear_reversals(x: np.ndarray, tau_x: np.ndarray, attached: int) -> list[ShearReversal]:
    """Sign changes of the streamwise wall shear ``tau_x`` (any unit) along
    a line sampled at increasing ``x`` (m); ``attached`` the sign of attached
    flow (:func:`attached_sign`). Zero crossings are located by linear
    interpolation."""
    xx = np.asarray(x, dtype=np.float64)
    t = np.asarray(tau_x, dtype=np.float64) * attached
    out = []
    s = np.sign(t)
    for i in np.flatnonzero((s[1:] * s[:-1] < 0)):
        x0 = xx[i] + (xx[i + 1] - xx[i]) * t[i] / (t[i] - t[i + 1])
        out.append(ShearReversal(x=float(x0), kind="separation" if t[i] > 0 else "reattachment"))
    return out


def reversed_share(tau_x: np.ndarray, areas: np.ndarray, attached: int) -> float:
    """Area share of faces whose streamwise shear opposes the attached sign."""
    t = np.asarray(tau_x, dtype=np.float64) * attached
    a = np.asarray(areas, dtype=np.float64)
    return float(a[t < 0].sum() / a.sum()) if a.sum() > 0 else float("nan")


@dataclass(frozen=True)
class FieldFlags:
    """Suspicious cell values of one array: non-finite count, counts below
    ``lower``/above ``upper`` (None: not checked) and the worst cell's
    position (m) and value."""

    name: str
    n_cells: int
    n_nonfinite: int
    n_below: int
    n_above: int
    lower: float | None
    upper: float | None
    worst_at: tuple[float, float, float] | None
    worst_value: float | None

    def to_dict(self) -> dict:
        return dict(self.__dict__)


def field_flags(name: str, values: np.ndarray, centres: np.ndarray, *, lower: float | None = None,
                upper: float | None = None) -> FieldFlags:
    """Flag non-finite values and values outside [lower, upper] of a cell
    array (vectors are checked by magnitude). ``centres`` (N, 3) m."""
    v = np.asarray(values, dtype=np.float64)
    if v.ndim == 2:
        v = np.linalg.norm(v, axis=1)
    fin = np.isfinite(v)
    below = fin & (v < lower) if lower is not None else np.zeros_like(fin)
    above = fin & (v > upper) if upper is not None else np.zeros_like(fin)
    worst_at = worst = None
    bad = np.flatnonzero(below | above)
    if bad.size:
        dev = np.where(below[bad], (lower if lower is not None else 0) - v[bad],
                       v[bad] - (upper if upper is not None else 0))
        k = bad[int(np.argmax(dev))]
        worst_at, worst = tuple(float(c) for c in np.asarray(centres)[k]), float(v[k])
    elif (~fin).any():
        k = int(np.flatnonzero(~fin)[0])
        worst_at, worst = tuple(float(c) for c in np.asarray(centres)[k]), None
    return FieldFlags(name=name, n_cells=int(v.size), n_nonfinite=int((~fin).sum()), n_below=int(below.sum()),
                      n_above=int(above.sum()), lower=lower, upper=upper, worst_at=worst_at, worst_value=worst)
