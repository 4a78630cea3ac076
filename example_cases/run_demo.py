"""The demo driver behind `make demo`: write the example sweep, run every case
with the solver, post-process the forces, and write a results table.

    python example_cases/run_demo.py --out runs/demo

Steps
1. Write the example sweep (example_cases/floor_study/sweep.toml, an
   invented demo scenario) at the ``smoke`` fidelity into OUT/sweep with the
   caseprep Python API. An existing OUT/sweep is reused (``--force`` rewrites
   it), so running the demo again resumes where it stopped.
2. Run every case with the case runner (1 case at a time, 2 MPI ranks by
   default), printing progress. A case that fails is reported with the tail
   of its log; the others go on.
3. Post-process every exported case with `postproc forces CASE --json` when
   that command is available, else note its absence.
4. Write OUT/results.csv and OUT/results.html (self-contained: the table,
   the flags explained and the safety caution) and print where they are and
   how long the demo took.

Exit codes: 0 all cases ran, 1 some case failed, 2 a missing prerequisite
(example config, solver), 130 interrupted (run again to resume).
"""
from __future__ import annotations

import argparse
import csv
import html
import io
import json
import math
import subprocess
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
if str(ROOT) not in sys.path:  # running from a source tree without installing
    sys.path.insert(0, str(ROOT))

from caseprep import runner  # noqa: E402
from caseprep.errors import UserError  # noqa: E402
from caseprep.manifest import read_manifest  # noqa: E402
from caseprep.safeio import write_text_atomic  # noqa: E402

DEFAULT_CONFIG = HERE / "floor_study" / "sweep.toml"
SAFETY = ("CFD is an approximation: the numbers depend on the mesh, the turbulence model and the set-up. "
          "Validate every decision by physical test. Run vehicles only where permitted and safe, follow the "
          "local rules, and defer to qualified engineers for anything that affects safety.")


def say(msg: str = "") -> None:
    print(msg, flush=True)


def write_sweep(config_path: Path, sweep_dir: Path, fidelity: str, force: bool) -> None:
    """Plan and write the sweep with the caseprep Python API."""
    try:
        from caseprep.config import load_config
        from caseprep.planner import plan
        from caseprep.writer import write_sweep as _write
    except ImportError as exc:
        raise SystemExit(_stop(f"this checkout lacks part of caseprep ({exc}); the sweep cannot be written", 2))
    config = load_config(config_path)
    config = _with_fidelity(config, fidelity)
    specs = plan(config)
    say(f"writing {len(specs)} case(s) at fidelity {fidelity!r} into {sweep_dir} …")
    _write(specs, sweep_dir, config_path, force=force)


def _with_fidelity(config, fidelity: str):
    """The config with its mesh fidelity set to ``fidelity`` (frozen pydantic
    models are copied with ``model_copy``)."""
    mesh = getattr(config, "mesh", None)
    if mesh is None or not hasattr(mesh, "fidelity") or getattr(mesh, "fidelity") == fidelity:
        return config
    if hasattr(config, "model_copy"):
        return config.model_copy(update={"mesh": mesh.model_copy(update={"fidelity": fidelity})})
    import dataclasses
    return dataclasses.replace(config, mesh=dataclasses.replace(mesh, fidelity=fidelity))


def _stop(msg: str, code: int) -> int:
    print(f"demo: {msg}", file=sys.stderr, flush=True)
    return code


def progress(ev: runner.Progress) -> None:
    head = f"  [{ev.index}/{ev.total}] {ev.case_id}"
    d = runner.format_duration
    if ev.event == "stage-start":
        say(f"{head}: {ev.stage} …")
    elif ev.event == "stage-done":
        say(f"{head}: {ev.stage} done in {d(ev.stage_elapsed)}")
    elif ev.event == "running":
        say(f"{head}: {ev.stage} still running ({d(ev.stage_elapsed)})")
    elif ev.event == "stage-failed":
        say(f"{head}: {ev.stage} FAILED: {ev.message}")
    elif ev.event == "skipped":
        say(f"{head}: done in an earlier run, skipped")
    elif ev.event == "case-done" and ev.record is not None:
        r = ev.record
        say(f"{head}: {r.status} in {d(r.wall_time)}" + (f" — flags: {', '.join(r.flags)}" if r.flags else ""))
        if r.failed and r.log_tail:
            say("      " + "\n      ".join(r.log_tail.splitlines()[-15:]))


# ---------------------------------------------------------------- post-processing


