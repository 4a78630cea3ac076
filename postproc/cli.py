"""Command line of postproc (the only postproc module that touches click,
prints, or chooses exit codes).

Exit codes: 0 success, 2 user error (the message says what to fix), 1 a bug.
"""
from __future__ import annotations

import sys

import click

from caseprep.cli import FriendlyGroup

from . import __version__


@click.group(cls=FriendlyGroup, context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="postproc")
def main() -> None:
    """Post-process ground-effect vehicle cases: forces, coefficients, aero
    balance, centre of pressure, vortices, diffuser recovery, aero maps and
    reports — headless.

    Axes: x rearward, y right, z up (body frame); see the README.
    """


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
