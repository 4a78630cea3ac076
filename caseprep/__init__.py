"""caseprep: one TOML config → a validated sweep of ready-to-run case folders
for the open-source finite-volume solver (Debian package ``openfoam``, v1912+).

Axes and sign conventions: :mod:`caseprep.frames`.
"""
__version__ = "0.1.0"
