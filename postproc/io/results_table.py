"""The results table: one row per operating point of one variant, from a
results CSV (CFD, wind tunnel or track) or from a post-processed sweep folder.

The columns are declared once in :data:`COLUMNS` (name, unit, required,
meaning); the README's table is this one. Units are SI: ride heights in m
(measured at the front and rear ride-height reference points), speed in
m/s, yaw in degrees, reference area in m²; coefficients dimensionless in the
wind axes of caseprep.frames (C_L positive up, so downforce = −C_L; C_LF and
C_LR the front and rear axle lift coefficients, C_LF + C_LR = C_L).

CSV rules: one header line, comma-separated, UTF-8; lines starting with
``#`` are comments (use one to mark demo data); ``flags`` is a
``;``-separated list of words, empty = the row is usable; a flagged row may
leave its coefficients empty. Unknown columns are ignored (and named in the
notes). Everything read is untrusted: every problem is a
:class:`~caseprep.errors.UserError` naming the file, line and column, and
the sizes (bytes, rows, columns, cell length, variants, variant × point
pairs) are bounded by :mod:`caseprep.contract.limits` before the analysis
starts.
"""
from __future__ import annotations

import csv
import io
import json
import math
from collections import Counter
from dataclasses import dataclass
from pathlib import Path
from types import MappingProxyType
from typing import Any, Callable, Mapping

import numpy as np

from caseprep.contract.errors import UserError, UserErrors
from caseprep.contract.limits import (MAX_CELL_LENGTH, MAX_TABLE_BYTES, MAX_TABLE_COLUMNS, MAX_TABLE_PAIRS,
                                     MAX_TABLE_ROWS, MAX_TABLE_VARIANTS)


@dataclass(frozen=True)
class Column:
    """One column of the results table."""

    unit: str
    required: bool
    kind: str          # "text" | "float" | "int" | "flags"
    meaning: str
    may_be_empty: bool = False  # also in an unflagged row


COLUMNS: Mapping[str, Column] = MappingProxyType({
    "variant": Column("—", True, "text", "geometry variant name"),
    "ride_height_front": Column("m", True, "float", "front ride height at the front reference point"),
    "ride_height_rear": Column("m", True, "float", "rear ride height at the rear reference point"),
    "yaw_deg": Column("deg", True, "float", "yaw angle β"),
    "speed": Column("m/s", True, "float", "air (road) speed of the coefficients' dynamic pressure"),
    "mesh_level": Column("—", True, "int", "mesh level m (cell size ∝ √2^(−m); 0 for tunnel or track data)"),
    "cl": Column("—", True, "float", "lift coefficient (downforce = −C_L)"),
    "cd": Column("—", True, "float", "drag coefficient"),
    "cs": Column("—", True, "float", "side-force coefficient", may_be_empty=True),
    "cl_front": Column("—", True, "float", "front axle lift coefficient C_LF", may_be_empty=True),
    "cl_rear": Column("—", True, "float", "rear axle lift coefficient C_LR", may_be_empty=True),
    "case_id": Column("—", False, "text", "row label (default: variant and line number)"),
    "reference_area": Column("m²", False, "float", "reference area of the coefficients", may_be_empty=True),
    "air_density": Column("kg/m³", False, "float", "air density of the run", may_be_empty=True),
    "flags": Column("—", False, "flags", "';'-separated problems; empty = usable"),
    "u_cl": Column("—", False, "float", "standard uncertainty of C_L (e.g. iterative std)", may_be_empty=True),
    "u_cd": Column("—", False, "float", "standard uncertainty of C_D", may_be_empty=True),
    "u_cs": Column("—", False, "float", "standard uncertainty of C_S", may_be_empty=True),
    "u_cl_front": Column("—", False, "float", "standard uncertainty of C_LF", may_be_empty=True),
    "u_cl_rear": Column("—", False, "float", "standard uncertainty of C_LR", may_be_empty=True),
})

NUMERIC = tuple(k for k, c in COLUMNS.items() if c.kind in ("float", "int"))
#: ride heights above this (m) are taken for millimetres (no ground vehicle's floor rides 1 m up)
RIDE_HEIGHT_MAX = 1.0
MAX_PROBLEMS = 20


