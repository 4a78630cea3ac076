"""Cost accounting of a run: core-seconds per stage (wall × the case's
cores), CPU seconds of each stage's process tree, the sums in the record and
the summary, core-hours per converged point per variant and in total.

Stand-in run.sh scripts (tests/test_runner.py's, copying real solver logs)
and one that burns CPU: this tests the bookkeeping, not the solver."""
from __future__ import annotations

import json
import resource
import subprocess
import sys
from pathlib import Path

import pytest

from caseprep.contract import cost, records
from caseprep.run import runner, solverlogs

sys.path.insert(0, str(Path(__file__).parent))
from test_runner import FIX, make_case  # noqa: E402
from tiny_case import write_manifest_only  # noqa: E402

LOOP = "i=0; while [ $i -lt {n} ]; do i=$((i+1)); done"
BURN = r"""#!/bin/bash
# the solve stage runs a fixed busy loop in a child shell; the others sleep
set -u
cd "$(dirname "$0")" || exit 1
mkdir -p logs
[ $# -eq 0 ] && set -- mesh solve export
for s in "$@"; do
  case "$s" in
    solve) bash -c '{loop}' ;;
    *) sleep 0.2 ;;
  esac
  touch "logs/$s.done"
done
"""


def _burning_case(root: Path, cid: str, n: int) -> None:
    p = root / "cases" / cid / "run.sh"
    p.write_text(BURN.format(loop=LOOP.format(n=n)))
    p.chmod(0o755)


def _cpu_of(command: list[str]) -> float:
    """CPU s (user + system) of a finished child, from the kernel's figures."""
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    subprocess.run(command, check=True)
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    return (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)


def test_two_ranks_count_twice_the_wall_time_and_the_summary_sums_the_stages(tmp_path):
    root = write_manifest_only(tmp_path / "sweep", ["a", "b", "c"])
    make_case(root, "a", solve_sleep=0.5)
    make_case(root, "b", solve_sleep=0.3)
    make_case(root, "c", solver="simpleFoam_crash.log", solve_fail=True)
    recs = {r.case_id: r for r in runner.run_sweep(root, jobs=1, ranks=2)}
    for r in recs.values():
        ran = [s for s in r.stages if s.status in ("ok", "failed")]
        assert ran and all(s.cores == 2 for s in ran)
        for s in ran:  # the definition: wall × cores, to the rounding of the record (1 ms)
            assert s.core_seconds == pytest.approx(2 * s.wall_time, abs=2e-3)
        assert r.core_seconds == pytest.approx(2 * r.wall_time, abs=5e-3)
        assert r.core_seconds == pytest.approx(sum(s.core_seconds for s in ran), abs=1e-6)
        assert all(s.cpu_seconds is not None and s.cpu_seconds >= 0 for s in ran)
    assert recs["a"].core_seconds >= 2 * 0.5  # it slept 0.5 s in the solve stage on 2 cores
    summ = json.loads((root / records.SUMMARY_NAME).read_text())
    total = summ["cost"]["total"]
    stage_sum = sum(s["core_seconds"] for c in summ["cases"] for s in c["stages"] if s.get("core_seconds"))
    assert total["core_seconds"] == pytest.approx(stage_sum, abs=1e-6)
    assert total["core_seconds"] == pytest.approx(sum(r.core_seconds for r in recs.values()), abs=1e-3)
    assert sum(total["core_seconds_by_stage"].values()) == pytest.approx(stage_sum, abs=1e-3)
    # a and b end-time without settling (stand-in logs): flagged not-converged, so no converged point
    assert total["converged_points"] == 0 and total["core_hours_per_converged_point"] is None
    assert summ["cost"]["variants"]["v"]["cases"] == 3


def test_cpu_time_of_the_stage_process_tree(tmp_path):
    root = write_manifest_only(tmp_path / "sweep", ["burn"])
    n = 300_000
    _burning_case(root, "burn", n)
    (rec,) = runner.run_sweep(root, jobs=1, ranks=1)
    solve = rec.stage_run("solve")
    # the same loop run here, measured by the kernel for a direct child (the loop is
    # the stage's only work; a grandchild's CPU reaches the runner through run.sh)
    ref = _cpu_of(["bash", "-c", LOOP.format(n=n)])
    assert ref > 0.2
    assert solve.cpu_seconds == pytest.approx(ref, rel=0.35)  # run-to-run spread of a shared core
    assert solve.cpu_seconds <= solve.wall_time + 0.05
    assert rec.stage_run("mesh").cpu_seconds < 0.3  # a sleep costs no CPU
    assert rec.status == "ok" and not rec.flags
    summ = json.loads((root / records.SUMMARY_NAME).read_text())
    g = summ["cost"]["total"]
    assert g["converged_points"] == 1
    assert g["core_hours_per_converged_point"] == pytest.approx(rec.core_seconds / 3600, rel=1e-3)
    text = runner.format_cost(summ["cost"])
    assert "1/1 converged" in text and "per converged point" in text


