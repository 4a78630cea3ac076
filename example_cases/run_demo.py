"""The demo driver behind `make demo`: write the example sweep, run every case
with the solver, post-process the forces, and write a results table.

    python example_cases/run_demo.py --out runs/demo

Steps
1. Write the example sweep (example_cases/floor_study/sweep.toml, an
   invented demo scenario) at the ``smoke`` fidelity into OUT/sweep with the
   caseprep Python API. An existing OUT/sweep is reused (``--force`` rewrites
   it), so running the demo again resumes where it stopped.
2. Run every case with the case runner (1 case at a time, 2 MPI ranks by
   default), printing progress. A case that fails is reported with the tail
   of its log; the others go on.
3. Post-process every case (postproc.pipelines.sweep: forces, coefficients, aero
   balance, convergence, the runner's flags) and write OUT/results.csv,
   OUT/results.json, OUT/results/<case>.json and OUT/report.html (the
   self-contained sweep report with the ranking and the safety caution);
   print where they are and how long the demo took.

Exit codes: 0 all cases ran, 1 some case failed, 2 a missing prerequisite
(example config, solver), 130 interrupted (run again to resume).
"""
from __future__ import annotations

import argparse
import math
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
if str(ROOT) not in sys.path:  # running from a source tree without installing
    sys.path.insert(0, str(ROOT))

from caseprep.run import runner  # noqa: E402
from caseprep.contract.errors import UserError  # noqa: E402
from caseprep.contract.manifest import read_manifest  # noqa: E402
from caseprep.contract.records import SUMMARY_NAME  # noqa: E402
from postproc.pipelines.sweep import postprocess_sweep  # noqa: E402
from postproc.report import RenderInfo, write_report  # noqa: E402

DEFAULT_CONFIG = HERE / "floor_study" / "sweep.toml"
SAFETY = ("CFD is an approximation: the numbers depend on the mesh, the turbulence model and the set-up. "
          "Validate every decision by physical test. Run vehicles only where permitted and safe, follow the "
          "local rules, and defer to qualified engineers for anything that affects safety.")


def say(msg: str = "") -> None:
    print(msg, flush=True)


def write_sweep(config_path: Path, sweep_dir: Path, fidelity: str, force: bool) -> None:
    """Plan and write the sweep with the caseprep Python API."""
    try:
        from caseprep.config.load import load_config, with_fidelity
        from caseprep.planning.planner import plan
        from caseprep.casefiles.writer import write_sweep as _write
    except ImportError as exc:
        raise SystemExit(_stop(f"this checkout lacks part of caseprep ({exc}); the sweep cannot be written", 2))
    config = load_config(config_path)
    config = with_fidelity(config, fidelity)
    specs = plan(config)
    say(f"writing {len(specs)} case(s) at fidelity {fidelity!r} into {sweep_dir} …")
    _write(specs, sweep_dir, config_path, force=force, study=config.study.name)


def _stop(msg: str, code: int) -> int:
    print(f"demo: {msg}", file=sys.stderr, flush=True)
    return code


def progress(ev: runner.Progress) -> None:
    head = f"  [{ev.index}/{ev.total}] {ev.case_id}"
    d = runner.format_duration
    if ev.event == "stage-start":
        say(f"{head}: {ev.stage} …")
    elif ev.event == "stage-done":
        say(f"{head}: {ev.stage} done in {d(ev.stage_elapsed)}")
    elif ev.event == "running":
        say(f"{head}: {ev.stage} still running ({d(ev.stage_elapsed)})")
    elif ev.event == "stage-failed":
        say(f"{head}: {ev.stage} FAILED: {ev.message}")
    elif ev.event == "skipped":
        say(f"{head}: done in an earlier run, skipped")
    elif ev.event == "case-done" and ev.record is not None:
        r = ev.record
        say(f"{head}: {r.status} in {d(r.wall_time)}" + (f" — flags: {', '.join(r.flags)}" if r.flags else ""))
        if r.failed and r.log_tail:
            say("      " + "\n      ".join(r.log_tail.splitlines()[-15:]))