@dataclass(frozen=True)
class ResultsTable:
    """Columns of the results table (read-only float64 arrays by :data:`NUMERIC`
    name, NaN = not available) plus the text columns; ``notes`` says what the
    reader ignored or assumed."""

    source: str
    kind: str  # "csv" | "sweep"
    case_id: tuple[str, ...]
    variant: tuple[str, ...]
    flags: tuple[tuple[str, ...], ...]
    values: Mapping[str, np.ndarray]
    notes: tuple[str, ...] = ()

    def __len__(self) -> int:
        return len(self.case_id)

    def col(self, name: str) -> np.ndarray:
        return self.values[name]

    @property
    def usable(self) -> np.ndarray:
        """True where the row has no flag and finite C_L and C_D."""
        ok = np.array([not f for f in self.flags], dtype=bool)
        return ok & np.isfinite(self.values["cl"]) & np.isfinite(self.values["cd"])


def _cell(raw: Any, name: str, spec: Column, flagged: bool, where: Callable[[str], str]) -> Any:
    """One parsed cell; raises UserError naming ``where(name)``."""
    text = "" if raw is None else (raw.strip() if isinstance(raw, str) else raw)
    if spec.kind == "text":
        if not spec.required and text == "":
            return None
        if not isinstance(text, str) or not text:
            raise UserError(expected=f"a non-empty {spec.meaning}", got=raw, file=where(name), key=name,
                            fix="fill the cell")
        return text
    if spec.kind == "flags":
        if not isinstance(text, str):
            raise UserError(expected="';'-separated flag words", got=raw, file=where(name), key=name)
        return tuple(w for w in (t.strip() for t in text.replace(";", " ").split()) if w)
    if text == "":
        if spec.may_be_empty or flagged or not spec.required:
            return math.nan
        raise UserError(expected=f"a number ({spec.unit}) for {spec.meaning}", got="an empty cell",
                        file=where(name), key=name,
                        fix="fill it in, or mark the row unusable with a word in the 'flags' column")
    try:
        if isinstance(text, bool):
            raise ValueError
        value = float(text)
    except (TypeError, ValueError):
        raise UserError(expected=f"a number ({spec.unit}) for {spec.meaning}", got=raw, file=where(name), key=name,
                        fix="use a plain decimal number with '.' as the decimal point") from None
    if not math.isfinite(value):
        raise UserError(expected="a finite number", got=raw, file=where(name), key=name,
                        fix="leave the cell empty and flag the row instead of writing nan/inf")
    if spec.kind == "int":
        if value != int(value):
            raise UserError(expected="a whole number", got=raw, file=where(name), key=name)
        value = int(value)
    return value


def _parse_rows(records: list[tuple[dict[str, Any], Callable[[str], str]]], default_ids: list[str]) -> list[dict]:
    """Parse every record; collects up to :data:`MAX_PROBLEMS` problems."""
    problems: list[UserError] = []
    rows: list[dict] = []
    for (rec, where), default_id in zip(records, default_ids):
        flags_raw = rec.get("flags")
        row: dict[str, Any] = {}
        try:
            row["flags"] = _cell(flags_raw, "flags", COLUMNS["flags"], False, where) if flags_raw is not None else ()
        except UserError as exc:
            problems.append(exc)
            row["flags"] = ()
        for name, spec in COLUMNS.items():
            if name == "flags":
                continue
            try:
                row[name] = _cell(rec.get(name), name, spec, bool(row["flags"]), where)
            except UserError as exc:
                problems.append(exc)
        row["case_id"] = row.get("case_id") if isinstance(row.get("case_id"), str) else default_id
        rows.append(row)
        if len(problems) >= MAX_PROBLEMS:
            break
    if len(problems) == 1:
        raise problems[0]
    if problems:
        raise UserErrors(problems)
    return rows


