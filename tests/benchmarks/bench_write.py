"""Benchmark: write a 1000-case sweep on a 1 M-triangle binary STL body.

Targets: < 10 s for the whole write, < 100 kB per case (the shared geometry
not counted). Prints the measured values and their ratios to the targets,
then the time of a re-run that finds every case unchanged.

    PYTHONPATH=. python tests/benchmarks/bench_write.py [--cases 1000] [--triangles 1000000]
"""
from __future__ import annotations

import argparse
import math
import os
import sys
import tempfile
import time
from dataclasses import replace
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))          # tests/ (uf_specs)
sys.path.insert(0, str(HERE.parent.parent))   # repository root (caseprep)

from caseprep.casefiles.writer import write_sweep  # noqa: E402
from uf_specs import make_spec  # noqa: E402

TARGET_S = 10.0
TARGET_BYTES = 100_000


def write_binary_stl(path: Path, n_triangles: int) -> int:
    """A closed ellipsoid-like body (demo shape, 1 m long, floor side flattened)
    tessellated into about ``n_triangles`` triangles, as a binary STL."""
    nu = int(math.sqrt(n_triangles / 4))
    nv = max(3, n_triangles // (2 * nu))
    th = np.linspace(0, np.pi, nu + 1)
    ph = np.linspace(0, 2 * np.pi, nv + 1)[:-1]
    T, P = np.meshgrid(th, ph, indexing="ij")
    x = 0.5 - 0.5 * np.cos(T)
    y = 0.2 * np.sin(T) * np.cos(P)
    z = np.maximum(0.1 + 0.1 * np.sin(T) * np.sin(P), 0.02)  # flattened underside
    pts = np.stack([x, y, z], axis=-1)
    i, j = np.meshgrid(np.arange(nu), np.arange(nv), indexing="ij")
    j1 = (j + 1) % nv
    a, b, c, d = pts[i, j], pts[i + 1, j], pts[i + 1, j1], pts[i, j1]
    tri = np.concatenate([np.stack([a, b, c], -2).reshape(-1, 3, 3), np.stack([a, c, d], -2).reshape(-1, 3, 3)])
    rec = np.zeros(len(tri), dtype=[("n", "<f4", 3), ("v", "<f4", (3, 3)), ("a", "<u2")])
    rec["v"] = tri
    nrm = np.cross(tri[:, 1] - tri[:, 0], tri[:, 2] - tri[:, 0])
    ln = np.linalg.norm(nrm, axis=1, keepdims=True)
    rec["n"] = np.divide(nrm, ln, out=np.zeros_like(nrm), where=ln > 0)
    with open(path, "wb") as fh:
        fh.write(b"underfloor demo benchmark body".ljust(80, b" "))
        fh.write(np.uint32(len(rec)).tobytes())
        fh.write(rec.tobytes())
    return len(rec)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--cases", type=int, default=1000)
    ap.add_argument("--triangles", type=int, default=1_000_000)
    args = ap.parse_args()
    with tempfile.TemporaryDirectory(prefix="uf-bench-") as tmp:
        tmp = Path(tmp)
        src = tmp / "src"
        src.mkdir()
        ntri = write_binary_stl(src / "body.stl", args.triangles)
        (src / "sweep.toml").write_text("# benchmark sweep (demo)\n")
        t0 = time.perf_counter()
        specs = []
        for k in range(args.cases):
            s = make_spec(f"bench-{k:05d}", rh_front=0.03 + 0.0001 * (k % 50), rh_rear=0.05 + 0.0002 * (k // 50 % 20),
                          beta_deg=float(k % 3), yaw_mode="crosswind")
            specs.append(replace(s, geometry="body.stl", geometry_solid_names=("body",)))
        t_plan = time.perf_counter() - t0
        out = tmp / "sweep"
        t0 = time.perf_counter()
        summary = write_sweep(specs, out, src / "sweep.toml")
        t_write = time.perf_counter() - t0
        t0 = time.perf_counter()
        again = write_sweep(specs, out, src / "sweep.toml")
        t_rerun = time.perf_counter() - t0
        assert len(again.unchanged) == args.cases
        geo = (out / "geometry" / "body.stl").stat().st_size
        on_disk = sum(f.stat().st_size for f in (out / "cases").rglob("*") if f.is_file() and not f.is_symlink())
        per_case = on_disk / args.cases
        print(f"body: {ntri} triangles, shared copy {geo / 1e6:.1f} MB (written once)")
        print(f"hand-made specs:   {t_plan:.2f} s (not part of the write)")
        print(f"write {args.cases} cases: {t_write:.2f} s   ratio to target {TARGET_S:.0f} s: {t_write / TARGET_S:.2f}")
        print(f"bytes per case:    {per_case / 1e3:.1f} kB   ratio to target {TARGET_BYTES / 1e3:.0f} kB: "
              f"{per_case / TARGET_BYTES:.2f}")
        print(f"re-run (all unchanged): {t_rerun:.2f} s   ratio to first write: {t_rerun / t_write:.2f}")
        print(f"manifest: {summary.manifest.stat().st_size / 1e6:.2f} MB")


if __name__ == "__main__":
    main()
