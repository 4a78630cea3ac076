"""`caseprep run` throughput: the default layout (one serial case per core)
against one case at a time on two MPI ranks (`-j 1 --ranks 2`), side by side
on the same smoke cases of the demo floor, on a quiet machine and with one
competing CPU-bound process that the benchmark starts itself.

    nice -n 10 .venv/bin/python tests/benchmarks/bench_runner.py [--cases 4] [--out DIR]

Run it under `nice` on a shared machine: the cases and the competing process
inherit the priority, so they compete on equal terms. For each condition
(quiet, loaded) the two layouts run one after the other on fresh copies of
the same written sweep; the wall time of `caseprep run` is measured, and the
coefficients of the two layouts are compared after `postproc sweep`.

Targets: default ≥ 1.3× faster quiet, ≥ 2.5× faster loaded; coefficients
equal within the convergence tolerance (the force monitor settles to 1 % of
the resultant force: the one convergence rule, common practice, no source).
Prints a table, the ratios and the 1-minute load average around each run,
and writes them as JSON to OUT/bench_runner.json.
"""
from __future__ import annotations

import argparse
import json
import math
import os
import resource
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
DEMO = ROOT / "example_cases" / "floor_study"
BIN = Path(sys.executable).parent
LAYOUTS = {"default": [], "-j 1 --ranks 2": ["-j", "1", "--ranks", "2"]}


def write_cases(work: Path, n: int) -> Path:
    """The demo floor study cut to ``n`` smoke cases (flat floor first, then
    the 8° diffuser; ride heights 20/30 mm × yaw 0/4°)."""
    cfg_dir = work / "config"
    shutil.copytree(DEMO, cfg_dir)
    text = (cfg_dir / "sweep.toml").read_text()
    variants = ["flat"] if n <= 4 else ["flat", "diffuser8"]
    text = text.replace('yaw_mode = "crosswind"', f'yaw_mode = "crosswind"\nvariants = {json.dumps(variants)}')
    (cfg_dir / "sweep.toml").write_text(text)
    base = work / "base"
    subprocess.run([str(BIN / "caseprep"), "write", str(cfg_dir / "sweep.toml"), "-o", str(base), "--fidelity",
                    "smoke"], check=True, stdout=subprocess.DEVNULL)
    ids = [line.strip() for line in (base / "cases.txt").read_text().splitlines() if line.strip()]
    if len(ids) > n:  # keep the first n cases in the manifest and cases.txt
        man = json.loads((base / "manifest.json").read_text())
        man["cases"] = [c for c in man["cases"] if c["case_id"] in ids[:n]]
        (base / "manifest.json").write_text(json.dumps(man, indent=2))
        (base / "cases.txt").write_text("".join(i + "\n" for i in ids[:n]))
    return base


def load1() -> float:
    return os.getloadavg()[0]


def run_layout(base: Path, dest: Path, args: list[str]) -> dict:
    """Wall time and CPU time (user + system of the command and everything
    it started) of `caseprep run` on a fresh copy of the sweep."""
    shutil.copytree(base, dest, symlinks=True)
    l0 = load1()
    r0 = resource.getrusage(resource.RUSAGE_CHILDREN)
    t0 = time.monotonic()
    res = subprocess.run([str(BIN / "caseprep"), "run", str(dest), "-q", *args], capture_output=True, text=True)
    dt = time.monotonic() - t0
    r1 = resource.getrusage(resource.RUSAGE_CHILDREN)
    cpu = (r1.ru_utime - r0.ru_utime) + (r1.ru_stime - r0.ru_stime)
    if res.returncode != 0:  # a failed case is reported and the comparison goes on without it
        print(f"\ncaseprep run {' '.join(args)} exit {res.returncode}:\n" + res.stdout[-1500:])
    layout = next((ln for ln in res.stdout.splitlines() if "core(s)" in ln), "")
    return {"wall_s": round(dt, 1), "cpu_s": round(cpu, 1), "load_before": round(l0, 2),
            "load_after": round(load1(), 2), "layout": layout}


