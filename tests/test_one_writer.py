"""One writer at a time; the manifest lists exactly the case folders present.

`caseprep write`, `caseprep run` and `postproc sweep` hold an advisory lock
on the sweep folder; a second command waits briefly, then refuses naming the
holder. A write killed midway (kill -9) leaves a journal: the readers refuse
until the write is run again, and the next write completes it, so that the
manifest and cases.txt list exactly the case folders present and no
temporary folder stays behind.
"""
from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest
from click.testing import CliRunner

from caseprep.cli import main as caseprep_main
from caseprep.contract import locking
from planning_helpers import BASE_TOML, write_config
from postproc.cli import main as postproc_main

TESTS = Path(__file__).resolve().parent


def _env():
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join([str(TESTS), str(TESTS.parent)] + [env.get("PYTHONPATH", "")])
    return env


def _cli(main, *args):
    r = CliRunner().invoke(main, [str(a) for a in args])
    if r.exception is not None and not isinstance(r.exception, SystemExit):
        raise r.exception
    return r


def assert_consistent(out: Path) -> list[str]:
    """The manifest, cases.txt and the case folders present agree; no temporary folder is left."""
    ids = [c["case_id"] for c in json.loads((out / "manifest.json").read_text())["cases"]]
    folders = sorted(p.name for p in (out / "cases").iterdir())
    assert sorted(ids) == folders, (ids, folders)
    assert (out / "cases.txt").read_text().split() == ids
    assert not (out / locking.JOURNAL_NAME).exists()
    return ids


def _hold_lock(folder: Path, seconds: float) -> subprocess.Popen:
    """A separate process holding the sweep's lock for ``seconds``."""
    code = ("import sys, time\nfrom caseprep.contract.locking import sweep_lock\n"
            f"with sweep_lock({str(folder)!r}, 'test holder'):\n"
            "    print('held', flush=True)\n"
            f"    time.sleep({seconds})\n")
    p = subprocess.Popen([sys.executable, "-c", code], stdout=subprocess.PIPE, text=True, env=_env())
    assert p.stdout.readline().strip() == "held"
    return p


def _sweep(tmp_path: Path, text: str = BASE_TOML, name: str = "sweep.toml") -> tuple[Path, Path]:
    cfg = tmp_path / name
    if not (tmp_path / "car.stl").exists():
        write_config(tmp_path, text)
        if name != "sweep.toml":
            (tmp_path / "sweep.toml").rename(cfg)
    cfg.write_text(text)
    return cfg, tmp_path / "out"


@pytest.fixture
def short_wait(monkeypatch):
    monkeypatch.setattr(locking, "WAIT_SECONDS", 0.5)


def test_second_command_refuses_naming_the_holder(tmp_path, short_wait):
    cfg, out = _sweep(tmp_path)
    assert _cli(caseprep_main, "write", cfg, "-o", out).exit_code == 0
    holder = _hold_lock(out, 30)
    try:
        for main, args in ((caseprep_main, ["write", cfg, "-o", out]),
                           (caseprep_main, ["run", out, "--skip-solver-check"]),
                           (postproc_main, ["sweep", out, "-q"])):
            t0 = time.monotonic()
            r = _cli(main, *args)
            assert r.exit_code == 2, r.output
            assert f"pid {holder.pid}" in r.output and "test holder" in r.output and "in use" in r.output, r.output
            assert 0.4 < time.monotonic() - t0 < 10
    finally:
        holder.kill()
        holder.wait()
    # the holder is gone (even by kill -9): the lock is free again
    assert _cli(postproc_main, "sweep", out, "-q").exit_code == 0


def test_second_command_waits_for_a_short_holder(tmp_path, monkeypatch):
    monkeypatch.setattr(locking, "WAIT_SECONDS", 20.0)
    cfg, out = _sweep(tmp_path)
    out.mkdir()
    holder = _hold_lock(out, 0.5)
    r = _cli(caseprep_main, "write", cfg, "-o", out)
    holder.wait()
    assert r.exit_code == 0, r.output
    assert_consistent(out)


def test_concurrent_writes_of_two_configs_lose_no_record(tmp_path):
    cfg_a, out = _sweep(tmp_path)
    cfg_b = tmp_path / "b.toml"
    cfg_b.write_text(BASE_TOML.replace("ride_height = [0.05]", "ride_height = [0.06, 0.07]"))
    procs = [subprocess.Popen([sys.executable, "-m", "caseprep.cli", "write", str(c), "-o", str(out)],
                              stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True, env=_env())
             for c in (cfg_a, cfg_b)]
    outs = [p.communicate(timeout=300)[0] for p in procs]
    codes = [p.returncode for p in procs]
    for code, text in zip(codes, outs):
        assert "Traceback" not in text and code in (0, 2), text
        if code == 2:
            assert "in use by another underfloor command" in text and "pid" in text, text
    ids = assert_consistent(out)
    assert len(ids) == (1 if codes[0] == 0 else 0) + (2 if codes[1] == 0 else 0)  # every written case listed


def test_same_config_twice_at_once_never_crashes(tmp_path):
    cfg, out = _sweep(tmp_path)
    for extra in ([], ["--force"]):
        procs = [subprocess.Popen([sys.executable, "-m", "caseprep.cli", "write", str(cfg), "-o", str(out), *extra],
                                  stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True, env=_env())
                 for _ in range(2)]
        for p in procs:
            text = p.communicate(timeout=300)[0]
            assert "Traceback" not in text and p.returncode in (0, 2), text
        assert_consistent(out)


