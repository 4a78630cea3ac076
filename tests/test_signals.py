"""Stop signals with real processes: `caseprep run` started as its own
program (with SIGINT and SIGTERM ignored by its parent, as a background job
of a non-interactive shell or a batch system may start it), case scripts
that start children of their own, and real signals.

The case scripts are stand-ins that follow the case folder contract (stages,
logs/<stage>.done markers) and sleep in the solve stage: this tests the
signal mechanics (process groups, grace period, records, exit codes,
resuming), not the solver. Exit codes 128 + signal number: the POSIX shell
convention for a process ended by a signal (common practice, no source).
"""
from __future__ import annotations

import json
import os
import signal
import socket
import subprocess
import sys
import time
from pathlib import Path

import pytest

from caseprep.contract import records

sys.path.insert(0, str(Path(__file__).parent))
from tiny_case import write_manifest_only  # noqa: E402

FIX = Path(__file__).parent / "data" / "logs"

SCRIPT = r"""#!/bin/bash
set -u
cd "$(dirname "$0")" || exit 1
mkdir -p logs
{trap}
[ $# -eq 0 ] && set -- mesh solve export
for s in "$@"; do
  echo "$s" >> logs/calls.txt
  case "$s" in
    mesh)
      cp "{fix}/blockMesh.log" logs/blockMesh.log
      cp "{fix}/checkMesh_ok.log" logs/checkMesh.log
      touch logs/mesh.done ;;
    solve)
      echo $$ > logs/script.pid
      sleep {sleep} &
      echo $! > logs/child.pid
      wait $!
      wait $!
      cp "{fix}/simpleFoam_converged.log" logs/simpleFoam.log
      touch logs/solve.done ;;
    export)
      cp "{fix}/foamToVTK.log" logs/foamToVTK.log
      touch logs/export.done ;;
  esac
done
"""


def make_case(root: Path, cid: str, sleep: float = 0.0, ignore_term: bool = False) -> None:
    p = root / "cases" / cid / "run.sh"
    p.write_text(SCRIPT.format(fix=FIX, sleep=sleep, trap="trap '' TERM" if ignore_term else ""))
    p.chmod(0o755)


def _ignore_stop_signals() -> None:  # the parent's dispositions the runner inherits
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    signal.signal(signal.SIGTERM, signal.SIG_IGN)


def start_run(root: Path, *args: str) -> subprocess.Popen:
    return subprocess.Popen(
        [sys.executable, "-m", "caseprep.cli", "run", str(root), "--skip-solver-check", "-j", "1", "--ranks", "1",
         *args],
        stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True, preexec_fn=_ignore_stop_signals,
        start_new_session=True)


def wait_for(path: Path, timeout: float = 60.0) -> None:
    t0 = time.monotonic()
    while not (path.exists() and path.read_text().strip()):
        if time.monotonic() - t0 > timeout:
            raise AssertionError(f"{path} did not appear in {timeout} s")
        time.sleep(0.05)


