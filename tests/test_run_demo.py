"""The demo driver (example_cases/run_demo.py): prerequisites, results files,
resuming. The solver-marked test runs it on a pre-written tiny real sweep."""
from __future__ import annotations

import csv
import importlib.util
import os
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
DEMO = ROOT / "example_cases" / "run_demo.py"
sys.path.insert(0, str(Path(__file__).parent))
from tiny_case import write_tiny_sweep  # noqa: E402


def load_demo():
    spec = importlib.util.spec_from_file_location("run_demo", DEMO)
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


def run(args, env=None):
    e = dict(os.environ, PYTHONPATH=str(ROOT))
    e.update(env or {})
    return subprocess.run([sys.executable, str(DEMO), *args], capture_output=True, text=True, env=e, timeout=600)


def test_missing_config_is_a_clear_stop(tmp_path):
    p = run(["--out", str(tmp_path / "o"), "--config", str(tmp_path / "nope.toml")])
    assert p.returncode == 2 and "is missing" in p.stderr and "Traceback" not in p.stderr


def test_missing_solver_says_how_to_install(tmp_path):
    cfg = tmp_path / "c.toml"
    cfg.write_text("")
    # A PATH holding only the Python interpreter's folder: no solver programs.
    p = run(["--out", str(tmp_path / "o"), "--config", str(cfg)], env={"PATH": str(Path(sys.executable).parent)})
    assert p.returncode == 2
    assert "sudo apt-get install -y --no-install-recommends openfoam" in p.stderr


@pytest.mark.solver
def test_demo_on_tiny_sweep_resumes(tmp_path):
    out = tmp_path / "demo"
    write_tiny_sweep(out / "sweep", ("ok", "crash"), n_iter=10)
    cfg = tmp_path / "c.toml"
    cfg.write_text("")  # the sweep exists already, so the config is not read
    p = run(["--out", str(out), "--config", str(cfg)])
    assert p.returncode == 1, p.stdout + p.stderr  # the crash case failed, the other ran
    assert "tiny_crash: solve FAILED" in p.stdout and "floating point exception" in p.stdout
    assert "tiny_ok: ok" in p.stdout
    rows = {r["case_id"]: r for r in csv.DictReader((out / "results.csv").open())}
    assert rows["tiny_ok"]["status"] == "ok" and rows["tiny_ok"]["iterations"] == "10"
    assert rows["tiny_crash"]["status"] == "solve-failed" and "solve-failed" in rows["tiny_crash"]["flags"]
    report = (out / "report.html").read_text()
    assert "permitted and safe" in report
    # the report's size limit (README, "The report"): the demo's report stays under 5 MB
    assert (out / "report.html").stat().st_size < 5_000_000
    # pictures drawn, or the watch list says why not (here: no case has usable forces, so none is pictured)
    assert ("Under the floor" in report or "pictures not drawn" in report
            or "no case could be pictured" in report)
    p2 = run(["--out", str(out), "--config", str(cfg)])
    assert "tiny_ok: done in an earlier run, skipped" in p2.stdout
