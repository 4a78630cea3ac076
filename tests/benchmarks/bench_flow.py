"""Benchmark: Q/λ2 from cell data (our sparse LSQ operator) vs VTK's
vtkGradientFilter, station slicing + core detection, peak memory.

Run (script, not a test; 2 shared cores: run occasionally):

    PYTHONPATH=. python tests/benchmarks/bench_flow.py [--cells 2000000]
        [--poly-fraction 0.05] [--skip-vtk] [RESULT.vtm|CASE_DIR]

Synthetic grid: a perturbed box of hexahedra with a share of them written as
VTK polyhedra (as the solver's converter writes split cells), carrying a
Lamb–Oseen vortex pair with axial flow (analytic Q known). With a path, the
same measurements run on a real solver result (accuracy then compares our Q
and VTK's Q with the solver's own Q when the case carries it — run
``postProcess -func Q -latestTime`` and the VTK converter again — and with
each other: sign agreement and median magnitude ratio).
Prints times and ratios.
"""
from __future__ import annotations

import argparse
import sys
import time
import tracemalloc
import warnings
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))
sys.path.insert(0, str(HERE.parent.parent))
warnings.filterwarnings("ignore")

from flow_meshes import box_grid, lamb_oseen  # noqa: E402

from postproc.io import flow as flowio  # noqa: E402
from postproc.pipelines import case_flow as flowreport  # noqa: E402
from postproc.kernels import gradients as G  # noqa: E402
from postproc.kernels import meshtopo  # noqa: E402
from postproc.kernels import vortices as vx  # noqa: E402

GAM, RC = 1.0, 0.15


def analytic_q(X):
    """Q of the pair from the exact gradient (finite differences of the
    analytic field with a tiny step, central, 1e-6 m)."""
    h = 1e-6
    J = np.empty((X.shape[0], 3, 3))
    for k in range(3):
        e = np.zeros(3)
        e[k] = h
        J[:, :, k] = (field(X + e) - field(X - e)) / (2 * h)
    return G.q_criterion(J)


def field(X):
    a = X.copy()
    a[:, 1] -= 0.35
    b = X.copy()
    b[:, 1] += 0.35
    u = lamb_oseen(a, GAM, RC) + lamb_oseen(b, -GAM, RC)
    u[:, 0] += 1.0
    return u


def loaded_bytes(grid, extra=()):
    n = 0
    for a in (grid.points, grid.cell_connectivity, grid.celltypes):
        n += np.asarray(a).nbytes
    n += np.asarray(grid.cell_offsets).nbytes
    if np.any(np.asarray(grid.celltypes) == 42):
        for a in (grid.polyhedron_face_connectivity, grid.polyhedron_face_offsets,
                  grid.polyhedron_face_location_connectivity, grid.polyhedron_face_location_offsets):
            n += np.asarray(a).nbytes
    for a in extra:
        n += np.asarray(a).nbytes
    return n


def ours(grid, U):
    t0 = time.perf_counter()
    topo = flowio.topology(grid)
    A, nb = meshtopo.cell_adjacency(topo)
    ta = time.perf_counter()
    X = flowio.cell_centres(grid)  # volume centroids
    t1 = time.perf_counter()
    op = G.lsq_gradient_operator(X, A, dtype=np.float32 if U.dtype == np.float32 else np.float64)
    t2 = time.perf_counter()
    f = G.velocity_gradient_fields(op, U, with_lambda2=True)
    t3 = time.perf_counter()
    return dict(adj=ta - t0, centres=t1 - ta, op=t2 - t1, fields=t3 - t2, total=t3 - t0), A, nb, X, op, f


def q_agreement(q, ref, mask, top):
    """Sign agreement and median |q/ref| on the ``top`` % largest |ref| of ``mask``."""
    thr = np.percentile(np.abs(ref[mask]), 100 - top)
    sel = mask & (np.abs(ref) > thr)
    return float(np.mean(np.sign(q[sel]) == np.sign(ref[sel]))), float(np.median(np.abs(q[sel]) / np.abs(ref[sel])))


