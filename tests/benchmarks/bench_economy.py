"""Core-seconds per converged point with and without the run economy (mesh
reuse + warm starts), side by side in one run, and the coefficient
differences between the two.

    nice -n 10 .venv/bin/python tests/benchmarks/bench_economy.py [--variants flat,diffuser8] [--out DIR]

The sweep (DEMO floor study, ``smoke`` fidelity): the chosen variants × front
ride height 20/25/30 mm (rake 0.6°) × speed 30/40 m/s at yaw 0 — a speed axis
and three ride heights per variant. It is written three times from the same config:
``cold`` (``mesh.reuse = "off"``, ``solver.warm_start = "off"``,
``solver.stop_rule = "budget"``: every case meshes, starts from the uniform
free stream and runs its iteration budget unless the solver's residual
criterion ends it), ``reuse+settled`` (shared meshes, cold starts, the stop
rule ``settled``) and ``economy`` (shared meshes, warm starts from the nearest
solved case, the stop rule ``settled``); each runs with ``caseprep run -j 1
--ranks 1`` (one solver process at a time), in that order. The middle
condition separates what the warm starts add. Core-seconds and converged points come from each sweep's
``run_summary.json`` (the runner's own accounting); the coefficients from
``postproc sweep`` (window means of the force monitor), paired by case id
(the same point has the same id in both sweeps).

Targets: ≥ 40 % fewer core-seconds per converged point with the economy;
|ΔC_L| and |ΔC_D| between the two within the convergence rule's tolerance in
coefficient counts (``count_tol_lift`` 0.005, ``count_tol_drag_side`` 0.002:
caseprep.contract.convergence, common practice, no source). Prints a table,
the 1-minute load average around each run, and writes OUT/bench_economy.json.
"""
from __future__ import annotations

import argparse
import json
import math
import os
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))
DEMO = ROOT / "example_cases" / "floor_study"
BIN = Path(sys.executable).parent

from caseprep.contract.convergence import DEFAULT_OPTIONS  # noqa: E402

CONDITIONS = {  # name: (mesh switches, solver switches)
    "cold": ('reuse = "off"', 'warm_start = "off"\nstop_rule = "budget"'),
    "reuse+settled": ('reuse = "identical"', 'warm_start = "off"\nstop_rule = "settled"'),
    "economy": ('reuse = "identical"', 'warm_start = "nearest"\nstop_rule = "settled"'),
}


def write_config(work: Path, variants: list[str], condition: str) -> Path:
    """The demo config with the benchmark's axes and the condition's switches."""
    cfg = work / f"config-{condition}"
    shutil.copytree(DEMO, cfg)
    text = (cfg / "sweep.toml").read_text()
    mesh, solver = CONDITIONS[condition]
    text = text.replace('yaw_mode = "crosswind"', f'yaw_mode = "crosswind"\nvariants = {json.dumps(variants)}')
    text = text.replace("ride_height = [0.020, 0.030]", "ride_height = [0.020, 0.025, 0.030]")
    text = text.replace("yaw_deg = [0.0, 4.0]", "yaw_deg = [0.0]\nspeed = [30.0, 40.0]")
    text = text.replace('fidelity = "smoke"', f'fidelity = "smoke"\n{mesh}')
    text = text.replace("turbulence_intensity = 0.005", f"turbulence_intensity = 0.005\n{solver}")
    (cfg / "sweep.toml").write_text(text)
    return cfg / "sweep.toml"


def load1() -> float:
    return os.getloadavg()[0]


def uptime() -> str:
    try:
        return subprocess.run(["uptime"], capture_output=True, text=True).stdout.strip()
    except OSError:
        return f"load {os.getloadavg()}"


