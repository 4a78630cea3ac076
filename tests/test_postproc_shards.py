"""Parallel, sharded, resumable sweep post-processing: shard arithmetic and
bad input, per-case results reused while their inputs are unchanged and
recomputed when stale or corrupt, merges with gaps, a merge of another
sweep's folder, two merges at once, stop signals; and on tiny real solver
cases: `-j 2` and shards + merge give the tables of a serial run, and each
case's surfaces are read once.
"""
from __future__ import annotations

import json
import math
import multiprocessing
import os
import shutil
import signal
import sys
import threading
import time
from pathlib import Path

import pytest
from click.testing import CliRunner

from caseprep.contract.errors import UserError
from caseprep.contract.locking import sweep_lock
from caseprep.contract.manifest import read_manifest
from caseprep.contract.signals import StopRequested
from postproc.cli import main as postproc_main
from postproc.pipelines import caseresults as cr
from postproc.pipelines import shards as sh
from postproc.pipelines.sweep import SweepOptions, merge_results, postprocess_shard, postprocess_sweep

sys.path.insert(0, str(Path(__file__).parent))
from tiny_case import write_manifest_only  # noqa: E402


# ----------------------------------------------------------------------------- shards

@pytest.mark.parametrize("text", ["3/2", "0/0", "0/2", "1/0", "a/b", "2", "-1/2", "1/2/3", ""])
def test_bad_shards_are_user_errors(text):
    if text == "":
        assert sh.parse_shard(text) == sh.ALL
        return
    with pytest.raises(UserError, match=r"expected a shard I/N.*--shard"):
        sh.parse_shard(text)


def test_bad_shard_on_the_command_line(tmp_path):
    root = write_manifest_only(tmp_path / "sw", ["a", "b"])
    for bad in ("3/2", "0/0"):
        r = CliRunner().invoke(postproc_main, ["sweep", str(root), "--shard", bad])
        assert r.exit_code == 2 and f"got '{bad}'" in r.output and "Traceback" not in r.output


def test_shards_split_every_case_once():
    items = [f"c{k}" for k in range(11)]
    for n in (1, 2, 3, 4, 11, 12):
        parts = [sh.Shard(i, n).select(items) for i in range(1, n + 1)]
        assert sorted(x for p in parts for x in p) == sorted(items)  # each case in exactly one shard
        assert max(map(len, parts)) - min(map(len, parts)) <= 1  # nearly equal parts
        for k, x in enumerate(items):
            assert x in sh.Shard.of_position(k, n).select(items)


# ----------------------------------------------------------------------------- reuse

def _ids(n):
    return [f"case{k:02d}" for k in range(n)]


def test_reuse_stale_and_corrupt(tmp_path):
    root = write_manifest_only(tmp_path / "sw", _ids(4))
    first = postprocess_shard(root)
    assert first.computed == tuple(_ids(4)) and first.reused == ()
    assert all(first.reasons[c] == "missing" for c in _ids(4))
    again = postprocess_shard(root)
    assert again.computed == () and again.reused == tuple(_ids(4))  # nothing changed: nothing recomputed
    # a changed input (the run record appears) makes that case stale
    rec = root / "cases" / "case01" / "underfloor-run.json"
    rec.write_text(json.dumps({"case_id": "case01", "folder": "cases/case01", "status": "interrupted"}))
    # a corrupt result: one flipped character keeps valid JSON but breaks the checksum
    p = cr.result_path(root, "case02")
    p.write_text(p.read_text().replace('"not-run"', '"ok-run"', 1))
    # a truncated result
    q = cr.result_path(root, "case03")
    q.write_bytes(q.read_bytes()[:40])
    third = postprocess_shard(root)
    assert set(third.computed) == {"case01", "case02", "case03"} and third.reused == ("case00",)
    assert third.reasons["case01"].startswith("stale: inputs changed: underfloor-run.json")
    assert third.reasons["case02"] == "corrupt: checksum does not match the content"
    assert third.reasons["case03"].startswith("corrupt: expected") and "JSON" in third.reasons["case03"]
    assert third.outcomes["case01"].result.flags == ("interrupted",)  # recomputed from the new record
    assert cr.read_case_result(root, "case02", "test").usable  # rewritten whole
    # --recompute ignores what is stored
    assert postprocess_shard(root, SweepOptions(recompute=True)).computed == tuple(_ids(4))


