"""The hostile corpus (tests/hostile/corpus.py) through the commands.

For every input: the expected exit code and message fragment, no traceback,
no native abort, no write outside the output folder, no hang (a per-input
timeout). Configs, geometries and names also go through ``caseprep write``,
which must agree with ``caseprep check``: ``check`` passes exactly when
``write`` succeeds.

Commands run in-process (click's CliRunner) to keep the suite fast; the
post-processing reads VTK files in worker processes of its own, so a native
crash of the reader cannot take the test process down (a few inputs are also
run as real processes to prove it: ``test_native_crashes_as_processes``).
"""
from __future__ import annotations

import contextlib
import os
import signal
import sys
from pathlib import Path

import pytest
from click.testing import CliRunner

sys.path.insert(0, str(Path(__file__).parent))

import corpus  # noqa: E402
from caseprep.cli import main as caseprep_main  # noqa: E402
from postproc.cli import main as postproc_main  # noqa: E402

#: seconds one command may take before it counts as a hang (generous: the
#: machine is shared; the slowest input takes about 3 s on a busy machine)
TIMEOUT = 60

CAD_INPUTS = corpus.config_inputs() + corpus.geometry_inputs() + corpus.name_inputs()
RESULT_INPUTS = corpus.vtk_inputs() + corpus.manifest_inputs() + corpus.record_inputs() + corpus.table_inputs()


def test_corpus_is_large_and_names_are_unique():
    names = [h.name for h in all_inputs()]
    assert len(names) == len(set(names))
    assert len(names) >= 250


def all_inputs():
    return CAD_INPUTS + RESULT_INPUTS


@contextlib.contextmanager
def _deadline(seconds: float, what: str):
    def hang(signum, frame):
        raise TimeoutError(f"{what} did not finish within {seconds} s (a hang)")

    old = signal.signal(signal.SIGALRM, hang)
    signal.setitimer(signal.ITIMER_REAL, seconds)
    try:
        yield
    finally:
        signal.setitimer(signal.ITIMER_REAL, 0)
        signal.signal(signal.SIGALRM, old)


def _snapshot(root: Path) -> dict[str, tuple]:
    out = {}
    for dirpath, dirnames, filenames in os.walk(root):
        for n in dirnames + filenames:
            p = Path(dirpath) / n
            st = p.lstat()
            out[str(p.relative_to(root))] = (st.st_mode, st.st_size, st.st_mtime_ns)
    return out


def run(prog, args: list[str], what: str):
    """Run a command in-process; a traceback or a hang fails the test."""
    with _deadline(TIMEOUT, what):
        r = CliRunner().invoke(prog, args)
    if r.exception is not None and not isinstance(r.exception, SystemExit):
        raise AssertionError(f"{what}: traceback instead of a message") from r.exception
    assert "Traceback" not in r.output, r.output
    return r


@pytest.fixture
def sandbox(tmp_path, monkeypatch):
    """tmp/in (the input's files), tmp/out (the output folder), tmp/cwd (the
    working directory) and tmp/outside (files that must stay untouched)."""
    for d in ("in", "cwd", "outside"):
        (tmp_path / d).mkdir()
    (tmp_path / "outside" / "precious.json").write_text("{}")
    monkeypatch.chdir(tmp_path / "cwd")
    return tmp_path


@pytest.mark.parametrize("h", CAD_INPUTS, ids=lambda h: h.name)
def test_config_geometry_and_name_inputs(h, sandbox):
    args = h.build(sandbox / "in")
    before = _snapshot(sandbox)
    r = run(caseprep_main, ["check", *args], f"caseprep check ({h.name})")
    assert r.exit_code == h.exit_code, r.output
    assert h.fragment in r.output, r.output
    assert _snapshot(sandbox) == before, "check wrote something"
    w = run(caseprep_main, ["write", *args, "-o", str(sandbox / "out")], f"caseprep write ({h.name})")
    # check passes exactly when write succeeds
    assert (w.exit_code == 0) == (r.exit_code == 0), (r.output, w.output)
    if w.exit_code != 0:
        assert w.exit_code == 2 and "error:" in w.output, w.output
        assert not (sandbox / "out" / "cases").exists() or not any((sandbox / "out" / "cases").iterdir())
    after = _snapshot(sandbox)
    changed = {k for k in set(after) | set(before) if after.get(k) != before.get(k)}
    assert all(k == "out" or k.startswith("out/") for k in changed), sorted(changed)[:5]


@pytest.mark.parametrize("h", RESULT_INPUTS, ids=lambda h: h.name)
def test_result_file_inputs(h, sandbox):
    """Bad VTK files, manifests and run records through postproc sweep / postproc forces (and caseprep run)."""
    args = h.build(sandbox / "in")
    before = _snapshot(sandbox)
    prog = caseprep_main if h.prog == "caseprep" else postproc_main
    r = run(prog, args, f"{h.prog} {args[0]} ({h.name})")
    assert r.exit_code == h.exit_code, r.output
    assert h.fragment in r.output, r.output
    after = _snapshot(sandbox)
    changed = {k for k in set(after) | set(before) if after.get(k) != before.get(k)}
    # postproc sweep writes its results into the sweep folder (its output folder); nothing else changes
    allowed = ("in/sw/results", "in/sw/report.html", "in/sw/.underfloor.lock", "in/sw/run_summary.json", "in/sw/shards",
               "in/sw/cases/a/underfloor-run.json", "in/sw/cases/b/underfloor-run.json")
    assert all(k == "in/sw" or k.startswith(allowed) for k in changed), sorted(k for k in changed if not k.startswith(allowed))


@pytest.mark.parametrize("name", ["vtk-sweep-crashes-reader-points", "vtk-forces-crashes-reader-polys"])
def test_native_crashes_as_processes(name, sandbox):
    """As real processes (a native abort would show as exit code 134 and no message)."""
    import subprocess

    h = next(x for x in RESULT_INPUTS if x.name == name)
    args = h.build(sandbox / "in")
    p = subprocess.run([sys.executable, "-m", f"{h.prog}.cli", *args], capture_output=True, text=True,
                       timeout=TIMEOUT * 5)
    out = p.stdout + p.stderr
    assert p.returncode == h.exit_code and h.fragment in out and "Traceback" not in out, (p.returncode, out[-800:])