def postprocess_forces(case_dir: Path) -> tuple[dict | None, str | None]:
    """Run `postproc forces CASE --json`; (report, None) or (None, why not)."""
    cmd = [sys.executable, "-m", "postproc.cli", "forces", str(case_dir), "--json"]
    p = subprocess.run(cmd, capture_output=True, text=True, cwd=ROOT)
    if p.returncode != 0:
        err = (p.stderr or p.stdout).strip()
        if "No such command" in err:
            return None, "forces post-processing (`postproc forces`) is not in this installation yet"
        return None, err.splitlines()[-1] if err else f"postproc exited {p.returncode}"
    try:
        return json.loads(p.stdout), None
    except ValueError:
        return None, "postproc printed something other than JSON"


def _flatten(d, prefix: str = "") -> dict[str, float | str]:
    """Scalar leaves of nested dicts as ``a.b`` keys; 3-vectors as ``a_x/_y/_z``."""
    out: dict[str, float | str] = {}
    for k, v in d.items():
        key = f"{prefix}{k}"
        if isinstance(v, bool):
            out[key] = str(v)
        elif isinstance(v, (int, float)):
            out[key] = v
        elif isinstance(v, str) and len(v) < 40:
            out[key] = v
        elif isinstance(v, list) and len(v) == 3 and all(isinstance(x, (int, float)) for x in v):
            for axis, x in zip("xyz", v):
                out[f"{key}_{axis}"] = x
        elif isinstance(v, dict):
            out.update(_flatten(v, key + "."))
    return out


def force_columns(report: dict) -> dict[str, float | str]:
    """The columns a forces report contributes: its coefficients, aero
    balance and convergence verdict (whatever keys they carry)."""
    cols: dict[str, float | str] = {}
    for section in ("coefficients", "balance"):
        if isinstance(report.get(section), dict):
            cols.update(_flatten(report[section], section + "."))
    conv = report.get("convergence")
    if isinstance(conv, dict):
        for k in ("verdict", "converged", "status"):
            if k in conv:
                cols[f"convergence.{k}"] = str(conv[k])
    return cols


# ---------------------------------------------------------------- results table


def results_rows(manifest, records: dict[str, runner.CaseRunRecord], forces: dict[str, dict]) -> list[dict]:
    rows = []
    for c in manifest.cases:
        r = records.get(c.case_id)
        row: dict[str, object] = {"case": c.case_id, "variant": c.variant}
        for k, v in c.params.items():
            row[k] = v
        if r is not None:
            row.update({
                "status": runner.effective_status(r), "flags": " ".join(r.flags), "cells": r.cells,
                "mesh_check": {True: "OK", False: "FAILED", None: ""}[r.mesh_ok],
                "layer_coverage": None if r.layer_coverage is None else round(r.layer_coverage, 3),
                "iterations": r.iterations, "end": r.end_reason or "",
                "max_final_residual": max(r.final_residuals.values()) if r.final_residuals else None,
                "wall_time_s": r.wall_time if r.status != "skipped" else sum(s.wall_time or 0 for s in r.stages),
            })
        row.update(forces.get(c.case_id, {}))
        rows.append(row)
    return rows


def _cell(v) -> str:
    if v is None:
        return ""
    if isinstance(v, float):
        if not math.isfinite(v):
            return ""
        return f"{v:.4g}"
    return str(v)


def to_csv(rows: list[dict]) -> str:
    cols: list[str] = []
    for r in rows:
        cols += [k for k in r if k not in cols]
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(cols)
    for r in rows:
        w.writerow([_cell(r.get(c)) for c in cols])
    return buf.getvalue()


def to_html(rows: list[dict], notes: list[str], title: str, elapsed: float) -> str:
    cols: list[str] = []
    for r in rows:
        cols += [k for k in r if k not in cols]
    e = html.escape
    head = "".join(f"<th>{e(c)}</th>" for c in cols)
    body = []
    for r in rows:
        bad = r.get("status") not in ("ok",) or r.get("flags")
        body.append(f"<tr class=\"{'flag' if bad else ''}\">" + "".join(f"<td>{e(_cell(r.get(c)))}</td>" for c in cols)
                    + "</tr>")
    flags = sorted({f for r in rows for f in str(r.get("flags") or "").split()})
    legend = "".join(f"<li><b>{e(f)}</b>: {e(runner.FLAG_TEXT.get(f, f))}</li>" for f in flags) or "<li>none</li>"
    note_html = "".join(f"<li>{e(n)}</li>" for n in notes) or "<li>none</li>"
    return f"""<!doctype html>
<html lang="en"><head><meta charset="utf-8"><title>{e(title)}</title>
<style>
body {{ font-family: sans-serif; margin: 2em; color: #222; }}
table {{ border-collapse: collapse; font-size: 0.85em; }}
th, td {{ border: 1px solid #bbb; padding: 0.25em 0.5em; text-align: right; }}
th {{ background: #eee; }} td:first-child, th:first-child {{ text-align: left; }}
tr.flag td {{ background: #fff3e0; }}
.caution {{ border-left: 4px solid #c62828; background: #fdecea; padding: 0.6em 1em; max-width: 60em; }}
</style></head><body>
<h1>{e(title)}</h1>
<p class="caution"><b>Safety.</b> {e(SAFETY)}</p>
<p>Demo data: an invented example study, smoke-level meshes — for showing the workflow, not for decisions.
Body-frame axes: x rearward, y right, z up; SI units. Demo wall time {e(runner.format_duration(elapsed))}.</p>
<table><thead><tr>{head}</tr></thead><tbody>
{chr(10).join(body)}
</tbody></table>
<h2>Flags</h2><ul>{legend}</ul>
<h2>Notes</h2><ul>{note_html}</ul>
</body></html>
"""


