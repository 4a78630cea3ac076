"""Log parsers against trimmed real logs of the solver (Debian openfoam 1912).

The fixtures under tests/data/logs/ are excerpts of logs produced by
tests/tiny_case.py (variants ok / collapsed / crash, 30 and 500 iterations,
1 and 2 ranks), of the tiny case switched to the k-omega SST turbulence model,
of a deliberately sheared background mesh, and the end of the mesher's and
the checker's logs of the demo floor's 14-degree diffuser at `coarse`
(20 mm; ``snappy_relaxed_tail.log``, ``checkMesh_layered_*.log``); lines were
deleted, never edited. Expected values are the numbers printed in those logs,
so exact equality (or float round-trip equality) is the right check.
"""
from __future__ import annotations

import math
from pathlib import Path

import pytest

from caseprep.run import solverlogs as sl

D = Path(__file__).parent / "data" / "logs"


def read(name: str) -> str:
    return (D / name).read_text()


def test_blockmesh_counts():
    r = sl.parse_blockmesh(read("blockMesh.log"))
    # 20 × 8 × 6 cells as set in the tiny case's background mesh dictionary.
    assert r.cells == 960 and r.points == 21 * 9 * 7
    assert dict(r.patches) == {"inlet": 48, "outlet": 48, "ground": 160, "farfield": 400}
    assert r.finished and r.error is None


def test_snappy_layers_full_coverage():
    r = sl.parse_snappy(read("snappyHexMesh_layers.log"))
    assert (r.initial_cells, r.snapped_cells, r.layer_cells, r.cells) == (960, 1544, 1904, 1904)
    (p,) = r.layers
    assert (p.patch, p.faces, p.target_layers, p.layers) == ("body", 180, 2, 2.0)
    assert p.thickness == pytest.approx(0.0159) and p.thickness_percent == pytest.approx(86.8)
    assert p.target_thickness == pytest.approx(0.0183)
    # The mesher's own % column is achieved / target overall thickness: 0.0159 / 0.0183
    # = 86.9 %, printed to 3 significant figures (tolerance: the print rounding).
    assert p.thickness / p.target_thickness * 100 == pytest.approx(p.thickness_percent, abs=0.2)
    assert r.layer_coverage == 1.0 and r.collapsed_patches() == ()
    assert (r.extruded_faces, r.extrudable_faces, r.illegal_faces) == (180, 180, 0)
    assert r.finished and r.error is None


def test_snappy_layers_collapsed_flagged():
    r = sl.parse_snappy(read("snappyHexMesh_collapsed.log"))
    assert r.cells == 1544  # no layer cells added: the snapped mesh is the final mesh
    assert r.layer_coverage == 0.0
    assert r.collapsed_patches() == ("body",)
    assert r.extruded_faces == 0


def test_snappy_relaxed_faces_do_not_fail_the_solve():
    """The mesher's final list on a layered mesh: 126 faces between its strict
    65 deg and the relaxed 75 deg, 2 of poor tet quality, 2 wall faces above
    its skewness limit of 3 — with the checker's maxima 73.8 deg and 3.01,
    none of them fails the finite-volume solve; above the checker's skewness
    limit they do."""
    r = sl.parse_snappy(read("snappy_relaxed_tail.log"))
    assert r.illegal_faces == 130
    assert r.faces_in_error == (("non-orthogonality > 65 degrees", 126),
                                ("faces with face-decomposition tet quality < 1e-15", 2),
                                ("faces with skewness > 4 (internal) or 3 (boundary)", 2))
    ok = sl.parse_checkmesh(read("checkMesh_layered_ok.log"))
    assert ok.mesh_ok and ok.max_non_orthogonality == pytest.approx(73.81268335) and ok.max_skewness < 4
    assert r.faces_failing_the_solve(ok.max_non_orthogonality, ok.max_skewness) == 0
    skew = sl.parse_checkmesh(read("checkMesh_layered_skew.log"))
    assert skew.mesh_ok is False and skew.max_skewness == pytest.approx(4.14146266)
    assert r.faces_failing_the_solve(ok.max_non_orthogonality, skew.max_skewness) == 2
    # beyond the solver numerics' top band the non-orthogonal faces count
    assert r.faces_failing_the_solve(81.0, ok.max_skewness) == 126
    # unknown maxima: every listed face but the tet-quality ones counts
    assert r.faces_failing_the_solve(None, None) == 128


