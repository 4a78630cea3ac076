"""Command line of caseprep (the only caseprep module that touches click,
prints, or chooses exit codes).

Exit codes: 0 success, 2 user error (bad config, geometry, options; the
message says what to fix), 1 anything else (a bug: please report it).
"""
from __future__ import annotations

import sys

import click

from . import __version__
from .errors import UserError


class FriendlyGroup(click.Group):
    """A click group that turns :class:`UserError` into a message and exit code 2."""

    def invoke(self, ctx: click.Context):
        try:
            return super().invoke(ctx)
        except UserError as exc:
            click.echo(f"error: {exc}", err=True)
            ctx.exit(2)


@click.group(cls=FriendlyGroup, context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="caseprep")
def main() -> None:
    """Prepare sweeps of ground-effect vehicle cases for the open-source
    finite-volume solver from one TOML config.

    Axes: x rearward, y right, z up (body frame); pitch positive nose-up;
    yaw positive with the air moving towards +y. See the README.
    """


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
def plan_cmd(config: str) -> None:
    """Print the sweep matrix of CONFIG (one row per case: id, variant,
    ride heights mm, pitch and yaw deg, speed m/s, mesh level, minimum ground
    clearance mm and where along the body (% of length from the nose),
    blockage %, estimated cells). Writes nothing."""
    from .config import load_config
    from .planner import TABLE_COLUMNS, plan_all, table_rows
    from .errors import UserErrors

    cfg = load_config(config)
    result = plan_all(cfg)
    if result.problems:
        raise result.problems[0] if len(result.problems) == 1 else UserErrors(result.problems)
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
    from .planner import check
    from .errors import UserErrors

    result = check(config)
    for w in result.warnings:
        click.echo(f"warning: {w}", err=True)
    if result.problems:
        raise result.problems[0] if len(result.problems) == 1 else UserErrors(result.problems)
    click.echo(f"{config}: OK, {len(result.cases)} cases, {len(result.warnings)} warnings")


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
