"""Convergence of a run from its runtime force monitor and its log.

I/O part: :func:`read_monitor` parses the monitor files the solver's
``forces``/``forceCoeffs`` function objects write while it runs
(``postProcessing/<name>/<start time>/force.dat``, ``moment.dat``,
``coefficient.dat``) and :func:`read_residuals` the initial residuals from a
solver log. Numeric part: :func:`assess` / :func:`assess_series` give the
statistics and a verdict over the last N iterations.

Verdict (per series, over the window of the last N samples; thresholds
are common practice, no source, and are parameters):

* scale s = max(|mean|, ``floor``) (the floor keeps near-zero series such as
  the side force of a symmetric body from reading as huge relative changes);
* relative std  σ_r = std / s;
* drift d = slope of the least-squares line × (N − 1) / s, i.e. the change
  of the fitted line across the window relative to the scale;
* **converged** when |d| ≤ ``drift_tol`` (default 0.01) and σ_r ≤ ``std_tol``
  (default 0.01);
* otherwise **diverging** when the series is non-finite or when the trend
  dominates: |d| > ``drift_tol`` and the line explains at least half the
  variance (R² ≥ 0.5) — a steady run-away or a still-settling drift;
* otherwise **oscillating** (bounded, not settled: the mean over the window
  is the best estimate, with σ_r as its spread).

The overall verdict is the worst of the series (diverging > oscillating >
converged).
"""
from __future__ import annotations

import os
import re
from dataclasses import dataclass
from pathlib import Path
from typing import Mapping, Sequence

import numpy as np

from caseprep.errors import UserError

VERDICTS = ("converged", "oscillating", "diverging")
_NUM = r"[-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?|[-+]?(?:nan|inf)"


@dataclass(frozen=True)
class SeriesStats:
    """Statistics of one series over the window (units of the series)."""

    name: str
    n: int
    mean: float
    std: float
    rel_std: float
    drift: float
    r2: float
    last: float
    verdict: str

    def to_dict(self) -> dict:
        return dict(self.__dict__)


@dataclass(frozen=True)
class Assessment:
    """Per-series statistics and the overall verdict."""

    window: int
    series: dict[str, SeriesStats]
    verdict: str

    def to_dict(self) -> dict:
        return {"window": self.window, "verdict": self.verdict, "series": {k: v.to_dict() for k, v in self.series.items()}}


def assess_series(name: str, values: Sequence[float], window: int = 200, floor: float = 1e-3,
                  drift_tol: float = 0.01, std_tol: float = 0.01) -> SeriesStats:
    """Mean, std, drift and verdict of the last ``window`` samples of a series.

    ``floor`` is in the units of the series (for coefficients 1e-3 ≈ one
    "count" of drag). See the module doc for the formulas and thresholds."""
    v = np.asarray(values, dtype=np.float64)[-window:]
    n = v.size
    if n < 3:
        raise UserError(expected="at least 3 monitor samples in the window", got=n, key=name,
                        fix="run more iterations or shorten the window")
    if not np.isfinite(v).all():
        return SeriesStats(name, n, float("nan"), float("nan"), float("nan"), float("nan"), 0.0, float(v[-1]), "diverging")
    mean = float(v.mean())
    std = float(v.std())
    s = max(abs(mean), floor)
    x = np.arange(n, dtype=np.float64)
    x -= x.mean()
    slope = float(np.dot(x, v - mean) / np.dot(x, x))
    ss_tot = float(np.dot(v - mean, v - mean))
    r2 = float(slope**2 * np.dot(x, x) / ss_tot) if ss_tot > 0 else 0.0
    drift = slope * (n - 1) / s
    rel_std = std / s
    if abs(drift) <= drift_tol and rel_std <= std_tol:
        verdict = "converged"
    elif abs(drift) > drift_tol and r2 >= 0.5:
        verdict = "diverging"
    else:
        verdict = "oscillating"
    return SeriesStats(name, n, mean, std, rel_std, drift, r2, float(v[-1]), verdict)