def test_result_of_another_case_or_study_is_not_trusted(tmp_path):
    root = write_manifest_only(tmp_path / "sw", ["a", "b"])
    postprocess_shard(root)
    shutil.copy(cr.result_path(root, "a"), cr.result_path(root, "b"))
    d = json.loads(cr.result_path(root, "a").read_text())
    d["study"] = "other"
    cr.result_path(root, "a").write_text(json.dumps(d))
    fp_a = cr.fingerprint(root / "cases" / "a", read_manifest(root).case("a"))
    assert cr.read_case_result(root, "a", "test", fp_a).why.startswith("corrupt")  # edited: checksum fails
    assert cr.read_case_result(root, "b", "test").why == "other case: 'a'"
    run = postprocess_shard(root)
    assert set(run.computed) == {"a", "b"}


# ----------------------------------------------------------------------------- merge

def test_shards_then_merge_equals_one_run(tmp_path):
    root = write_manifest_only(tmp_path / "sw", _ids(5))
    whole = postprocess_sweep(root, SweepOptions(out_dir=tmp_path / "whole"))
    for i in (1, 2, 3):
        run = postprocess_shard(root, SweepOptions(out_dir=tmp_path / "parts", shard=sh.Shard(i, 3)))
        assert list(run.outcomes) == sh.Shard(i, 3).select(_ids(5))
    assert not (tmp_path / "parts" / "results.csv").exists()  # shards write no tables
    analysis, gap = merge_results(root, SweepOptions(out_dir=tmp_path / "parts"))
    assert gap is None
    assert (tmp_path / "parts" / "results.csv").read_text() == (tmp_path / "whole" / "results.csv").read_text()
    states = json.loads((tmp_path / "parts" / "shards" / "2-of-3.json").read_text())
    assert states["state"] == "done" and states["cases"] == {"case01": "computed", "case04": "computed"}


def test_merge_with_missing_shards_names_them_and_writes_the_rest(tmp_path):
    root = write_manifest_only(tmp_path / "sw", _ids(6))
    postprocess_shard(root, SweepOptions(shard=sh.Shard(1, 3)))
    postprocess_shard(root, SweepOptions(shard=sh.Shard(3, 3)))
    r = CliRunner().invoke(postproc_main, ["merge", str(root), "--shards", "3"])
    assert r.exit_code == 1, r.output
    assert "shard(s) 2/3 missing" in r.output and "case01 (missing)" in r.output and "case04" in r.output
    rows = json.loads((root / "results.json").read_text())["cases"]
    assert [x["case_id"] for x in rows] == _ids(6)  # every case listed, once
    missing = {x["case_id"] for x in rows if "results-missing" in x["flags"]}
    assert missing == {"case01", "case04"}
    assert "results-missing" in json.loads((root / "results.json").read_text())["flags"]
    assert "results-missing" in (root / "report.html").read_text()
    # the missing shard runs, the merge completes (replacing the tables needs --force)
    postprocess_shard(root, SweepOptions(shard=sh.Shard(2, 3)))
    r = CliRunner().invoke(postproc_main, ["merge", str(root)])
    assert r.exit_code == 2 and "--force" in r.output
    r = CliRunner().invoke(postproc_main, ["merge", str(root), "--force"])
    assert r.exit_code == 0, r.output
    rows = json.loads((root / "results.json").read_text())["cases"]
    assert not any("results-missing" in x["flags"] for x in rows)


def test_merge_refuses_another_sweeps_folder(tmp_path):
    a = write_manifest_only(tmp_path / "a", ["x", "y"])
    b = write_manifest_only(tmp_path / "b", ["x", "y"])
    m = json.loads((b / "manifest.json").read_text())
    m["study"] = "another study"
    (b / "manifest.json").write_text(json.dumps(m))
    postprocess_shard(b, SweepOptions(out_dir=tmp_path / "out", shard=sh.Shard(1, 2)))
    r = CliRunner().invoke(postproc_main, ["merge", str(a), "-o", str(tmp_path / "out")])
    assert r.exit_code == 2 and "another study" in r.output and "1-of-2.json" in r.output
    assert not (tmp_path / "out" / "results.csv").exists()


