"""caseprep: one TOML config → a validated sweep of ready-to-run case folders
for the open-source finite-volume solver (Debian package ``openfoam``, v1912+).

Axes and sign conventions: :mod:`caseprep.contract.frames`.
"""
from caseprep.contract import __version__  # one version for the whole distribution

__all__ = ["__version__"]
