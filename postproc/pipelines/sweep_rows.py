"""The rows of a sweep's results table and what is made from the rows
alone.

:class:`CaseResult` is one row (one case): the operating point and the
coefficients (window means of the runtime monitor, judged by the one
convergence rule), with their iterative spreads, reference area and
density — with them ``results.csv`` is a complete input of ``postproc
analyse`` (:mod:`postproc.pipelines.analysis`). :class:`CaseOutcome` is a
case's row with its run facts, forces report, y+ and flow columns (its
stored form ``results/<case>.json``). :func:`mesh_study` is the grid
convergence of the points solved on three mesh levels; :func:`rows_csv` the
CSV form of the rows, safe to open in a spreadsheet.
"""
from __future__ import annotations

import csv
import io
import math
from dataclasses import asdict, dataclass, field
from typing import Any

from caseprep.contract.atomicio import json_ready
from caseprep.contract.records import as_flag
from postproc.kernels.meshstudy import grid_convergence
from postproc.pipelines.analysis_points import level_cell_size
from postproc.pipelines.case_forces import ForcesReport

ALL_WALLS = "all body and wheel patches"



@dataclass(frozen=True)
class CaseResult:
    """One row of the results table (one case).

    Ride heights in m, angles in degrees, speed in m/s; coefficients in the
    wind axes of caseprep.contract.frames (C_L positive up, C_D along the relative
    wind, C_S along +y_W); ``balance`` front share of downforce (fraction,
    None when undefined); ``stability_margin`` as a fraction of the wheelbase (None when undefined or
    no CG given); ``flags`` non-empty means the case is not usable (the
    analysis lists it, never compares on it).
    ``u_*``: the iterative spread (standard deviation over the settling
    window, coefficient units; NaN unknown) of each coefficient, whose window
    mean is the value; ``reference_area`` (m²) and ``air_density`` (kg/m³)
    of the coefficients.
    """

    case_id: str
    variant: str
    ride_height_front: float
    ride_height_rear: float
    pitch_deg: float
    yaw_deg: float
    cl: float
    cd: float
    cs: float = 0.0
    cl_front: float | None = None
    cl_rear: float | None = None
    balance: float | None = None
    stability_margin: float | None = None
    flags: tuple[str, ...] = ()
    speed: float = float("nan")
    mesh_level: int = 0
    reference_area: float = float("nan")
    air_density: float = float("nan")
    u_cl: float = float("nan")
    u_cd: float = float("nan")
    u_cs: float = float("nan")
    u_cl_front: float = float("nan")
    u_cl_rear: float = float("nan")


@dataclass(frozen=True)
class CaseOutcome:
    """One row of the sweep's results: the case's ranking row (``result``),
    its run status, cell and iteration counts, the monitor's verdict, the
    prism-layer coverage, notes, the full forces report and the y+
    statistics per patch. :meth:`row` is its flat form in the tables."""

    result: CaseResult
    status: str
    cells: int | None
    iterations: int | None
    convergence: str | None
    layers: str | None = None  # e.g. "body 85 %, strake_left 38 %" (share of the target layer thickness)
    notes: tuple[str, ...] = ()
    report: ForcesReport | None = field(default=None, repr=False)
    yplus: dict[str, dict] = field(default_factory=dict)
    flow: dict[str, Any] = field(default_factory=dict)
    scene: Any = field(default=None, repr=False)
    history: Any = field(default=None, repr=False)
    seconds: dict[str, float] = field(default_factory=dict)
    #: the forces report's JSON form when the outcome was read back from a
    #: stored result (``report`` is then None)
    stored_forces: dict[str, Any] | None = field(default=None, repr=False)
    #: h = (V/N)^(1/3), m, from the real cell count
    cell_size: float | None = None

    def row(self) -> dict[str, Any]:
        """The case as one flat row of the results tables (CSV and JSON)."""
        r = asdict(self.result)
        r["flags"] = " ".join(self.result.flags)
        r["downforce_coefficient"] = -self.result.cl if math.isfinite(self.result.cl) else None
        r.update(status=self.status, cells=self.cells, cell_size_h=self.cell_size, iterations=self.iterations,
                 convergence=self.convergence, layers=self.layers)
        if self.yplus:
            a = self.yplus[ALL_WALLS]  # all body and wheel faces together
            r.update(yplus_median=a["median"], yplus_p95=a["p95"], yplus_max=a["max"],
                     yplus_share_in_range=a["share_in_target"], yplus_range="{:g}-{:g}".format(*a["target"]))
        r.update(self.flow)
        r["notes"] = "; ".join(self.notes)
        return r

    def forces_dict(self) -> dict[str, Any] | None:
        """The forces report's JSON form (None without one)."""
        return self.report.to_dict() if self.report is not None else self.stored_forces

    def to_json(self) -> dict[str, Any]:
        """The JSON form stored as the case's result (``results/<case>.json``):
        the ranking row (``result``), run facts, notes, the full forces report
        (``forces``, None without an export), y+ per patch, the flow columns
        and the flags. The picture scene and the force history are not
        stored (rebuilt from the case's files when the report needs them)."""
        return json_ready({"result": asdict(self.result), "status": self.status, "cells": self.cells,
                           "iterations": self.iterations, "convergence": self.convergence, "layers": self.layers,
                           "notes": list(self.notes), "forces": self.forces_dict(), "yplus": self.yplus,
                           "flow": self.flow, "flags": list(self.result.flags), "seconds": self.seconds,
                           "cell_size": self.cell_size})

    @classmethod
    def from_json(cls, d: dict[str, Any]) -> "CaseOutcome":
        """Inverse of :meth:`to_json` (None → NaN for the number fields that
        are NaN when unknown). Raises ValueError/TypeError/KeyError for
        content of the wrong shape."""
        import dataclasses

        r = dict(d["result"])
        for f in dataclasses.fields(CaseResult):
            if r.get(f.name) is None and (f.type == "float" or isinstance(f.default, float)):
                r[f.name] = math.nan
        r["flags"] = tuple(as_flag(str(x)) for x in r.get("flags") or ())
        result = CaseResult(**r)
        notes, yplus, flow = d.get("notes") or [], d.get("yplus") or {}, d.get("flow") or {}
        forces = d.get("forces")
        if (not isinstance(notes, list) or not isinstance(yplus, dict) or not isinstance(flow, dict)
                or not (forces is None or isinstance(forces, dict))):
            raise TypeError("per-case result of the wrong shape")
        return cls(result=result, status=str(d["status"]), cells=d.get("cells"), iterations=d.get("iterations"),
                   convergence=d.get("convergence"), layers=d.get("layers"), notes=tuple(str(x) for x in notes),
                   yplus=yplus, flow=flow, seconds=dict(d.get("seconds") or {}), stored_forces=forces,
                   cell_size=_finite_or_none(d.get("cell_size")))