def test_merge_ignores_state_of_an_earlier_manifest(tmp_path):
    root = write_manifest_only(tmp_path / "sw", ["a", "b"])
    postprocess_shard(root, SweepOptions(shard=sh.Shard(1, 2)))
    postprocess_shard(root, SweepOptions(shard=sh.Shard(2, 2)))
    write_manifest_only(root, ["a", "b", "c"])  # a case added
    analysis, gap = merge_results(root)
    assert gap is not None and list(gap.cases) == ["c"]
    assert any("earlier manifest" in n for n in analysis.notes)


def test_two_merges_at_once_never_tear_the_tables(tmp_path):
    root = write_manifest_only(tmp_path / "sw", _ids(30))
    postprocess_shard(root)
    errors = []

    def merge():
        try:
            merge_results(root, SweepOptions(force=True))
        except Exception as exc:  # noqa: BLE001 - reported below
            errors.append(exc)

    threads = [threading.Thread(target=merge) for _ in range(4)]
    # another command holds the folder first: every merge has to wait its turn
    with sweep_lock(root, "a test holder"):
        for t in threads:
            t.start()
        time.sleep(0.5)
        assert not (root / "results.csv").exists()
    for t in threads:
        t.join(120)
    assert not errors, errors
    rows = json.loads((root / "results.json").read_text())["cases"]
    assert len(rows) == 30 and (root / "results.csv").read_text().count("\n") == 31
    assert not list(root.glob(".*.tmp"))
    # a merge that cannot get the lock in time stops with a clear error naming the holder
    with sweep_lock(root, "a test holder"):
        with pytest.raises(UserError, match="in use by another underfloor command.*a test holder"):
            merge_results(root, SweepOptions(force=True, wait=0.3))


# ----------------------------------------------------------------------------- stop signals

def _sleep_and_square(x):
    time.sleep(0.3)
    return x * x


def _slow_forever(x):
    time.sleep(300)
    return x


def test_workers_stop_on_sigterm():
    seen = []

    def on_result(k, v):
        seen.append(v)
        os.kill(os.getpid(), signal.SIGTERM)

    t0 = time.monotonic()
    with pytest.raises(StopRequested) as exc:
        sh.run_cases(_sleep_and_square, list(range(40)), 2, on_result)
    assert exc.value.exit_code == 143 and 1 <= len(seen) <= 2
    assert time.monotonic() - t0 < 10  # did not run the 40 items
    # workers that never finish their item are ended too (SIGTERM)
    box = {}

    def fire():
        time.sleep(1.0)
        box["t"] = time.monotonic()
        os.kill(os.getpid(), signal.SIGINT)

    threading.Thread(target=fire, daemon=True).start()
    with pytest.raises(StopRequested) as exc:
        sh.run_cases(_slow_forever, [1, 2, 3], 2, lambda k, v: None)
    assert exc.value.exit_code == 130 and time.monotonic() - box["t"] < 5
    assert not [c for c in multiprocessing.active_children() if c.is_alive()]


@pytest.mark.parametrize("jobs", [1, 2])
def test_stopped_shard_records_interrupted_and_resumes(tmp_path, jobs):
    root = write_manifest_only(tmp_path / "sw", _ids(12))

    def progress(ev):
        if ev.done == 2:
            os.kill(os.getpid(), signal.SIGTERM)

    with pytest.raises(StopRequested):
        postprocess_shard(root, SweepOptions(jobs=jobs), progress=progress)
    state = json.loads((root / "shards" / "1-of-1.json").read_text())
    assert state["state"] == "interrupted"
    done = [k for k, v in state["cases"].items() if v == "computed"]
    assert len(done) >= 2 and state["counts"]["interrupted"] == 12 - len(done)
    assert all(cr.read_case_result(root, k, "test").usable for k in done)
    assert not (root / "results.csv").exists()
    again = postprocess_shard(root, SweepOptions(jobs=jobs))
    assert set(again.reused) == set(done) and len(again.computed) == 12 - len(done)


