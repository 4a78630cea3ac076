"""Parsers of the solver's log files: pure text in, frozen dataclasses out.

Written against the logs of the Debian ``openfoam`` package, version 1912, as
the case folders' ``run.sh`` produces them (one file per tool under
``logs/``): the background mesher (``blockMesh``), the surface-snapping and
layering mesher (``snappyHexMesh``), the mesh checker (``checkMesh``), the
steady incompressible solver (``simpleFoam``) and the VTK exporter
(``foamToVTK``). No file access here: the runner reads the files and hands
the text over.

Units: cell counts are numbers of cells; thicknesses are metres; angles are
degrees (the checker's non-orthogonality); residuals and continuity errors are
the solver's normalised, dimensionless values; times are the solver's time
values (for a steady run, the iteration number) and seconds of wall time.
Nothing here involves axes.

A log that stops part-way (the tool was killed, or is still running) parses
without error: the ``finished`` fields say whether the tool's closing
``End`` was reached.
"""
from __future__ import annotations

import math
import re
from dataclasses import asdict, dataclass, field
from typing import Any

from caseprep.contract.atomicio import json_ready

_NUM = r"(?:[-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?|[-+]?nan|[-+]?inf)"

# ---------------------------------------------------------------- common


def _float(s: str) -> float:
    try:
        return float(s)
    except ValueError:
        return math.nan


def fatal_error(text: str) -> str | None:
    """The solver's own account of a crash, or None.

    Recognises the ``--> FOAM FATAL ERROR`` / ``FOAM FATAL IO ERROR`` block
    (its message lines up to the ``From function`` line), a floating-point
    exception or segmentation fault trapped by the solver (the stack dump that
    starts with ``#0  Foam::error::printStack`` followed by the signal
    handler's frame), and MPI's report of an aborted run.
    """
    text = re.sub(r"(?m)^\[\d+\] ?", "", text)  # parallel runs prefix each rank's lines with [rank]
    m = re.search(r"-->\s*FOAM FATAL (?:IO )?ERROR\s*:?\s*\n(.*?)(?:\n\s*From function|\nFOAM (?:exiting|aborting)|\Z)",
                  text, re.S)
    if m:
        msg = " ".join(line.strip() for line in m.group(1).strip().splitlines() if line.strip())
        return msg or "fatal error"
    m = re.search(r"#\d+\s+Foam::error::printStack.*?\n#\d+\s+(\S+)", text)
    if m:
        frame = m.group(1)
        if "sigFpe" in frame:
            return "floating point exception (the solution diverged)"
        if "sigSegv" in frame:
            return "segmentation fault"
        return f"crashed in {frame}"
    m = re.search(r"exited on signal \d+ \(([^)]*)\)|Signal: ([A-Za-z ]+) \(\d+\)", text)
    if m:
        sig = (m.group(1) or m.group(2)).strip().lower()
        return f"{sig} (the solution diverged)" if "floating point" in sig else sig
    if re.search(r"MPI_ABORT was invoked|mpirun noticed that process rank", text):
        return "an MPI rank aborted"
    return None


def _finished(text: str) -> bool:
    """True when the tool printed its closing ``End`` line (last one only)."""
    return re.search(r"(?m)^End(?::.*)?\s*$", text) is not None


def _nprocs(text: str) -> int:
    m = re.search(r"(?m)^nProcs\s*:\s*(\d+)", text)
    return int(m.group(1)) if m else 1


class _Dict:
    def to_dict(self) -> dict[str, Any]:
        """JSON-ready form (tuples become lists, NaN becomes None)."""
        return json_ready(asdict(self))


# ---------------------------------------------------------------- background mesh


@dataclass(frozen=True)
class BlockMeshLog(_Dict):
    """Background mesh: cells, faces, points and boundary patches (name, faces)."""

    cells: int | None
    faces: int | None
    points: int | None
    patches: tuple[tuple[str, int], ...]
    finished: bool
    error: str | None


def parse_blockmesh(text: str) -> BlockMeshLog:
    """Parse a background-mesher log (its ``Mesh Information`` block)."""
    def grab(key: str) -> int | None:
        m = re.search(rf"(?m)^\s*{key}:\s*(\d+)", text)
        return int(m.group(1)) if m else None

    patches = tuple((m.group(2), int(m.group(1)))
                    for m in re.finditer(r"(?m)^\s*patch \d+ \(start: \d+ size: (\d+)\) name: (\S+)", text))
    return BlockMeshLog(cells=grab("nCells"), faces=grab("nFaces"), points=grab("nPoints"), patches=patches,
                        finished=_finished(text), error=fatal_error(text))