def test_done_before_stages_keep_their_cost(tmp_path):
    root = write_manifest_only(tmp_path / "sweep", ["a"])
    make_case(root, "a", solve_sleep=0.2)
    (first,) = runner.run_sweep(root, jobs=1, ranks=1)
    (again,) = runner.run_sweep(root, jobs=1, ranks=1)
    assert again.status == "skipped"
    assert [s.status for s in again.stages] == ["done-before"] * 3
    assert again.core_seconds == pytest.approx(first.core_seconds, abs=1e-6)


def test_converged_point_and_groups():
    ok = [{"stage": s, "status": "ok", "core_seconds": 10.0, "cpu_seconds": 9.0} for s in ("mesh", "solve", "export")]
    rows = [
        {"case_id": "x1", "status": "ok", "flags": [], "stages": ok, "iterations": 100},
        {"case_id": "x2", "status": "ok", "flags": ["not-converged"], "stages": ok, "iterations": 180},
        {"case_id": "y1", "status": "solve-failed", "flags": ["solver-crashed"],
         "stages": ok[:1] + [{"stage": "solve", "status": "failed", "core_seconds": 5.0}]},
    ]
    c = cost.cost_summary(rows, {"x1": "x", "x2": "x", "y1": "y"})
    assert c["variants"]["x"]["core_seconds"] == 60.0 and c["variants"]["x"]["converged_points"] == 1
    assert c["variants"]["x"]["core_hours_per_converged_point"] == pytest.approx(60.0 / 3600)
    assert c["variants"]["y"]["core_hours_per_converged_point"] is None
    assert c["total"]["core_seconds"] == 75.0 and c["total"]["cpu_seconds"] == 63.0
    assert c["total"]["iterations_of_converged_points"] == 100


def test_tool_times_from_the_solver_log():
    t = solverlogs.parse_times((FIX / "simpleFoam_endtime.log").read_text())
    assert t is not None and t["execution"] >= 0 and t["clock"] >= 0
    assert solverlogs.parse_times("no times here") is None


def test_records_with_cost_round_trip_and_bad_cost_is_refused(tmp_path):
    root = write_manifest_only(tmp_path / "sweep", ["a"])
    make_case(root, "a")
    runner.run_sweep(root, jobs=1, ranks=1)
    case = root / "cases" / "a"
    rec = records.load_case_record(case)
    assert rec.tool_times.get("simpleFoam") and rec.stage_run("solve").core_seconds is not None
    d = json.loads((case / records.RECORD_NAME).read_text())
    d["stages"][1]["core_seconds"] = "lots"
    (case / records.RECORD_NAME).write_text(json.dumps(d))
    with pytest.raises(records.UserError, match=r"stages\[1\]\.core_seconds"):
        records.load_case_record(case)


def test_the_report_renders_the_cost_table_it_is_given():
    from dataclasses import replace

    from postproc.pipelines.report_data import cost_rows
    from postproc.report import render_report
    from report_fixtures import demo_report_data

    ok = [{"stage": s, "status": "ok", "core_seconds": 30.0} for s in ("mesh", "solve", "export")]
    block = cost.cost_summary([{"case_id": "a", "status": "ok", "flags": [], "stages": ok},
                               {"case_id": "b", "status": "ok", "flags": [], "stages": ok}], {"a": "flat", "b": "flat"})
    rows = cost_rows(block)
    assert [r["group"] for r in rows] == ["flat", "all variants"]
    assert rows[-1]["core_seconds"] == "180" and rows[-1]["per_point_seconds"] == "90"
    data = replace(demo_report_data(pictures=False), cost=rows)
    text, _ = render_report(data)
    assert "Solver cost" in text and ">90<" in text
    assert "Solver cost" not in render_report(demo_report_data(pictures=False))[0]
