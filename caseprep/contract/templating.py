"""Where the jinja2 templates live, in a source checkout and in an installed wheel.

The top-level ``templates/`` folder ships as the package data of
``caseprep.templates`` (``caseprep/templates`` is a link to it; see
``[tool.setuptools.package-data]`` in pyproject.toml). Running from a source
tree without installing, it is found at the top of the checkout.
"""
from __future__ import annotations

from importlib import resources
from pathlib import Path

import jinja2


def template_dir() -> Path:
    """Folder holding the case templates."""
    try:
        p = Path(str(resources.files("caseprep.templates")))
        if p.is_dir() and any(p.iterdir()):
            return p
    except (ModuleNotFoundError, TypeError):
        pass
    return Path(__file__).resolve().parents[2] / "templates"


#: Templates whose output is HTML/XML: every value they print is escaped
#: (autoescape); the solver's dictionaries and the shell scripts are not HTML
#: (their values are checked and formatted by caseprep.casefiles instead).
ESCAPED_EXTENSIONS = ("html", "htm", "xml", "svg", "html.j2", "htm.j2", "xml.j2", "svg.j2")


def environment() -> jinja2.Environment:
    """A jinja2 environment over :func:`template_dir` with StrictUndefined;
    HTML templates (:data:`ESCAPED_EXTENSIONS`) render with autoescape on."""
    return jinja2.Environment(
        loader=jinja2.FileSystemLoader(str(template_dir())),
        undefined=jinja2.StrictUndefined,
        keep_trailing_newline=True,
        trim_blocks=True,
        lstrip_blocks=True,
        autoescape=jinja2.select_autoescape(enabled_extensions=ESCAPED_EXTENSIONS, default_for_string=False,
                                            default=False),
    )
