"""The SLURM job chain on a real SLURM (single node, `tools/slurm-up.sh`):
submit.sh submits the solver array, the post-processing shards and the merge
and report job of a small real sweep, and the tables equal those of a local
`caseprep run` + `postproc sweep` of the same sweep; a running task is
cancelled with scancel and the chain resubmitted, and nothing is lost or
duplicated.

The cases are smoke-sized cases around the demo body (tests/uf_specs.py),
serial, written by the caseprep writer with small memory requests so that
they fit any test node.
"""
from __future__ import annotations

import csv
import io
import json
import os
import shutil
import subprocess
import sys
import time
from pathlib import Path

import pytest

from caseprep.casefiles.writer import write_sweep
from caseprep.contract.records import read_case_record
from caseprep.planning.batch import BatchSettings

sys.path.insert(0, str(Path(__file__).parent))
from uf_specs import make_spec, write_body_stl  # noqa: E402

pytestmark = [pytest.mark.slurm, pytest.mark.solver]

BIN = Path(sys.executable).parent  # caseprep and postproc of this environment
BATCH = BatchSettings(cores_per_case=1, memory_per_core="300M", case_time="00:20:00", postproc_shards=2,
                      postproc_memory="1G", postproc_time="00:10:00", report_memory="1G", report_time="00:10:00")


def _sweep(tmp_path: Path, name: str, iterations: int) -> Path:
    src = tmp_path / "src"
    if not src.is_dir():
        src.mkdir()
        write_body_stl(src / "body.stl")
        (src / "sweep.toml").write_text("# test sweep\n")
    root = tmp_path / name
    specs = [make_spec("sl-a", n_iterations=iterations), make_spec("sl-b", beta_deg=3.0, n_iterations=iterations)]
    write_sweep(specs, root, src / "sweep.toml", study="slurm-test", batch=BATCH)
    return root


def _env() -> dict[str, str]:
    # the jobs inherit the submitting environment: this environment's commands first on PATH
    return dict(os.environ, PATH=f"{BIN}:{os.environ.get('PATH', '/usr/bin:/bin')}")


def _submit(root: Path) -> dict[str, str]:
    """Job ids (``solve``, ``post``, ``merge``) and the submitted commands (``commands``)."""
    r = subprocess.run(["./submit.sh"], cwd=root, env=_env(), capture_output=True, text=True, timeout=120)
    assert r.returncode == 0, r.stdout + r.stderr
    last = (root / "submitted-jobs.txt").read_text().splitlines()[-1]
    return {**dict(kv.split("=", 1) for kv in last.split()[1:]), "commands": r.stderr}


def _job_states(job: str) -> list[str]:
    r = subprocess.run(["scontrol", "show", "job", "-o", job], capture_output=True, text=True)
    return [f.split("=", 1)[1] for line in r.stdout.splitlines() for f in line.split() if f.startswith("JobState=")]


def _wait(jobs: list[str], timeout: float = 1500.0) -> None:
    t0 = time.monotonic()
    while True:
        r = subprocess.run(["squeue", "-h", "-o", "%i %T", "-j", ",".join(jobs)], capture_output=True, text=True)
        if r.returncode == 0 and not r.stdout.strip():
            return
        if time.monotonic() - t0 > timeout:
            subprocess.run(["scancel", *jobs])
            raise AssertionError(f"jobs {jobs} still queued after {timeout} s:\n{r.stdout}")
        time.sleep(2.0)


def _rows(path: Path) -> dict[str, dict[str, str]]:
    return {r["case_id"]: r for r in csv.DictReader(io.StringIO(path.read_text()))}


def _local(root: Path) -> Path:
    """The same sweep run and post-processed here, without SLURM."""
    env = _env()
    r = subprocess.run([str(BIN / "caseprep"), "run", str(root), "-q"], env=env, capture_output=True, text=True)
    assert r.returncode == 0, r.stdout[-3000:]
    r = subprocess.run([str(BIN / "postproc"), "sweep", str(root), "-q"], env=env, capture_output=True, text=True)
    assert r.returncode == 0, r.stdout + r.stderr
    return root / "results.csv"