def gone(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return True
    # a zombie child of someone else still answers; look at its state
    try:
        return Path(f"/proc/{pid}/stat").read_text().split(")")[-1].split()[0] == "Z"
    except OSError:
        return True


def calls(root: Path, cid: str) -> list[str]:
    p = root / "cases" / cid / "logs" / "calls.txt"
    return p.read_text().split() if p.exists() else []


def record(root: Path, cid: str) -> dict:
    return json.loads((root / "cases" / cid / records.RECORD_NAME).read_text())


@pytest.mark.parametrize("sig, code", [(signal.SIGTERM, 143), (signal.SIGINT, 130)])
def test_stop_signal_stops_records_and_resumes(tmp_path, sig, code):
    root = tmp_path / "s"
    write_manifest_only(root, ["slow", "later"])
    make_case(root, "slow", sleep=120)
    make_case(root, "later")
    logs = root / "cases" / "slow" / "logs"
    proc = start_run(root)
    try:
        wait_for(logs / "child.pid")
        # While the stage runs, the record says so: running, where, which stage.
        rec = record(root, "slow")
        assert rec["status"] == "running" and rec["host"] == socket.gethostname() and rec["pid"] == proc.pid
        assert [s["status"] for s in rec["stages"]] == ["ok", "running", "not-run"]
        summ = json.loads((root / records.SUMMARY_NAME).read_text())
        assert {r["case_id"]: r["status"] for r in summ["cases"]} == {"slow": "running", "later": "not-run"}
        t0 = time.monotonic()
        proc.send_signal(sig)
        out, _ = proc.communicate(timeout=60)
    finally:
        if proc.poll() is None:
            proc.kill()
    assert time.monotonic() - t0 < 30, "waited for the 120 s sleep"
    assert proc.returncode == code, out
    assert "Traceback" not in out and "run the same command again" in out
    # The case's whole process group is gone: the script and its child.
    assert gone(int((logs / "script.pid").read_text())) and gone(int((logs / "child.pid").read_text()))
    rec = record(root, "slow")
    assert rec["status"] == "interrupted" and signal.Signals(sig).name in rec["message"]
    assert [s["status"] for s in rec["stages"]] == ["ok", "interrupted", "not-run"]
    assert not (logs / "solve.done").exists()
    summ = json.loads((root / records.SUMMARY_NAME).read_text())
    assert summ["counts"] == {"interrupted": 1, "not-run": 1}
    assert not list(root.glob(".*.tmp")) and not list(logs.parent.glob(".*.tmp"))  # atomic writes left no temp
    assert calls(root, "later") == []  # no new case started after the signal
    # Running again resumes: the stopped stage runs again, the finished one does not.
    make_case(root, "slow")
    res = subprocess.run([sys.executable, "-m", "caseprep.cli", "run", str(root), "--skip-solver-check", "-j", "1"],
                         capture_output=True, text=True, timeout=120)
    assert res.returncode == 0, res.stdout + res.stderr
    assert calls(root, "slow") == ["mesh", "solve", "solve", "export"] and calls(root, "later") == [
        "mesh", "solve", "export"]
    assert record(root, "slow")["status"] == "ok"


def test_grace_then_sigkill_and_no_stale_ok(tmp_path):
    """A case that ignores SIGTERM is killed after the grace period; a case
    that was `ok` and is being re-run never keeps saying `ok`."""
    root = tmp_path / "s"
    write_manifest_only(root, ["stubborn"])
    make_case(root, "stubborn")
    res = subprocess.run([sys.executable, "-m", "caseprep.cli", "run", str(root), "--skip-solver-check"],
                         capture_output=True, text=True, timeout=120)
    assert res.returncode == 0 and record(root, "stubborn")["status"] == "ok"
    make_case(root, "stubborn", sleep=120, ignore_term=True)
    logs = root / "cases" / "stubborn" / "logs"
    (logs / "child.pid").unlink()
    proc = start_run(root, "--force", "--stage", "solve", "--grace", "2")
    try:
        wait_for(logs / "child.pid")
        assert record(root, "stubborn")["status"] == "running"  # not the old ok
        t0 = time.monotonic()
        proc.send_signal(signal.SIGTERM)
        out, _ = proc.communicate(timeout=60)
        dt = time.monotonic() - t0
    finally:
        if proc.poll() is None:
            proc.kill()
    assert proc.returncode == 143, out
    assert 1.5 < dt < 20, dt  # waited the 2 s grace, then SIGKILL
    assert gone(int((logs / "script.pid").read_text())) and gone(int((logs / "child.pid").read_text()))
    rec = record(root, "stubborn")
    assert rec["status"] == "interrupted"
    assert [s["status"] for s in rec["stages"]] == ["done-before", "interrupted", "not-run"]


def test_second_signal_skips_the_grace(tmp_path):
    root = tmp_path / "s"
    write_manifest_only(root, ["stubborn"])
    make_case(root, "stubborn", sleep=120, ignore_term=True)
    logs = root / "cases" / "stubborn" / "logs"
    proc = start_run(root, "--grace", "60")
    try:
        wait_for(logs / "child.pid")
        t0 = time.monotonic()
        proc.send_signal(signal.SIGINT)
        time.sleep(1.0)
        proc.send_signal(signal.SIGINT)
        out, _ = proc.communicate(timeout=60)
    finally:
        if proc.poll() is None:
            proc.kill()
    assert proc.returncode == 130, out
    assert time.monotonic() - t0 < 20  # not the 60 s grace
    assert gone(int((logs / "child.pid").read_text()))
    assert record(root, "stubborn")["status"] == "interrupted"


def test_scheduler_signals_every_process_at_once(tmp_path):
    """A batch scheduler's cancel sends SIGTERM to every process of the job:
    the case's processes may end before the runner's own handler runs. The
    case is still recorded interrupted, not failed."""
    root = tmp_path / "s"
    write_manifest_only(root, ["slow"])
    make_case(root, "slow", sleep=120)
    logs = root / "cases" / "slow" / "logs"
    proc = start_run(root)
    try:
        wait_for(logs / "child.pid")
        for pid in (int((logs / "child.pid").read_text()), int((logs / "script.pid").read_text())):
            os.kill(pid, signal.SIGTERM)  # the case's processes first
        time.sleep(0.3)
        proc.send_signal(signal.SIGTERM)  # then the runner
        out, _ = proc.communicate(timeout=60)
    finally:
        if proc.poll() is None:
            proc.kill()
    assert proc.returncode == 143, out
    rec = record(root, "slow")
    assert rec["status"] == "interrupted" and "SIGTERM" in rec["message"], rec["message"]