def run(sweep: Path) -> dict:
    """`caseprep run -j 1 --ranks 1` on the sweep: wall time, load, the runner's cost block."""
    up0 = uptime()
    t0 = time.monotonic()
    res = subprocess.run([str(BIN / "caseprep"), "run", str(sweep), "-q", "-j", "1", "--ranks", "1"],
                         capture_output=True, text=True)
    wall = time.monotonic() - t0
    if res.returncode != 0:
        print(f"\ncaseprep run exit {res.returncode}:\n" + res.stdout[-1500:])
    summary = json.loads((sweep / "run_summary.json").read_text())
    cases = {c["case_id"]: {"iterations": c.get("iterations"), "core_seconds": c.get("core_seconds"),
                            "cpu_seconds": c.get("cpu_seconds"), "flags": c.get("flags"),
                            "initial_field": c.get("initial_field"), "mesh_source": c.get("mesh_source"),
                            "stages": {s["stage"]: s.get("core_seconds") for s in c.get("stages", [])}}
             for c in summary["cases"]}
    return {"wall_s": round(wall, 1), "uptime_before": up0, "uptime_after": uptime(), "cost": summary["cost"],
            "cases": cases}


def coefficients(sweep: Path) -> dict[str, tuple[float, float]]:
    subprocess.run([str(BIN / "postproc"), "sweep", str(sweep), "-q", "--force", "--no-pictures"], check=True,
                   stdout=subprocess.DEVNULL)
    rows = json.loads((sweep / "results.json").read_text())["cases"]
    nan = float("nan")
    return {r["case_id"]: (nan if r["cl"] is None else r["cl"], nan if r["cd"] is None else r["cd"]) for r in rows}


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--variants", default="flat,diffuser8")
    ap.add_argument("--out", default=None, help="keep the runs here (default: a temporary folder)")
    a = ap.parse_args(argv)
    work = Path(a.out) if a.out else Path(tempfile.mkdtemp(prefix="uf-bench-economy-"))
    work.mkdir(parents=True, exist_ok=True)
    variants = [v for v in a.variants.split(",") if v]
    print(f"cores {os.cpu_count()}, nice {os.nice(0)}, variants {variants}, work folder {work}", flush=True)
    results: dict = {"variants": variants, "cores": os.cpu_count(), "nice": os.nice(0), "runs": {}}
    coeffs = {}
    for cond in CONDITIONS:
        sweep = work / f"sweep-{cond}"
        if sweep.exists():
            shutil.rmtree(sweep)
        subprocess.run([str(BIN / "caseprep"), "write", str(write_config(work, variants, cond)), "-o", str(sweep)],
                       check=True, stdout=subprocess.DEVNULL)
        print(f"{cond:8s} …", end="", flush=True)
        r = run(sweep)
        results["runs"][cond] = r
        t = r["cost"]["total"]
        print(f" {r['wall_s']:7.1f} s wall, {t['core_seconds']:7.1f} core-s, {t['cpu_seconds']:7.1f} CPU s, "
              f"{t['converged_points']}/{t['cases']} converged; {r['uptime_before']}", flush=True)
        coeffs[cond] = coefficients(sweep)
    print()
    tot = {c: results["runs"][c]["cost"]["total"] for c in CONDITIONS}

    def per_point(t, key):
        return t[key] / t["converged_points"] if t["converged_points"] else None

    savings = {}
    for c in list(CONDITIONS)[1:]:
        for key in ("core_seconds", "cpu_seconds"):
            x, y = per_point(tot["cold"], key), per_point(tot[c], key)
            savings[f"{c} {key}"] = None if not x or not y else 1.0 - y / x
    x, y = per_point(tot["reuse+settled"], "cpu_seconds"), per_point(tot["economy"], "cpu_seconds")
    savings["warm starts alone, cpu_seconds"] = None if not x or not y else 1.0 - y / x
    results["savings_per_converged_point"] = savings
    saving = savings.get("economy core_seconds")
    print("| condition | cases | converged | iterations | mesh core-s | solve core-s | core-s | CPU s "
          "| core-s per converged point | CPU s per converged point |")
    print("|---|---|---|---|---|---|---|---|---|---|")
    for cond in CONDITIONS:
        t = tot[cond]
        st = t["core_seconds_by_stage"]
        its = sum(c.get("iterations") or 0 for c in results["runs"][cond]["cases"].values())
        cpp = per_point(t, "cpu_seconds")
        print(f"| {cond} | {t['cases']} | {t['converged_points']} | {its} | {st.get('mesh', 0):.0f} "
              f"| {st.get('solve', 0):.0f} | {t['core_seconds']:.0f} | {t['cpu_seconds']:.0f} "
              f"| {t['core_seconds_per_converged_point']:.1f} | {'-' if cpp is None else f'{cpp:.1f}'} |")
    print()
    for k, v in savings.items():
        print(f"{k}: {'-' if v is None else f'{100 * v:.1f} %'} fewer per converged point than cold"
              if not k.startswith("warm") else f"{k}: {'-' if v is None else f'{100 * v:.1f} %'} fewer per "
              "converged point than reuse+settled")
    if saving is not None:
        print(f"economy: {100 * saving:.1f} % fewer core-seconds per converged point (target ≥ 40 %)")
    tol_l, tol_d = DEFAULT_OPTIONS.count_tol_lift, DEFAULT_OPTIONS.count_tol_drag_side
    rows = []
    for cid, (cl0, cd0) in sorted(coeffs["cold"].items()):
        cl1, cd1 = coeffs["economy"].get(cid, (math.nan, math.nan))
        e = results["runs"]["economy"]["cases"].get(cid, {})
        c = results["runs"]["cold"]["cases"].get(cid, {})
        rows.append({"case_id": cid, "cl_cold": cl0, "cl_economy": cl1, "cd_cold": cd0, "cd_economy": cd1,
                     "dcl": cl1 - cl0, "dcd": cd1 - cd0, "iterations_cold": c.get("iterations"),
                     "iterations_economy": e.get("iterations"),
                     "start": (e.get("initial_field") or {}).get("kind"),
                     "from": (e.get("initial_field") or {}).get("source"),
                     "mesh": "shared" if (e.get("mesh_source") or {}).get("shared") else "own"})
    results["coefficients"] = rows
    print(f"\n| case | start | mesh | iterations cold → economy | C_L cold | C_L economy | ΔC_L | C_D cold | C_D economy | ΔC_D |")
    print("|---|---|---|---|---|---|---|---|---|---|")
    for r in rows:
        print(f"| {r['case_id']} | {r['start']}{' from ' + r['from'] if r['from'] else ''} | {r['mesh']} "
              f"| {r['iterations_cold']} → {r['iterations_economy']} | {r['cl_cold']:.4f} | {r['cl_economy']:.4f} "
              f"| {r['dcl']:+.4f} | {r['cd_cold']:.4f} | {r['cd_economy']:.4f} | {r['dcd']:+.4f} |")
    finite = [r for r in rows if all(map(math.isfinite, (r["dcl"], r["dcd"])))]
    worst_l = max((abs(r["dcl"]) for r in finite), default=math.nan)
    worst_d = max((abs(r["dcd"]) for r in finite), default=math.nan)
    results.update(max_abs_dcl=worst_l, max_abs_dcd=worst_d, tol_cl=tol_l, tol_cd=tol_d,
                   within_tolerance=bool(finite) and worst_l <= tol_l and worst_d <= tol_d)
    print(f"\neconomy against cold: largest |ΔC_L| {worst_l:.4f} (tolerance {tol_l}), largest |ΔC_D| {worst_d:.4f} "
          f"(tolerance {tol_d}): {'within' if results['within_tolerance'] else 'NOT within'} the convergence rule's "
          "tolerance")
    mid = [(cl1 - coeffs["cold"][cid][0], cd1 - coeffs["cold"][cid][1])
           for cid, (cl1, cd1) in coeffs["reuse+settled"].items() if cid in coeffs["cold"]]
    mid = [(a, b) for a, b in mid if math.isfinite(a) and math.isfinite(b)]
    if mid:
        results["reuse_settled_max_abs_dcl"] = max(abs(a) for a, _ in mid)
        results["reuse_settled_max_abs_dcd"] = max(abs(b) for _, b in mid)
        print(f"reuse+settled against cold: largest |ΔC_L| {results['reuse_settled_max_abs_dcl']:.4f}, "
              f"largest |ΔC_D| {results['reuse_settled_max_abs_dcd']:.4f}")
    (work / "bench_economy.json").write_text(json.dumps(results, indent=2))
    print(f"written: {work / 'bench_economy.json'}")
    if not a.out:
        shutil.rmtree(work, ignore_errors=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