# ---------------------------------------------------------------- snapping/layering mesher


@dataclass(frozen=True)
class LayerPatch(_Dict):
    """Prism-layer result on one patch.

    ``faces``: patch faces; ``target_layers``: layers asked for (None when
    the log lacks the target table); ``target_thickness``: overall layer
    thickness asked for (m); ``layers``: layers achieved, averaged over the
    patch faces (fractional); ``thickness``: overall thickness achieved (m);
    ``thickness_percent``: achieved overall thickness as a percentage of the
    target, as the mesher reports it.
    """

    patch: str
    faces: int
    target_layers: int | None
    target_thickness: float | None
    layers: float
    thickness: float
    thickness_percent: float

    @property
    def coverage(self) -> float | None:
        """Achieved / target layers (fraction, 0..1), None when no target is known."""
        if not self.target_layers:
            return None
        return self.layers / self.target_layers


@dataclass(frozen=True)
class SnappyLog(_Dict):
    """Snapping/layering mesher result.

    ``cells``: final cell count (the last mesh summary line: after layers,
    else after snapping, else after refinement); ``initial_cells``,
    ``snapped_cells``, ``layer_cells`` the counts at those phases;
    ``layers``: the per-patch layer summary (empty when no layers were
    added); ``extruded_faces`` / ``extrudable_faces`` from the last layer
    iteration; ``illegal_faces``: faces left failing the mesher's quality
    checks at the end (0 on a clean finish, None if unknown).
    """

    cells: int | None
    initial_cells: int | None
    snapped_cells: int | None
    layer_cells: int | None
    layers: tuple[LayerPatch, ...]
    extruded_faces: int | None
    extrudable_faces: int | None
    illegal_faces: int | None
    finished: bool
    error: str | None
    faces_in_error: tuple[tuple[str, int], ...] = ()

    def faces_failing_the_solve(self, max_non_orthogonality: float | None,
                                max_skewness: float | None = None) -> int | None:
        """The mesher's illegal faces that matter to the finite-volume solve
        (None when the log gives no count). Left out of the mesher's final
        list: faces of non-orthogonality above its strict limit while the
        checker's maximum stays below :data:`SOLVE_NON_ORTHO_LIMIT` (the
        mesher's relaxed pass accepted them, and the solver's non-orthogonal
        correctors follow the checker's maximum: run.sh's
        ``system/meshNumerics``); faces above the mesher's (stricter) wall
        skewness limit while the checker's maximum stays within its own
        :data:`CHECKER_SKEWNESS_LIMIT`; and faces of poor face-decomposition
        tet quality (used to track particles through cells, not by the
        finite-volume discretisation). Without the itemised list, the total."""
        if self.illegal_faces is None or not self.faces_in_error:
            return self.illegal_faces
        n = 0
        for what, count in self.faces_in_error:
            if what.startswith("faces with face-decomposition tet quality"):
                continue
            if (what.startswith("non-orthogonality") and max_non_orthogonality is not None
                    and max_non_orthogonality < SOLVE_NON_ORTHO_LIMIT):
                continue
            if (what.startswith("faces with skewness") and max_skewness is not None
                    and max_skewness <= CHECKER_SKEWNESS_LIMIT):
                continue
            n += count
        return n

    @property
    def layer_coverage(self) -> float | None:
        """Face-weighted mean of achieved/target layers over the layered
        patches (fraction 0..1); None when no layers were asked for."""
        rows = [(p.faces, p.coverage) for p in self.layers if p.coverage is not None and p.faces > 0]
        if not rows:
            return None
        n = sum(f for f, _ in rows)
        return sum(f * c for f, c in rows) / n

    def collapsed_patches(self, min_coverage: float = 0.5) -> tuple[str, ...]:
        """Patches whose achieved/target layers is below ``min_coverage``
        (fraction; 0.5 by default — common practice, no source: fewer than
        half the layers means the near-wall resolution the case was sized
        for is not there)."""
        return tuple(p.patch for p in self.layers if p.coverage is not None and p.coverage < min_coverage)


#: Largest non-orthogonality (deg) up to which the mesher's relaxed faces
#: are accepted for the solve: the top band of the solver numerics that
#: follow the mesh (caseprep.casefiles.render.MESH_NUMERICS, 3 correctors
#: from 80 deg; common practice, no source).
SOLVE_NON_ORTHO_LIMIT = 80.0
#: The mesh checker's skewness limit (its default, from memory): above it
#: the checker reports a failed check.
CHECKER_SKEWNESS_LIMIT = 4.0