def _check_units(rows: list[dict], source: str) -> None:
    """Ride heights positive and in metres; speeds positive; |yaw| ≤ 90°."""
    for i, r in enumerate(rows):
        for k in ("ride_height_front", "ride_height_rear"):
            h = r[k]
            if math.isnan(h):   # only a flagged row may leave it empty; _table drops it
                continue
            if h > RIDE_HEIGHT_MAX:
                raise UserError(expected=f"ride heights in m (0 < h ≤ {RIDE_HEIGHT_MAX:g})", got=h, file=source,
                                key=f"{k} of {r['case_id']}",
                                fix="these values look like millimetres: divide the ride-height columns by 1000")
            if not h > 0:
                raise UserError(expected="a ride height above the ground (> 0 m)", got=h, file=source,
                                key=f"{k} of {r['case_id']}", fix="ride heights are measured upwards from the ground")
        if not r["speed"] > 0 and not math.isnan(r["speed"]):
            raise UserError(expected="a positive speed (m/s)", got=r["speed"], file=source,
                            key=f"speed of {r['case_id']}")
        if abs(r["yaw_deg"]) > 90:
            raise UserError(expected="a yaw angle within ±90 deg", got=r["yaw_deg"], file=source,
                            key=f"yaw_deg of {r['case_id']}", fix="yaw is in degrees")
        for k, what in (("reference_area", "reference area (m²)"), ("air_density", "air density (kg/m³)")):
            a = r.get(k, math.nan)
            if math.isfinite(a) and not a > 0:
                raise UserError(expected=f"a positive {what}", got=a, file=source, key=f"{k} of {r['case_id']}")


POINT = ("ride_height_front", "ride_height_rear", "yaw_deg", "speed", "mesh_level")


def _check_rows(n: int, source: str, at: str) -> None:
    """At most :data:`~caseprep.contract.limits.MAX_TABLE_ROWS` data rows."""
    if n > MAX_TABLE_ROWS.value:
        raise UserError(expected=f"at most {int(MAX_TABLE_ROWS):,} data rows", got=f"{n:,} rows", file=source, key=at,
                        fix="split the table (one file per study, or per group of variants) and analyse each")


def _check_breadth(rows: list[dict], source: str) -> None:
    """At most :data:`~caseprep.contract.limits.MAX_TABLE_VARIANTS` variants
    and :data:`~caseprep.contract.limits.MAX_TABLE_PAIRS` variant × distinct
    operating point pairs (the ranking's lists of missing points grow with
    their product)."""
    variants = {r["variant"] for r in rows}
    if len(variants) > MAX_TABLE_VARIANTS.value:
        raise UserError(expected=f"at most {int(MAX_TABLE_VARIANTS)} variants", got=f"{len(variants):,} variants",
                        file=source, key="variant",
                        fix="analyse the variants in groups (one table each), or check that 'variant' holds "
                            "the geometry names, not run labels")
    points = {tuple(round(float(r[k]), 9) for k in POINT) for r in rows}
    pairs = len(variants) * len(points)
    if pairs > MAX_TABLE_PAIRS.value:
        raise UserError(expected=f"at most {int(MAX_TABLE_PAIRS):,} variant × operating-point pairs",
                        got=f"{len(variants)} variants × {len(points):,} distinct points = {pairs:,}", file=source,
                        key="ride_height_front, ride_height_rear, yaw_deg, speed, mesh_level",
                        fix="round the operating points to the tested grid (ride heights to 0.1 mm), or analyse "
                            "fewer variants at a time")


def _table(rows: list[dict], source: str, kind: str, notes: list[str]) -> ResultsTable:
    if not rows:
        raise UserError(expected="at least one data row", got="none", file=source,
                        fix="add one row per operating point under the header")
    _check_units(rows, source)
    lost = [r["case_id"] for r in rows if any(math.isnan(float(r[k])) for k in POINT)]
    if lost:
        rows = [r for r in rows if not any(math.isnan(float(r[k])) for k in POINT)]
        notes = notes + [f"{len(lost)} flagged row(s) without an operating point left out: "
                         + ", ".join(lost[:10]) + (" …" if len(lost) > 10 else "")]
    if not rows:
        raise UserError(expected="at least one row with an operating point (ride heights, yaw, speed)",
                        got="none", file=source, fix="only flagged rows without ride heights were found")
    _check_breadth(rows, source)
    ids = [r["case_id"] for r in rows]
    dup = sorted(i for i, k in Counter(ids).items() if k > 1)   # one pass: tables run to MAX_TABLE_ROWS
    if dup:
        raise UserError(expected="unique case_id values", got=", ".join(dup[:5]), file=source, key="case_id",
                        fix="give every row its own label (or drop the case_id column)")
    values = {}
    for name in NUMERIC:
        a = np.array([float(r[name]) for r in rows], dtype=np.float64)
        a.setflags(write=False)
        values[name] = a
    return ResultsTable(source=source, kind=kind, case_id=tuple(ids), variant=tuple(r["variant"] for r in rows),
                        flags=tuple(tuple(r["flags"]) for r in rows), values=MappingProxyType(values),
                        notes=tuple(notes))


