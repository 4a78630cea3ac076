"""Sweep post-processing: run records + forces → results table, ranking, report."""
from __future__ import annotations

import json
import math

import pytest
from click.testing import CliRunner

from caseprep.run import runner
from postproc.pipelines.case_forces import forces_report
from postproc.cli import main as postproc_main
from postproc.pipelines.sweep import postprocess_sweep
from postproc.report import write_report

import numpy as np

from tiny_case import write_manifest_only


def test_unrun_sweep_is_all_flagged_and_still_reports(tmp_path):
    root = write_manifest_only(tmp_path / "sw", ["a", "b"])
    analysis = postprocess_sweep(root)
    outcomes, paths = analysis.outcomes, analysis.paths
    write_report(analysis, paths["report"])
    assert [o.result.flags for o in outcomes] == [("not-run",), ("not-run",)]
    data = json.loads(paths["json"].read_text())
    assert data["flags"]["not-run"].startswith("the case has not been run")
    assert "never ranked" in paths["report"].read_text() or "flagged" in paths["report"].read_text()
    # nothing changed: the tables are left as they are
    r = CliRunner().invoke(postproc_main, ["sweep", str(root)])
    assert r.exit_code == 0 and "nothing changed" in r.output, r.output
    # an input changed: results are not replaced without force
    (root / "cases" / "a" / "underfloor-run.json").write_text('{"case_id": "a", "folder": "cases/a", "status": "ok"}')
    r = CliRunner().invoke(postproc_main, ["sweep", str(root)])
    assert r.exit_code == 2 and "--force" in r.output and "Traceback" not in r.output
    r = CliRunner().invoke(postproc_main, ["sweep", str(root), "--force", "-q"])
    assert r.exit_code == 0, r.output


def test_not_a_sweep_is_a_user_error(tmp_path):
    r = CliRunner().invoke(postproc_main, ["sweep", str(tmp_path)])
    assert r.exit_code == 2 and "manifest.json" in r.output


@pytest.mark.solver
def test_real_smoke_sweep(tmp_path):
    from caseprep.casefiles.writer import write_sweep
    from caseprep.contract.monitor import read_monitor
    from uf_specs import make_spec, write_body_stl

    src = tmp_path / "src"
    src.mkdir()
    write_body_stl(src / "body.stl")
    (src / "sweep.toml").write_text("# demo smoke sweep\n")
    root = tmp_path / "sw"
    write_sweep([make_spec("smoke-a", beta_deg=3.0, yaw_mode="crosswind", n_iterations=30)], root, src / "sweep.toml")
    runner.run_sweep(root, jobs=1, ranks=1)
    analysis = postprocess_sweep(root)
    (o,), paths = analysis.outcomes, analysis.paths
    assert o.status == "ok", o
    assert math.isfinite(o.result.cl) and math.isfinite(o.result.cd)
    # the table carries the window means of the forces report's coefficient series (the rule in
    # coefficient counts), with their spreads; the monitor's last sample, reduced the same way,
    # is the export's wind-axes coefficient (same integral, Float32 storage: 1e-6)
    rep = forces_report(str(root / "cases" / "smoke-a")).to_dict()
    counts = rep["convergence"]
    assert o.result.cd == pytest.approx(counts["means"]["cd"], rel=1e-12)
    assert o.result.cl == pytest.approx(counts["means"]["cl"], rel=1e-12)
    assert o.result.u_cl == pytest.approx(counts["stds"]["cl"], rel=1e-12)
    from caseprep.contract.frames import axes_rotations
    from caseprep.contract.manifest import read_manifest
    from caseprep.contract.monitor import coefficient_series

    rec = read_manifest(root).cases[0]
    last = coefficient_series(read_monitor(root / "cases" / "smoke-a"), rec.reference,
                              axes_rotations(rec.placement, rec.wind_direction_body), window=1)
    scale = float(np.hypot(rep["coefficients"]["drag"], rep["coefficients"]["lift"]))
    assert abs(last["cd"][0] - rep["coefficients"]["drag"]) <= 1e-6 * scale
    assert abs(last["cl"][0] - rep["coefficients"]["lift"]) <= 1e-6 * scale
    # our integral of the exported surface equals the solver's own runtime force monitor at the
    # last iteration (an independent implementation of the same integral); the export stores
    # Float32 (epsilon 1.2e-7), so 1e-6 of the resultant is the justified bound
    mon = read_monitor(root / "cases" / "smoke-a")
    F_mon = np.array([mon[f"force.total_{c}"][-1] for c in "xyz"])
    F = np.asarray(rep["force"])
    assert np.linalg.norm(F - F_mon) <= 1e-6 * np.linalg.norm(F_mon)  # measured 2.4e-8
    # 30 iterations are not enough to settle: the runner or the monitor says so, and the case is not ranked
    assert o.result.flags
    data = json.loads(paths["json"].read_text())
    row = data["cases"][0]
    assert row["case_id"] == "smoke-a"
    # y+ of the body comes from the solver's yPlus field: positive, ordered statistics
    assert 0 < row["yplus_median"] <= row["yplus_p95"] <= row["yplus_max"]
    # the band of the case's wall treatment (Spalding's wall function at coarse and smoke: caseprep/contract/walls.py)
    assert 0.0 <= row["yplus_share_in_range"] <= 1.0 and row["yplus_range"] == "30-150"
    # prism-layer coverage per patch from the mesher's log (this spec asks for layers)
    assert row["layers"] and row["layers"].endswith("%")
    assert (paths["cases"] / "smoke-a.json").is_file()
    # the sweep's analysis.json is the analysis of this table: the point carries the window spread
    an = json.loads(paths["analysis"].read_text())
    (pt,) = an["points"]
    assert pt["cases"] == ["smoke-a"] and pt["usable"] is False       # flagged above: not compared
    assert an["ranking"]["decision"]["status"] == "no-common-points"
