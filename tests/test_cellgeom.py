"""Cell volume centroids and volumes (pyramid decomposition), any cell type."""
from __future__ import annotations

import numpy as np
import pyvista as pv

from postproc.kernels import cellgeom
from postproc.io import flow as flowio

from flow_meshes import box_grid

CUBE = np.array([[0, 0, 0], [1, 0, 0], [1, 1, 0], [0, 1, 0], [0, 0, 1], [1, 0, 1], [1, 1, 1], [0, 1, 1]], float)


def _poly_grid(points, faces):
    """One VTK polyhedron from its face lists."""
    stream = [len(faces)]
    for f in faces:
        stream += [len(f), *f]
    cells = np.array([len(stream), *stream])
    return pv.UnstructuredGrid(cells, np.array([42], dtype=np.uint8), np.asarray(points, float))


def _geom(grid):
    return cellgeom.cell_centroids(np.asarray(grid.points), flowio.topology(grid))


def test_split_face_hexahedron_centroid_is_the_cube_centre():
    # a unit cube whose top face is split into four quads (hanging nodes, as
    # at a refinement interface): analytic centroid (½, ½, ½), volume 1; the
    # vertex mean is pulled towards the split face
    pts = [*CUBE.tolist(), [0.5, 0, 1], [1, 0.5, 1], [0.5, 1, 1], [0, 0.5, 1], [0.5, 0.5, 1]]
    top = [(4, 8, 12, 11), (8, 5, 9, 12), (12, 9, 6, 10), (11, 12, 10, 7)]
    faces = [(0, 3, 2, 1), (0, 1, 5, 8, 4), (1, 2, 6, 9, 5), (2, 3, 7, 10, 6), (3, 0, 4, 11, 7), *top]
    g = _poly_grid(pts, faces)
    c, v = _geom(g)
    np.testing.assert_allclose(c[0], [0.5, 0.5, 0.5], atol=1e-14)
    np.testing.assert_allclose(v, [1.0], rtol=1e-14)
    vm = flowio.cell_centres(g, kind="vertex-mean")
    assert vm[0, 2] > 0.6  # 9 of 13 vertices on the top face


def test_non_convex_polyhedron():
    # an L-shaped prism (three unit cubes, concave edge): volume 3, centroid
    # by composition of the cubes' centres (analytic)
    base = [(0, 0), (2, 0), (2, 1), (1, 1), (1, 2), (0, 2)]
    pts = [(x, y, 0) for x, y in base] + [(x, y, 1) for x, y in base]
    faces = [tuple(range(5, -1, -1)), tuple(range(6, 12))]
    faces += [(i, (i + 1) % 6, 6 + (i + 1) % 6, 6 + i) for i in range(6)]
    c, v = _geom(_poly_grid(pts, faces))
    np.testing.assert_allclose(v, [3.0], rtol=1e-14)
    np.testing.assert_allclose(c[0], [(0.5 + 1.5 + 0.5) / 3, (0.5 + 0.5 + 1.5) / 3, 0.5], atol=1e-14)


def test_pyramid_and_wedge_analytic():
    # square pyramid, base 1 × 1, apex height h: V = h/3, centroid at h/4
    # above the base; right triangular prism (legs 1, height 2): V = 1,
    # centroid at the triangle's centroid, mid-height (elementary geometry)
    h = 0.8
    pyr = np.array([[0, 0, 0], [1, 0, 0], [1, 1, 0], [0, 1, 0], [0.5, 0.5, h]])
    wedge = np.array([[0, 0, 0], [1, 0, 0], [0, 1, 0], [0, 0, 2], [1, 0, 2], [0, 1, 2]], float)
    pts = np.vstack([pyr, wedge])
    cells = np.array([5, 0, 1, 2, 3, 4, 6, 5, 6, 7, 8, 9, 10])
    g = pv.UnstructuredGrid(cells, np.array([14, 13], dtype=np.uint8), pts)
    c, v = _geom(g)
    np.testing.assert_allclose(v, [h / 3, 1.0], rtol=1e-14)
    np.testing.assert_allclose(c[0], [0.5, 0.5, h / 4], atol=1e-14)
    np.testing.assert_allclose(c[1], [1 / 3, 1 / 3, 1.0], atol=1e-14)


def test_tetrahedra_against_vtk_and_vertex_mean():
    # a tetrahedron's centroid is its vertex mean and VTK's cell-size filter
    # gives its exact volume (reference library: VTK vtkCellSizeFilter)
    g = box_grid(4, 3, 3, kind="tet", perturb=0.3, seed=2)
    c, v = _geom(g)
    np.testing.assert_allclose(c, flowio.cell_centres(g, kind="vertex-mean"), atol=1e-13)
    ref = np.abs(np.asarray(g.compute_cell_sizes(length=False, area=False, volume=True).cell_data["Volume"]))
    np.testing.assert_allclose(v, ref, rtol=1e-12)


def test_hexahedra_and_polyhedra_agree_and_inputs_untouched():
    # the same perturbed cells written as hexahedra or as polyhedra give the
    # same centroids and volumes (one decomposition for both); inputs unchanged
    gh = box_grid(4, 3, 3, kind="hex", perturb=0.3, seed=4)
    gp = box_grid(4, 3, 3, kind="poly", perturb=0.3, seed=4)
    pts = np.asarray(gp.points).copy()
    topo = flowio.topology(gp)
    conn = np.asarray(topo.poly_face_connectivity).copy()
    ch, vh = _geom(gh)
    cp, vp = cellgeom.cell_centroids(np.asarray(gp.points), topo)
    np.testing.assert_allclose(cp, ch, atol=1e-14)
    np.testing.assert_allclose(vp, vh, rtol=1e-12)
    # affine cells (no perturbation): the centroid is the vertex mean and volumes fill the box
    g0 = box_grid(4, 3, 3, (0, 2, 0, 1.5, 0, 1), kind="hex")
    c0, v0 = _geom(g0)
    np.testing.assert_allclose(c0, flowio.cell_centres(g0, kind="vertex-mean"), atol=1e-14)
    assert np.isclose(v0.sum(), 3.0, rtol=1e-13)
    assert np.array_equal(np.asarray(gp.points), pts)
    assert np.array_equal(np.asarray(topo.poly_face_connectivity), conn)
