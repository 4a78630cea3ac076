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


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
