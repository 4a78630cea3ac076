"""DEMO geometry generator (invented scenario, not a real vehicle).

A 1:4-scale sports-prototype floor study: one parametric body, 1.2 m long,
0.5 m wide, with three floors:

- ``flat``       flat floor to the tail;
- ``diffuser8``  8 deg ramp diffuser over the last 0.35 m;
- ``diffuser14`` 14 deg ramp diffuser with two longitudinal strakes.

Body frame: x rearward from the nose (x = 0), y to the right, z up, the
flat floor at z = 0; metres. Each body is a closed, outward-oriented
triangulated surface (ASCII STL, a few thousand triangles); the strakes are
separate closed solids that overlap the body above the diffuser surface.

Run ``python make_geometry.py [OUTDIR]`` (default: ./geometry beside this
file). The output is deterministic.
"""
from __future__ import annotations

import sys
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent.parent))  # run from a source checkout without installing

from caseprep.geometry.checks import inspect_surface
from caseprep.geometry.stl import write_stl_ascii  # noqa: E402

LENGTH = 1.2          # m
HALF_WIDTH = 0.25     # m
DIFFUSER_START = 0.85  # m
N_RING = 32
N_STATIONS = 40


def _top(x: np.ndarray) -> np.ndarray:
    """Roof height (m) along x: low nose, cockpit hump, tapering tail."""
    return 0.07 + 0.17 * np.exp(-((x - 0.55) / 0.30) ** 2) + 0.05 * x / LENGTH


def _half_width(x: np.ndarray) -> np.ndarray:
    """Plan-view half width (m): rounded nose, parallel sides, slight taper."""
    nose = np.sqrt(np.clip(1.0 - ((0.18 - np.minimum(x, 0.18)) / 0.18) ** 2, 0.0, 1.0))
    return HALF_WIDTH * (0.35 + 0.65 * nose) * (1.0 - 0.08 * np.clip((x - 0.9) / 0.3, 0.0, 1.0))


def _floor(x: np.ndarray, ramp_deg: float) -> np.ndarray:
    """Underside height (m): z = 0, rising at ``ramp_deg`` behind DIFFUSER_START."""
    return np.clip(x - DIFFUSER_START, 0.0, None) * np.tan(np.radians(ramp_deg))


def body(ramp_deg: float) -> np.ndarray:
    """Triangles (M,3,3) of the lofted body with a planar nose and tail cap."""
    xs = np.linspace(0.0, LENGTH, N_STATIONS)
    t = np.linspace(0.0, 2.0 * np.pi, N_RING, endpoint=False) + np.pi / N_RING
    rings = []
    for x in xs:
        a = float(_half_width(np.array(x)))
        zb = float(_floor(np.array(x), ramp_deg))
        zt = float(_top(np.array(x)))
        b = 1.3 * (zt - zb) / 2.0
        zc = zt - b
        m = 4.0
        c, s = np.cos(t), np.sin(t)
        y = a * np.sign(c) * np.abs(c) ** (2.0 / m)
        z = zc + b * np.sign(s) * np.abs(s) ** (2.0 / m)
        z = np.maximum(z, zb)  # flat underside
        rings.append(np.stack([np.full_like(y, x), y, z], axis=1))
    R = np.array(rings)  # (S, N, 3)
    tris = []
    for i in range(N_STATIONS - 1):
        for j in range(N_RING):
            k = (j + 1) % N_RING
            p00, p01, p10, p11 = R[i, j], R[i, k], R[i + 1, j], R[i + 1, k]
            tris.append([p00, p10, p11])
            tris.append([p00, p11, p01])
    for i, sign in ((0, 1), (N_STATIONS - 1, -1)):
        c = R[i].mean(axis=0)
        for j in range(N_RING):
            k = (j + 1) % N_RING
            tris.append([c, R[i, j], R[i, k]] if sign > 0 else [c, R[i, k], R[i, j]])
    T = np.array(tris)
    if inspect_surface(T).volume < 0:
        T = T[:, ::-1]
    return T


def strake(y_centre: float, ramp_deg: float, thickness: float = 0.006) -> np.ndarray:
    """A closed thin plate (12 triangles) under the diffuser: lower edge on the
    floor plane z = 0, upper edge 10 mm inside the body above the ramp."""
    x0, x1 = DIFFUSER_START, LENGTH - 0.005
    rise = (x1 - x0) * np.tan(np.radians(ramp_deg))
    prof = np.array([[x0, 0.0], [x1, 0.0], [x1, rise + 0.010], [x0, 0.010]])
    yl, yr = y_centre - thickness / 2, y_centre + thickness / 2
    V = np.array([[px, yl, pz] for px, pz in prof] + [[px, yr, pz] for px, pz in prof])
    faces = [(0, 1, 2), (0, 2, 3), (4, 6, 5), (4, 7, 6),  # sides
             (0, 4, 5), (0, 5, 1), (1, 5, 6), (1, 6, 2), (2, 6, 7), (2, 7, 3), (3, 7, 4), (3, 4, 0)]
    T = V[np.array(faces)]
    if inspect_surface(T).volume < 0:
        T = T[:, ::-1]
    return T


VARIANTS = {
    "flat": [("body", lambda: body(0.0))],
    "diffuser8": [("body", lambda: body(8.0))],
    "diffuser14": [("body", lambda: body(14.0)),
                   ("strake_left", lambda: strake(-0.12, 14.0)),
                   ("strake_right", lambda: strake(0.12, 14.0))],
}


def main(outdir: str | Path = HERE / "geometry") -> list[Path]:
    out = Path(outdir)
    paths = []
    for name, solids in VARIANTS.items():
        p = out / f"{name}.stl"
        write_stl_ascii(p, [(sname, make()) for sname, make in solids])
        paths.append(p)
    return paths


if __name__ == "__main__":
    for p in main(sys.argv[1] if len(sys.argv) > 1 else HERE / "geometry"):
        print(p)
