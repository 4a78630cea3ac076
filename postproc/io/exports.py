"""The newest VTK export of a case folder: the one rule every reader uses to
pick ``<case>/VTK/<case>_<time>.vtm`` (the solver's converter output).

The files are untrusted input: an unreadable series file or header is
passed over, not trusted.
"""
from __future__ import annotations

import json
import math
import os
import re
from pathlib import Path

from caseprep.contract.errors import UserError

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
    case folder holds none."""
    d = Path(case_dir) / "VTK"
    files = sorted(d.glob("*.vtm")) if d.is_dir() else []
    if not files:
        raise UserError(expected="a VTK export in the case folder (VTK/<case>_<time>.vtm)",
                        got="none" if d.is_dir() else "no VTK folder", file=str(case_dir),
                        fix="run `foamToVTK -latestTime` in the case folder after the solver")
    times: dict[Path, float] = {}
    for s in d.glob("*.vtm.series"):
        try:
            for e in json.loads(s.read_text(encoding="utf-8")).get("files", []):
                times[d / e["name"]] = float(e["time"])
        except (ValueError, KeyError, TypeError, json.JSONDecodeError):
            pass

    def key(f: Path) -> tuple[float, str]:
        if f in times:
            return times[f], f.name
        m = re.search(r"time='([^']+)'", f.read_text(encoding="utf-8", errors="replace")[:400])
        if m:
            try:
                return float(m.group(1)), f.name
            except ValueError:
                pass
        named = time_from_name(f)
        return (-math.inf if named is None else named), f.name
    return max(files, key=key)