def assess(series: Mapping[str, Sequence[float]], window: int = 200, floor: float = 1e-3,
           drift_tol: float = 0.01, std_tol: float = 0.01) -> Assessment:
    """:func:`assess_series` for each series and the worst verdict."""
    stats = {k: assess_series(k, v, window, floor, drift_tol, std_tol) for k, v in series.items()}
    if not stats:
        raise UserError(expected="at least one monitor series", got="none", key="monitor")
    worst = max((s.verdict for s in stats.values()), key=VERDICTS.index)
    n = min(s.n for s in stats.values())
    return Assessment(window=n, series=stats, verdict=worst)


#: Settling window of a run: its last 30 % of samples, at least 20 (common practice, no source:
#: long enough to see a drift, short enough to leave the start-up transient out).
SETTLE_FRACTION = 0.3
SETTLE_MIN_SAMPLES = 20


def settle_window(n_samples: int | None, fraction: float = SETTLE_FRACTION, minimum: int = SETTLE_MIN_SAMPLES) -> int:
    """Number of samples at the end of a run over which settling is judged:
    ``ceil(fraction × n_samples)``, at least ``minimum``, at most
    ``n_samples`` (``minimum`` when ``n_samples`` is unknown). Dimensionless."""
    if n_samples is None or n_samples <= 0:
        return minimum
    return int(min(n_samples, max(minimum, int(np.ceil(fraction * n_samples)))))


def assess_force_monitor(case_dir: str | os.PathLike, name: str | None = None, window: int | None = None,
                         drift_tol: float = 0.01, std_tol: float = 0.01, floor_fraction: float = 0.01) -> Assessment:
    """Verdict of the total force components (``force.total_x/y/z``, N, the
    monitor's axes) of a case's runtime monitor over ``window`` samples
    (default :func:`settle_window` of the run). The floor of each series is
    ``floor_fraction`` × the magnitude of the last total force (N), so a
    component near zero (the side force of a symmetric body at zero yaw) is
    judged against the resultant, not against itself; ``floor_fraction`` = 1
    judges every component against the resultant. Raises UserError when no
    monitor is found."""
    mon = read_monitor(case_dir, name)
    series = {k: v for k, v in mon.items() if k.startswith("force.total_")}
    if not series:
        raise UserError(expected="force.total_x/y/z in the runtime force monitor", got=", ".join(sorted(mon)) or "none",
                        file=str(case_dir), fix="switch on the forces function object in system/controlDict")
    n = min(len(v) for v in series.values())
    w = settle_window(n) if window is None else window
    scale = max(float(np.linalg.norm([v[-1] for v in series.values()])), 1e-300)
    if not np.isfinite(scale):
        scale = 1.0
    return assess(series, window=w, floor=floor_fraction * scale, drift_tol=drift_tol, std_tol=std_tol)


# --------------------------------------------------------------------------- monitor files

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


def read_residuals(log_path: str | os.PathLike) -> dict[str, np.ndarray]:
    """Initial residual of each solved field per iteration from a solver log.

    Parses ``Time = <t>`` lines and ``Solving for <field>, Initial residual =
    <r>``; the first solve of each field per iteration is kept. Returns
    ``{"Time": …, "<field>": …}`` (NaN where a field was not solved)."""
    p = Path(log_path)
    if not p.is_file():
        raise UserError(expected="a solver log file", got=str(p), fix="run the solver with its output saved (log.<solver>)")
    times: list[float] = []
    rows: list[dict[str, float]] = []
    pat_t = re.compile(r"^Time = (" + _NUM + r")\s*$")
    pat_r = re.compile(r"Solving for (\w+), Initial residual = (" + _NUM + ")")
    with open(p, encoding="utf-8", errors="replace") as fh:
        for line in fh:
            m = pat_t.match(line)
            if m:
                times.append(float(m.group(1)))
                rows.append({})
                continue
            m = pat_r.search(line)
            if m and rows and m.group(1) not in rows[-1]:
                rows[-1][m.group(1)] = float(m.group(2))
    if not rows:
        raise UserError(expected="solver iterations (lines 'Time = …')", got="none", file=str(p))
    fields = sorted({k for r in rows for k in r})
    out = {"Time": np.array(times)}
    for f in fields:
        out[f] = np.array([r.get(f, np.nan) for r in rows])
    return out
