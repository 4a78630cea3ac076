"""Faces grouped by vertex count and the fast sums against a plain per-face
reference (the polygon formulas written out face by face), and the reader's
array selection."""
from __future__ import annotations

import numpy as np
import pytest

from _surfaces import icosphere
from _vtkfiles import polydata, write, write_solver_like_export
from postproc.kernels import forces as pf
from postproc.kernels.forces import ForceSettings, integrate_forces
from postproc.kernels.polygons import face_geometry
from postproc.io.surfaces import read_surface


def mixed_surface(seed=0, n=400):
    """Our invented mixed surface: triangles, quads, pentagons and hexagons in shuffled
    order, on a wavy sheet (so most faces are non-planar), with face data."""
    rng = np.random.default_rng(seed)
    faces, pts = [], []
    for i in range(n):
        k = (3, 4, 5, 6)[i % 4]
        # irregular convex polygon: k angles, each step 0.4 … 1.6 of 2π/k
        ang = np.cumsum(rng.uniform(0.4, 1.6, k))
        ang = 2 * np.pi * ang / (ang[-1] + rng.uniform(0.4, 1.6))
        c = rng.uniform(-2, 2, 2)
        r = rng.uniform(0.05, 0.2)
        xy = c + r * np.column_stack([np.cos(ang), np.sin(ang)])
        z = 0.3 * np.sin(3 * xy[:, 0]) * np.cos(2 * xy[:, 1]) + (0.02 * rng.normal(size=k) if i % 3 else 0.0)
        faces.append(list(range(len(pts), len(pts) + k)))
        pts.extend(np.column_stack([xy, z]).tolist())
    order = rng.permutation(n)
    faces = [faces[i] for i in order]
    off = np.concatenate([[0], np.cumsum([len(f) for f in faces])]).astype(np.int64)
    conn = np.concatenate(faces).astype(np.int64)
    P = np.array(pts)
    p = rng.normal(size=n)
    tau = rng.normal(size=(n, 3))
    return P, off, conn, p, tau


def reference_geometry(P, off, conn):
    """Per face: S = ½ Σ p_i × p_{i+1}; centroid = Σ w_t c_t / Σ w_t over the fan
    triangles (p_0, p_j, p_{j+1}), w_t = their area vector projected on S
    (common practice, no source: the area-weighted centroid of a planar polygon)."""
    S, C = [], []
    for a, b in zip(off[:-1], off[1:]):
        v = P[conn[a:b]]
        s = 0.5 * sum(np.cross(v[i], v[(i + 1) % len(v)]) for i in range(len(v)))
        n = s / np.linalg.norm(s)
        w = [0.5 * np.cross(v[j] - v[0], v[j + 1] - v[0]) @ n for j in range(1, len(v) - 1)]
        c = sum(wj * (v[0] + v[j] + v[j + 1]) / 3 for wj, j in zip(w, range(1, len(v) - 1))) / sum(w)
        S.append(s)
        C.append(c)
    return np.array(S), np.array(C)


def reference_loads(S, C, p, tau, rho, about):
    """Midpoint rule written out per face (solver conventions: normals into the body,
    shear on the fluid, kinematic values)."""
    mag = np.linalg.norm(S, axis=1)
    dFp = rho * p[:, None] * S
    dFv = -rho * tau * mag[:, None]
    r = C - np.asarray(about)
    return dFp.sum(0), dFv.sum(0), np.cross(r, dFp).sum(0), np.cross(r, dFv).sum(0)


def test_grouped_geometry_matches_per_face_formulas():
    P, off, conn, *_ = mixed_surface()
    S, C = face_geometry(P, (off, conn))
    Sr, Cr = reference_geometry(P, off, conn)
    # same formulas, different operation order: round-off (faces ~0.1 m, |S| ~0.03 m²)
    np.testing.assert_allclose(S, Sr, rtol=0, atol=1e-15)
    np.testing.assert_allclose(C, Cr, rtol=0, atol=1e-14)


@pytest.mark.parametrize("chunk", [7, 100_000])
def test_grouped_loads_match_reference_in_any_chunking(monkeypatch, chunk):
    monkeypatch.setattr(pf, "CHUNK", chunk)  # chunks shorter than a group and chunks holding everything
    P, off, conn, p, tau = mixed_surface(1)
    Sr, Cr = reference_geometry(P, off, conn)
    about = (0.3, -0.2, 0.5)
    Fp, Fv, Mp, Mv = reference_loads(Sr, Cr, p, tau, 1.2, about)
    r = integrate_forces(P, (off, conn), p, tau, ForceSettings(rho=1.2, about=about))
    # sums of ~400 terms of size ≤ 0.1 N: round-off well below 1e-13
    for got, want in ((r.force_pressure, Fp), (r.force_viscous, Fv), (r.moment_pressure, Mp), (r.moment_viscous, Mv)):
        np.testing.assert_allclose(got, want, rtol=0, atol=1e-13)
    assert r.area == pytest.approx(np.linalg.norm(Sr, axis=1).sum(), rel=1e-14)
    assert r.open_fraction == pytest.approx(np.linalg.norm(Sr.sum(0)) / np.linalg.norm(Sr, axis=1).sum(), rel=1e-12)
    # the same faces as precomputed area vectors and centroids
    r2 = integrate_forces(area_vectors=Sr, centroids=Cr, pressure=p, shear=tau, settings=ForceSettings(rho=1.2, about=about))
    np.testing.assert_allclose(r2.force, r.force, rtol=0, atol=1e-13)
    np.testing.assert_allclose(r2.moment, r.moment, rtol=0, atol=1e-13)