#: a `caseprep write` that places its cases one at a time and stops forever
#: before the case number ``n`` (so a test can kill it there)
KILLABLE = """
import sys, time
from pathlib import Path
from concurrent.futures import ThreadPoolExecutor
import caseprep.casefiles.writer as w
from caseprep.cli import main
w.ThreadPoolExecutor = lambda max_workers: ThreadPoolExecutor(1)
place, calls = w._place_case, []
def slow(*a, **k):
    calls.append(a[1])
    if len(calls) == {n}:
        Path({marker!r}).write_text("stopped")
        time.sleep(600)
    return place(*a, **k)
w._place_case = slow
sys.exit(main(sys.argv[1:]))
"""


def _killed_write(cfg: Path, out: Path, n: int, *extra: str) -> int:
    marker = cfg.parent / f"stopped-{n}"
    p = subprocess.Popen([sys.executable, "-c", KILLABLE.format(n=n, marker=str(marker)), "write", str(cfg),
                          "-o", str(out), *extra], stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True,
                         env=_env())
    t0 = time.monotonic()
    while not marker.exists():
        assert p.poll() is None, p.stdout.read()
        assert time.monotonic() - t0 < 300
        time.sleep(0.05)
    p.send_signal(signal.SIGKILL)
    p.wait()
    marker.unlink()
    return p.pid


def test_killed_write_is_refused_by_readers_and_completed_by_the_next_write(tmp_path):
    cfg, out = _sweep(tmp_path, BASE_TOML.replace("ride_height = [0.05]", "ride_height = [0.05, 0.06, 0.07]"))
    pid = _killed_write(cfg, out, 3)  # two cases placed, the manifest not yet written
    assert (out / locking.JOURNAL_NAME).exists() and len(list((out / "cases").iterdir())) == 2
    for main, args in ((postproc_main, ["sweep", out, "-q"]), (caseprep_main, ["run", out, "--skip-solver-check"])):
        r = _cli(main, *args)
        assert r.exit_code == 2 and f"pid {pid}" in r.output and "interrupted" in r.output, r.output
        assert f"caseprep write {cfg} -o {out}" in r.output
    r = _cli(caseprep_main, "write", cfg, "-o", out)
    assert r.exit_code == 0 and "completed the manifest of an interrupted write" in r.output, r.output
    assert "1 new" in r.output and "2 unchanged" in r.output
    assert len(assert_consistent(out)) == 3


def _nu(case: Path) -> float:
    import re

    text = (case / "constant" / "transportProperties").read_text()
    return float(re.search(r"\bnu\s+(?:\[[^\]]*\]\s*)?([0-9.eE+-]+)\s*;", text).group(1))


def test_killed_force_keeps_each_record_with_its_folder(tmp_path):
    text = BASE_TOML.replace("ride_height = [0.05]", "ride_height = [0.05, 0.06]")
    cfg, out = _sweep(tmp_path, text)
    assert _cli(caseprep_main, "write", cfg, "-o", out).exit_code == 0
    cfg.write_text(text.replace("[air]\n", "[air]\ntemperature = 310.0\n"))  # same cases, new air: new files and records
    _killed_write(cfg, out, 2, "--force")  # the first case replaced, the second not
    # a write of another config into the folder settles the interrupted one first
    other = tmp_path / "other.toml"
    other.write_text(text.replace("ride_height = [0.05, 0.06]", "ride_height = [0.08]"))
    r = _cli(caseprep_main, "write", other, "-o", out)
    assert r.exit_code == 0 and "completed the manifest" in r.output, r.output
    ids = assert_consistent(out)
    records = {c["case_id"]: c for c in json.loads((out / "manifest.json").read_text())["cases"]}
    nus = {cid: _nu(out / "cases" / cid) for cid in ids}
    assert len(set(nus.values())) == 2  # one case holds the new air, the others the old
    for cid in ids:  # each record describes what its folder holds (ν written to 6 significant digits)
        assert records[cid]["reference"]["nu"] == pytest.approx(nus[cid], rel=1e-5)


def test_leftover_temporary_folders_are_cleaned_or_restored(tmp_path):
    cfg, out = _sweep(tmp_path, BASE_TOML.replace("ride_height = [0.05]", "ride_height = [0.05, 0.06]"))
    assert _cli(caseprep_main, "write", cfg, "-o", out).exit_code == 0
    a, b = sorted(p.name for p in (out / "cases").iterdir())
    (out / "cases" / f".uf-new-{a}-x1y2").mkdir()  # a half-assembled case
    (out / "cases" / f".uf-new-{a}-x1y2" / "junk").write_text("half")
    aside = out / "cases" / f".uf-old-{b}-z9"  # a case moved aside whose replacement never arrived
    aside.mkdir()
    os.rename(out / "cases" / b, aside / "case")
    r = _cli(caseprep_main, "write", cfg, "-o", out)
    assert r.exit_code == 0, r.output
    assert f"restored cases/{b}" in r.output and f"removed cases/.uf-new-{a}-x1y2" in r.output
    assert "2 unchanged" in r.output
    assert_consistent(out)


def test_unlisted_folders_are_named(tmp_path):
    cfg, out = _sweep(tmp_path)
    assert _cli(caseprep_main, "write", cfg, "-o", out).exit_code == 0
    (out / "cases" / "stray").mkdir()
    r = _cli(caseprep_main, "write", cfg, "-o", out)
    assert r.exit_code == 0 and "stray" in r.output and "not listed" in r.output, r.output
