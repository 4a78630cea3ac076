"""The newest VTK export of a case folder: the one rule every reader uses to
pick ``<case>/VTK/<case>_<time>.vtm`` (the solver's converter output).

The files are untrusted input: an unreadable series file or header is
passed over, not trusted.
"""
from __future__ import annotations

import math
import os
import re
from pathlib import Path

from caseprep.contract.errors import UserError
from caseprep.contract.untrusted import is_inside, read_json

_TIME_RE = re.compile(r"_(\d+(?:\.\d+)?(?:[eE][-+]?\d+)?)$")


def time_from_name(path: str | os.PathLike) -> float | None:
    """The time in an export's name ``<case>_<time>.vtm`` (s, or the
    iteration of a steady run), or None when the name carries none."""
    m = _TIME_RE.search(Path(path).stem)
    return float(m.group(1)) if m else None


def latest_export(case_dir: str | os.PathLike) -> Path:
    """The latest multiblock export ``<case>/VTK/*.vtm`` of a case folder.

    The latest is the one with the largest time: from ``*.vtm.series`` when
    present, else the ``time='…'`` header of each file, else the trailing
    ``_<time>`` of the name (``<case>_<time>.vtm``). Raises UserError when the
    case folder holds none, and when the export folder or file is a link
    leading out of the case folder (never followed)."""
    d = Path(case_dir) / "VTK"
    if d.is_symlink() and not is_inside(d, case_dir):
        raise UserError(expected="a VTK export folder inside the case folder", got=f"a link to {d.resolve()}",
                        file=str(d), fix="remove the link: results are read only from inside the sweep folder")
    files = sorted(f for f in d.glob("*.vtm") if is_inside(f, case_dir)) if d.is_dir() else []
    if not files:
        raise UserError(expected="a VTK export in the case folder (VTK/<case>_<time>.vtm)",
                        got="none" if d.is_dir() else "no VTK folder", file=str(case_dir),
                        fix="run `foamToVTK -latestTime` in the case folder after the solver")
    times: dict[Path, float] = {}
    for s in d.glob("*.vtm.series"):
        try:
            for e in read_json(s, "export series", fix="").get("files", []):
                times[d / e["name"]] = float(e["time"])
        except (UserError, ValueError, KeyError, TypeError, AttributeError):
            pass  # an unreadable series file is passed over

    def key(f: Path) -> tuple[float, str]:
        if f in times:
            return times[f], f.name
        with open(f, "rb") as fh:
            head = fh.read(400).decode("utf-8", errors="replace")
        m = re.search(r"time='([^']+)'", head)
        if m:
            try:
                return float(m.group(1)), f.name
            except ValueError:
                pass
        named = time_from_name(f)
        return (-math.inf if named is None else named), f.name
    return max(files, key=key)