# ---------------------------------------------------------------- main


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description="Run the underfloor demo: write, run and post-process the example sweep.")
    ap.add_argument("--out", default="runs/demo", help="output folder (default runs/demo)")
    ap.add_argument("--config", default=str(DEFAULT_CONFIG), help="sweep config (default the bundled example)")
    ap.add_argument("--fidelity", default="smoke", help="mesh fidelity (default smoke)")
    ap.add_argument("--jobs", type=int, default=1, help="cases at a time (default 1)")
    ap.add_argument("--ranks", type=int, default=2, help="MPI ranks per case (default 2)")
    ap.add_argument("--force", action="store_true", help="rewrite the sweep and re-run every case")
    a = ap.parse_args(argv)
    t0 = time.monotonic()
    out = Path(a.out)
    sweep_dir = out / "sweep"
    config = Path(a.config)

    if not config.is_file():
        return _stop(f"the example config {config} is missing — it belongs to this repository "
                     "(example_cases/floor_study/sweep.toml); check out the full project, or give --config", 2)
    missing = runner.missing_solver_binaries()
    if missing:
        return _stop("the solver is not installed (missing: " + ", ".join(missing) + ").\n"
                     f"Install it with:\n    {runner.INSTALL_HINT}\nthen run `make demo` again.", 2)

    try:
        if (sweep_dir / "manifest.json").is_file() and not a.force:
            say(f"reusing the sweep in {sweep_dir} (written before; --force rewrites it) — resuming")
        else:
            write_sweep(config, sweep_dir, a.fidelity, a.force)
        manifest = read_manifest(sweep_dir)
        say(f"running {len(manifest.cases)} case(s), {a.jobs} at a time, {a.ranks} rank(s) each …")
        try:
            recs = runner.run_sweep(sweep_dir, jobs=a.jobs, ranks=a.ranks, force=a.force, progress=progress)
        except runner.SweepInterrupted:
            return _stop("interrupted; the running case was stopped and recorded. Run `make demo` again to resume.",
                         130)
    except UserError as exc:
        return _stop(str(exc), 2)

    say("post-processing every case (forces, coefficients, balance, convergence, flow numbers) and the report …")

    def post_progress(i, n, o):
        r = o.result
        what = f"C_L {r.cl:+.4f}, C_D {r.cd:.4f}" if math.isfinite(r.cl) else "no coefficients"
        say(f"  [{i}/{n}] {r.case_id}: {what}" + (f" — flags: {', '.join(r.flags)}" if r.flags else ""))

    try:
        t_post = time.monotonic()
        analysis = postprocess_sweep(sweep_dir, out_dir=out, force=True, progress=post_progress,
                                     title="underfloor demo — example floor study (DEMO data, smoke meshes)")
        paths = analysis.paths
        info = RenderInfo()
        write_report(analysis, paths["report"], info=info)
        t_post = time.monotonic() - t_post
    except UserError as exc:
        return _stop(str(exc), 2)
    elapsed = time.monotonic() - t0
    say("")
    say(runner.format_summary_table(recs))
    failed = [r for r in recs if r.failed]
    say("")
    say(f"report: {paths['report']} ({info.size / 1e6:.2f} MB; post-processing and report "
        f"{runner.format_duration(t_post)}, pictures {info.seconds.get('pictures', 0.0):.1f} s"
        f"{'' if info.backend else ', no pictures: see the report'}); tables: {paths['csv']}, {paths['json']}; "
        f"run records: {sweep_dir / SUMMARY_NAME}")
    say(f"demo took {runner.format_duration(elapsed)}; {len(recs) - len(failed)} of {len(recs)} case(s) ran"
        + (f", {len(failed)} failed (see above)" if failed else ""))
    say("Caution: " + SAFETY)
    return 1 if failed else 0


if __name__ == "__main__":
    sys.exit(main())