def test_snappy_fatal_error():
    r = sl.parse_snappy(read("snappyHexMesh_fatal.log"))
    assert not r.finished and r.cells is None
    assert "Thickness should be factor of local undistorted cell size" in r.error


def test_checkmesh_ok():
    r = sl.parse_checkmesh(read("checkMesh_ok.log"))
    assert r.mesh_ok is True and r.failed_checks == 0 and r.problems == ()
    assert r.cells == 1904
    assert r.max_non_orthogonality == 41.805411 and r.avg_non_orthogonality == 10.658785
    assert r.max_skewness == 2.3745226 and r.max_aspect_ratio == 7.8926251


def test_checkmesh_failed():
    r = sl.parse_checkmesh(read("checkMesh_failed.log"))
    assert r.mesh_ok is False and r.failed_checks == 1
    # The sheared block: top face shifted 1.5 m over a 0.3 m height → atan(1.5/0.3) = 78.69°
    # (plane geometry); the checker prints it to 8 significant figures.
    assert r.max_non_orthogonality == pytest.approx(math.degrees(math.atan(1.5 / 0.3)), rel=1e-7)
    assert r.max_skewness == 5.0
    assert any("highly skew faces" in p for p in r.problems)


def test_checkmesh_unfinished_is_unknown():
    text = read("checkMesh_ok.log").split("Checking geometry")[0]
    r = sl.parse_checkmesh(text)
    assert r.mesh_ok is None and r.failed_checks is None and not r.finished


def test_solver_end_time():
    r = sl.parse_solver(read("simpleFoam_endtime.log"))
    assert r.end_reason == "end-time" and r.converged_at is None and r.error is None
    assert r.times == (1.0, 2.0, 3.0, 28.0, 29.0, 30.0) and r.iterations == 6
    assert list(r.residuals) == ["Ux", "Uy", "Uz", "p"]
    assert r.residuals["p"][0] == 1.0 and r.residuals["Ux"][1] == 0.27951687
    assert r.final_residuals == {"Ux": 0.00039158468, "Uy": 0.001617106, "Uz": 0.0018456494, "p": 0.0060121517}
    assert r.max_final_residual() == 0.0060121517
    assert (r.continuity_local, r.continuity_global, r.continuity_cumulative) == (0.00025297573, 4.3892855e-05, -0.0075488614)
    assert r.n_procs == 1


def test_solver_converged():
    r = sl.parse_solver(read("simpleFoam_converged.log"))
    assert r.end_reason == "converged" and r.converged_at == 61
    assert r.times[-1] == 61.0
    # The criterion in the tiny case's dictionary is p < 1e-5, U < 1e-6 on initial residuals.
    assert r.final_residuals["p"] < 1e-5 and max(r.final_residuals[c] for c in ("Ux", "Uy", "Uz")) < 1e-6


def test_solver_crash():
    r = sl.parse_solver(read("simpleFoam_crash.log"))
    assert r.end_reason == "crashed"
    assert "floating point exception" in r.error
    assert r.iterations == 2  # the banner of iteration 3 is followed by the crash, nothing solved
    assert r.continuity_local == 1.2347207e08


def test_solver_parallel():
    r = sl.parse_solver(read("simpleFoam_parallel.log"))
    assert r.n_procs == 2 and r.end_reason == "end-time" and r.times[-1] == 30.0


def test_solver_incomplete_and_bounding():
    text = read("simpleFoam_endtime.log").rsplit("End", 1)[0]
    text += "Time = 31\n\nbounding omega, min: -3.2 max: 1e5 average: 20\n"
    text += "smoothSolver:  Solving for omega, Initial residual = 0.01, Final residual = 1e-4, No Iterations 2\n"
    text += "bounding omega, min: -1 max: 1e5 average: 20\n"
    r = sl.parse_solver(text)
    assert r.end_reason == "incomplete"
    assert r.bounded == {"omega": 2}
    assert math.isnan(r.residuals["p"][-1]) and r.residuals["omega"][-1] == 0.01
    assert r.final_residuals["p"] == 0.0060121517  # last finite value