def main(argv=None):
    ap = argparse.ArgumentParser()
    ap.add_argument("path", nargs="?")
    ap.add_argument("--cells", type=int, default=2_000_000)
    ap.add_argument("--poly-fraction", type=float, default=0.05)
    ap.add_argument("--skip-vtk", action="store_true")
    a = ap.parse_args(argv)
    if a.path:
        case = flowio.read_flow(a.path)
        grid = case.grid
        U = np.asarray(grid.cell_data["U"])
        label = f"solver result {a.path}"
    else:
        n = round(a.cells ** (1 / 3))
        t = time.perf_counter()
        grid = box_grid(n, n, n, (0, 1, -1, 1, -1, 1), kind="mixed", perturb=0.3, seed=1, poly_fraction=a.poly_fraction)
        X = flowio.cell_centres(grid)
        U = field(X).astype(np.float32)
        grid.cell_data["U"] = U
        label = f"synthetic mixed grid {grid.n_cells} cells ({100 * a.poly_fraction:.0f} % polyhedra), built in {time.perf_counter() - t:.1f} s"
    print(label)
    tm, A, nb, X, op, f = ours(grid, U)
    print(f"ours: adjacency {tm['adj']:.2f} s, centroids {tm['centres']:.2f} s, operator {tm['op']:.2f} s, "
          f"Q+λ2+ω {tm['fields']:.2f} s, total {tm['total']:.2f} s")
    t = time.perf_counter()
    op.gradient(U)
    t_apply = time.perf_counter() - t
    print(f"ours: one more gradient with the operator built: {t_apply:.2f} s")
    inner = nb == 0
    if a.path:
        # what `postproc vortices/flow` does: the patches' face velocities join the wall cells' stencils
        t = time.perf_counter()
        gd = flowreport.gradient_data(case)
        print(f"ours with the patches' boundary values (the command's path, incl. point lookup): "
              f"{time.perf_counter() - t:.2f} s, {gd.operator.n_boundary} boundary points")
    if a.path and "Q" in grid.cell_data:
        # the solver's own Q function object (Gauss-linear gradient), when it was run and exported
        qs = np.asarray(grid.cell_data["Q"], dtype=float)
        for name, qq in (("ours (cells only)", f.q), ("ours with boundary values", gd.fields.q)):
            for label, m, top in (("interior cells, top 25 % |Q|", inner, 25), ("wall cells, top 25 % |Q|", ~inner, 25),
                                  ("all cells, top 10 % |Q|", np.ones_like(inner), 10)):
                s, r = q_agreement(qq, qs, m, top)
                print(f"{name} vs the solver's Q, {label}: sign agreement {100 * s:.1f} %, median |Q| ratio {r:.3f}")
    if not a.path:
        qa = analytic_q(X[inner])
        scale = (GAM / (2 * np.pi * RC**2)) ** 2
        core = np.abs(qa) > 1e-3 * scale
        err_ours = np.sqrt(np.mean((f.q[inner][core] - qa[core]) ** 2)) / scale
        print(f"accuracy (RMS |Q − Q_exact| / Q(0), interior cells near the vortices): ours {err_ours:.4f}")
    if not a.skip_vtk:
        t = time.perf_counter()
        _, qv = flowio.vtk_cell_gradient(grid, "U")
        t_vtk = time.perf_counter() - t
        print(f"VTK vtkGradientFilter (cell data, Q): {t_vtk:.2f} s")
        print(f"speed ratio VTK / ours (total, incl. adjacency + operator): {t_vtk / tm['total']:.1f}x")
        if not a.path:
            err_vtk = np.sqrt(np.mean((qv[inner][core] - qa[core]) ** 2)) / scale
            print(f"accuracy VTK {err_vtk:.4f}; ratio VTK/ours {err_vtk / err_ours:.2f}")
        else:
            agree, ratio = q_agreement(f.q, qv, np.ones_like(inner), 10)
            print(f"ours vs VTK on the top-10 % |Q| cells: sign agreement {100 * agree:.1f} %, median |Q| ratio {ratio:.3f}")
            if "Q" in grid.cell_data:
                s, r = q_agreement(qv, np.asarray(grid.cell_data["Q"], dtype=float), inner, 25)
                print(f"VTK vs the solver's Q, interior cells, top 25 % |Q|: sign agreement {100 * s:.1f} %, "
                      f"median |Q| ratio {r:.3f}")
    # 20 stations: slicing + core detection
    b = grid.bounds
    xs = np.linspace(b[0], b[1], 22)[1:-1]
    t = time.perf_counter()
    secs = flowio.slice_stations(grid, xs, {"Q": f.q, "vorticity": f.vorticity, "U": U})
    t_slice = time.perf_counter() - t
    thr = 0.05 * float(np.percentile(f.q, 99.9))
    cores = [vx.find_cores(s, thr) for s in secs]
    tracks = vx.link_tracks(cores, 2 * (xs[1] - xs[0]))
    t_st = time.perf_counter() - t
    print(f"20 stations: slicing {t_slice:.2f} s, slicing + cores + tracks {t_st:.2f} s "
          f"({sum(len(c) for c in cores)} cores, {len(tracks)} tracks); ratio to Q time {t_st / tm['total']:.2f}")
    # memory: tracemalloc peak of our whole Q pipeline vs the loaded arrays
    del op, f, A
    lb = loaded_bytes(grid, [U])
    tracemalloc.start()
    ours(grid, U)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    print(f"memory: loaded arrays {lb / 1e6:.0f} MB, peak extra during Q/λ2 {peak / 1e6:.0f} MB, ratio {peak / lb:.2f}")


if __name__ == "__main__":
    main()
