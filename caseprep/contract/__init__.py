"""Shared contract of both halves (caseprep and postproc): errors, frames and
sign conventions, the manifest and run-record schemas, the flag and status
vocabulary, the convergence rule, the runtime force monitor files, atomic
writes, templating and the helpers both command lines share.

Imports nothing else of the project (stdlib, numpy, jinja2, click in the CLI
helpers only).
"""
__version__ = "0.1.0"  # the distribution's version (pyproject.toml reads it from here)
