"""DEMO/validation geometry: a sphere of diameter 0.1 m centred at the origin
(body frame, metres), an icosahedron subdivided three times and projected onto
the sphere (1 280 triangles, closed, outward normals). Deterministic.

Run ``python make_geometry.py [OUTDIR]`` (default: ./geometry beside this file).
"""
from __future__ import annotations

import sys
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent.parent))

from caseprep.geometry.stl import write_stl_ascii  # noqa: E402

DIAMETER = 0.1  # m


def icosphere(radius: float, subdivisions: int) -> np.ndarray:
    """Triangles (M,3,3) of a subdivided icosahedron on a sphere of ``radius`` (m)."""
    g = (1.0 + 5.0**0.5) / 2.0
    V = [(-1, g, 0), (1, g, 0), (-1, -g, 0), (1, -g, 0), (0, -1, g), (0, 1, g), (0, -1, -g), (0, 1, -g),
         (g, 0, -1), (g, 0, 1), (-g, 0, -1), (-g, 0, 1)]
    F = [(0, 11, 5), (0, 5, 1), (0, 1, 7), (0, 7, 10), (0, 10, 11), (1, 5, 9), (5, 11, 4), (11, 10, 2), (10, 7, 6),
         (7, 1, 8), (3, 9, 4), (3, 4, 2), (3, 2, 6), (3, 6, 8), (3, 8, 9), (4, 9, 5), (2, 4, 11), (6, 2, 10),
         (8, 6, 7), (9, 8, 1)]
    T = np.array(V, dtype=float)[np.array(F)]
    T /= np.linalg.norm(T, axis=2, keepdims=True)
    for _ in range(subdivisions):
        a, b, c = T[:, 0], T[:, 1], T[:, 2]
        ab, bc, ca = [(p + q) / np.linalg.norm(p + q, axis=1, keepdims=True) for p, q in ((a, b), (b, c), (c, a))]
        T = np.concatenate([np.stack(s, axis=1) for s in ((a, ab, ca), (ab, b, bc), (ca, bc, c), (ab, bc, ca))])
    return T * radius


def main(outdir: str | Path = HERE / "geometry") -> list[Path]:
    p = Path(outdir) / "sphere.stl"
    write_stl_ascii(p, [("sphere", icosphere(DIAMETER / 2.0, 3))])
    return [p]


if __name__ == "__main__":
    for p in main(sys.argv[1] if len(sys.argv) > 1 else HERE / "geometry"):
        print(p)
