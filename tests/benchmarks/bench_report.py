"""Benchmark: the report's flow pictures on a 1 M-cell case, and the whole
report of a sweep.

Run (script, not a test; 2 shared cores — note the load average it prints):

    PYTHONPATH=. python tests/benchmarks/bench_report.py [--cells 1000000] [--sweep runs/demo/sweep]

1. Synthetic case: a ground-effect channel (ground, a floor with a ramp)
   of about ``--cells`` hexahedra carrying a 1-D flow and a counter-rotating
   Lamb–Oseen vortex pair under the floor, a sweep-like manifest record,
   ~50 k floor faces. Times: the flow pass that the sweep table needs anyway
   (gradients, Q, vortices, diffuser, underbody, walls), the picture scene
   (underside raster, streak lines, Q iso-surface) and the rendering of the
   five views (off-screen, encoded PNG). Target: scene + rendering ≤ 3 s per
   case on 2 cores.
2. With ``--sweep`` (default ``runs/demo/sweep`` when it exists): the whole
   ``postproc sweep`` of that sweep into a temporary folder — forces, flow
   columns, scenes, pictures, plots, HTML — with its breakdown and the
   report's size. Target: ≤ 60 s for a 12-case sweep; size < 5 MB.
"""
from __future__ import annotations

import argparse
import os
import sys
import tempfile
import time
import warnings
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))
sys.path.insert(0, str(HERE.parent.parent))
warnings.filterwarnings("ignore")

from flow_meshes import box_grid, box_patch, lamb_oseen  # noqa: E402

from caseprep.contract.frames import place_body  # noqa: E402
from caseprep.contract.manifest import CaseRecord, Reference  # noqa: E402
from postproc.io import flow as flowio  # noqa: E402
from postproc.pipelines import case_flow, flow_columns  # noqa: E402
from postproc.pipelines.case_scene import build_scene, scene_difference  # noqa: E402
from postproc.report import pictures as pics  # noqa: E402

H1, H2, XT, XE, W, V = 0.04, 0.08, 0.3, 0.8, 0.5, 50.0


def h_of_x(x):
    return np.interp(x, [0.0, XT, XE, 1.0], [H1, H1, H2, H2])


def synthetic_case(cells: int) -> flowio.FlowCase:
    n = cells ** (1.0 / 3.0)
    nx, ny, nz = int(2.5 * n), int(2.0 * n), max(8, int(0.2 * n))
    g = box_grid(nx, ny, nz, (0, 1, -W / 2, W / 2, 0, 1), zmap=lambda X, Y, S: S * h_of_x(X))
    X = flowio.cell_centres(g, kind="vertex-mean")
    u = 2.0 / (W * h_of_x(X[:, 0]))
    U = np.column_stack([u, np.zeros_like(u), np.zeros_like(u)])
    U += lamb_oseen(X, 1.0, 0.012, (-0.1, 0.02)) + lamb_oseen(X, -1.0, 0.012, (0.1, 0.02))
    g.cell_data["U"] = U.astype(np.float32)
    g.cell_data["p"] = (10.0 - 0.5 * u**2).astype(np.float32)
    patches = {}
    for name, which in (("floor", "top"), ("ground", "bottom")):
        s = box_patch(g, nx, ny, nz, which)
        c = s.cell_centers().points
        s.cell_data["p"] = (10.0 - 0.5 * (2.0 / (W * h_of_x(c[:, 0]))) ** 2).astype(np.float32)
        tau = np.zeros((s.n_cells, 3), dtype=np.float32)
        tau[:, 0] = np.where(c[:, 0] < 0.7, 1.0, -1.0)
        tau[:, 1] = 0.2 * np.sin(6 * c[:, 1])
        s.cell_data["wallShearStress"] = tau
        s.cell_data["U"] = np.zeros((s.n_cells, 3), dtype=np.float32)
        patches[name] = flowio.surface_from_polydata(s, name)
    ref = Reference(area=0.02, length=1.0, wheelbase=0.8, front_axle=(0.1, 0.0, 0.0), rear_axle=(0.9, 0.0, 0.0),
                    moment_point=(0.5, 0.0, 0.0), rho=1.2, nu=1.5e-5, speed=V)
    rec = CaseRecord(case_id="bench-0001", folder="cases/bench-0001", variant="bench",
                     params={"ride_height_front": H1, "ride_height_rear": H1},
                     yaw_mode="crosswind", ground="moving", mesh_frame="body",
                     placement=place_body(np.array([0.1, 0.0, H1]), np.array([0.25, 0.0, H1]), H1, H1),
                     wind_direction_body=(1.0, 0.0, 0.0), reference=ref,
                     patches={"body": ["floor"], "wheels": [], "ground": "ground"}, fidelity="smoke")
    return flowio.flow_case_from_grid(g, patches, source="<synthetic>", record=rec)


