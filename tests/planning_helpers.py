"""Small geometry and config builders for the caseprep planning tests."""
from __future__ import annotations

from pathlib import Path

import numpy as np

BOX_FACES = np.array([
    (0, 2, 1), (0, 3, 2),  # z = lo (normal −z)
    (4, 5, 6), (4, 6, 7),  # z = hi
    (0, 1, 5), (0, 5, 4),  # y = lo
    (2, 3, 7), (2, 7, 6),  # y = hi
    (1, 2, 6), (1, 6, 5),  # x = hi
    (0, 4, 7), (0, 7, 3),  # x = lo
])


def box_triangles(lo, hi) -> np.ndarray:
    """(12,3,3) outward-oriented triangles of an axis-aligned box (m)."""
    lo, hi = np.asarray(lo, float), np.asarray(hi, float)
    V = np.array([[lo[0], lo[1], lo[2]], [hi[0], lo[1], lo[2]], [hi[0], hi[1], lo[2]], [lo[0], hi[1], lo[2]],
                  [lo[0], lo[1], hi[2]], [hi[0], lo[1], hi[2]], [hi[0], hi[1], hi[2]], [lo[0], hi[1], hi[2]]])
    return V[BOX_FACES]


def convex_body(points: np.ndarray) -> np.ndarray:
    """Outward-oriented triangles of the convex hull of ``points``."""
    from scipy.spatial import ConvexHull

    h = ConvexHull(points)
    T = points[h.simplices].copy()
    c = points[h.vertices].mean(axis=0)
    n = np.cross(T[:, 1] - T[:, 0], T[:, 2] - T[:, 0])
    flip = np.einsum("ij,ij->i", n, T[:, 0] - c) < 0
    T[flip] = T[flip][:, ::-1]
    return T


def write_binary_stl(path: Path, tris: np.ndarray, scale: float = 1.0) -> Path:
    """Binary STL of ``tris`` (m) written in units of ``scale`` metres."""
    t = np.asarray(tris, float) / scale
    n = len(t)
    rec = np.zeros(n, dtype=[("n", "<f4", (3,)), ("v", "<f4", (3, 3)), ("attr", "<u2")])
    rec["v"] = t
    path = Path(path)
    path.write_bytes(b"\0" * 80 + np.uint32(n).tobytes() + rec.tobytes())
    return path


def car_box(tmp: Path, name: str = "car.stl") -> Path:
    """A 1.0 m × 0.4 m × 0.25 m box body, floor at z = 0, nose at x = 0 (binary STL)."""
    return write_binary_stl(tmp / name, box_triangles([0.0, -0.2, 0.0], [1.0, 0.2, 0.25]))


BASE_TOML = """
[study]
name = "t1"

[air]
speed = 30.0

[body]
reference_length = 0.6
front_axle = [0.2, 0.0, 0.05]
rear_axle = [0.8, 0.0, 0.05]
ride_height_point_front = [0.1, 0.0, 0.0]
ride_height_point_rear = [0.9, 0.0, 0.0]

[variants.base]
geometry = "car.stl"

[sweep]
ride_height = [0.05]
pitch_deg = [0.0]

[mesh]
fidelity = "smoke"
"""


def write_config(tmp: Path, text: str = BASE_TOML, geometry: bool = True) -> Path:
    if geometry:
        car_box(tmp)
    p = tmp / "sweep.toml"
    p.write_text(text)
    return p
