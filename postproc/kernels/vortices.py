"""Vortex cores as data: cores on cross-stream stations, tracks linking them
from station to station, and connected 3D Q-regions. Pure numpy/scipy.

Axes: body frame (x rearward, y right, z up, m). Stations are planes
x = const (normal to the body x axis). Sense of rotation is about +x by the
right-hand rule: +1 when the core's circulation Σ ω_x A is positive, which
is anticlockwise for an observer behind the vehicle looking forward (along
−x, with +y on the observer's right and +z up).

A core is a connected region of a station's cut cells with Q above the
threshold (Hunt, Wray & Moin 1988, CTR-S88; regions: polygons sharing a
vertex). Per core:

- ``centre``: vorticity-weighted centroid Σ|ω_x| A x / Σ|ω_x| A (m);
- ``circulation`` Γ = ∫ ω·n dA = Σ ω_x A over the region (m²/s), n = +x
  (Stokes' theorem: equals ∮ u·dl around the region's boundary);
- ``radius`` = √(A/π), the radius of the circle of the region's area (m);
- ``peak_q``: the largest Q in the region (1/s²);
- ``axial_velocity`` u_x at the cell nearest the centre (m/s) and
  ``axial_excess`` = (u_x − U∞,x)/|U∞| (negative: a deficit, wake-like core;
  positive: jet-like core).
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import scipy.sparse as sp
from scipy.sparse.csgraph import connected_components

from postproc.kernels.sections import PlaneSection


@dataclass(frozen=True)
class VortexCore:
    """One vortex core on one station (SI units, body frame).

    ``sense`` is +1 when the core rotates positively about +x by the
    right-hand rule (ω_x > 0), −1 otherwise.
    """

    station: float
    centre: tuple[float, float, float]
    sense: int
    circulation: float
    radius: float
    area: float
    peak_q: float
    peak_q_at: tuple[float, float, float]
    axial_velocity: float | None
    axial_excess: float | None
    n_cells: int
    peak_q_star: float | None = None

    def to_dict(self) -> dict:
        return {
            "station": self.station,
            "centre": list(self.centre),
            "sense": self.sense,
            "circulation": self.circulation,
            "radius": self.radius,
            "area": self.area,
            "peak_q": self.peak_q,
            "peak_q_star": self.peak_q_star,
            "peak_q_at": list(self.peak_q_at),
            "axial_velocity": self.axial_velocity,
            "axial_excess": self.axial_excess,
            "n_cells": self.n_cells,
        }


def find_cores(section: PlaneSection, q_threshold: float, *, min_polygons: int = 3,
               min_circulation_fraction: float = 0.01,
               free_stream: np.ndarray | None = None, q_scale: float | None = None,
               q_name: str = "Q", vorticity_name: str = "vorticity", velocity_name: str = "U") -> list[VortexCore]:
    """Vortex cores on one station.

    Parameters
    ----------
    section : a plane x = const through the volume mesh; ``section.data`` holds
        Q (1/s²), vorticity (m-frame, 1/s, (M, 3)) and optionally velocity
        (m/s, (M, 3)) per polygon.
    q_threshold : cores are connected regions with Q > q_threshold (1/s²).
    min_polygons : smaller regions are ignored (noise).
    min_circulation_fraction : regions whose |circulation| is below this
        fraction of the strongest region's on the station are ignored (noise
        patches of Q slightly above the threshold).
    free_stream : free-stream velocity (3,) m/s, body axes, for the axial
        excess; None leaves it out.
    q_scale : (V/L)² in 1/s² for ``peak_q_star``; None leaves it out.

    Returns the cores sorted by |circulation|, strongest first. The input is
    not modified.
    """
    if section.n_polygons == 0:
        return []
    q = np.asarray(section.data[q_name], dtype=np.float64)
    w = np.asarray(section.data[vorticity_name], dtype=np.float64).reshape(-1, 3)
    u = section.data.get(velocity_name)
    if not np.isfinite(q).all():
        raise ValueError("Q contains NaN or inf on the station")
    ax = section.axis
    n, labels = section.components(q > q_threshold)
    if n == 0:
        return []
    A = section.areas
    C = section.centroids
    sel = labels >= 0
    lab = labels[sel]
    idx = np.flatnonzero(sel)
    count = np.bincount(lab, minlength=n)
    area = np.bincount(lab, weights=A[idx], minlength=n)
    circ = np.bincount(lab, weights=w[idx, ax] * A[idx], minlength=n)
    wabs = np.abs(w[idx, ax]) * A[idx]
    wsum = np.bincount(lab, weights=wabs, minlength=n)
    cores = []
    big = count >= min_polygons
    gmax = float(np.abs(circ[big]).max()) if big.any() else 0.0
    for r in range(n):
        if count[r] < min_polygons or abs(circ[r]) < min_circulation_fraction * gmax:
            continue
        members = idx[lab == r]
        ww = np.abs(w[members, ax]) * A[members]
        if wsum[r] > 0:
            centre = (ww[:, None] * C[members]).sum(axis=0) / wsum[r]
        else:
            centre = (A[members, None] * C[members]).sum(axis=0) / max(area[r], 1e-300)
        centre[ax] = section.value
        k = members[np.argmax(q[members])]
        near = members[np.argmin(np.linalg.norm(C[members] - centre, axis=1))]
        ux = exc = None
        if u is not None:
            ux = float(np.asarray(u)[near, ax])
            if free_stream is not None:
                fs = np.asarray(free_stream, dtype=float)
                exc = (ux - fs[ax]) / float(np.linalg.norm(fs))
        pk = float(q[k])
        cores.append(VortexCore(
            station=float(section.value),
            centre=tuple(float(v) for v in centre),
            sense=1 if circ[r] >= 0 else -1,
            circulation=float(circ[r]),
            radius=float(np.sqrt(area[r] / np.pi)),
            area=float(area[r]),
            peak_q=pk,
            peak_q_at=tuple(float(v) for v in C[k]),
            axial_velocity=ux,
            axial_excess=exc,
            n_cells=int(count[r]),
            peak_q_star=pk / q_scale if q_scale else None,
        ))
    cores.sort(key=lambda c: -abs(c.circulation))
    return cores


@dataclass(frozen=True)
class VortexTrack:
    """A vortex followed from station to station (body frame, m).

    ``members``: (station index, core index) pairs in stream order;
    ``centres``: (K, 3) core centres; ``birth_x``/``end_x`` the first and last
    station; ``end``: why the track stops — ``"merged"`` (another track took
    the only core within reach), ``"lost"`` (breakdown/dissipation: no core
    within reach on the next station) or ``"last-station"``.
    """

    track_id: int
    sense: int
    members: tuple[tuple[int, int], ...]
    centres: np.ndarray
    circulations: np.ndarray
    birth_x: float
    end_x: float
    end: str

    def to_dict(self) -> dict:
        return {
            "track_id": self.track_id,
            "sense": self.sense,
            "birth_x": self.birth_x,
            "end_x": self.end_x,
            "end": self.end,
            "stations": [int(s) for s, _ in self.members],
            "centres": self.centres.tolist(),
            "circulation": self.circulations.tolist(),
        }


def link_tracks(cores: list[list[VortexCore]], max_jump: float, *, same_sense: bool = True) -> list[VortexTrack]:
    """Link cores on successive stations into tracks.

    Greedy nearest-centre matching (common practice, no source): all pairs
    (open track, core on the next station) closer than ``max_jump`` (m, 3D
    distance) are taken shortest first, each track and core at most once,
    and, with ``same_sense``, only between cores of the same sense. Unmatched
    cores start new tracks (birth); unmatched tracks end.
    """
    if max_jump <= 0:
        raise ValueError(f"expected a positive jump limit (m), got {max_jump}")
    open_tracks: list[dict] = []
    done: list[dict] = []
    ns = len(cores)
    for s in range(ns):
        here = cores[s]
        taken_core = np.zeros(len(here), dtype=bool)
        if open_tracks and here:
            last = np.array([t["centres"][-1] for t in open_tracks])
            cc = np.array([c.centre for c in here])
            d = np.linalg.norm(last[:, None, :] - cc[None, :, :], axis=2)
            if same_sense:
                ts = np.array([t["sense"] for t in open_tracks])
                cs = np.array([c.sense for c in here])
                d = np.where(ts[:, None] == cs[None, :], d, np.inf)
            order = np.argsort(d, axis=None)
            taken_track = np.zeros(len(open_tracks), dtype=bool)
            for flat in order:
                i, j = divmod(int(flat), len(here))
                if d[i, j] > max_jump:
                    break
                if taken_track[i] or taken_core[j]:
                    continue
                taken_track[i] = taken_core[j] = True
                t = open_tracks[i]
                t["members"].append((s, j))
                t["centres"].append(here[j].centre)
                t["circ"].append(here[j].circulation)
            still = []
            for i, t in enumerate(open_tracks):
                if taken_track[i]:
                    still.append(t)
                else:
                    t["end"] = "merged" if np.any(d[i] <= max_jump) else "lost"
                    done.append(t)
            open_tracks = still
        elif open_tracks:
            for t in open_tracks:
                t["end"] = "lost"
                done.append(t)
            open_tracks = []
        for j, c in enumerate(here):
            if not taken_core[j]:
                open_tracks.append({"sense": c.sense, "members": [(s, j)], "centres": [c.centre],
                                    "circ": [c.circulation], "end": None})
    for t in open_tracks:
        t["end"] = "last-station"
        done.append(t)
    done.sort(key=lambda t: (t["members"][0][0], t["members"][0][1]))
    out = []
    for k, t in enumerate(done):
        cen = np.array(t["centres"], dtype=float)
        out.append(VortexTrack(
            track_id=k, sense=int(t["sense"]), members=tuple(t["members"]), centres=cen,
            circulations=np.array(t["circ"], dtype=float),
            birth_x=float(cores[t["members"][0][0]][t["members"][0][1]].station),
            end_x=float(cores[t["members"][-1][0]][t["members"][-1][1]].station),
            end=str(t["end"]),
        ))
    return out


@dataclass(frozen=True)
class QRegion:
    """A connected 3D region of cells with Q above the threshold (body frame).

    ``volume`` m³; ``centroid`` m (volume-weighted); ``bounds`` ((xmin, ymin,
    zmin), (xmax, ymax, zmax)) of the cell centres, m; ``peak_q`` 1/s²;
    ``sense`` sign of the volume-integrated ω_x (about +x).
    """

    n_cells: int
    volume: float
    centroid: tuple[float, float, float]
    bounds: tuple[tuple[float, float, float], tuple[float, float, float]]
    peak_q: float
    sense: int

    def to_dict(self) -> dict:
        return {"n_cells": self.n_cells, "volume": self.volume, "centroid": list(self.centroid),
                "bounds": [list(self.bounds[0]), list(self.bounds[1])],
                "x_extent": self.bounds[1][0] - self.bounds[0][0], "peak_q": self.peak_q, "sense": self.sense}


def q_regions(adjacency: sp.csr_matrix, q: np.ndarray, q_threshold: float, centres: np.ndarray,
              volumes: np.ndarray, vorticity: np.ndarray, *, min_cells: int = 8, max_regions: int = 50) -> list[QRegion]:
    """Connected 3D regions (face-connected cells) with Q > q_threshold.

    ``volumes`` (m³) may be given for all N cells or only for the cells above
    the threshold (in cell order). Regions with fewer than ``min_cells`` are
    dropped; the ``max_regions`` largest by volume are returned, largest first.
    """
    q = np.asarray(q)
    mask = q > q_threshold
    ids = np.flatnonzero(mask)
    if ids.size == 0:
        return []
    vol = np.asarray(volumes, dtype=np.float64)
    vol = vol[ids] if vol.shape[0] == q.shape[0] else vol
    sub = adjacency[ids][:, ids]
    n, lab = connected_components(sub, directed=False)
    cnt = np.bincount(lab, minlength=n)
    V = np.bincount(lab, weights=vol, minlength=n)
    X = np.asarray(centres, dtype=np.float64)[ids]
    wx = np.asarray(vorticity, dtype=np.float64)[ids, 0]
    circ = np.bincount(lab, weights=wx * vol, minlength=n)
    cen = np.stack([np.bincount(lab, weights=X[:, k] * vol, minlength=n) for k in range(3)], axis=1) / np.maximum(V, 1e-300)[:, None]
    order = np.argsort(-V)
    out = []
    for r in order:
        if cnt[r] < min_cells or len(out) >= max_regions:
            continue
        m = lab == r
        lo, hi = X[m].min(axis=0), X[m].max(axis=0)
        out.append(QRegion(n_cells=int(cnt[r]), volume=float(V[r]), centroid=tuple(float(v) for v in cen[r]),
                           bounds=(tuple(float(v) for v in lo), tuple(float(v) for v in hi)),
                           peak_q=float(q[ids][m].max()), sense=1 if circ[r] >= 0 else -1))
    return out


def default_stations(x_front: float, length: float, x_min: float, x_max: float, step: float = 0.05,
                     wake: float = 0.5, x_tail: float | None = None) -> np.ndarray:
    """Stations every ``step`` × length (m) from the nose (exclusive) to
    ``wake`` × length behind the tail (body frame, x rearward), clipped to
    the domain [x_min, x_max] (m). ``x_tail`` (m): the tail, when the body
    is longer or shorter than ``length`` (a wheelbase); default the nose +
    length."""
    tail = x_front + length if x_tail is None else x_tail
    k = np.arange(1, int(math.floor((tail - x_front + wake * length) / (step * length) + 1e-9)) + 1)
    xs = x_front + k * step * length
    inside = (xs > x_min) & (xs < x_max)
    return xs[inside]


def wall_shear_cells(q: np.ndarray, vorticity: np.ndarray, at_wall: np.ndarray, rotation_min: float) -> np.ndarray:
    """Cells at a wall where rotation does not clearly dominate strain:
    ``at_wall`` and ‖Ω‖ < ``rotation_min`` ‖S‖, the kinematic vorticity
    number (Truesdell 1953, "Two measures of vorticity", J. Rational Mech.
    Anal. 2:173) below the limit. A boundary layer is nearly pure shear
    (‖Ω‖ ≈ ‖S‖, Q ≈ 0 of either sign from small discretisation differences),
    so its wall cells can show Q above a core threshold without any vortex;
    a vortex core has ‖Ω‖ well above ‖S‖. Uses ‖Ω‖² = ½|ω|² and
    ‖S‖² = ‖Ω‖² − 2Q (Q in 1/s², ω in 1/s). The limit is our choice (common
    practice, no source): 1.5 keeps the cores of the demo cases' vortices
    (median ‖Ω‖/‖S‖ 1.6 away from walls) and drops their wall cells (1.06)."""
    o2 = 0.5 * np.einsum("ij,ij->i", vorticity, vorticity)
    s2 = o2 - 2.0 * np.asarray(q, dtype=np.float64)
    return np.asarray(at_wall, dtype=bool) & (o2 < rotation_min**2 * s2)


@dataclass(frozen=True)
class VortexResult:
    """Cores per station, tracks and 3D regions, with the settings used."""

    stations: np.ndarray
    cores: list[list[VortexCore]]
    tracks: list[VortexTrack]
    regions: list[QRegion] = field(default_factory=list)
    q_threshold: float = 0.0
    q_scale: float | None = None
    wall_cells_excluded: int = 0
    wall_rotation_min: float | None = None
    q_length: float | None = None

    def to_dict(self) -> dict:
        return {
            "q_threshold": self.q_threshold,
            "q_length": self.q_length,
            "q_star_threshold": self.q_threshold / self.q_scale if self.q_scale else None,
            "q_scale": self.q_scale,
            "wall_rotation_min": self.wall_rotation_min,
            "wall_cells_excluded": self.wall_cells_excluded,
            "stations": [{"x": float(x), "cores": [c.to_dict() for c in cs]} for x, cs in zip(self.stations, self.cores)],
            "tracks": [t.to_dict() for t in self.tracks],
            "regions": [r.to_dict() for r in self.regions],
        }