def bench_case(cells: int) -> None:
    t0 = time.perf_counter()
    case = synthetic_case(cells)
    print(f"synthetic case: {case.n_cells} cells, floor {case.patches['floor'].n_cells} faces "
          f"(built in {time.perf_counter() - t0:.1f} s)")
    t0, c0 = time.perf_counter(), time.process_time()
    payload, gd = case_flow.flow_payload(case)
    t_flow, c_flow = time.perf_counter() - t0, time.process_time() - c0
    v = payload["vortices"]
    refs = case_flow.references(case)
    t0, c0 = time.perf_counter(), time.process_time()
    scene = build_scene(case, refs, label="bench", variant="bench", case_id="bench-0001", gd=gd,
                        vortices=flow_columns.tracks_only(v), q_scale=v["q_scale"],
                        q_level=payload["q_normalisation"]["threshold"])
    t_scene, c_scene = time.perf_counter() - t0, time.process_time() - c0
    print(f"flow pass (gradients, Q, vortices, diffuser, underbody, walls): {t_flow:.2f} s wall, {c_flow:.2f} s CPU; "
          f"{sum(len(s['cores']) for s in v['stations'])} cores, {len(v['tracks'])} tracks")
    print(f"picture scene (underside raster {scene.underside.grid.shape}, {len(scene.streaks)} streak lines, "
          f"Q surface {scene.q_surface.n_faces if scene.q_surface else 0} triangles): {t_scene:.2f} s wall, "
          f"{c_scene:.2f} s CPU")
    problem = pics.rendering_problem()
    if problem:
        print("no rendering:", problem)
        return
    from dataclasses import replace

    other = replace(scene, variant="bench2", case_id="bench-0002")
    t0 = time.perf_counter()
    with pics.PictureRenderer() as r:
        t_start = time.perf_counter() - t0
        cams = pics.view_cameras([scene, other])
        times = []
        for s in (scene, scene_difference(other, scene)):
            t1, c1 = time.perf_counter(), time.process_time()
            sizes = [len(r.render(view, s, cams[view]).data) for view in pics.VIEWS
                     if not (view == "difference" and s is scene)]
            times.append((time.perf_counter() - t1, len(sizes), sum(sizes), time.process_time() - c1))
    print(f"renderer start-up (once per report): {t_start:.2f} s ({pics.rendering_backend()})")
    for k, (t, n, b, c) in enumerate(times):
        print(f"render case {k + 1}: {n} views in {t:.2f} s wall, {c:.2f} s CPU (all threads) ({b / 1e3:.0f} kB PNG)")
    best = min(t for t, _, _, _ in times)
    cpu = c_scene + times[-1][3]
    print(f"pictures per case (scene + 5 views): {t_scene + best:.2f} s wall — target ≤ 3 s: "
          f"{'met' if t_scene + best <= 3.0 else 'NOT met'}; CPU {cpu:.2f} s "
          f"(on 2 otherwise idle cores the wall time lies between CPU/2 and CPU)")


def bench_sweep(sweep: Path) -> None:
    from postproc.pipelines.sweep import SweepOptions, postprocess_sweep
    from postproc.report import RenderInfo, write_report

    with tempfile.TemporaryDirectory() as d:
        t0, c0 = time.perf_counter(), time.process_time()
        analysis = postprocess_sweep(sweep, SweepOptions(out_dir=d, force=True))
        t_post = time.perf_counter() - t0
        info = RenderInfo()
        write_report(analysis, Path(d) / "report.html", info=info)
        t_all, c_all = time.perf_counter() - t0, time.process_time() - c0
        forces = sum(o.seconds.get("forces", 0.0) for o in analysis.outcomes)
        flow = sum(o.seconds.get("flow", 0.0) for o in analysis.outcomes)
        n = len(analysis.outcomes)
        print(f"sweep {sweep}: {n} cases")
        print(f"  post-processing {t_post:.1f} s (forces {forces:.1f} s, flow columns + scenes {flow:.1f} s)")
        print(f"  report {t_all - t_post:.1f} s (pictures {info.seconds.get('pictures', 0):.1f} s, plots "
              f"{info.seconds.get('plots', 0):.1f} s, html {info.seconds.get('html', 0):.2f} s); per pictured case: "
              + ", ".join(f"{k} {v:.2f} s" for k, v in info.picture_seconds.items()))
        print(f"  total {t_all:.1f} s wall, {c_all:.1f} s CPU — target ≤ 60 s for 12 cases: "
              f"{'met' if t_all <= 60 * max(n, 1) / 12 else 'NOT met'} (wall)")
        print(f"  report size {info.size / 1e6:.2f} MB — limit 5 MB: {'met' if info.size < 5e6 else 'NOT met'}")


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--cells", type=float, default=1e6)
    ap.add_argument("--sweep", type=Path, default=Path("runs/demo/sweep"))
    ap.add_argument("--skip-case", action="store_true")
    a = ap.parse_args()
    print(f"load average {os.getloadavg()[0]:.1f} on {os.cpu_count()} cores")
    if not a.skip_case:
        bench_case(int(a.cells))
    if (a.sweep / "manifest.json").is_file():
        bench_sweep(a.sweep)
    else:
        print(f"no sweep at {a.sweep}: sweep part skipped (run `make demo` first)")
    print(f"load average {os.getloadavg()[0]:.1f} at the end")
    return 0


if __name__ == "__main__":
    sys.exit(main())
