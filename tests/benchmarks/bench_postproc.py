"""`postproc sweep` speed: one worker against two (`-j 1` / `-j 2`) on the same
run sweep, side by side, and a rerun with nothing changed (every per-case
result reused).

    nice -n 10 .venv/bin/python tests/benchmarks/bench_postproc.py [--sweep runs/demo/sweep] [--repeat 3]

The sweep must have been run (`make demo` leaves one with 12 smoke cases in
runs/demo/sweep). Each configuration writes into its own fresh output folder
with `--recompute`, so every case is read and reduced; the rerun then reuses
them. Times are wall times of the command (imports, case work, tables and
report), best of ``--repeat`` runs, and of the case work alone (from the
progress events in-process).

Targets: `-j 2` ≥ 1.7× faster than `-j 1` on ≥ 8 cases; a rerun with nothing
changed ≤ 5 % of the first run's time.
"""
from __future__ import annotations

import argparse
import json
import os
import resource
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
BIN = Path(sys.executable).parent


CPU: list[float] = []  # CPU seconds (user + system, with child processes) of each measurement, in order


def _cpu() -> float:
    s, c = resource.getrusage(resource.RUSAGE_SELF), resource.getrusage(resource.RUSAGE_CHILDREN)
    return s.ru_utime + s.ru_stime + c.ru_utime + c.ru_stime


def timed(args: list[str]) -> float:
    t0, c0 = time.monotonic(), _cpu()
    subprocess.run(args, check=True, stdout=subprocess.DEVNULL)
    CPU.append(_cpu() - c0)
    return time.monotonic() - t0


def in_process(sweep: Path, out: Path, jobs: int, recompute: bool) -> float:
    """Seconds of the per-case work alone (no imports, no tables)."""
    from postproc.pipelines.sweep import SweepOptions, postprocess_shard

    t0, c0 = time.monotonic(), _cpu()
    postprocess_shard(sweep, SweepOptions(out_dir=out, jobs=jobs, recompute=recompute))
    CPU.append(_cpu() - c0)
    return time.monotonic() - t0


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sweep", default=str(ROOT / "runs" / "demo" / "sweep"))
    ap.add_argument("--repeat", type=int, default=3)
    a = ap.parse_args(argv)
    sweep = Path(a.sweep)
    if not (sweep / "manifest.json").is_file():
        print(f"no run sweep in {sweep}: run `make demo` first, or give --sweep (nothing measured)")
        return 0
    n_exported = sum(1 for _ in sweep.glob("cases/*/logs/export.done"))
    work = Path(tempfile.mkdtemp(prefix="uf-bench-post-"))
    print(f"{sweep}: {n_exported} exported case(s); cores {os.cpu_count()}, nice {os.nice(0)}, "
          f"load {os.getloadavg()[0]:.1f}", flush=True)
    res: dict = {"cases_exported": n_exported, "cli": {}, "work": {}}
    try:
        for jobs in (1, 2):
            cli, work_only = [], []
            for r in range(a.repeat):
                out = work / f"j{jobs}-{r}"
                cli.append(timed([str(BIN / "postproc"), "sweep", str(sweep), "-o", str(out), "-j", str(jobs),
                                  "-q", "--recompute"]))
                work_only.append(in_process(sweep, out, jobs, recompute=True))
            res["cli"][jobs], res["work"][jobs] = min(cli), min(work_only)
            print(f"-j {jobs}: command {min(cli):6.2f} s (runs {', '.join(f'{t:.2f}' for t in cli)}); "
                  f"case work {min(work_only):6.2f} s; CPU of the last command and case work "
                  f"{CPU[-2]:.1f} s, {CPU[-1]:.1f} s", flush=True)
        out = work / "j2-0"
        rerun = [timed([str(BIN / "postproc"), "sweep", str(sweep), "-o", str(out), "-q", "--force"])
                 for _ in range(a.repeat)]
        rerun_work = min(in_process(sweep, out, 1, recompute=False) for _ in range(a.repeat))
        res["rerun_cli"], res["rerun_work"] = min(rerun), rerun_work
        print(f"rerun, nothing changed: command {min(rerun):.2f} s, case work {rerun_work:.3f} s", flush=True)
        print()
        r_cli = res["cli"][1] / res["cli"][2]
        r_work = res["work"][1] / res["work"][2]
        print(f"-j 2 vs -j 1: {r_cli:.2f}× (command), {r_work:.2f}× (case work) — target 1.7×")
        print(f"rerun / first run (-j 1): {100 * min(rerun) / res['cli'][1]:.1f} % (command), "
              f"{100 * rerun_work / res['work'][1]:.1f} % (case work) — target ≤ 5 %")
        print(json.dumps(res))
    finally:
        shutil.rmtree(work, ignore_errors=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
