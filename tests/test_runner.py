"""The sweep runner: scheduling, resuming, failure isolation, interruption and
records, with small bash run.sh scripts that follow the case folder contract
(stages mesh/solve/export, logs/<tool>.log, logs/<stage>.done, non-zero exit
at the first failing tool) and write real solver logs from tests/data/logs.
That tests the runner, not the solver's physics; the solver-marked test at
the end runs the tiny real case through the runner.
"""
from __future__ import annotations

import json
import os
import signal
import sys
import threading
import time
from pathlib import Path

import pytest
from click.testing import CliRunner

from caseprep.contract import records
from caseprep.run import runner
from caseprep.cli import main
from caseprep.contract.errors import UserError

sys.path.insert(0, str(Path(__file__).parent))
from tiny_case import write_manifest_only, write_tiny_sweep  # noqa: E402

FIX = Path(__file__).parent / "data" / "logs"

SCRIPT = r"""#!/bin/bash
# Test case script following the case folder contract; copies real logs.
set -u
cd "$(dirname "$0")" || exit 1
FIX="{fix}"
mkdir -p logs
echo "$UF_RANKS" > logs/ranks.txt
[ $# -eq 0 ] && set -- mesh solve export
for s in "$@"; do
  echo "$s" >> logs/calls.txt
  case "$s" in
    mesh)
      rm -f logs/mesh.done
      cp "$FIX/blockMesh.log" logs/blockMesh.log
      cp "$FIX/{snappy}" logs/snappyHexMesh.log
      {mesh_fail}
      cp "$FIX/{check}" logs/checkMesh.log
      touch logs/mesh.done ;;
    solve)
      rm -f logs/solve.done
      echo $$ > logs/solve.pid
      {solve_sleep}
      cp "$FIX/{solver}" logs/simpleFoam.log
      {solve_fail}
      touch logs/solve.done ;;
    export)
      rm -f logs/export.done
      cp "$FIX/foamToVTK.log" logs/foamToVTK.log
      {export_mark} ;;
  esac
done
"""


def make_case(root: Path, cid: str, *, snappy="snappyHexMesh_layers.log", check="checkMesh_ok.log",
              solver="simpleFoam_endtime.log", mesh_fail=False, solve_fail=False, solve_sleep=0.0,
              export_mark=True) -> None:
    text = SCRIPT.format(
        fix=FIX, snappy=snappy, check=check, solver=solver,
        mesh_fail='echo "snappyHexMesh failed" >&2; exit 1' if mesh_fail else "",
        solve_fail="exit 1" if solve_fail else "",
        solve_sleep=f"sleep {solve_sleep}" if solve_sleep else "",
        export_mark="touch logs/export.done" if export_mark else "true",
    )
    p = root / "cases" / cid / "run.sh"
    p.write_text(text)
    p.chmod(0o755)


def calls(root: Path, cid: str) -> list[str]:
    p = root / "cases" / cid / "logs" / "calls.txt"
    return p.read_text().split() if p.exists() else []


@pytest.fixture
def sweep(tmp_path):
    root = tmp_path / "sweep"
    write_manifest_only(root, ["good", "crash", "collapsed", "badmesh"])
    make_case(root, "good")
    make_case(root, "crash", solver="simpleFoam_crash.log", solve_fail=True)
    make_case(root, "collapsed", snappy="snappyHexMesh_collapsed.log", solver="simpleFoam_converged.log")
    make_case(root, "badmesh", snappy="snappyHexMesh_fatal.log", mesh_fail=True)
    return root


def test_statuses_flags_and_records(sweep):
    events = []
    recs = runner.run_sweep(sweep, jobs=2, ranks=3, progress=events.append)
    by = {r.case_id: r for r in recs}
    assert [r.case_id for r in recs] == ["good", "crash", "collapsed", "badmesh"]  # manifest order
    assert {k: r.status for k, r in by.items()} == {
        "good": "ok", "crash": "solve-failed", "collapsed": "ok", "badmesh": "mesh-failed"}
    # A failure does not stop the others: every case ran its stages up to its failure.
    assert calls(sweep, "good") == ["mesh", "solve", "export"]
    assert calls(sweep, "crash") == ["mesh", "solve"]
    assert calls(sweep, "badmesh") == ["mesh"]
    # UF_RANKS reaches the scripts.
    assert (sweep / "cases" / "good" / "logs" / "ranks.txt").read_text().strip() == "3"

    g = by["good"]
    assert g.cells == 1904 and g.background_cells == 960 and g.mesh_ok is True
    assert g.layer_coverage == 1.0 and g.iterations == 6 and g.end_reason == "end-time"
    assert g.final_residuals["p"] == 0.0060121517 and g.export_files == 6
    assert g.flags == ("not-converged",)  # 6.0e-3 > the 1e-3 default tolerance
    assert [s.status for s in g.stages] == ["ok", "ok", "ok"] and all(s.wall_time >= 0 for s in g.stages)

    c = by["crash"]
    assert c.failed and c.failed_tool == "simpleFoam" and "solver-crashed" in c.flags
    assert "floating point exception" in c.message
    assert "Foam::sigFpe::sigHandler" in c.log_tail
    assert [s.status for s in c.stages] == ["ok", "failed", "not-run"]

    k = by["collapsed"]
    assert k.status == "ok" and k.flags == ("layers-collapsed",)  # converged by criterion: no not-converged
    assert k.end_reason == "converged" and k.layers[0]["coverage"] == 0.0

    b = by["badmesh"]
    assert b.flags[0] == "mesh-failed" and b.failed_tool == "snappyHexMesh"
    assert "Thickness should be factor" in b.message and "FOAM exiting" in b.log_tail

    for cid in by:
        d = json.loads((sweep / "cases" / cid / records.RECORD_NAME).read_text())
        assert d["status"] == by[cid].status
    summ = json.loads((sweep / records.SUMMARY_NAME).read_text())
    assert summ["counts"] == {"ok": 2, "solve-failed": 1, "mesh-failed": 1}
    assert [r["case_id"] for r in summ["cases"]] == ["good", "crash", "collapsed", "badmesh"]
    assert {e.event for e in events} >= {"case-start", "stage-start", "stage-done", "stage-failed", "case-done"}
    assert all(e.total == 4 for e in events)