_FACES_IN_ERROR = re.compile(r"(?m)^Checking faces in error :\n((?:[ \t]+[^\n]*:[ \t]*\d+[ \t]*\n)+)")


def _faces_in_error(text: str) -> tuple[tuple[str, int], ...]:
    """The mesher's last itemised list of faces in error: (criterion, count)
    per line, criteria with a zero count left out."""
    blocks = _FACES_IN_ERROR.findall(text)
    if not blocks:
        return ()
    out = []
    for line in blocks[-1].splitlines():
        what, _, count = line.rpartition(":")
        if count.strip().isdigit() and int(count) > 0:
            out.append((" ".join(what.split()), int(count)))
    return tuple(out)


_CELLS_LINE = re.compile(r"(?m)^(Initial mesh|After [^:\n]*|Snapped mesh|Layer mesh)\s*:\s*cells:(\d+)")


def _table_rows(text: str, start: int) -> list[list[str]]:
    """Rows of a mesher table whose header starts at ``start``: the lines after
    the ``-----`` rule up to the first blank line."""
    lines = text[start:].splitlines()
    rows: list[list[str]] = []
    seen_rule = False
    for line in lines[1:]:
        if not seen_rule:
            if line.lstrip().startswith("-----"):
                seen_rule = True
            continue
        if not line.strip():
            break
        rows.append(line.split())
    return rows


def parse_snappy(text: str) -> SnappyLog:
    """Parse a snapping/layering mesher log.

    The layer tables are matched by their header lines: the target table
    ``patch faces layers avg thickness[m]`` (columns: patch, faces, layers,
    near-wall thickness, overall thickness) printed before layering, and the
    result table ``patch faces layers overall thickness`` (columns: patch,
    faces, layers, thickness [m], thickness [%]) printed after it. Only the
    last of each is used.
    """
    counts: dict[str, int] = {}
    for m in _CELLS_LINE.finditer(text):
        counts[m.group(1)] = int(m.group(2))
    last = None
    for m in _CELLS_LINE.finditer(text):
        last = int(m.group(2))

    targets: dict[str, tuple[int, float]] = {}
    tstarts = [m.start() for m in re.finditer(r"(?m)^patch\s+faces\s+layers\s+avg thickness", text)]
    if tstarts:
        for row in _table_rows(text, tstarts[-1]):
            if len(row) >= 5:
                try:
                    targets[row[0]] = (int(row[2]), _float(row[4]))
                except ValueError:
                    pass
    layers: list[LayerPatch] = []
    rstarts = [m.start() for m in re.finditer(r"(?m)^patch\s+faces\s+layers\s+overall thickness", text)]
    if rstarts:
        for row in _table_rows(text, rstarts[-1]):
            if len(row) >= 5:
                try:
                    tl, tt = targets.get(row[0], (None, None))
                    layers.append(LayerPatch(patch=row[0], faces=int(row[1]), target_layers=tl, target_thickness=tt,
                                             layers=_float(row[2]), thickness=_float(row[3]),
                                             thickness_percent=_float(row[4])))
                except ValueError:
                    pass
    ext = re.findall(r"(?m)^Extruding (\d+) out of (\d+) faces", text)
    illegal = None
    if re.search(r"(?m)^Finished meshing without any errors", text):
        illegal = 0
    else:
        m = re.search(r"(?m)^Finished meshing with (\d+) illegal faces", text)
        if m:
            illegal = int(m.group(1))
    return SnappyLog(
        cells=last,
        initial_cells=counts.get("Initial mesh"),
        snapped_cells=counts.get("Snapped mesh"),
        layer_cells=counts.get("Layer mesh"),
        layers=tuple(layers),
        extruded_faces=int(ext[-1][0]) if ext else None,
        extrudable_faces=int(ext[-1][1]) if ext else None,
        illegal_faces=illegal,
        finished=_finished(text),
        error=fatal_error(text),
        faces_in_error=_faces_in_error(text) if illegal else (),
    )


# ---------------------------------------------------------------- mesh checker


@dataclass(frozen=True)
class CheckMeshLog(_Dict):
    """Mesh checker verdict.

    ``mesh_ok``: True for ``Mesh OK.``, False for ``Failed N mesh checks.``,
    None when neither line is present (the checker did not finish).
    ``failed_checks``: N (0 when OK). ``max_non_orthogonality`` and
    ``avg_non_orthogonality`` in degrees; ``max_skewness`` and
    ``max_aspect_ratio`` dimensionless; ``problems``: the checker's lines
    marked ``***`` (failed checks) and ``*`` (warnings), stripped.

    Note: the checker's exit code is 0 even when checks fail, so this
    verdict, not the exit code, says whether the mesh passed.
    """

    cells: int | None
    faces: int | None
    points: int | None
    mesh_ok: bool | None
    failed_checks: int | None
    max_non_orthogonality: float | None
    avg_non_orthogonality: float | None
    max_skewness: float | None
    max_aspect_ratio: float | None
    problems: tuple[str, ...]
    finished: bool
    error: str | None


