"""Synthetic unstructured meshes and analytic flow fields for the flow-structure
tests and benchmark (test helper, not part of the package).

Meshes: a box of nx×ny×nz cells with random interior point perturbation, as
hexahedra, Freudenthal tetrahedra (6 per hexahedron, conforming), VTK
polyhedra (each hexahedron written as a 6-face polyhedron, like the solver
converter writes its polyhedral cells) or a random mix of hexahedra and
polyhedra.
"""
from __future__ import annotations

import itertools

import numpy as np
import pyvista as pv


def box_points(nx, ny, nz, bounds, perturb=0.0, seed=0, zmap=None):
    """Grid points (n, 3) with node index i + (nx+1)(j + (ny+1) k); interior
    points moved randomly by up to ``perturb`` × spacing along each axis.
    ``zmap(x, y, s)`` maps s ∈ [0, 1] to z (for channels with a shaped roof)."""
    x0, x1, y0, y1, z0, z1 = bounds
    xs, ys, ss = np.linspace(x0, x1, nx + 1), np.linspace(y0, y1, ny + 1), np.linspace(0, 1, nz + 1)
    X, Y, S = np.meshgrid(xs, ys, ss, indexing="ij")
    X, Y, S = (a.transpose(2, 1, 0).ravel() for a in (X, Y, S))
    if perturb:
        rng = np.random.default_rng(seed)
        d = np.array([(x1 - x0) / nx, (y1 - y0) / ny, 1.0 / nz]) * perturb
        inner = (X > x0 + 1e-12) & (X < x1 - 1e-12) & (Y > y0 + 1e-12) & (Y < y1 - 1e-12) & (S > 1e-12) & (S < 1 - 1e-12)
        r = rng.uniform(-1, 1, size=(inner.sum(), 3)) * d
        X[inner] += r[:, 0]
        Y[inner] += r[:, 1]
        S[inner] += r[:, 2]
    Z = z0 + (z1 - z0) * S if zmap is None else zmap(X, Y, S)
    return np.column_stack([X, Y, Z])


def _hex_conn(nx, ny, nz):
    i, j, k = np.meshgrid(np.arange(nx), np.arange(ny), np.arange(nz), indexing="ij")
    i, j, k = (a.transpose(2, 1, 0).ravel() for a in (i, j, k))

    def nid(a, b, c):
        return a + (nx + 1) * (b + (ny + 1) * c)

    return np.stack([nid(i, j, k), nid(i + 1, j, k), nid(i + 1, j + 1, k), nid(i, j + 1, k),
                     nid(i, j, k + 1), nid(i + 1, j, k + 1), nid(i + 1, j + 1, k + 1), nid(i, j + 1, k + 1)], axis=1)


HEX_FACES = ((0, 3, 2, 1), (4, 5, 6, 7), (0, 1, 5, 4), (1, 2, 6, 5), (2, 3, 7, 6), (3, 0, 4, 7))


def box_grid(nx, ny, nz, bounds=(0, 1, 0, 1, 0, 1), *, kind="hex", perturb=0.0, seed=0, zmap=None,
             poly_fraction=0.5):
    """An unstructured box grid (pyvista UnstructuredGrid); see module docstring."""
    pts = box_points(nx, ny, nz, bounds, perturb, seed, zmap)
    hx = _hex_conn(nx, ny, nz).astype(np.int64)
    n = hx.shape[0]
    if kind == "hex":
        cells = np.column_stack([np.full(n, 8), hx]).ravel()
        return pv.UnstructuredGrid(cells, np.full(n, 12, dtype=np.uint8), pts)
    if kind == "tet":
        # Freudenthal/Kuhn: one tetrahedron per axis permutation, all sharing the 0-6 diagonal
        corner = {(0, 0, 0): 0, (1, 0, 0): 1, (1, 1, 0): 2, (0, 1, 0): 3, (0, 0, 1): 4, (1, 0, 1): 5,
                  (1, 1, 1): 6, (0, 1, 1): 7}
        tets = []
        for perm in itertools.permutations(range(3)):
            v = [0, 0, 0]
            path = [corner[tuple(v)]]
            for ax in perm:
                v[ax] = 1
                path.append(corner[tuple(v)])
            tets.append(path)
        conn = np.concatenate([hx[:, t] for t in tets], axis=0)
        m = conn.shape[0]
        cells = np.column_stack([np.full(m, 4), conn]).ravel()
        return pv.UnstructuredGrid(cells, np.full(m, 10, dtype=np.uint8), pts)
    if kind in ("poly", "mixed"):
        if kind == "poly":
            is_poly = np.ones(n, dtype=bool)
        else:
            is_poly = np.random.default_rng(seed + 1).random(n) < poly_fraction
        # polyhedron stream: [n_items, 6, (4 ids) × 6]; hexahedron: [8, ids]
        fc = np.concatenate([np.column_stack([np.full(n, 4), hx[:, list(f)]]) for f in HEX_FACES], axis=1)
        poly_rows = np.column_stack([np.full(n, 31), np.full(n, 6), fc])  # 31 = 1 + 6*5
        hex_rows = np.column_stack([np.full(n, 8), hx])
        parts = []
        lens = np.where(is_poly, 32, 9)
        out = np.empty(int(lens.sum()), dtype=np.int64)
        starts = np.concatenate([[0], np.cumsum(lens)[:-1]])
        pi = np.flatnonzero(is_poly)
        hi = np.flatnonzero(~is_poly)
        out[(starts[pi][:, None] + np.arange(32)).ravel()] = poly_rows[pi].ravel()
        out[(starts[hi][:, None] + np.arange(9)).ravel()] = hex_rows[hi].ravel()
        del parts
        types = np.where(is_poly, 42, 12).astype(np.uint8)
        return pv.UnstructuredGrid(out, types, pts)
    raise ValueError(kind)