def test_resume_and_force(sweep):
    runner.run_sweep(sweep, jobs=2)
    recs = {r.case_id: r for r in runner.run_sweep(sweep, jobs=2)}
    # Done cases are skipped; a failed solve resumes from the solve stage.
    assert recs["good"].status == "skipped" and records.effective_status(recs["good"]) == "ok"
    assert recs["good"].cells == 1904  # a skipped case still reports its results
    assert calls(sweep, "good") == ["mesh", "solve", "export"]
    assert calls(sweep, "crash") == ["mesh", "solve", "solve"]
    assert [s.status for s in recs["crash"].stages] == ["done-before", "failed", "not-run"]
    assert calls(sweep, "badmesh") == ["mesh", "mesh"]
    # The skipped case's own record still says ok.
    assert records.read_case_record(sweep / "cases" / "good").status == "ok"
    runner.run_sweep(sweep, only=["good"], force=True)
    assert calls(sweep, "good") == ["mesh", "solve", "export"] * 2


def test_single_stage_and_not_ready(sweep):
    recs = {r.case_id: r for r in runner.run_sweep(sweep, stages=["solve"], only=["good"])}
    assert recs["good"].status == "not-ready" and "mesh" in recs["good"].message and recs["good"].failed
    assert calls(sweep, "good") == []
    runner.run_sweep(sweep, stages=["mesh"], only=["good"])
    assert calls(sweep, "good") == ["mesh"]
    recs = runner.run_sweep(sweep, stages=["solve", "export"], only=["good"])
    assert calls(sweep, "good") == ["mesh", "solve", "export"] and recs[0].status == "ok"
    # Re-meshing makes the later stages stale: their markers go.
    runner.run_sweep(sweep, stages=["mesh"], only=["good"], force=True)
    logs = sweep / "cases" / "good" / "logs"
    assert (logs / "mesh.done").exists() and not (logs / "solve.done").exists()
    assert not (logs / "export.done").exists()


def test_missing_marker_is_a_failure(tmp_path):
    root = tmp_path / "s"
    write_manifest_only(root, ["nomark"])
    make_case(root, "nomark", export_mark=False)
    (rec,) = runner.run_sweep(root)
    assert rec.status == "export-failed" and "did not leave logs/export.done" in rec.message


def test_user_errors(tmp_path, sweep):
    with pytest.raises(UserError, match="manifest.json"):
        runner.run_sweep(tmp_path / "nothing")
    with pytest.raises(UserError, match="Did you mean 'good'"):
        runner.run_sweep(sweep, only=["goood"])
    with pytest.raises(UserError, match="stage"):
        runner.run_sweep(sweep, stages=["mseh"])
    with pytest.raises(UserError, match="jobs"):
        runner.run_sweep(sweep, jobs=0)
    (sweep / "cases" / "good" / "run.sh").chmod(0o644)
    with pytest.raises(UserError, match="executable run.sh"):
        runner.run_sweep(sweep)


