"""The runtime force monitor a case writes while the solver runs.

The case files switch on the solver's ``forces`` function object under the
name :data:`FORCES_NAME`; it writes ``postProcessing/<name>/<start time>/``
``force.dat`` (N), ``moment.dat`` (N·m about the monitor's centre) and, for
``forceCoeffs``, ``coefficient.dat``, one row per iteration (steady) or time
step. :func:`read_monitor` reads them into series by column name (joining
restarts); the files are untrusted input. :func:`coefficient_series`
reduces the monitor's loads to the coefficients the convergence rule judges
(:mod:`caseprep.contract.convergence`), sample by sample.
"""
from __future__ import annotations

import os
import re
from pathlib import Path
from typing import Any, Mapping, Sequence

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


def case_monitor(case_dir: str | os.PathLike) -> dict[str, np.ndarray]:
    """The force monitor of a case: :data:`FORCES_NAME` when the case has
    it, else every monitor under ``postProcessing/`` (:func:`read_monitor`).
    Raises UserError when none is readable."""
    named = (Path(case_dir) / "postProcessing" / FORCES_NAME).is_dir()
    return read_monitor(case_dir, FORCES_NAME if named else None)


def coefficient_series(monitor: Mapping[str, Sequence[float]], reference: Any,
                       rotations: Mapping[str, np.ndarray] | None = None,
                       axle: tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray] | None = None,
                       window: int | None = None) -> dict[str, np.ndarray]:
    """The monitor's loads over its last ``window`` samples (all when None)
    as coefficient series, each sample reduced like an exported surface.

    ``monitor``: ``force.total_x/y/z`` (N) and optionally
    ``moment.total_x/y/z`` (N·m about ``reference.moment_point``, where the
    case files put the monitor's centre), body axes. ``reference``: any
    object with ``area`` (m²), ``length`` (m), ``rho`` (kg/m³), ``speed``
    (m/s), ``moment_point``, ``front_axle``, ``rear_axle`` (body frame, m):
    the manifest's :class:`~caseprep.contract.manifest.Reference` or the
    post-processing's reference values. ``rotations``:
    :func:`caseprep.contract.frames.axes_rotations` of the case (default a
    level body at zero yaw); ``axle``: :func:`caseprep.contract.frames.axle_axes`
    (None: no axle loads, e.g. a body without ground).

    Formulas (per sample; q = ½ρV²):
    C_D, C_S, C_L = (Q_W F)_x,y,z / (q A) and C_N = (Q_W M)_z / (q A L),
    Q_W the body → wind rotation; axle loads from statics about the
    wheelbase midpoint at ground level m (ℓ the axles' distance along x_A
    once projected on the ground): L = F·z_A, M_m = (M + (r_0 − m) × F)·y_A,
    C_LF = (L/2 + M_m/ℓ)/(q A), C_LR = (L/2 − M_m/ℓ)/(q A) (the definitions
    of ``postproc.kernels.coefficients``; vehicle-aerodynamics practice,
    SAE J1594 terms, from memory). Without ``moment.total_*`` the moment
    series (C_N, axle loads) are left out. Raises KeyError when the forces
    are missing, UserError for a wheelbase that is not positive."""
    F = np.stack([np.asarray(monitor[f"force.total_{c}"], dtype=float) for c in "xyz"], axis=1)
    has_m = all(f"moment.total_{c}" in monitor for c in "xyz")
    M = np.stack([np.asarray(monitor[f"moment.total_{c}"], dtype=float) for c in "xyz"], axis=1) if has_m else None
    if window is not None:
        F = F[-window:]
        M = None if M is None else M[-window:]
    qA = 0.5 * float(reference.rho) * float(reference.speed) ** 2 * float(reference.area)
    Qw = np.asarray((rotations or {}).get("wind", np.eye(3)), dtype=float)
    fw = F @ Qw.T
    out = {"cl": fw[:, 2] / qA, "cd": fw[:, 0] / qA, "cs": fw[:, 1] / qA}
    if M is None:
        return out
    out["cn"] = (M @ Qw.T)[:, 2] / (qA * float(reference.length))
    if axle is None or reference.front_axle is None or reference.rear_axle is None:
        return out
    xA, yA, zA, g = (np.asarray(a, dtype=float) for a in axle)
    on_ground = lambda p: p - np.dot(p - g, zA) * zA  # noqa: E731
    fa = on_ground(np.asarray(reference.front_axle, dtype=float))
    ra = on_ground(np.asarray(reference.rear_axle, dtype=float))
    mid = 0.5 * (fa + ra)
    wb = float(np.dot(ra - fa, xA))
    if not wb > 0:
        raise UserError(expected="a rear axle behind the front axle (larger body x)", got=f"{wb:.6g} m apart",
                        key="reference.rear_axle", fix="check the axle positions (body frame, x rearward)")
    lift = F @ zA
    pitch = (M + np.cross(np.asarray(reference.moment_point, dtype=float) - mid, F)) @ yA
    out["cl_front"] = (lift / 2 + pitch / wb) / qA
    out["cl_rear"] = (lift / 2 - pitch / wb) / qA
    return out
