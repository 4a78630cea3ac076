"""The runtime force monitor a case writes while the solver runs.

The case files switch on the solver's ``forces`` function object under the
name :data:`FORCES_NAME`; it writes ``postProcessing/<name>/<start time>/``
``force.dat`` (N), ``moment.dat`` (N·m about the monitor's centre) and, for
``forceCoeffs``, ``coefficient.dat``, one row per iteration (steady) or time
step. :func:`read_monitor` reads them into series by column name (joining
restarts); the files are untrusted input.
"""
from __future__ import annotations

import os
import re
from pathlib import Path

import numpy as np

from caseprep.contract.errors import UserError

#: Name of the force monitor (function object) in every case underfloor writes.
FORCES_NAME = "uf_forces"
_NUM = r"[-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?|[-+]?(?:nan|inf)"


def _parse_dat(path: Path) -> tuple[list[str], np.ndarray]:
    """Columns and rows of one monitor file. Vector groups ``(a b c)`` are
    flattened; the header's last comment line names the columns."""
    header: list[str] = []
    rows: list[list[float]] = []
    with open(path, encoding="utf-8", errors="replace") as fh:
        for line in fh:
            if line.startswith("#"):
                body = line[1:].strip()
                if body.lower().startswith("time"):
                    header = [_strip_parens(t) for t in body.split()]
                continue
            nums = re.findall(_NUM, line, flags=re.IGNORECASE)
            if nums:
                rows.append([float(t) for t in nums])
    if not rows:
        raise UserError(expected="monitor samples", got="no data rows", file=str(path),
                        fix="run the solver with the forces function object switched on")
    lengths = [len(r) for r in rows]
    width = max(set(lengths), key=lengths.count)
    rows = [r for r in rows if len(r) == width]  # a half-written last line (run still going) is dropped
    arr = np.array(rows, dtype=np.float64)
    if not header or len(header) != width:
        header = ["Time"] + [f"c{i}" for i in range(1, width)]
    return header, arr


def _strip_parens(tok: str) -> str:
    """'(total_x' → 'total_x', 'total_z)' → 'total_z', 'Cd(f)' stays."""
    while tok.startswith("(") and tok.count("(") > tok.count(")"):
        tok = tok[1:]
    while tok.endswith(")") and tok.count(")") > tok.count("("):
        tok = tok[:-1]
    return tok


def _concat_restarts(files: list[Path]) -> tuple[list[str], np.ndarray]:
    """Join monitor files of successive start times; later starts win."""
    header: list[str] = []
    data: np.ndarray | None = None
    for f in files:
        h, a = _parse_dat(f)
        if data is None:
            header, data = h, a
        else:
            if a.shape[1] != data.shape[1]:
                continue
            data = np.vstack([data[data[:, 0] < a[0, 0]], a])
    assert data is not None
    return header, data


def read_monitor(case_dir: str | os.PathLike, name: str | None = None) -> dict[str, np.ndarray]:
    """Series of the runtime force monitor of a case, by column name.

    Looks in ``<case>/postProcessing/<name>/<start>/`` (every ``name`` when
    None) for ``force.dat`` (keys ``force.total_x`` …, N), ``moment.dat``
    (``moment.…``, N·m about the monitor's centre) and ``coefficient.dat``
    (``Cd``, ``Cl`` … as written; the monitor's own axes). ``Time`` is the
    iteration (steady) or time (s)."""
    root = Path(case_dir) / "postProcessing"
    if not root.is_dir():
        raise UserError(expected="a postProcessing folder with the runtime force monitor", got="none",
                        file=str(case_dir), fix="switch on the forces function object in system/controlDict")
    out: dict[str, np.ndarray] = {}
    groups = [root / name] if name else sorted(p for p in root.iterdir() if p.is_dir())
    for g in groups:
        starts = sorted((d for d in g.iterdir() if d.is_dir()), key=lambda d: float(d.name) if _isnum(d.name) else np.inf) \
            if g.is_dir() else []
        for stem, prefix in (("force", "force."), ("moment", "moment."), ("coefficient", "")):
            files = [d / f"{stem}.dat" for d in starts if (d / f"{stem}.dat").is_file()]
            if not files:
                continue
            header, data = _concat_restarts(files)
            out.setdefault("Time", data[:, 0])
            if len(data[:, 0]) != len(out["Time"]):
                continue
            for i, h in enumerate(header[1:], start=1):
                out[prefix + h] = data[:, i]
    if len(out) <= 1:
        raise UserError(expected="force.dat, moment.dat or coefficient.dat under postProcessing/<name>/<time>/",
                        got="none", file=str(root), fix="switch on the forces function object in system/controlDict")
    return out


def _isnum(s: str) -> bool:
    try:
        float(s)
        return True
    except ValueError:
        return False