def parse_checkmesh(text: str) -> CheckMeshLog:
    """Parse a mesh checker log (the ``Mesh stats`` block and the geometry checks)."""
    def grab_int(key: str) -> int | None:
        m = re.search(rf"(?m)^\s*{key}:\s+(\d+)", text)
        return int(m.group(1)) if m else None

    def grab_float(pattern: str) -> float | None:
        m = re.search(pattern, text)
        return _float(m.group(1)) if m else None

    if re.search(r"(?m)^Mesh OK\.", text):
        ok, failed = True, 0
    else:
        m = re.search(r"(?m)^Failed (\d+) mesh checks?\.", text)
        ok, failed = (False, int(m.group(1))) if m else (None, None)
    problems = tuple(line.strip().lstrip("*").strip()
                     for line in text.splitlines() if re.match(r"^\s*\*", line))
    return CheckMeshLog(
        cells=grab_int("cells"),
        faces=grab_int("faces"),
        points=grab_int("points"),
        mesh_ok=ok,
        failed_checks=failed,
        max_non_orthogonality=grab_float(rf"Mesh non-orthogonality Max:\s*({_NUM})"),
        avg_non_orthogonality=grab_float(rf"Mesh non-orthogonality Max:\s*{_NUM}\s+average:\s*({_NUM})"),
        max_skewness=grab_float(rf"Max skewness = ({_NUM})"),
        max_aspect_ratio=grab_float(rf"Max aspect ratio = ({_NUM})"),
        problems=problems,
        finished=_finished(text),
        error=fatal_error(text),
    )


# ---------------------------------------------------------------- steady solver


@dataclass(frozen=True)
class SolverLog(_Dict):
    """Steady solver run.

    ``times``: the time value of each iteration that ran (for a steady run
    the iteration number), ``iterations`` = len(times).
    ``residuals``: per field (vector fields by component, e.g. ``Ux``), the
    initial residual of the field's first linear solve in each iteration,
    aligned with ``times`` (NaN where the field was not solved that
    iteration). ``final_residuals``: the last finite value of each, which is
    what the solver's convergence criterion compares. ``end_reason``:
    ``converged`` (the residual criterion was met), ``end-time`` (the
    iteration budget ran out), ``crashed`` (fatal error or trapped signal) or
    ``incomplete`` (the log stops without an end: killed or still running).
    ``continuity_local`` / ``continuity_global`` / ``continuity_cumulative``:
    the time-step continuity errors of the last iteration
    (dimensionless); ``max_continuity_local`` the largest ``sum local`` seen.
    ``bounded``: per field, how many times the solver had to bound it
    (clip negative turbulence quantities), a sign of a struggling run.
    ``execution_time``: the solver's last reported CPU time (s).
    """

    times: tuple[float, ...]
    residuals: dict[str, tuple[float, ...]]
    final_residuals: dict[str, float]
    end_reason: str
    converged_at: int | None
    continuity_local: float | None
    continuity_global: float | None
    continuity_cumulative: float | None
    max_continuity_local: float | None
    bounded: dict[str, int]
    execution_time: float | None
    n_procs: int
    error: str | None

    @property
    def iterations(self) -> int:
        return len(self.times)

    def max_final_residual(self) -> float | None:
        """Largest of the final residuals (NaN counts as largest); None if none."""
        vals = list(self.final_residuals.values())
        if not vals:
            return None
        return math.inf if any(not math.isfinite(v) for v in vals) else max(vals)


_TIME = re.compile(r"(?m)^Time = (\S+)\s*$")
_SOLVE = re.compile(rf"Solving for (\w+), Initial residual = ({_NUM}), Final residual = ({_NUM}), No Iterations (\d+)")
_CONT = re.compile(rf"time step continuity errors : sum local = ({_NUM}), global = ({_NUM}), cumulative = ({_NUM})")


