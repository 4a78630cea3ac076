"""Sweep post-processing: run records + forces → results table, ranking, report."""
from __future__ import annotations

import json
import math

import pytest
from click.testing import CliRunner

from caseprep import runner
from postproc.caseforces import forces_report
from postproc.cli import main as postproc_main
from postproc.sweep import postprocess_sweep

from tiny_case import write_manifest_only, write_tiny_sweep


def test_unrun_sweep_is_all_flagged_and_still_reports(tmp_path):
    root = write_manifest_only(tmp_path / "sw", ["a", "b"])
    outcomes, paths = postprocess_sweep(root)
    assert [o.result.flags for o in outcomes] == [("not-run",), ("not-run",)]
    data = json.loads(paths["json"].read_text())
    assert data["flags"]["not-run"].startswith("the case has not been run")
    assert "never ranked" in paths["report"].read_text() or "flagged" in paths["report"].read_text()
    # results are not replaced without force
    r = CliRunner().invoke(postproc_main, ["sweep", str(root)])
    assert r.exit_code == 2 and "--force" in r.output and "Traceback" not in r.output
    r = CliRunner().invoke(postproc_main, ["sweep", str(root), "--force", "-q"])
    assert r.exit_code == 0, r.output


def test_not_a_sweep_is_a_user_error(tmp_path):
    r = CliRunner().invoke(postproc_main, ["sweep", str(tmp_path)])
    assert r.exit_code == 2 and "manifest.json" in r.output


@pytest.mark.solver
def test_real_tiny_sweep(tmp_path):
    root = write_tiny_sweep(tmp_path / "sw", variants=("ok", "collapsed"), n_iter=20)
    runner.run_sweep(root, jobs=1, ranks=1)
    outcomes, paths = postprocess_sweep(root)
    by = {o.result.case_id: o for o in outcomes}
    ok = by["tiny_ok"]
    assert not ok.result.flags, ok
    # the table carries exactly the coefficients of the per-case forces report (same code path,
    # wind axes; independent checks of those numbers live in the forces tests)
    rep = forces_report(str(root / "cases" / "tiny_ok"))
    assert ok.result.cd == pytest.approx(rep["coefficients"]["drag"], rel=1e-12)
    assert ok.result.cd > 0  # a bluff box in a channel has positive drag (common practice, no source)
    assert "layers-collapsed" in by["tiny_collapsed"].result.flags
    assert (paths["cases"] / "tiny_ok.json").is_file()
    rows = json.loads(paths["json"].read_text())["cases"]
    assert {r["case_id"] for r in rows} == {"tiny_ok", "tiny_collapsed"}
    assert math.isfinite(rows[0]["cd"])
