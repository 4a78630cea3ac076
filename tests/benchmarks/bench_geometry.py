"""Benchmark: reading and measuring a ~1 M-triangle body, and clearance for a
1000-case sweep on its hull. Prints times and ratios (not a test).

Run: PYTHONPATH=. python tests/benchmarks/bench_geometry.py
"""
from __future__ import annotations

import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))
sys.path.insert(0, str(Path(__file__).resolve().parent.parent.parent))

from caseprep.geometry import body, checks, stl  # noqa: E402
from caseprep.contract.frames import place_body  # noqa: E402
from planning_helpers import write_binary_stl  # noqa: E402


def bumpy_body(n_theta: int, n_x: int) -> np.ndarray:
    """A closed lofted body with a wavy surface, 2·n_theta·(n_x−1) + 2·n_theta triangles (m)."""
    xs = np.linspace(0.0, 4.0, n_x)
    th = np.linspace(0, 2 * np.pi, n_theta, endpoint=False)
    r = 0.5 + 0.02 * np.sin(7 * th)[None, :] + 0.1 * np.sin(np.pi * xs / 4)[:, None]
    R = np.stack([np.broadcast_to(xs[:, None], r.shape), r * 1.8 * np.cos(th), 0.6 + r * np.sin(th)], axis=-1)
    i, j = np.meshgrid(np.arange(n_x - 1), np.arange(n_theta), indexing="ij")
    k = (j + 1) % n_theta
    a, b, c, d = R[i, j], R[i + 1, j], R[i + 1, k], R[i, k]
    quads = np.concatenate([np.stack([a, b, c], -2).reshape(-1, 3, 3), np.stack([a, c, d], -2).reshape(-1, 3, 3)])
    caps = []
    for s, sgn in ((0, -1), (n_x - 1, 1)):
        cen = R[s].mean(axis=0)
        for jj in range(n_theta):
            kk = (jj + 1) % n_theta
            caps.append([cen, R[s, jj], R[s, kk]] if sgn < 0 else [cen, R[s, kk], R[s, jj]])
    T = np.concatenate([quads, np.array(caps)])
    if checks.inspect_surface(T).volume < 0:
        T = T[:, ::-1]
    return T


def main() -> None:
    T = bumpy_body(1000, 501)
    print(f"triangles: {len(T):,}")
    with tempfile.TemporaryDirectory() as tmp:
        p = write_binary_stl(Path(tmp) / "big.stl", T)
        t0 = time.perf_counter()
        s = stl.read_stl(p)
        t_read = time.perf_counter() - t0
    t0 = time.perf_counter()
    rep = checks.inspect_surface(s.triangles)
    t_inspect = time.perf_counter() - t0
    t0 = time.perf_counter()
    g = body.analyse(s)
    t_analyse = time.perf_counter() - t0
    print(f"read binary STL   {t_read:6.3f} s  ({t_read / len(T) * 1e6:.3f} µs/triangle)")
    print(f"topology checks   {t_inspect:6.3f} s  closed={rep.closed} misoriented={rep.misoriented_edges}")
    print(f"analyse (hull, frontal area, checks) {t_analyse:6.3f} s  hull vertices {len(g.hull):,} of {rep.n_points:,} points")
    rng = np.random.default_rng(0)
    pts = s.triangles.reshape(-1, 3)
    t0 = time.perf_counter()
    mins_h = []
    for _ in range(1000):
        P = place_body([0.5, 0, 0.1], [3.5, 0, 0.1], rng.uniform(0.02, 0.08), rng.uniform(0.02, 0.08), rng.uniform(-0.1, 0.1))
        mins_h.append(float((g.hull @ P.rotation[2] + P.translation[2]).min()))
    t_hull = time.perf_counter() - t0
    t0 = time.perf_counter()
    for _ in range(10):
        (pts @ P.rotation[2] + P.translation[2]).min()
    t_brute = (time.perf_counter() - t0) / 10 * 1000
    print(f"1000 clearances on the hull {t_hull:6.3f} s; brute force would take {t_brute:6.1f} s (ratio {t_brute / t_hull:.0f}×)")


if __name__ == "__main__":
    main()