# ---------------------------------------------------------------- main


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description="Run the underfloor demo: write, run and post-process the example sweep.")
    ap.add_argument("--out", default="runs/demo", help="output folder (default runs/demo)")
    ap.add_argument("--config", default=str(DEFAULT_CONFIG), help="sweep config (default the bundled example)")
    ap.add_argument("--fidelity", default="smoke", help="mesh fidelity (default smoke)")
    ap.add_argument("--jobs", type=int, default=1, help="cases at a time (default 1)")
    ap.add_argument("--ranks", type=int, default=2, help="MPI ranks per case (default 2)")
    ap.add_argument("--force", action="store_true", help="rewrite the sweep and re-run every case")
    a = ap.parse_args(argv)
    t0 = time.monotonic()
    out = Path(a.out)
    sweep_dir = out / "sweep"
    config = Path(a.config)

    if not config.is_file():
        return _stop(f"the example config {config} is missing — it belongs to this repository "
                     "(example_cases/floor_study/sweep.toml); check out the full project, or give --config", 2)
    missing = runner.missing_solver_binaries()
    if missing:
        return _stop("the solver is not installed (missing: " + ", ".join(missing) + ").\n"
                     f"Install it with:\n    {runner.INSTALL_HINT}\nthen run `make demo` again.", 2)

    try:
        if (sweep_dir / "manifest.json").is_file() and not a.force:
            say(f"reusing the sweep in {sweep_dir} (written before; --force rewrites it) — resuming")
        else:
            write_sweep(config, sweep_dir, a.fidelity, a.force)
        manifest = read_manifest(sweep_dir)
        say(f"running {len(manifest.cases)} case(s), {a.jobs} at a time, {a.ranks} rank(s) each …")
        try:
            recs = runner.run_sweep(sweep_dir, jobs=a.jobs, ranks=a.ranks, force=a.force, progress=progress)
        except runner.SweepInterrupted:
            return _stop("interrupted; the running case was stopped and recorded. Run `make demo` again to resume.",
                         130)
    except UserError as exc:
        return _stop(str(exc), 2)
    records = {r.case_id: r for r in recs}

    notes: list[str] = []
    forces: dict[str, dict] = {}
    unavailable = None
    for c in manifest.cases:
        r = records.get(c.case_id)
        if r is None or runner.effective_status(r) != "ok" or unavailable:
            continue
        report, why = postprocess_forces(manifest.case_dir(c))
        if report is not None:
            forces[c.case_id] = force_columns(report)
        elif why and "not in this installation" in why:
            unavailable = why
        else:
            notes.append(f"{c.case_id}: forces not computed: {why}")
    if unavailable:
        notes.insert(0, unavailable + "; the table shows the run results only.")
    say("post-processed forces of %d case(s)" % len(forces) + (f" ({unavailable})" if unavailable else ""))

    elapsed = time.monotonic() - t0
    rows = results_rows(manifest, records, forces)
    write_text_atomic(out / "results.csv", to_csv(rows))
    write_text_atomic(out / "results.html", to_html(rows, notes, "underfloor demo — example floor study", elapsed))
    say("")
    say(runner.format_summary_table(recs))
    failed = [r for r in recs if r.failed]
    say("")
    say(f"results: {out / 'results.html'} and {out / 'results.csv'}; run records: {sweep_dir / runner.SUMMARY_NAME}")
    say(f"demo took {runner.format_duration(elapsed)}; {len(recs) - len(failed)} of {len(recs)} case(s) ran"
        + (f", {len(failed)} failed (see above)" if failed else ""))
    say("Caution: " + SAFETY)
    return 1 if failed else 0


if __name__ == "__main__":
    sys.exit(main())
