"""Benchmark: `caseprep write` end to end — config → plan → case folders — for a
1000-case sweep on a 1 M-triangle body.

Targets (the caseprep issue): under 10 s for the whole command and under
100 kB per case on disk besides the shared geometry. Prints the time of each
step (config + geometry checks, planning, writing), the totals and the ratios
to the targets. The body is an invented demo shape (bench_write's ellipsoid
with a flattened floor), the sweep 10 ride heights × 10 pitch angles ×
5 yaw angles × 2 speeds.

    PYTHONPATH=. python tests/benchmarks/bench_caseprep_write.py [--triangles 1000000]
"""
from __future__ import annotations

import argparse
import os
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent.parent))   # repository root

import numpy as np  # noqa: E402

from caseprep.config.load import load_config  # noqa: E402
from caseprep.planning.planner import plan  # noqa: E402
from caseprep.casefiles.writer import write_sweep  # noqa: E402

CONFIG = """# DEMO benchmark sweep (invented body and numbers)
[study]
name = "bench-write"
[air]
speed = 40.0
[ground]
mode = "moving"
[body]
length_unit = "m"
reference_area = "auto"
reference_length = 1.0
front_axle = [0.2, 0.0, 0.05]
rear_axle = [0.8, 0.0, 0.05]
ride_height_point_front = [0.2, 0.0, 0.02]
ride_height_point_rear = [0.8, 0.0, 0.02]
moment_point = [0.5, 0.0, 0.0]
[variants.body]
geometry = "body.stl"
[sweep]
yaw_mode = "crosswind"
ride_height = [0.030, 0.032, 0.034, 0.036, 0.038, 0.040, 0.042, 0.044, 0.046, 0.048]
pitch_deg = [-1.0, -0.8, -0.6, -0.4, -0.2, 0.0, 0.2, 0.4, 0.6, 0.8]
yaw_deg = [0.0, 1.0, 2.0, 3.0, 4.0]
speed = [30.0, 40.0]
[mesh]
fidelity = "coarse"
"""


def write_closed_body(path: Path, n_triangles: int) -> int:
    """A closed, outward-oriented demo body (1 m ellipsoid, flattened floor at
    z = 0.02 m) of about ``n_triangles`` triangles, as a binary STL: a latitude
    -longitude grid with triangle fans at the two poles (no degenerate faces)."""
    nv = max(8, int(np.sqrt(n_triangles / 2)))          # around the axis
    nu = max(3, n_triangles // (2 * nv) + 1)            # along the axis (rings = nu - 1)
    th = np.linspace(0, np.pi, nu + 1)[1:-1]            # ring angles, poles excluded
    ph = np.linspace(0, 2 * np.pi, nv + 1)[:-1]
    T, P = np.meshgrid(th, ph, indexing="ij")
    x = 0.5 - 0.5 * np.cos(T)
    y = 0.2 * np.sin(T) * np.cos(P)
    z = np.maximum(0.1 + 0.1 * np.sin(T) * np.sin(P), 0.02)
    ring = np.stack([x, y, z], axis=-1)                 # (nu-1, nv, 3)
    nose, tail = np.array([0.0, 0.0, 0.1]), np.array([1.0, 0.0, 0.1])
    j = np.arange(nv)
    j1 = (j + 1) % nv
    tris = [np.stack([np.broadcast_to(nose, (nv, 3)), ring[0, j1], ring[0, j]], 1)]
    a, b = ring[:-1], ring[1:]
    tris.append(np.stack([a[:, j], a[:, j1], b[:, j1]], 2).reshape(-1, 3, 3))
    tris.append(np.stack([a[:, j], b[:, j1], b[:, j]], 2).reshape(-1, 3, 3))
    tris.append(np.stack([np.broadcast_to(tail, (nv, 3)), ring[-1, j], ring[-1, j1]], 1))
    tri = np.concatenate(tris)
    # orient outward: flip all when the signed volume is negative
    vol = np.einsum("ij,ij->i", tri[:, 0], np.cross(tri[:, 1], tri[:, 2])).sum() / 6.0
    if vol < 0:
        tri = tri[:, ::-1]
    rec = np.zeros(len(tri), dtype=[("n", "<f4", 3), ("v", "<f4", (3, 3)), ("a", "<u2")])
    rec["v"] = tri
    nrm = np.cross(tri[:, 1] - tri[:, 0], tri[:, 2] - tri[:, 0])
    rec["n"] = nrm / np.linalg.norm(nrm, axis=1, keepdims=True)
    with open(path, "wb") as fh:
        fh.write(b"underfloor demo benchmark body".ljust(80, b" "))
        fh.write(np.uint32(len(rec)).tobytes())
        fh.write(rec.tobytes())
    return len(rec)


def du(path: Path, skip: Path) -> int:
    total = 0
    for root, _dirs, files in os.walk(path):
        if Path(root).resolve() == skip.resolve():
            continue
        for f in files:
            p = Path(root) / f
            if not p.is_symlink():
                total += p.stat().st_size
    return total


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--triangles", type=int, default=1_000_000)
    a = ap.parse_args()
    with tempfile.TemporaryDirectory(prefix="uf-bench-cw-") as tmp:
        tmp = Path(tmp)
        ntri = write_closed_body(tmp / "body.stl", a.triangles)
        (tmp / "sweep.toml").write_text(CONFIG)
        t0 = time.perf_counter()
        cfg = load_config(tmp / "sweep.toml")
        t1 = time.perf_counter()
        specs = plan(cfg)
        t2 = time.perf_counter()
        out = tmp / "out"
        write_sweep(specs, out, tmp / "sweep.toml", study=cfg.study.name)
        t3 = time.perf_counter()
        per_case = du(out, out / "geometry") / len(specs)
        total = t3 - t0
        print(f"body: {ntri:,} triangles; cases: {len(specs)}")
        print(f"config + geometry checks {t1 - t0:6.2f} s")
        print(f"planning                 {t2 - t1:6.2f} s")
        print(f"writing                  {t3 - t2:6.2f} s")
        print(f"total                    {total:6.2f} s   target < 10 s   ratio {total / 10.0:.2f}")
        print(f"disk per case            {per_case / 1e3:6.1f} kB  target < 100 kB ratio {per_case / 1e5:.2f}")


if __name__ == "__main__":
    main()