def coefficients(sweep: Path) -> dict[str, tuple[float, float]]:
    subprocess.run([str(BIN / "postproc"), "sweep", str(sweep), "-q", "--force", "--no-pictures"], check=True,
                   stdout=subprocess.DEVNULL)
    rows = json.loads((sweep / "results.json").read_text())["cases"]
    nan = float("nan")
    return {r["case_id"]: (nan if r["cl"] is None else r["cl"], nan if r["cd"] is None else r["cd"]) for r in rows}


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--cases", type=int, default=4, help="smoke cases (≥ 4)")
    ap.add_argument("--out", default=None, help="keep the runs here (default: a temporary folder)")
    ap.add_argument("--conditions", default="quiet,loaded")
    a = ap.parse_args(argv)
    work = Path(a.out) if a.out else Path(tempfile.mkdtemp(prefix="uf-bench-run-"))
    work.mkdir(parents=True, exist_ok=True)
    print(f"cores {os.cpu_count()}, nice {os.nice(0)}, work folder {work}", flush=True)
    base = write_cases(work, a.cases)
    results: dict = {"cases": a.cases, "cores": os.cpu_count(), "nice": os.nice(0), "runs": {}}
    coeffs = {}
    for cond in a.conditions.split(","):
        hog = None
        if cond == "loaded":  # one CPU-bound process, same priority as the cases
            hog = subprocess.Popen([sys.executable, "-c", "while True: pass"])
        try:
            for name, args in LAYOUTS.items():
                dest = work / f"{cond}-{name.replace(' ', '').replace('-', '_')}"
                print(f"{cond:7s} {name:16s} …", end="", flush=True)
                r = run_layout(base, dest, args)
                results["runs"][f"{cond} {name}"] = r
                print(f" {r['wall_s']:7.1f} s wall, {r['cpu_s']:7.1f} s CPU  (load {r['load_before']}→"
                      f"{r['load_after']}) {r['layout']}", flush=True)
                coeffs[(cond, name)] = coefficients(dest)
        finally:
            if hog is not None:
                hog.kill()
                hog.wait()
    print()
    for cond in a.conditions.split(","):
        d = results["runs"][f"{cond} default"]["wall_s"]
        m = results["runs"][f"{cond} -j 1 --ranks 2"]["wall_s"]
        results[f"ratio_{cond}"] = round(m / d, 2)
        cd = results["runs"][f"{cond} default"]["cpu_s"]
        cm = results["runs"][f"{cond} -j 1 --ranks 2"]["cpu_s"]
        print(f"{cond}: default {d:.1f} s, -j 1 --ranks 2 {m:.1f} s: default {m / d:.2f}× faster "
              f"(target {'1.3' if cond == 'quiet' else '2.5'}×); CPU {cd:.0f} s against {cm:.0f} s")
    ref = coeffs[(a.conditions.split(",")[0], "default")]
    worst = 0.0
    for key, c in coeffs.items():
        for cid, (cl, cd) in c.items():
            if cid not in ref or not all(map(math.isfinite, (cl, cd, *ref[cid]))):
                print(f"  {key} {cid}: no coefficients")
                continue
            rl, rd = ref[cid]
            worst = max(worst, abs(cl - rl) / max(abs(rl), 1e-9), abs(cd - rd) / max(abs(rd), 1e-9))
    results["max_relative_coefficient_difference"] = worst
    print(f"largest relative difference of C_L or C_D between layouts and runs: {100 * worst:.2f} % "
          "(the convergence rule settles the monitor to 1 %)")
    (work / "bench_runner.json").write_text(json.dumps(results, indent=2))
    print(f"written: {work / 'bench_runner.json'}")
    if not a.out:
        shutil.rmtree(work, ignore_errors=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
