"""Command line of caseprep (the only caseprep module that touches click,
prints, or chooses exit codes).

Exit codes: 0 success, 2 user error (bad config, geometry, options; the
message says what to fix), 1 anything else (a bug: please report it).
"""
from __future__ import annotations

import sys

import click

from caseprep.contract import __version__
from caseprep.contract.cli_common import FriendlyGroup
from caseprep.contract.cli_progress import ProgressDisplay
from caseprep.contract.convergence import DEFAULT_OPTIONS, ConvergenceOptions
from caseprep.contract.errors import UserError
from caseprep.contract.records import flag_meaning
from caseprep.run.runner import RunOptions

RUN_DEFAULTS = RunOptions()


@click.group(cls=FriendlyGroup, context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="caseprep")
def main() -> None:
    """Prepare sweeps of ground-effect vehicle cases for the open-source
    finite-volume solver from one TOML config.

    Axes: x rearward, y right, z up (body frame); pitch positive nose-up;
    yaw positive with the air moving towards +y. See the README.
    """


class _RunProgress:
    """The progress of `caseprep run` (events of caseprep.run.runner.Progress):
    a bar on a terminal, else one line per finished case with the count and
    the estimated time left; stage lines with ``verbose``, fewer with ``quiet``."""

    def __init__(self, quiet: bool, verbose: bool, tty: bool | None = None):
        self.quiet, self.verbose, self.tty = quiet, verbose, tty
        self.display: ProgressDisplay | None = None
        self.now: dict[str, str] = {}

    def _note(self) -> str:
        return "; ".join(f"{k}: {v}" for k, v in self.now.items())

    def __call__(self, ev) -> None:
        from caseprep.contract.progress import format_duration as d

        if self.display is None:
            self.display = ProgressDisplay(ev.total, tty=self.tty)
        out = self.display
        head = f"[{ev.index}/{ev.total}] {ev.case_id}"
        verbose = self.verbose and not self.quiet
        if ev.event == "layout":
            out.message(ev.message)
        elif ev.event in ("case-start", "stage-start", "running"):
            if ev.stage:
                self.now[ev.case_id] = f"{ev.stage} {d(ev.stage_elapsed)}"
            if ev.event == "stage-start" and verbose:
                out.message(f"{head}: {ev.stage} …")
            elif ev.event == "running" and verbose and not out.tty:
                out.message(f"{head}: {ev.stage} running {d(ev.stage_elapsed)} (case {d(ev.elapsed)})")
            out.draw(self._note())
        elif ev.event == "stage-done":
            if verbose:
                out.message(f"{head}: {ev.stage} done in {d(ev.stage_elapsed)}")
        elif ev.event == "stage-failed":
            out.message(f"{head}: {ev.stage} FAILED after {d(ev.stage_elapsed)}: {ev.message}")
        elif ev.event == "skipped":
            if self.quiet:
                out.meter.finish(worked=False)
            else:
                out.item_done(f"{head}: skipped ({ev.message})", worked=False)
        elif ev.event == "interrupted":
            self.now.pop(ev.case_id, None)
            out.message(f"{head}: interrupted ({ev.message})")
        elif ev.event == "case-done" and ev.record is not None:
            self.now.pop(ev.case_id, None)
            r = ev.record
            extra = f" flags: {', '.join(r.flags)}" if r.flags else ""
            worked = any(s.status in ("ok", "failed") for s in r.stages)
            if self.quiet and not r.failed:
                out.meter.finish(worked)
                out.draw(self._note())
            else:
                out.item_done(f"{head}: {r.status} in {d(r.wall_time)}{extra}", worked)
            if r.failed and r.log_tail:
                out.message("    " + "\n    ".join(r.log_tail.splitlines()[-12:]))
            out.draw(self._note())

    def close(self) -> None:
        if self.display is not None:
            self.display.close()


@main.command("run")
@click.argument("sweep_dir", type=click.Path(file_okay=False, path_type=str))
@click.option("-j", "--jobs", type=int, default=None,
              help="Cases run at the same time (default: one per core when there are at least as many cases to "
                   "run as cores, else all of them).")
@click.option("--ranks", type=int, default=None,
              help="MPI ranks per case (default: 1 when there are at least as many cases to run as cores, else "
                   "the cores shared out among the cases). Keep jobs × ranks ≤ cores.")
@click.option("--only", "only", multiple=True, metavar="ID", help="Run only this case id (repeatable).")
@click.option("--stage", "stages", multiple=True, type=click.Choice(["mesh", "solve", "export"]),
              help="Run only this stage (repeatable); default all three.")
@click.option("--force", is_flag=True, help="Run stages again even if they are marked done.")
@click.option("--residual-tol", type=float, default=DEFAULT_OPTIONS.residual_tol, show_default=True,
              help="Residual below which a run that used its whole budget counts as converged; above it the "
                   "force monitor must have settled (see the README's convergence rule).")