def test_cli_stop_exit_code(tmp_path, monkeypatch):
    import postproc.pipelines.sweep as sw

    root = write_manifest_only(tmp_path / "sw", _ids(3))
    real = sw.process_case

    def stop_after_first(manifest, case, *args):
        if case.case_id == "case01":
            os.kill(os.getpid(), signal.SIGTERM)
        return real(manifest, case, *args)

    monkeypatch.setattr(sw, "process_case", stop_after_first)
    r = CliRunner().invoke(postproc_main, ["sweep", str(root), "-q"])
    assert r.exit_code == 143 and "run the same command again" in r.output.lower() + r.stderr.lower()
    assert not (root / "results.csv").exists()


# ----------------------------------------------------------------------------- real cases

@pytest.fixture(scope="module")
def smoke_sweep(tmp_path_factory):
    """Two real smoke-sized cases around the demo body (k-ω SST: the export
    carries wall shear and y+), 12 iterations, run serially side by side."""
    from caseprep.casefiles.writer import write_sweep
    from caseprep.run import runner
    from uf_specs import make_spec, write_body_stl

    base = tmp_path_factory.mktemp("smoke")
    src = base / "src"
    src.mkdir()
    write_body_stl(src / "body.stl")
    (src / "sweep.toml").write_text("# test sweep\n")
    root = base / "sw"
    write_sweep([make_spec("pp-a", n_iterations=12), make_spec("pp-b", beta_deg=3.0, n_iterations=12)], root,
                src / "sweep.toml")
    recs = runner.run_sweep(root, jobs=2, ranks=1)
    assert all(r.status == "ok" for r in recs), [r.message for r in recs]
    return root


@pytest.mark.solver
def test_parallel_and_sharded_equal_serial_on_real_cases(smoke_sweep, tmp_path, monkeypatch):
    import postproc.pipelines.case_forces as case_forces
    import postproc.pipelines.sweep_case as sweep_mod

    reads = []
    real = sweep_mod.read_surface

    def counting(path, *a, **k):  # every read of a case's surfaces, by the sweep or by the forces report
        reads.append(Path(path).parent.parent.name)
        return real(path, *a, **k)

    monkeypatch.setattr(sweep_mod, "read_surface", counting)
    monkeypatch.setattr(case_forces, "read_surface", counting)
    serial = postprocess_sweep(smoke_sweep, SweepOptions(out_dir=tmp_path / "serial"))
    # each case's body surface read once (forces and y+ from the same read)
    assert sorted(reads) == ["pp-a", "pp-b"]
    assert all(math.isfinite(o.result.cl) and o.yplus for o in serial.outcomes)
    postprocess_sweep(smoke_sweep, SweepOptions(out_dir=tmp_path / "par", jobs=2))
    for i in (1, 2):
        postprocess_shard(smoke_sweep, SweepOptions(out_dir=tmp_path / "shards", shard=sh.Shard(i, 2), jobs=2))
    merge_results(smoke_sweep, SweepOptions(out_dir=tmp_path / "shards"))
    ref = (tmp_path / "serial" / "results.csv").read_text()
    # the same floating-point operations on the same data: identical tables
    assert (tmp_path / "par" / "results.csv").read_text() == ref
    assert (tmp_path / "shards" / "results.csv").read_text() == ref
    ok = json.loads(cr.result_path(tmp_path / "par", "pp-a").read_text())
    (serial_a,) = [o for o in serial.outcomes if o.result.case_id == "pp-a"]
    # the stored result holds the same row and the same forces report as the serial run
    assert ok["result"]["cd"] == pytest.approx(serial_a.result.cd, rel=0, abs=0)
    assert ok["forces"]["coefficients"]["drag"] == pytest.approx(serial_a.forces_dict()["coefficients"]["drag"], rel=0, abs=0)
    # touching an export file makes only that case stale
    vtm = next((smoke_sweep / "cases" / "pp-a" / "VTK").glob("*.vtm"))
    os.utime(vtm, ns=(time.time_ns(), time.time_ns()))
    run = postprocess_shard(smoke_sweep, SweepOptions(out_dir=tmp_path / "par"))
    assert run.computed == ("pp-a",) and run.reused == ("pp-b",)
    assert run.reasons["pp-a"].startswith("stale: inputs changed: VTK/")