# ---------------------------------------------------------------------------
# analytic fields
# ---------------------------------------------------------------------------

def lamb_oseen(points, gamma, rc, centre_yz=(0.0, 0.0), axial=0.0, axial_deficit=0.0):
    """Lamb–Oseen vortex about an axis parallel to +x through ``centre_yz``
    (Lamb 1932, Hydrodynamics §334a; Oseen 1912): u_θ = Γ/(2πr)(1 − e^{−r²/rc²}).
    Axial flow u_x = axial − axial_deficit e^{−r²/rc²}. Returns (n, 3)."""
    y = points[:, 1] - centre_yz[0]
    z = points[:, 2] - centre_yz[1]
    r2 = y * y + z * z
    with np.errstate(invalid="ignore", divide="ignore"):
        f = np.where(r2 > 0, gamma / (2 * np.pi * r2) * (1 - np.exp(-r2 / rc**2)), gamma / (2 * np.pi * rc**2))
    u = np.zeros((points.shape[0], 3))
    u[:, 0] = axial - axial_deficit * np.exp(-r2 / rc**2)
    u[:, 1] = -f * z
    u[:, 2] = f * y
    return u


def lamb_oseen_q(r, gamma, rc):
    """Analytic Q(r) of the Lamb–Oseen vortex (2D velocity field in the
    cross-plane): Q = ½(ω² ) − ‖S‖²... computed from Q = −½ tr(J²) with
    u_θ(r): Q = (u_θ/r)(du_θ/dr) ... see the test for the derivation."""
    a = 1 - np.exp(-r**2 / rc**2)
    up = gamma / (2 * np.pi) * (-a / r**2 + 2 / rc**2 * np.exp(-r**2 / rc**2))  # du_θ/dr
    ut_over_r = gamma / (2 * np.pi * r**2) * a
    return ut_over_r * up


def burgers(points, gamma, nu, alpha):
    """Burgers vortex (Burgers 1948, Adv. Appl. Mech. 1:171): axial strain α
    along +x, u_r = −α r/2, u_x = α x, u_θ = Γ/(2πr)(1 − e^{−α r²/(4ν)})."""
    x, y, z = points[:, 0], points[:, 1], points[:, 2]
    r2 = y * y + z * z
    rc2 = 4 * nu / alpha
    with np.errstate(invalid="ignore", divide="ignore"):
        f = np.where(r2 > 0, gamma / (2 * np.pi * r2) * (1 - np.exp(-r2 / rc2)), gamma / (2 * np.pi * rc2))
    u = np.zeros((points.shape[0], 3))
    u[:, 0] = alpha * x
    u[:, 1] = -0.5 * alpha * y - f * z
    u[:, 2] = -0.5 * alpha * z + f * y
    return u


def box_patch(grid, nx, ny, nz, which):
    """The z-bottom (``"bottom"``) or z-top (``"top"``) boundary of a
    :func:`box_grid` as pyvista PolyData (quads, the grid's points)."""
    k = 0 if which == "bottom" else nz
    i, j = np.meshgrid(np.arange(nx), np.arange(ny), indexing="ij")
    i, j = i.ravel(), j.ravel()

    def nid(a, b):
        return a + (nx + 1) * (b + (ny + 1) * k)

    q = np.stack([nid(i, j), nid(i + 1, j), nid(i + 1, j + 1), nid(i, j + 1)], axis=1)
    if which == "top":
        q = q[:, ::-1]
    faces = np.column_stack([np.full(len(q), 4), q]).ravel()
    return pv.PolyData(np.asarray(grid.points), faces=faces).clean()
