"""Test surfaces (our own meshes): icospheres, plates, and their face data."""
from __future__ import annotations

import numpy as np


def icosphere(radius: float = 1.0, nsub: int = 2, center=(0.0, 0.0, 0.0)) -> tuple[np.ndarray, np.ndarray]:
    """Triangulated sphere: points (N,3), faces (M,3) with outward (right-hand) order.

    Built from an icosahedron by ``nsub`` midpoint subdivisions, points pushed
    onto the sphere; h halves at each subdivision."""
    t = (1.0 + 5 ** 0.5) / 2.0
    P = [(-1, t, 0), (1, t, 0), (-1, -t, 0), (1, -t, 0), (0, -1, t), (0, 1, t), (0, -1, -t), (0, 1, -t),
         (t, 0, -1), (t, 0, 1), (-t, 0, -1), (-t, 0, 1)]
    F = [(0, 11, 5), (0, 5, 1), (0, 1, 7), (0, 7, 10), (0, 10, 11), (1, 5, 9), (5, 11, 4), (11, 10, 2), (10, 7, 6),
         (7, 1, 8), (3, 9, 4), (3, 4, 2), (3, 2, 6), (3, 6, 8), (3, 8, 9), (4, 9, 5), (2, 4, 11), (6, 2, 10),
         (8, 6, 7), (9, 8, 1)]
    pts = [np.array(p, float) / np.linalg.norm(p) for p in P]
    faces = [tuple(f) for f in F]
    for _ in range(nsub):
        cache: dict[tuple[int, int], int] = {}

        def mid(a, b):
            k = (min(a, b), max(a, b))
            if k not in cache:
                m = pts[a] + pts[b]
                pts.append(m / np.linalg.norm(m))
                cache[k] = len(pts) - 1
            return cache[k]

        new = []
        for a, b, c in faces:
            ab, bc, ca = mid(a, b), mid(b, c), mid(c, a)
            new += [(a, ab, ca), (b, bc, ab), (c, ca, bc), (ab, bc, ca)]
        faces = new
    X = np.array(pts) * radius + np.asarray(center, float)
    Fa = np.array(faces, dtype=np.int64)
    # make the order outward (right-hand rule)
    c = X[Fa].mean(axis=1) - np.asarray(center, float)
    S = np.cross(X[Fa[:, 1]] - X[Fa[:, 0]], X[Fa[:, 2]] - X[Fa[:, 0]])
    flip = np.einsum("ij,ij->i", S, c) < 0
    Fa[flip] = Fa[flip][:, ::-1]
    return X, Fa


def plate(xs: np.ndarray, ys: np.ndarray, z: float = 0.0) -> tuple[np.ndarray, np.ndarray]:
    """Quad plate in the plane z = const, vertex order giving normals +z."""
    X, Y = np.meshgrid(xs, ys, indexing="ij")
    pts = np.column_stack([X.ravel(), Y.ravel(), np.full(X.size, z)])
    nx, ny = len(xs), len(ys)
    idx = np.arange(nx * ny).reshape(nx, ny)
    q = np.column_stack([idx[:-1, :-1].ravel(), idx[1:, :-1].ravel(), idx[1:, 1:].ravel(), idx[:-1, 1:].ravel()])
    return pts, q
