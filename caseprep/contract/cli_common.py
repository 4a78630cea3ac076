"""Command-line helpers both CLIs (``caseprep`` and ``postproc``) share."""
from __future__ import annotations

import click

from caseprep.contract.errors import UserError


class FriendlyGroup(click.Group):
    """A click group that turns :class:`UserError` into a message and exit code 2."""

    def invoke(self, ctx: click.Context):
        try:
            return super().invoke(ctx)
        except UserError as exc:
            click.echo(f"error: {exc}", err=True)
            ctx.exit(2)