def test_export_files():
    r = sl.parse_export(read("foamToVTK.log"))
    assert r.times == (30.0,) and r.finished and r.fields == ("p", "U")
    assert r.files[0].endswith("internal.vtu")
    assert {Path(f).name for f in r.files[1:]} == {f"{p}.vtp" for p in ("inlet", "outlet", "ground", "farfield", "body")}


def test_to_dict_is_json_ready():
    import json
    d = sl.parse_solver(read("simpleFoam_crash.log")).to_dict()
    json.dumps(d, allow_nan=False)
    d2 = sl.parse_snappy(read("snappyHexMesh_layers.log")).to_dict()
    assert d2["layers"][0]["patch"] == "body"


def test_parse_log_unknown_tool():
    with pytest.raises(ValueError, match="expected a tool"):
        sl.parse_log("nope", "")


@pytest.mark.solver
def test_tiny_case_fresh_logs(tmp_path):
    """Run the tiny real case and parse the fresh logs."""
    import subprocess
    import sys

    sys.path.insert(0, str(Path(__file__).parent))
    from tiny_case import write_tiny_case

    case = write_tiny_case(tmp_path / "tiny", "ok", n_iter=20)
    p = subprocess.run([str(case / "run.sh")], capture_output=True, text=True, timeout=300)
    assert p.returncode == 0, p.stderr
    logs = case / "logs"
    bm = sl.parse_blockmesh((logs / "blockMesh.log").read_text())
    sn = sl.parse_snappy((logs / "snappyHexMesh.log").read_text())
    cm = sl.parse_checkmesh((logs / "checkMesh.log").read_text())
    so = sl.parse_solver((logs / "simpleFoam.log").read_text())
    ex = sl.parse_export((logs / "foamToVTK.log").read_text())
    assert bm.cells == 960
    # The checker counts the same final mesh the mesher wrote.
    assert sn.cells == cm.cells and sn.cells > bm.cells
    assert cm.mesh_ok is True
    assert sn.layers and sn.layers[0].patch == "body" and sn.layer_coverage > 0.5
    assert so.iterations == 20 and so.end_reason == "end-time"
    assert set(so.final_residuals) >= {"Ux", "Uy", "Uz", "p"}
    assert all((case / f).is_file() for f in ex.files)


def test_solver_crash_parallel():
    # 2 ranks: the stack dump lines carry a "[rank] " prefix and MPI adds its own report.
    r = sl.parse_solver(read("simpleFoam_crash_parallel.log"))
    assert r.end_reason == "crashed" and r.n_procs == 2
    assert r.error == "floating point exception (the solution diverged)"


def test_fatal_error_parallel_prefix():
    text = "[1] \n[1] --> FOAM FATAL ERROR: \n[1] cannot find file \"p\"\n[1] \n[1]     From function x\n"
    assert sl.fatal_error(text) == 'cannot find file "p"'


def test_solver_turbulent_fields():
    # The tiny case with the k-omega SST model (nu 1.5e-5): k and omega residuals appear
    # per iteration, omega solved before k.
    r = sl.parse_solver(read("simpleFoam_komegasst.log"))
    assert list(r.residuals) == ["Ux", "Uy", "Uz", "p", "omega", "k"]
    assert r.residuals["k"][0] == 1.0 and r.times[-1] == 30.0 and r.end_reason == "end-time"
    assert r.final_residuals["omega"] == 0.0016972368 and r.final_residuals["k"] == 0.014078294


def test_solver_residuals_first_solve_per_iteration():
    # the first solve of each field in an iteration is its initial residual; NaN where not solved
    text = ("Time = 1\n\nsmoothSolver:  Solving for Ux, Initial residual = 1, Final residual = 0.01, No Iterations 2\n"
            "GAMG:  Solving for p, Initial residual = 1, Final residual = 0.01, No Iterations 3\n"
            "GAMG:  Solving for p, Initial residual = 0.5, Final residual = 0.01, No Iterations 3\n"
            "Time = 2\n\nsmoothSolver:  Solving for Ux, Initial residual = 0.1, Final residual = 0.01, No Iterations 2\n")
    r = sl.parse_solver(text)
    assert r.times == (1.0, 2.0) and r.residuals["Ux"] == (1.0, 0.1)
    assert r.residuals["p"][0] == 1.0 and math.isnan(r.residuals["p"][1])
    assert r.final_residuals == {"Ux": 0.1, "p": 1.0}