def test_interrupt_stops_cases_cleanly(tmp_path):
    root = tmp_path / "s"
    write_manifest_only(root, ["slow", "later"])
    make_case(root, "slow", solve_sleep=60)
    make_case(root, "later")
    pidfile = root / "cases" / "slow" / "logs" / "solve.pid"

    def on_event(ev):
        if ev.event == "stage-start" and ev.stage == "solve":
            def fire():
                for _ in range(100):  # wait until the script is really running
                    if pidfile.exists():
                        break
                    time.sleep(0.05)
                os.kill(os.getpid(), signal.SIGINT)
            threading.Thread(target=fire, daemon=True).start()

    t0 = time.monotonic()
    with pytest.raises(runner.SweepInterrupted) as exc:
        runner.run_sweep(root, jobs=1, progress=on_event, options=runner.RunOptions(kill_grace=5.0))
    assert time.monotonic() - t0 < 30  # did not wait for the 60 s sleep
    (rec,) = exc.value.records
    assert rec.case_id == "slow" and rec.status == "interrupted"
    assert [s.status for s in rec.stages] == ["ok", "interrupted", "not-run"]
    pid = int(pidfile.read_text())
    with pytest.raises(ProcessLookupError):
        os.kill(pid, 0)  # the case's process is gone
    assert calls(root, "later") == []  # not started
    assert json.loads((root / "cases" / "slow" / records.RECORD_NAME).read_text())["status"] == "interrupted"
    # Resuming runs the interrupted stage again (60 s sleep removed first).
    make_case(root, "slow")
    recs = runner.run_sweep(root)
    assert [r.status for r in recs] == ["ok", "ok"] and calls(root, "slow") == ["mesh", "solve", "solve", "export"]


def test_cli_run(sweep, tmp_path):
    cli = CliRunner()
    res = cli.invoke(main, ["run", str(sweep), "-j", "2", "--skip-solver-check"])
    assert res.exit_code == 1, res.output  # a case failed
    out = res.output
    assert "solve FAILED" in out and "floating point exception" in out
    assert "layers-collapsed" in out and "mesh-failed" in out
    assert "4 case(s)" in out and "2 failed" in out
    res = cli.invoke(main, ["run", str(tmp_path / "nothing"), "--skip-solver-check"])
    assert res.exit_code == 2 and "manifest.json" in res.output and "Traceback" not in res.output
    res = cli.invoke(main, ["run", str(sweep), "--only", "good", "--only", "collapsed", "--skip-solver-check"])
    assert res.exit_code == 0 and "done before" in res.output


@pytest.mark.solver
def test_runner_on_tiny_real_case(tmp_path):
    """The tiny real case through the runner, 2 ranks for the solve stage."""
    root = write_tiny_sweep(tmp_path / "sweep", ("ok", "collapsed"), n_iter=15)
    recs = {r.case_id: r for r in runner.run_sweep(root, jobs=1, ranks=2)}
    ok, col = recs["tiny_ok"], recs["tiny_collapsed"]
    assert ok.status == "ok" and col.status == "ok"
    assert ok.mesh_ok is True and ok.iterations == 15 and ok.layer_coverage > 0.5
    assert "layers-collapsed" in col.flags and "layers-collapsed" not in ok.flags
    assert ok.cells > ok.background_cells  # refinement and layers add cells
    assert (root / "cases" / "tiny_ok" / "logs" / "decomposePar.log").exists()  # ran in parallel
    vtk = root / "cases" / "tiny_ok" / "VTK"
    assert any(vtk.glob("*.vtm")) and ok.export_files >= 2


def test_relative_sweep_path(sweep, monkeypatch):
    # `make demo` passes a relative output folder; run.sh starts inside its case folder.
    monkeypatch.chdir(sweep.parent)
    recs = runner.run_sweep(Path(sweep.name), only=["good"])
    assert recs[0].status == "ok" and calls(sweep, "good") == ["mesh", "solve", "export"]


@pytest.mark.parametrize("pending, cores, jobs, ranks, want", [
    (4, 2, None, None, (2, 1)),     # at least as many cases as cores: one serial case per core
    (12, 2, None, None, (2, 1)),
    (2, 2, None, None, (2, 1)),
    (1, 2, None, None, (1, 2)),     # fewer cases than cores: ranks share the cores out
    (3, 8, None, None, (3, 2)),
    (1, 1, None, None, (1, 1)),
    (4, 2, None, 2, (1, 2)),        # ranks asked: as many cases as fit
    (4, 8, None, 2, (4, 2)),
    (1, 8, None, 2, (1, 2)),        # never more at a time than there are cases
    (4, 2, 1, None, (1, 2)),        # jobs asked: the cores shared among them
    (4, 8, 3, None, (3, 2)),
    (4, 2, 1, 2, (1, 2)),           # both asked: as asked
    (4, 2, 4, 4, (4, 4)),
])
def test_throughput_layout(pending, cores, jobs, ranks, want):
    """The throughput rule (README "Throughput"; the rule is ours, measured
    there on this project's machine)."""
    lay = runner.choose_layout(pending, cores, jobs, ranks)
    assert (lay.jobs, lay.ranks) == want and lay.reason


def test_default_layout_packs_the_machine(sweep):
    events = []
    recs = runner.run_sweep(sweep, progress=events.append)
    (lay,) = [e for e in events if e.event == "layout"]
    cores = runner.usable_cores()
    want = runner.choose_layout(4, cores)
    assert lay.message == want.reason
    # every case of the four ran with the rule's ranks (all 4 cases pending)
    ranks_seen = {(sweep / "cases" / c / "logs" / "ranks.txt").read_text().strip() for c in ("good", "crash")}
    assert ranks_seen == {str(want.ranks)} and all(r.ranks == want.ranks for r in recs if r.status != "skipped")
