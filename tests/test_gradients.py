"""Cell-data LSQ gradients, Q, λ2 and vorticity on unstructured meshes."""
from __future__ import annotations

import warnings

import numpy as np
import pytest
import vtk

from postproc.io import flow as flowio
from postproc.pipelines import case_flow as flowreport
from postproc.kernels import gradients as G
from postproc.kernels import meshtopo

from flow_meshes import box_grid, box_patch, burgers, lamb_oseen, lamb_oseen_q

warnings.filterwarnings("ignore", category=DeprecationWarning)
KINDS = ["hex", "tet", "poly", "mixed"]


def _prep(grid):
    A, nb = meshtopo.cell_adjacency(flowio.topology(grid))
    X = flowio.cell_centres(grid)
    return A, nb, X, G.lsq_gradient_operator(X, A)


@pytest.fixture(scope="module", params=KINDS)
def mesh(request):
    g = box_grid(7, 6, 5, (0, 1.4, -0.6, 0.6, 0, 1), kind=request.param, perturb=0.35, seed=3)
    A, nb, X, op = _prep(g)
    return request.param, g, A, nb, X, op


def test_adjacency_matches_vtk_face_neighbours(mesh):
    # reference: VTK's vtkUnstructuredGrid.GetCellNeighbors over each cell's faces
    kind, g, A, nb, X, op = mesh
    ug = vtk.vtkUnstructuredGrid()
    ug.DeepCopy(g)
    for c in range(0, g.n_cells, max(1, g.n_cells // 40)):
        cell = ug.GetCell(c)
        ref = set()
        for f in range(cell.GetNumberOfFaces()):
            ids = cell.GetFace(f).GetPointIds()
            nl = vtk.vtkIdList()
            ug.GetCellNeighbors(c, ids, nl)
            ref.update(nl.GetId(k) for k in range(nl.GetNumberOfIds()))
        ours = set(A.indices[A.indptr[c]:A.indptr[c + 1]].tolist())
        assert ours == ref, (kind, c)


def test_lsq_exact_for_linear_fields(mesh):
    # Proof (module docstring of postproc.kernels.gradients): for φ = a + g·x the LSQ
    # normal equations give M g = M g, so the operator returns g exactly when
    # M is invertible; only round-off remains (1e-9 relative is ~1e6 × eps).
    kind, g, A, nb, X, op = mesh
    rng = np.random.default_rng(7)
    Jt = rng.normal(size=(3, 3))
    U = X @ Jt.T + rng.normal(size=3)
    J = op.gradient(U)
    assert op.n_degenerate == 0
    np.testing.assert_allclose(J, np.broadcast_to(Jt, J.shape), atol=1e-9 * np.abs(Jt).max())


def test_q_exact_solid_body_shear_strain(mesh):
    # Analytic: solid-body rotation u = Ω × x gives Q = Ω² (|Ω| the rotation
    # rate), λ2 = −Ω²; simple shear u = (γ y, 0, 0) gives Q = 0; irrotational
    # strain u = (a x, b y, −(a+b) z) gives Q = −(a² + b² + (a+b)²)/2
    # (Hunt, Wray & Moin 1988; Jeong & Hussain 1995). Exact on any mesh
    # because the LSQ gradient is exact for linear fields.
    kind, g, A, nb, X, op = mesh
    om = 3.0
    U = np.column_stack([np.zeros(len(X)), -om * X[:, 2], om * X[:, 1]])  # rotation about +x
    f = G.velocity_gradient_fields(op, U)
    np.testing.assert_allclose(f.q, om**2, rtol=1e-9)
    # λ2 by the closed-form eigenvalues: a double eigenvalue sits where arccos
    # is ill-conditioned, so round-off grows to ~√eps ≈ 1.5e-8 relative
    np.testing.assert_allclose(f.lambda2, -om**2, rtol=1e-7)
    np.testing.assert_allclose(f.vorticity, np.broadcast_to([2 * om, 0, 0], f.vorticity.shape), atol=1e-9)
    gam = 5.0
    U = np.column_stack([gam * X[:, 1], np.zeros(len(X)), np.zeros(len(X))])
    f = G.velocity_gradient_fields(op, U)
    np.testing.assert_allclose(f.q, 0.0, atol=1e-9 * gam**2)
    a, b = 2.0, -0.5
    U = np.column_stack([a * X[:, 0], b * X[:, 1], -(a + b) * X[:, 2]])
    f = G.velocity_gradient_fields(op, U)
    np.testing.assert_allclose(f.q, -(a * a + b * b + (a + b) ** 2) / 2, rtol=1e-9)
    assert np.all(f.q < 0)


def test_boundary_stencils_are_widened_on_tets():
    # a corner tetrahedron has a single face neighbour: the stencil must grow
    g = box_grid(4, 4, 4, kind="tet", perturb=0.2, seed=1)
    A, nb, X, op = _prep(g)
    assert np.diff(A.indptr).min() < 3
    assert op.n_extended > 0 and op.n_degenerate == 0


def test_eigenvalues_closed_form_vs_numpy():
    # reference: numpy.linalg.eigvalsh (LAPACK)
    rng = np.random.default_rng(0)
    M = rng.normal(size=(500, 3, 3))
    S = M + M.transpose(0, 2, 1)
    np.testing.assert_allclose(G._sym3_eigvals(S), np.linalg.eigvalsh(S), atol=1e-10)


def test_lamb_oseen_q_against_analytic():
    # Lamb–Oseen vortex (Lamb 1932, Hydrodynamics §334a; Oseen 1912):
    # Q(r) = (u_θ/r) du_θ/dr for a swirl u_θ(r) (Q = det of the 2D gradient).
    # First-order LSQ on a perturbed mixed mesh with h = rc/5: RMS error in
    # the core region below 6 % of Q(0) (measured ~3 %).
    gam, rc = 1.0, 0.2
    g = box_grid(6, 40, 40, (0, 0.3, -1, 1, -1, 1), kind="mixed", perturb=0.3, seed=5)
    A, nb, X, op = _prep(g)
    U = lamb_oseen(X, gam, rc, axial=2.0)
    q = G.velocity_gradient_fields(op, U).q
    r = np.hypot(X[:, 1], X[:, 2])
    inner = (nb == 0) & (r < 2 * rc) & (r > 1e-6)
    qa = lamb_oseen_q(r[inner], gam, rc)
    q0 = (gam / (2 * np.pi * rc**2)) ** 2
    rms = np.sqrt(np.mean((q[inner] - qa) ** 2))
    assert rms < 0.06 * q0
    # sign structure: Q > 0 inside the core, < 0 outside the Q = 0 radius
    assert np.all(q[(nb == 0) & (r < 0.8 * rc)] > 0)
    assert np.all(q[(nb == 0) & (r > 1.5 * rc) & (r < 0.8)] < 0)


def test_q_against_vtk_gradient_filter():
    # reference library: VTK's vtkGradientFilter (cell data, ComputeQCriterion)
    # on a regular hexahedral mesh, interior cells: both are consistent
    # central-difference-like stencils; agreement within 2 % of Q(0) RMS.
    gam, rc = 1.0, 0.2
    g = box_grid(4, 40, 40, (0, 0.2, -1, 1, -1, 1), kind="hex")
    A, nb, X, op = _prep(g)
    U = lamb_oseen(X, gam, rc)
    q = G.velocity_gradient_fields(op, U).q
    g.cell_data["U"] = U
    _, qv = flowio.vtk_cell_gradient(g, "U")
    inner = nb == 0
    q0 = (gam / (2 * np.pi * rc**2)) ** 2
    assert np.sqrt(np.mean((q[inner] - qv[inner]) ** 2)) < 0.02 * q0
    # on a perturbed mesh our operator stays exact for a linear field while
    # VTK's cell gradient does not (documented difference, measured here)
    gp = box_grid(6, 6, 6, kind="hex", perturb=0.3, seed=2)
    A, nb, X, op = _prep(gp)
    om = 2.0
    U = np.column_stack([np.zeros(len(X)), -om * X[:, 2], om * X[:, 1]])
    gp.cell_data["U"] = U
    _, qv = flowio.vtk_cell_gradient(gp, "U")
    ours = G.velocity_gradient_fields(op, U).q
    assert np.abs(ours - om**2).max() < 1e-9
    assert np.abs(qv - om**2).max() > 1e-3


def test_burgers_vortex_lambda2_negative_in_core():
    # Burgers vortex (Burgers 1948, Adv. Appl. Mech. 1:171): the core
    # (r < rc = √(4ν/α)) has λ2 < 0 (Jeong & Hussain 1995, §4) and Q > 0.
    nu, alpha, gam = 0.01, 1.0, 2.0
    rc = np.sqrt(4 * nu / alpha)
    g = box_grid(6, 30, 30, (-0.1, 0.1, -3 * rc, 3 * rc, -3 * rc, 3 * rc), kind="tet", perturb=0.2, seed=9)
    A, nb, X, op = _prep(g)
    f = G.velocity_gradient_fields(op, burgers(X, gam, nu, alpha))
    r = np.hypot(X[:, 1], X[:, 2])
    core = r < 0.7 * rc
    assert core.sum() > 20
    assert np.all(f.lambda2[core] < 0)
    assert np.all(f.q[core] > 0)


def test_q_star_normalisation():
    q = np.array([100.0, -50.0])
    np.testing.assert_allclose(G.normalised_q(q, 40.0, 4.0), q / 100.0)
    with pytest.raises(ValueError):
        G.normalised_q(q, 0.0, 1.0)


def test_face_matching_survives_key_collisions():
    # Packed-key matching: slots whose high key bits collide (here all of
    # them, by construction) must still pair exactly by the full keys, and a
    # face present three times (non-conforming input) gives one pair only.
    # total = 11 slots → 4 low bits hold the slot number; keys below 16 all
    # share the high bits 0.
    k1 = np.array([5, 5, 5, 5, 7, 7, 3, 3, 3, 9, 12], dtype=np.uint64)
    k2 = np.array([1, 2, 1, 2, 3, 3, 4, 4, 4, 5, 6], dtype=np.uint64)
    own = np.array([0, 1, 2, 3, 4, 5, 6, 7, 8, 9, 10], dtype=np.int32)
    a, b = meshtopo._match_keys(k1.copy(), k2, own)
    pairs = {tuple(sorted(p)) for p in zip(a.tolist(), b.tolist())}
    assert pairs == {(0, 2), (1, 3), (4, 5), (6, 7)}
    # a run of exactly two with different second keys is not a face pair
    a, b = meshtopo._match_keys(np.array([1, 2], dtype=np.uint64), np.array([1, 2], dtype=np.uint64),
                         np.array([0, 1], dtype=np.int32))
    assert a.size == 0


def _reference_gradient_row(A, X, c, layers):
    """Independent check of one operator row: the cell's stencil by
    breadth-first search over ``layers`` face-neighbour layers and the
    weighted least-squares fit by numpy.linalg.lstsq (LAPACK) of
    √w (φ_j − φ_i) ≈ √w d_ij·g on the three unit fields."""
    st = {c}
    front = {c}
    for _ in range(layers):
        front = {int(j) for i in front for j in A.indices[A.indptr[i]:A.indptr[i + 1]]} - st
        st |= front
    nb = np.array(sorted(st - {c}))
    d = X[nb] - X[c]
    sw = 1.0 / np.linalg.norm(d, axis=1)
    # coefficients: the pseudo-inverse of the weighted system, columns per neighbour
    P = np.linalg.pinv(d * sw[:, None]) * sw[None, :]
    return nb, P


def test_ill_posed_face_stencils_are_widened_and_match_lstsq():
    # a strict quality limit forces the ill-posed-stencil path on many cells
    # with enough face neighbours; every operator row must equal the weighted
    # least-squares fit over its widened stencil (reference: numpy's LAPACK
    # pseudo-inverse), and linear fields stay exact (1e-9, round-off only)
    g = box_grid(7, 6, 5, (0, 1.4, -0.6, 0.6, 0, 1), kind="mixed", perturb=0.35, seed=3)
    A, nb, X, _ = _prep(g)
    op = G.lsq_gradient_operator(X, A, quality_limit=0.95)
    few = int((np.diff(A.indptr) < 4).sum())
    assert op.n_extended > few + 20 and op.n_degenerate == 0
    rows = np.flatnonzero(np.diff(op.coeffs[0].indptr) > np.diff(A.indptr))
    assert rows.size == op.n_extended
    for c in rows[:: max(1, rows.size // 15)]:
        lo, hi = op.coeffs[0].indptr[c], op.coeffs[0].indptr[c + 1]
        cols = op.coeffs[0].indices[lo:hi]
        for layers in (2, 3):
            ref_nb, P = _reference_gradient_row(A, X, int(c), layers)
            if ref_nb.size == cols.size:
                break
        assert np.array_equal(np.sort(cols), ref_nb)
        order = np.argsort(cols)
        for k in range(3):
            np.testing.assert_allclose(op.coeffs[k].data[lo:hi][order], P[k], rtol=1e-9, atol=1e-9 * np.abs(P).max())
    rng = np.random.default_rng(1)
    Jt = rng.normal(size=(3, 3))
    J = op.gradient(X @ Jt.T)
    np.testing.assert_allclose(J, np.broadcast_to(Jt, J.shape), atol=1e-9 * np.abs(Jt).max())


def _patched_case(kind, field):
    """A perturbed box grid whose bottom and top boundaries are patches
    carrying ``field`` at their face centres (like the solver's boundary
    values), as a FlowCase."""
    nx, ny, nz = 6, 5, 4
    g = box_grid(nx, ny, nz, (0, 1.2, -0.5, 0.5, 0, 0.8), kind=kind, perturb=0.3, seed=6)
    patches = {}
    for which in ("bottom", "top"):
        s = flowio.surface_from_polydata(box_patch(g, nx, ny, nz, which), which)
        s.cell_data["U"] = field(s.centroids)
        patches[which] = s
    X = flowio.cell_centres(g)
    g.cell_data["U"] = field(X)
    return flowio.flow_case_from_grid(g, patches), X


@pytest.mark.parametrize("kind", ["hex", "mixed"])
def test_boundary_face_values_join_the_stencil_and_keep_linear_exactness(kind):
    # linear field (cell and face values): exact with the boundary points in
    # the stencils too (same proof as without them; round-off only)
    rng = np.random.default_rng(3)
    Jt = rng.normal(size=(3, 3))
    case, X = _patched_case(kind, lambda P: P @ Jt.T + 1.0)
    gd = flowreport.gradient_data(case, with_lambda2=False)
    op = gd.operator
    assert op.n_boundary == 2 * 6 * 5  # every bottom and top face found its cell
    U = case.cell_array("U")
    Ub = np.concatenate([case.patches[n].cell_data["U"] for n in ("bottom", "top")])
    U0, Ub0 = U.copy(), Ub.copy()
    J = op.gradient(U, boundary=Ub)
    np.testing.assert_allclose(J, np.broadcast_to(Jt, J.shape), atol=1e-9 * np.abs(Jt).max())
    assert np.array_equal(U, U0) and np.array_equal(Ub, Ub0)  # inputs untouched
    with pytest.raises(ValueError, match="boundary points"):
        op.gradient(U)


def test_boundary_face_values_improve_the_wall_gradient():
    # a wall-bounded shear layer u = (z², 0, 0) with u = 0 on the wall z = 0:
    # exact ∂u/∂z = 2z (analytic). In the wall-adjacent cells the one-sided
    # stencil (cells only) has an O(h) error; with the wall value it must be
    # at least three times smaller (measured ~4× on this grid).
    case, X = _patched_case("hex", lambda P: np.column_stack([P[:, 2] ** 2, 0 * P[:, 0], 0 * P[:, 0]]))
    wall = X[:, 2] < 0.2
    err = {}
    for ub in (False, True):
        gd = flowreport.gradient_data(case, with_lambda2=False, use_boundary=ub)
        U = case.cell_array("U")
        Ub = np.concatenate([case.patches[n].cell_data["U"] for n in ("bottom", "top")]) if ub else None
        J = gd.operator.gradient(U, boundary=Ub)
        err[ub] = np.sqrt(np.mean((J[wall, 0, 2] - 2 * X[wall, 2]) ** 2))
    assert err[True] < err[False] / 3