@pytest.mark.parametrize("chunk", [5, 64, 100_000])
def test_parts_in_runs_and_interleaved_match_subsets(monkeypatch, chunk):
    monkeypatch.setattr(pf, "CHUNK", chunk)
    X, F = icosphere(1.0, 3)  # 1280 triangles
    rng = np.random.default_rng(2)
    p, tau = rng.normal(size=len(F)), rng.normal(size=(len(F), 3))
    runs = np.repeat([0, 1, 2], [300, 500, len(F) - 800])      # patches one after another (summed run by run)
    mixed = rng.integers(0, 3, len(F))                          # interleaved ids (summed by bincount)
    for ids in (runs, mixed):
        r = integrate_forces(X, F, p, tau, ForceSettings(rho=1.2, about=(0.1, 0, 0)), part_ids=ids, part_names=["a", "b", "c"])
        for i, name in enumerate("abc"):
            sub = integrate_forces(X, F[ids == i], p[ids == i], tau[ids == i], ForceSettings(rho=1.2, about=(0.1, 0, 0)))
            # the same faces summed in another grouping: round-off of ~500 terms of size ≤ 0.05
            np.testing.assert_allclose(r.parts[name].force, sub.force, rtol=0, atol=1e-13)
            np.testing.assert_allclose(r.parts[name].moment, sub.moment, rtol=0, atol=1e-13)
            assert r.parts[name].area == pytest.approx(sub.area, rel=1e-14)
            assert r.parts[name].n_faces == int((ids == i).sum())


def test_grouped_path_inputs_unmodified_and_skips_nonfinite():
    P, off, conn, p, tau = mixed_surface(3)
    p = p.astype(np.float32)
    tau = tau.astype(np.float32)
    p[[5, 17]] = np.nan
    tau[40, 1] = np.inf
    ids = np.arange(len(p)) % 3
    copies = [a.copy() for a in (P, off, conn, p, tau, ids)]
    r = integrate_forces(P, (off, conn), p, tau, ForceSettings(rho=1.2, allow_nonfinite=True), part_ids=ids)
    face_geometry(P, (off, conn))
    for a, b in zip((P, off, conn, p, tau, ids), copies):
        np.testing.assert_array_equal(a, b)
    keep = np.ones(len(p), bool)
    keep[[5, 17, 40]] = False
    Sr, Cr = reference_geometry(P, off, conn)
    ref = integrate_forces(area_vectors=Sr[keep], centroids=Cr[keep], pressure=p[keep], shear=tau[keep], settings=ForceSettings(rho=1.2))
    np.testing.assert_allclose(r.force, ref.force, rtol=0, atol=1e-12)  # float32 data, float64 sums: round-off
    np.testing.assert_allclose(r.moment, ref.moment, rtol=0, atol=1e-12)


def test_grouped_degenerate_face_reported_by_its_input_index():
    P, off, conn, p, tau = mixed_surface(4)
    conn = conn.copy()
    i = 123
    conn[off[i]:off[i + 1]] = conn[off[i]]  # collapse face 123 to a point
    with pytest.raises(pf.UserError, match=r"1 zero-area .*first at face 123"):
        integrate_forces(P, (off, conn), p, tau)


def test_reader_loads_only_the_named_face_arrays(tmp_path):
    X, F = icosphere(0.5, 2)
    rng = np.random.default_rng(0)
    cells = {"p": rng.normal(size=len(F)), "wallShearStress": rng.normal(size=(len(F), 3)), "k": np.ones(len(F))}
    f = write(polydata(X, F, cells, {"p": np.zeros(len(X))}), tmp_path / "s.vtp")
    s = read_surface(f, arrays=["p"])
    assert set(s.cell_data) == {"p"}
    assert set(s.cell_arrays) == {"p", "wallShearStress", "k"} and s.point_arrays == ("p",)
    np.testing.assert_array_equal(s.array("p"), cells["p"].astype(np.float32))
    full = read_surface(f)
    assert set(full.cell_data) == {"p", "wallShearStress", "k"}
    with pytest.raises(pf.UserError, match=r"(?s)'pMean'.*face arrays: k, p, wallShearStress"):
        s.array("pMean")
    vtm = write_solver_like_export(tmp_path / "case", {"body": polydata(X, F, cells), "wing": polydata(X, F, cells)})
    m = read_surface(vtm, ["*"], arrays=["p", "wallShearStress"])
    assert set(m.cell_data) == {"p", "wallShearStress"} and m.n_faces == 2 * len(F)