@click.option("--grace", type=click.FloatRange(min=0.0), default=RUN_DEFAULTS.kill_grace, show_default=True,
              help="Seconds between SIGTERM and SIGKILL for the running cases when the run is stopped "
                   "(keep it below the scheduler's own grace, e.g. SLURM's KillWait).")
@click.option("--cold", is_flag=True, help="Start every case from the uniform free stream (no warm start).")
@click.option("--warm-from", "warm_from", metavar="ID", default=None,
              help="Start the selected cases from this solved case (same variant and mesh level).")
@click.option("-q", "--quiet", is_flag=True, help="Print only failures and the final table.")
@click.option("-v", "--verbose", is_flag=True, help="Also print each stage's start and end.")
@click.option("--skip-solver-check", is_flag=True, hidden=True)
def run_cmd(sweep_dir, jobs, ranks, only, stages, force, residual_tol, grace, cold, warm_from, quiet, verbose,
            skip_solver_check) -> None:
    """Run the solver over the cases of SWEEP_DIR (a folder written by
    `caseprep write`): mesh, solve and export each case, resumably.

    Each case's outcome goes to <case>/underfloor-run.json and the sweep's
    run_summary.json. Exit code 0 when every case ran, 1 when any case
    failed, 2 for a usage error, 143 when stopped by SIGTERM (a scheduler's
    cancel or time limit), 130 by SIGINT/Ctrl-C (run again to resume).
    """
    import os
    import time

    from caseprep.run import runner

    if not skip_solver_check:
        missing = runner.missing_solver_binaries()
        if missing:
            raise UserError(expected="the solver's programs on PATH", got=", ".join(missing),
                            fix=f"install them: {runner.INSTALL_HINT}")
    cores = runner.usable_cores()
    if jobs is not None and ranks is not None and jobs * ranks > cores:
        click.echo(f"note: {jobs} jobs × {ranks} ranks = {jobs * ranks} processes on {cores} cores; "
                   "cases will compete for the processors", err=True)
    t0 = time.monotonic()
    show = _RunProgress(quiet, verbose)
    tty = sys.stdout.isatty()
    if cold and warm_from:
        raise UserError(expected="either --cold or --warm-from", got="both", key="--warm-from",
                        fix="drop one of them")
    opts = runner.RunOptions(convergence=ConvergenceOptions(residual_tol=residual_tol), kill_grace=grace,
                             cold=cold, warm_from=warm_from,
                             heartbeat=1.0 if tty else RUN_DEFAULTS.heartbeat)  # a terminal's bar moves on
    try:
        try:
            records = runner.run_sweep(sweep_dir, jobs=jobs, ranks=ranks, stages=list(stages) or None,
                                       only=list(only) or None, force=force, progress=show, options=opts)
        finally:
            show.close()
    except runner.SweepInterrupted as exc:
        click.echo("")
        click.echo(runner.format_summary_table(exc.records))
        click.echo(f"{exc}: running cases were stopped and recorded 'interrupted'; run the same command again "
                   "to resume.")
        sys.exit(exc.exit_code)
    except KeyboardInterrupt:  # before any case started
        click.echo("interrupted before any case started.", err=True)
        sys.exit(130)
    dt = time.monotonic() - t0
    click.echo("")
    click.echo(runner.format_summary_table(records))
    failed = [r for r in records if r.failed]
    flagged = [r for r in records if r.flags and not r.failed]
    click.echo("")
    for f in sorted({f for r in records for f in r.flags}):
        click.echo(f"  {f}: {flag_meaning(f)}")
    click.echo(runner.format_cost(runner.sweep_cost(sweep_dir, records)))
    click.echo(f"{len(records)} case(s) in {runner.format_duration(dt)}: {len(records) - len(failed)} ran, "
               f"{len(failed)} failed, {len(flagged)} flagged. Records: {sweep_dir}/run_summary.json")
    if failed:
        sys.exit(1)


@main.command("write")
@click.argument("config", type=click.Path(dir_okay=False, path_type=str))
@click.option("-o", "--out", "out_dir", required=True, type=click.Path(file_okay=False, path_type=str),
              help="Sweep folder to write (created if missing).")
@click.option("--force", is_flag=True, default=False,
              help="Replace cases (and shared geometry) that exist with different content; "
                   "their mesh, results and logs are deleted.")
@click.option("--fidelity", default=None, metavar="NAME",
              help="Mesh fidelity preset to write at (smoke, coarse, production), overriding the config's mesh.fidelity.")
