"""The run economy with the real solver (marker ``solver``): the DEMO flat
floor at the ``smoke`` fidelity, 3 ride heights × 2 speeds at yaw 0, written
with ``mesh.reuse = "identical"``, ``solver.warm_start = "nearest"`` and
``solver.stop_rule = "settled"`` (a run ends once converged with its loads
settled: without it most smoke runs use their whole budget warm or cold) and
run through ``caseprep run -j 1`` (one solver process at a time: the
ordering under ``-j 2`` is tested with stand-in scripts in
tests/test_economy_runner.py). About 2 CPU-minutes in all (measured: 1 min 51 s; three
meshes, one cold and five warm solves of 40 k cells, one cold rerun).

Checks: each speed pair shares one mesh (the second case ran no meshing
tool); sources and owners ran before the cases that use them; a warm-started
case converges in fewer iterations than its cold twin (the same case rerun
with ``--cold``) and to the same coefficients within the convergence rule's
tolerance in coefficient counts (C_L 0.005, C_D 0.002: caseprep.contract.
convergence, common practice, no source)."""
from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

from caseprep.contract.convergence import DEFAULT_OPTIONS
from caseprep.contract.records import read_case_record
from caseprep.run.runner import missing_solver_binaries

sys.path.insert(0, str(Path(__file__).parent))
from test_economy_write import demo_config  # noqa: E402

pytestmark = pytest.mark.solver
BIN = Path(sys.executable).parent


@pytest.fixture(scope="module")
def solved(tmp_path_factory):
    missing = missing_solver_binaries(("blockMesh", "snappyHexMesh", "simpleFoam", "mapFields", "foamToVTK"))
    if missing:
        if os.environ.get("UNDERFLOOR_REQUIRE_SOLVER") == "1":
            pytest.fail(f"solver programs missing: {missing}")
        pytest.skip(f"solver programs missing: {missing}")
    tmp = tmp_path_factory.mktemp("economy")
    cfg = demo_config(tmp, extra_solver='warm_start = "nearest"\nstop_rule = "settled"')
    sweep = tmp / "sweep"
    env = dict(os.environ, PATH=f"{BIN}{os.pathsep}{os.environ.get('PATH', '')}")
    subprocess.run([str(BIN / "caseprep"), "write", str(cfg), "-o", str(sweep)], check=True, env=env,
                   stdout=subprocess.DEVNULL)
    r = subprocess.run([str(BIN / "caseprep"), "run", str(sweep), "-j", "1", "--ranks", "1", "-v"], env=env,
                       capture_output=True, text=True)
    assert r.returncode == 0, r.stdout[-3000:] + r.stderr[-2000:]
    return sweep, env, r.stdout


def _manifest(sweep: Path) -> list[dict]:
    return json.loads((sweep / "manifest.json").read_text())["cases"]


def _coefficients(sweep: Path, env) -> dict[str, tuple[float, float]]:
    subprocess.run([str(BIN / "postproc"), "sweep", str(sweep), "-q", "--force", "--no-pictures"], check=True,
                   env=env, stdout=subprocess.DEVNULL)
    return {r["case_id"]: (r["cl"], r["cd"]) for r in json.loads((sweep / "results.json").read_text())["cases"]}


def test_speed_pairs_share_one_mesh_and_owners_and_sources_run_first(solved):
    sweep, env, out = solved
    cases = _manifest(sweep)
    recs = {c["case_id"]: read_case_record(sweep / c["folder"]) for c in cases}
    assert all(r.status == "ok" and not r.flags for r in recs.values()), {k: r.flags for k, r in recs.items()}
    sharers = [c for c in cases if c["mesh_owner"] != c["case_id"]]
    assert len(sharers) == 3
    started = {cid: r.started_utc for cid, r in recs.items()}
    for c in sharers:
        case, owner = sweep / c["folder"], sweep / "cases" / c["mesh_owner"]
        rec = recs[c["case_id"]]
        assert rec.mesh_source["shared"] is True and rec.mesh_source["owner"] == c["mesh_owner"]
        # no meshing tool ran here: run.sh was never started for the mesh stage, the mesh files are the owner's
        assert not (case / "logs" / "underfloor-mesh.out").exists()
        assert (case / "constant/polyMesh/faces").stat().st_ino == (owner / "constant/polyMesh/faces").stat().st_ino
        assert rec.cells == recs[c["mesh_owner"]].cells
        assert rec.stage_run("mesh").wall_time < 2.0 < recs[c["mesh_owner"]].stage_run("mesh").wall_time
        assert started[c["mesh_owner"]] <= started[c["case_id"]]
    for cid, r in recs.items():
        init = r.initial_field
        if init["source"] is not None:
            assert init["kind"] in ("copied", "mapped"), init
            assert recs[init["source"]].finished_utc <= r.started_utc  # with -j 1 the source ended first
            shared = r.mesh_source is not None and r.mesh_source["owner"] == init["source"]
            assert init["kind"] == ("copied" if shared else "mapped")
    kinds = sorted(r.initial_field["kind"] for r in recs.values())
    assert kinds.count("uniform") == 1  # one root: the middle of the sweep
    summary = json.loads((sweep / "run_summary.json").read_text())
    total = summary["cost"]["total"]
    assert total["converged_points"] == 6
    assert total["core_seconds"] == pytest.approx(sum(r.core_seconds for r in recs.values()), abs=0.01)
    assert "per converged point" in out


def test_a_warm_start_converges_sooner_to_the_same_coefficients(solved):
    sweep, env, _ = solved
    cases = _manifest(sweep)
    recs = {c["case_id"]: read_case_record(sweep / c["folder"]) for c in cases}
    warm_id = next(cid for cid, r in recs.items() if r.initial_field["kind"] == "mapped")
    warm = recs[warm_id]
    before = _coefficients(sweep, env)
    r = subprocess.run([str(BIN / "caseprep"), "run", str(sweep), "--only", warm_id, "--force", "--cold",
                        "-j", "1", "--ranks", "1", "-q"], env=env, capture_output=True, text=True)
    assert r.returncode == 0, r.stdout[-2000:]
    cold = read_case_record(sweep / "cases" / warm_id)
    assert cold.initial_field["kind"] == "uniform" and not cold.flags
    assert warm.iterations < cold.iterations, (warm.iterations, cold.iterations)
    after = _coefficients(sweep, env)
    (cl_w, cd_w), (cl_c, cd_c) = before[warm_id], after[warm_id]
    assert abs(cl_w - cl_c) <= DEFAULT_OPTIONS.count_tol_lift, (cl_w, cl_c)
    assert abs(cd_w - cd_c) <= DEFAULT_OPTIONS.count_tol_drag_side, (cd_w, cd_c)