def parse_solver(text: str) -> SolverLog:
    """Parse a steady solver log (serial or parallel: the master's output)."""
    marks = list(_TIME.finditer(text))
    times: list[float] = []
    per_iter: list[dict[str, float]] = []
    cont = None
    max_local = None
    for i, m in enumerate(marks):
        block = text[m.end(): marks[i + 1].start() if i + 1 < len(marks) else len(text)]
        res: dict[str, float] = {}
        for s in _SOLVE.finditer(block):
            res.setdefault(s.group(1), _float(s.group(2)))
        if not res:
            continue  # a time banner with nothing solved (the crash happened first)
        times.append(_float(m.group(1)))
        per_iter.append(res)
        for c in _CONT.finditer(block):
            cont = tuple(_float(g) for g in c.groups())
            loc = abs(cont[0])
            max_local = loc if max_local is None or not math.isfinite(loc) or loc > max_local else max_local
    fields: list[str] = []
    for r in per_iter:
        for k in r:
            if k not in fields:
                fields.append(k)
    residuals = {f: tuple(r.get(f, math.nan) for r in per_iter) for f in fields}
    final = {}
    for f, seq in residuals.items():
        finite = [v for v in seq if not math.isnan(v)]
        if finite:
            final[f] = finite[-1]
    bounded: dict[str, int] = {}
    for b in re.finditer(r"(?m)^bounding (\w+),", text):
        bounded[b.group(1)] = bounded.get(b.group(1), 0) + 1
    err = fatal_error(text)
    conv = re.search(r"(?m)^\S+ solution converged in (\S+) iterations", text)
    if err:
        reason = "crashed"
    elif conv:
        reason = "converged"
    elif _finished(text):
        reason = "end-time"
    else:
        reason = "incomplete"
    conv_at = None
    if conv:
        try:
            conv_at = int(float(conv.group(1)))
        except ValueError:
            conv_at = None
    exe = re.findall(rf"(?m)^ExecutionTime = ({_NUM}) s", text)
    return SolverLog(
        times=tuple(times),
        residuals=residuals,
        final_residuals=final,
        end_reason=reason,
        converged_at=conv_at,
        continuity_local=cont[0] if cont else None,
        continuity_global=cont[1] if cont else None,
        continuity_cumulative=cont[2] if cont else None,
        max_continuity_local=max_local,
        bounded=bounded,
        execution_time=_float(exe[-1]) if exe else None,
        n_procs=_nprocs(text),
        error=err,
    )


# ---------------------------------------------------------------- VTK export


@dataclass(frozen=True)
class ExportLog(_Dict):
    """VTK export: the files written (paths relative to the case, as logged)
    and the times exported."""

    files: tuple[str, ...] = ()
    times: tuple[float, ...] = ()
    finished: bool = False
    error: str | None = None
    fields: tuple[str, ...] = field(default_factory=tuple)


def parse_export(text: str) -> ExportLog:
    """Parse a VTK exporter log (its ``Internal`` / ``Boundary`` lines)."""
    files = tuple(m.group(1) for m in re.finditer(r'(?m)^\s*(?:Internal|Boundary|Patch|Surface|Faces|Points|Cloud)\s*:\s*"([^"]+)"', text))
    times = tuple(_float(t) for t in re.findall(r"(?m)^Time: (\S+)\s*$", text))
    flds: list[str] = []
    for m in re.finditer(r"(?m)^\s+(?:vol|point|surface)\w*\s*:\s*(.+)$", text):
        for f in m.group(1).split():
            if f not in flds:
                flds.append(f)
    return ExportLog(files=files, times=times, finished=_finished(text), error=fatal_error(text), fields=tuple(flds))


# ---------------------------------------------------------------- dispatch

PARSERS = {
    "blockMesh": parse_blockmesh,
    "snappyHexMesh": parse_snappy,
    "checkMesh": parse_checkmesh,
    "simpleFoam": parse_solver,
    "foamToVTK": parse_export,
}


def parse_mesh_numerics(text: str) -> dict[str, float | int] | None:
    """The numerics ``run.sh`` chose from the mesh (``system/meshNumerics``):
    ``{"non_orthogonal_correctors": n, "momentum_relaxation": x}``, or None
    when the text does not hold both entries."""
    n = re.search(r"nNonOrthogonalCorrectors\s+(\d+)\s*;", text)
    u = re.search(rf"(?m)^\s*U\s+({_NUM})\s*;", text)
    if n is None or u is None:
        return None
    return {"non_orthogonal_correctors": int(n.group(1)), "momentum_relaxation": _float(u.group(1))}


def parse_log(tool: str, text: str):
    """Parse the log of ``tool`` (one of :data:`PARSERS`' keys)."""
    try:
        return PARSERS[tool](text)
    except KeyError:
        raise ValueError(f"expected a tool among {sorted(PARSERS)}, got {tool!r}") from None
