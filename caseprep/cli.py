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


@main.command("write")
@click.argument("config", type=click.Path(dir_okay=False, path_type=str))
@click.option("-o", "--out", "out_dir", required=True, type=click.Path(file_okay=False, path_type=str),
              help="Sweep folder to write (created if missing).")
@click.option("--force", is_flag=True, default=False,
              help="Replace cases (and shared geometry) that exist with different content; "
                   "their mesh, results and logs are deleted.")
@click.option("--fidelity", default=None, metavar="NAME",
              help="Write only the cases of this fidelity level (as named in the config).")
def write_cmd(config: str, out_dir: str, force: bool, fidelity: str | None) -> None:
    """Write the case folders of CONFIG's sweep into a sweep folder.

    Existing identical cases are left alone and new ones added; a case that
    exists with different content is refused unless --force is given.
    """
    from .config import load_config  # planning half: loaded only when needed
    from .planner import plan
    from .writer import write_sweep

    specs = plan(load_config(config))
    if fidelity is not None:
        names = sorted({s.fidelity for s in specs})
        specs = [s for s in specs if s.fidelity == fidelity]
        if not specs:
            from .errors import did_you_mean

            raise UserError(expected=f"a fidelity level of the sweep ({', '.join(names)})", got=fidelity,
                            file=config, key="--fidelity", fix="pick one of those levels." + did_you_mean(fidelity, names))
    summary = write_sweep(specs, out_dir, config, force=force)
    click.echo(f"{summary.root}: {len(summary.written)} new, {len(summary.replaced)} replaced, "
               f"{len(summary.unchanged)} unchanged case(s); manifest {summary.manifest}")
    if summary.geometry_written:
        click.echo("shared geometry written: " + ", ".join(summary.geometry_written))
    click.echo(f"run them: {summary.root}/run_all.sh  (or sbatch slurm_array.sh on a cluster)")


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