def _read_text(path: Path) -> str:
    if not path.is_file():
        raise UserError(expected="a results CSV file or a sweep folder", got=str(path), fix="check the path")
    size = path.stat().st_size
    if size > MAX_TABLE_BYTES.value:
        raise UserError(expected=f"a results file of at most {int(MAX_TABLE_BYTES):,} bytes", got=f"{size:,} bytes",
                        file=str(path), key="file size",
                        fix="split the table (one file per study or per variant group) and analyse each")
    try:
        return path.read_bytes().decode("utf-8-sig")
    except UnicodeDecodeError:
        raise UserError(expected="a UTF-8 text file", got="binary or non-UTF-8 data", file=str(path),
                        fix="export the table as CSV (UTF-8)") from None


def read_results_csv(path: str | Path) -> ResultsTable:
    """Read a results CSV (columns :data:`COLUMNS`); see the module docstring."""
    p = Path(path)
    text = _read_text(p)
    numbered = [(i + 1, ln) for i, ln in enumerate(text.splitlines()) if ln.strip() and not ln.lstrip().startswith("#")]
    if not numbered:
        raise UserError(expected="a header line and data rows", got="an empty file", file=str(p))
    _check_rows(len(numbered) - 1, str(p), f"line {numbered[-1][0]}")
    reader = csv.reader(io.StringIO("\n".join(ln for _, ln in numbered)))
    try:
        table = list(reader)
    except csv.Error as exc:
        raise UserError(f"{p} is not a valid CSV file ({exc})", fix="check the quoting") from None
    _check_rows(len(table) - 1, str(p), f"line {numbered[-1][0]}")
    header = [h.strip() for h in table[0]]
    if len(header) > MAX_TABLE_COLUMNS.value:
        raise UserError(expected=f"at most {int(MAX_TABLE_COLUMNS)} columns", got=f"{len(header)} columns", file=str(p),
                        key=f"header (line {numbered[0][0]})",
                        fix="keep the table's columns (README, postproc analyse) and drop the others")
    missing = [k for k, c in COLUMNS.items() if c.required and k not in header]
    if missing:
        raise UserError(expected="the required columns " + ", ".join(k for k, c in COLUMNS.items() if c.required),
                        got="no column " + ", ".join(missing), file=str(p), key="header (line "
                        f"{numbered[0][0]})", fix="add the missing columns (names as listed, SI units)")
    dups = sorted(h for h, k in Counter(header).items() if k > 1)
    if dups:
        raise UserError(expected="each column once", got=", ".join(dups), file=str(p), key="header")
    ignored = [h for h in header if h not in COLUMNS]
    records = []
    for k, cells in enumerate(table[1:]):
        line = numbered[min(k + 1, len(numbered) - 1)][0]
        if len(cells) != len(header):
            raise UserError(expected=f"{len(header)} cells as in the header", got=f"{len(cells)} cells",
                            file=f"{p} line {line}", fix="check for a missing or extra comma")
        long = [h for h, c in zip(header, cells) if len(c) > MAX_CELL_LENGTH.value]
        if long:
            raise UserError(expected=f"cells of at most {int(MAX_CELL_LENGTH)} characters",
                            got=f"{max(len(c) for c in cells):,} characters", file=f"{p} line {line}",
                            key=long[0], fix="names are at most 64 characters, numbers plain decimals")
        rec = dict(zip(header, cells))
        records.append((rec, lambda name, line=line: f"{p} line {line}"))
    ids = [f"{r.get('variant', '').strip() or 'row'}@line{numbered[k + 1][0]}" for k, (r, _) in enumerate(records)]
    notes = [f"ignored column(s): {', '.join(ignored)}"] if ignored else []
    return _table(_parse_rows(records, ids), str(p), "csv", notes)