def _finite_or_none(x: Any) -> float | None:
    """A stored number that must be finite and positive (a cell size), else None."""
    try:
        v = float(x)
    except (TypeError, ValueError):
        return None
    return v if math.isfinite(v) and v > 0 else None


def mesh_study(results: list[CaseResult], cell_sizes: dict[str, float | None] | None = None) -> list[dict[str, Any]]:
    """Grid convergence (Celik et al. 2008, postproc.kernels.meshstudy) of C_L and C_D
    for every operating point solved on three or more mesh levels (unflagged
    cases only; the three finest levels are used). The representative cell
    size of each case is h = (V/N)^(1/3) from its real cell count
    (``cell_sizes``: case id → h in m) when every case of the point has one,
    else the nominal 2^(−m/2) of its mesh level (``h_source`` says which).
    One dict per point and coefficient: the point's parameters, the values
    per level, h, the apparent order, the extrapolated value and the
    fine-mesh GCI (fraction)."""
    cell_sizes = cell_sizes or {}
    groups: dict[tuple, dict[int, CaseResult]] = {}
    for r in results:
        if r.flags or not math.isfinite(r.cl):
            continue
        key = (r.variant, round(r.ride_height_front, 9), round(r.ride_height_rear, 9), round(r.pitch_deg, 9),
               round(r.yaw_deg, 9), round(r.speed, 9) if math.isfinite(r.speed) else None)
        groups.setdefault(key, {})[r.mesh_level] = r
    out = []
    for key, by_level in groups.items():
        if len(by_level) < 3:
            continue
        lv = sorted(by_level)[-3:][::-1]  # finest first
        rows = [by_level[m] for m in lv]
        hs = [cell_sizes.get(r.case_id) for r in rows]
        real = all(h is not None for h in hs) and hs[0] < hs[1] < hs[2]
        if not real:
            hs = [level_cell_size(m) for m in lv]
        for name, get in (("cl", lambda r: r.cl), ("cd", lambda r: r.cd)):
            g = grid_convergence(*(get(r) for r in rows), *hs)
            out.append({"variant": key[0], "ride_height_front": key[1], "ride_height_rear": key[2],
                        "pitch_deg": key[3], "yaw_deg": key[4], "speed": key[5], "coefficient": name,
                        "levels": lv, "cases": [r.case_id for r in rows],
                        "h_source": "cells" if real else "mesh level", **g.to_dict()})
    return out


#: First characters that make a spreadsheet evaluate a cell as a formula (or
#: a command) when a CSV file is opened: OWASP, "CSV Injection" (common
#: practice). A text cell starting with one of them gets a leading apostrophe.
FORMULA_START = ("=", "+", "-", "@", "\t", "\r")


def spreadsheet_safe(value: object) -> object:
    """``value`` for a CSV cell: text that a spreadsheet would evaluate
    (starting with one of :data:`FORMULA_START`) is prefixed with ``'`` so it
    stays text; numbers are left alone (they are written by us)."""
    if isinstance(value, str) and value.startswith(FORMULA_START):
        return "'" + value
    return value


def rows_csv(rows: list[dict[str, Any]]) -> str:
    """The rows as CSV: floats with 6 significant digits, NaN/inf and None
    empty, text cells neutralised for spreadsheets (:func:`spreadsheet_safe`)."""
    cols: list[str] = []
    for r in rows:
        cols += [k for k in r if k not in cols]
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow([spreadsheet_safe(c) for c in cols])
    for r in rows:
        w.writerow(["" if r.get(k) is None or (isinstance(r.get(k), float) and not math.isfinite(r[k]))
                    else (f"{r[k]:.6g}" if isinstance(r.get(k), float) else spreadsheet_safe(r[k])) for k in cols])
    return buf.getvalue()