def test_chain_equals_a_local_run(tmp_path):
    root = _sweep(tmp_path, "cluster", 12)
    local = _sweep(tmp_path, "local", 12)
    jobs = _submit(root)
    assert jobs["solve"] != "none"
    ref = _local(local)  # meanwhile, here
    _wait([jobs["solve"], jobs["post"], jobs["merge"]])
    assert set(_job_states(jobs["solve"])) == {"COMPLETED"}, _job_states(jobs["solve"])
    assert set(_job_states(jobs["post"])) == {"COMPLETED"} and _job_states(jobs["merge"]) == ["COMPLETED"]
    # every case ran through the runner in its task (records with the node's host name)
    for cid in ("sl-a", "sl-b"):
        rec = read_case_record(root / "cases" / cid)
        assert rec is not None and rec.status == "ok" and rec.host
    for i in (1, 2):
        state = json.loads((root / "shards" / f"{i}-of-2.json").read_text())
        assert state["state"] == "done"
    # the same solver runs and the same post-processing: identical tables
    got, want = _rows(root / "results.csv"), _rows(ref)
    assert list(got) == list(want) == ["sl-a", "sl-b"]
    for cid in want:
        assert got[cid] == want[cid], cid
    assert (root / "report.html").is_file() and "Caution" in (root / "report.html").read_text()


def test_cancelled_task_resubmitted_loses_and_duplicates_nothing(tmp_path):
    root = _sweep(tmp_path, "cluster", 150)
    ids = (root / "cases.txt").read_text().split()
    jobs = _submit(root)
    # cancel task 1 while its solver runs (its record says so)
    t0 = time.monotonic()
    while True:
        rec = read_case_record(root / "cases" / ids[0])
        if rec is not None and rec.status == "running" and "solve" in rec.message:
            break
        if time.monotonic() - t0 > 900:
            subprocess.run(["scancel", jobs["solve"], jobs["post"], jobs["merge"]])
            raise AssertionError("the first case never reached its solve stage")
        time.sleep(0.5)
    time.sleep(3.0)
    subprocess.run(["scancel", f"{jobs['solve']}_1"], check=True)
    _wait([jobs["solve"], jobs["post"], jobs["merge"]])
    # SLURM's SIGTERM reached the runner: the case is recorded interrupted, not a stale ok
    rec = read_case_record(root / "cases" / ids[0])
    assert rec.status == "interrupted" and "SIGTERM" in rec.message, rec
    assert not (root / "cases" / ids[0] / "logs" / "solve.done").exists()
    # the rest of the chain ran (afterany): the other case is complete, the cancelled one flagged
    first = _rows(root / "results.csv")
    assert "interrupted" in first[ids[0]]["flags"] and not first[ids[1]]["flags"].count("interrupted")
    # resubmitted: only the cancelled case runs again; the other's stored result is reused
    again = _submit(root)
    assert again["solve"] != "none"
    assert "--array=1 slurm_array.sh" in again["commands"]  # only the cancelled case
    _wait([again["solve"], again["post"], again["merge"]])
    assert set(_job_states(again["solve"])) == {"COMPLETED"} and _job_states(again["merge"]) == ["COMPLETED"]
    rows = _rows(root / "results.csv")
    assert list(rows) == ids  # every case once
    for cid in ids:
        assert rows[cid]["status"] == "ok" and "interrupted" not in rows[cid]["flags"], rows[cid]
        assert len(list((root / "cases" / cid / "VTK").glob("*.vtm"))) == 1  # one export
    calls = [json.loads((root / "shards" / f"{i}-of-2.json").read_text())["cases"] for i in (1, 2)]
    merged = {k: v for c in calls for k, v in c.items()}
    assert merged[ids[0]] == "computed" and merged[ids[1]] == "reused"
    # the case's second solve started from scratch and ran to its end: its log is a whole run
    log = (root / "cases" / ids[0] / "logs" / "simpleFoam.log").read_text()
    assert log.count("Starting time loop") == 1 and log.rstrip().endswith("End")
