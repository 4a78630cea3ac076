"""Is a point inside a closed triangulated surface? (winding number).

Body frame, metres; pure numpy.
"""
from __future__ import annotations

import numpy as np


def winding_number(triangles: np.ndarray, point, chunk: int = 500_000) -> float:
    """Winding number of the closed, consistently oriented surface
    ``triangles`` (M, 3, 3) about ``point`` (3,): the sum of the signed solid
    angles of the triangles seen from the point, divided by 4π.

    Solid angle of one triangle with vertices a, b, c relative to the point
    (Van Oosterom, A. and Strackee, J. (1983), "The solid angle of a plane
    triangle", IEEE Trans. Biomed. Eng. BME-30(2), 125–126):

        tan(Ω/2) = a·(b × c) / (|a||b||c| + (a·b)|c| + (a·c)|b| + (b·c)|a|).

    1 inside an outward-oriented closed surface, 0 outside (−1 inside an
    inward-oriented one); exact up to round-off for points not on the
    surface. Valid for any closed surface, convex or not.
    """
    T = np.asarray(triangles, dtype=float)
    p = np.asarray(point, dtype=float).reshape(3)
    total = 0.0
    for s in range(0, len(T), chunk):
        q = T[s:s + chunk] - p
        a, b, c = q[:, 0], q[:, 1], q[:, 2]
        la, lb, lc = np.linalg.norm(a, axis=1), np.linalg.norm(b, axis=1), np.linalg.norm(c, axis=1)
        num = np.einsum("ij,ij->i", a, np.cross(b, c))
        den = (la * lb * lc + np.einsum("ij,ij->i", a, b) * lc + np.einsum("ij,ij->i", a, c) * lb
               + np.einsum("ij,ij->i", b, c) * la)
        total += float(np.sum(2.0 * np.arctan2(num, den)))
    return total / (4.0 * np.pi)


def inside(triangles: np.ndarray, point) -> bool:
    """True when ``point`` is inside the closed outward-oriented surface
    (:func:`winding_number` above one half)."""
    return abs(winding_number(triangles, point)) > 0.5