def _case_extras(case_file: Path) -> dict[str, float]:
    """Reference area, air density and iterative uncertainties of one case from its
    ``results/<case>.json`` (written by ``postproc sweep``); {} when absent.
    Used where the results row has no value of its own. The uncertainties
    are the standard deviations over the settling window of the monitor's
    verdict in coefficient counts (``convergence.stds``)."""
    try:
        if case_file.stat().st_size > MAX_TABLE_BYTES.value:
            return {}
        d = json.loads(case_file.read_text(encoding="utf-8"))
    except (OSError, json.JSONDecodeError, UnicodeDecodeError, RecursionError):
        return {}
    if not isinstance(d, dict):
        return {}
    d = d.get("forces") if isinstance(d.get("forces"), dict) else {}   # the case's forces report
    out: dict[str, float] = {}
    ref = d.get("reference") if isinstance(d.get("reference"), dict) else {}
    area, rho = ref.get("area"), ref.get("rho")
    if isinstance(area, (int, float)) and area > 0:
        out["reference_area"] = float(area)
    if isinstance(rho, (int, float)) and rho > 0:
        out["air_density"] = float(rho)
    conv = d.get("convergence") if isinstance(d.get("convergence"), dict) else {}
    stds = conv.get("stds") if isinstance(conv.get("stds"), dict) else {}
    for k in ("cl", "cd", "cs", "cl_front", "cl_rear"):
        u = stds.get(k)
        if isinstance(u, (int, float)) and not isinstance(u, bool) and math.isfinite(u) and u >= 0:
            out[f"u_{k}"] = float(u)
    return out


def read_sweep_table(folder: str | Path) -> ResultsTable:
    """The results table of a sweep folder post-processed by ``postproc sweep``
    (``results.json`` rows, with each case's reference area and monitor
    spread from ``results/<case>.json``)."""
    root = Path(folder)
    p = root / "results.json"
    if not p.is_file():
        raise UserError(expected="a sweep folder with results.json (from `postproc sweep`) or a results CSV",
                        got=str(root), fix="run `postproc sweep SWEEP_DIR` first, or pass a CSV")
    try:
        d = json.loads(_read_text(p))
    except json.JSONDecodeError as exc:
        raise UserError(f"{p} is not valid JSON ({exc})", fix="re-run `postproc sweep --force`") from None
    cases = d.get("cases") if isinstance(d, dict) else None
    if not isinstance(cases, list) or not all(isinstance(c, dict) for c in cases):
        raise UserError(expected="a list of case rows under 'cases'", got=type(cases).__name__, file=str(p), key="cases",
                        fix="re-run `postproc sweep --force`")
    _check_rows(len(cases), str(p), "cases")
    extras = {}
    for c in cases:
        cid = str(c.get("case_id") or "")
        if cid and "/" not in cid and "\\" not in cid:
            extras[cid] = _case_extras(root / "results" / f"{cid}.json")
    return rows_table(cases, str(p), extras)


def rows_table(cases: list[dict], source: str, extras: Mapping[str, Mapping[str, float]] | None = None) -> ResultsTable:
    """The results table of a sweep's rows (``results.json``'s ``cases``,
    or :class:`postproc.pipelines.sweep_rows.CaseResult` rows as dicts);
    ``extras``: per case id, values used where the row has none (reference
    area, density, iterative spreads). ``source`` names the rows in
    messages."""
    _check_rows(len(cases), source, "cases")
    records, ids = [], []
    for i, c in enumerate(cases):
        rec = dict(c)
        cid = str(c.get("case_id") or f"cases[{i}]")
        if isinstance(rec.get("flags"), (list, tuple)):
            rec["flags"] = " ".join(str(f) for f in rec["flags"])
        for k, v in (extras or {}).get(cid, {}).items():
            if rec.get(k) is None or (isinstance(rec.get(k), float) and math.isnan(rec[k])):
                rec[k] = v      # the row's own value (window spread, area) wins
        for k, v in list(rec.items()):   # NaN (unknown) is an empty cell
            if isinstance(v, float) and math.isnan(v):
                rec[k] = None
        records.append((rec, lambda name, i=i, cid=cid: f"{source} cases[{i}] ({cid})"))
        ids.append(cid)
    return _table(_parse_rows(records, ids), source, "sweep", [])


def read_results(source: str | Path) -> ResultsTable:
    """A results CSV file or a post-processed sweep folder → :class:`ResultsTable`."""
    p = Path(source)
    if p.is_dir():
        return read_sweep_table(p)
    return read_results_csv(p)
