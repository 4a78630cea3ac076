"""The interior-point filter in front of the 2-D convex hull keeps the hull
exact (Akl & Toussaint 1978: points strictly inside a polygon of hull
points are not hull vertices)."""
from __future__ import annotations

import numpy as np
from scipy.spatial import ConvexHull

from caseprep.geometry.hull import _drop_interior, hull_projected_area


def test_filter_keeps_the_hull_exactly():
    rng = np.random.default_rng(3)
    for pts in (rng.normal(size=(20000, 2)), rng.uniform(-1, 1, size=(5000, 2)),
                np.c_[np.cos(t := rng.uniform(0, 2 * np.pi, 4000)), 0.3 * np.sin(t)]):
        kept = _drop_interior(pts)
        assert len(kept) <= len(pts)
        # the same hull: scipy's ConvexHull on all points is the reference
        assert ConvexHull(kept).volume == ConvexHull(pts).volume
        assert set(map(tuple, pts[ConvexHull(pts).vertices])) <= set(map(tuple, kept))


def test_projected_area_of_a_unit_sphere_hull():
    # a sphere's shadow is a disc of area π r² (geometry); the hull of a fine
    # point sphere is slightly inside it: polygon error O(1/n²)
    rng = np.random.default_rng(0)
    v = rng.normal(size=(200000, 3))
    v /= np.linalg.norm(v, axis=1, keepdims=True)
    a = hull_projected_area(v, [1.0, 0.2, -0.1])
    assert abs(a - np.pi) < 2e-3 * np.pi