def write_cmd(config: str, out_dir: str, force: bool, fidelity: str | None) -> None:
    """Write the case folders of CONFIG's sweep into a sweep folder.

    Existing identical cases are left alone and new ones added; a case that
    exists with different content is refused unless --force is given.
    """
    from caseprep.config.load import load_config, with_fidelity  # planning half: loaded only when needed
    from caseprep.planning.batch import batch_settings
    from caseprep.planning.planner import plan
    from caseprep.casefiles.writer import write_sweep

    cfg = with_fidelity(load_config(config), fidelity)
    specs = plan(cfg)
    summary = write_sweep(specs, out_dir, config, force=force, study=cfg.study.name, batch=batch_settings(cfg))
    click.echo(f"{summary.root}: {len(summary.written)} new, {len(summary.replaced)} replaced, "
               f"{len(summary.unchanged)} unchanged case(s); manifest {summary.manifest}")
    if summary.geometry_written:
        click.echo("shared geometry written: " + ", ".join(summary.geometry_written))
    for what in summary.cleaned:
        click.echo(f"note: {what}")
    if summary.unlisted:
        click.echo(f"warning: {len(summary.unlisted)} folder(s) in cases/ have no record and are not listed in the "
                   f"manifest (not written by caseprep): {', '.join(summary.unlisted[:10])}"
                   + (" …" if len(summary.unlisted) > 10 else "") + "; move them out of the sweep folder", err=True)
    click.echo(f"run them here: caseprep run {summary.root}   on a SLURM cluster: {summary.root}/submit.sh")


def _format_table(rows: list[dict], columns: tuple[str, ...]) -> str:
    def cell(v) -> str:
        if v is None:
            return "-"
        if isinstance(v, float):
            return f"{v:g}"
        return str(v)

    body = [[cell(r[c]) for c in columns] for r in rows]
    widths = [max(len(c), *(len(b[i]) for b in body)) if body else len(c) for i, c in enumerate(columns)]
    lines = ["  ".join(c.ljust(w) for c, w in zip(columns, widths))]
    lines.append("  ".join("-" * w for w in widths))
    lines += ["  ".join(v.rjust(w) if i > 1 else v.ljust(w) for i, (v, w) in enumerate(zip(b, widths))) for b in body]
    return "\n".join(lines)


@main.command("plan")
@click.argument("config", type=click.Path(dir_okay=False))
@click.option("--json", "as_json", is_flag=True,
              help="Print every case as JSON: the table row plus first-cell height and centre y+, the gap plan, "
                   "the free-stream turbulence at inlet and model, the local Mach number and each wheel's placement.")
def plan_cmd(config: str, as_json: bool) -> None:
    """Print the sweep matrix of CONFIG (one row per case: id, variant,
    ride heights mm, pitch and yaw deg, speed m/s, mesh level, minimum ground
    clearance mm and where along the body (% of length from the nose),
    blockage %, estimated cells). Writes nothing."""
    import json

    from caseprep.config.load import load_config
    from caseprep.planning.planner import TABLE_COLUMNS, plan_all, plan_json, table_rows
    from caseprep.contract.atomicio import json_ready
    from caseprep.contract.errors import UserErrors

    cfg = load_config(config)
    result = plan_all(cfg)
    if result.problems:
        raise result.problems[0] if len(result.problems) == 1 else UserErrors(result.problems)
    if as_json:
        click.echo(json.dumps({"study": cfg.study.name, "fidelity": cfg.mesh.fidelity, "yaw_mode": cfg.sweep.yaw_mode,
                               "ground": cfg.ground.mode, "cases": json_ready(plan_json(result.cases)),
                               "warnings": list(result.warnings)}, indent=1))
        return
    rows = table_rows(result.cases)
    click.echo(f"study {cfg.study.name}: {len(rows)} cases, fidelity {cfg.mesh.fidelity}, yaw mode {cfg.sweep.yaw_mode}, "
               f"ground {cfg.ground.mode}")
    click.echo(_format_table(rows, TABLE_COLUMNS))
    total = sum(r["cells_est"] for r in rows)
    click.echo(f"estimated cells in total: {total:,}")
    for w in result.warnings:
        click.echo(f"warning: {w}", err=True)


@main.command("check")
@click.argument("config", type=click.Path(dir_okay=False))
def check_cmd(config: str) -> None:
    """Validate CONFIG, every geometry file and every case of the sweep, and
    report all problems at once (exit code 2 when there are any)."""
    from caseprep.planning.planner import check
    from caseprep.contract.errors import UserErrors

    result = check(config)
    for w in result.warnings:
        click.echo(f"warning: {w}", err=True)
    if result.problems:
        raise result.problems[0] if len(result.problems) == 1 else UserErrors(result.problems)
    from caseprep.casefiles.writer import prepare_sweep

    prepare_sweep(result.cases, config)  # every case file and geometry copy made in memory, as `write` makes them
    click.echo(f"{config}: OK, {len(result.cases)} cases, {len(result.warnings)} warnings")


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
