"""Numerics that follow the mesh: run.sh's choice of non-orthogonal
correctors and momentum relaxation from the checker's maximum
non-orthogonality equals the rule declared in
``caseprep.casefiles.render.MESH_NUMERICS`` (run through bash, no solver),
and the runner reads the choice back into the run record."""
from __future__ import annotations

import shutil
import subprocess
from pathlib import Path

import pytest

from caseprep.casefiles import render
from caseprep.run import solverlogs as sl
from uf_specs import make_spec

CHECKMESH = """    cells:            259369
    Mesh non-orthogonality Max: {x} average: 6.278791384
    Non-orthogonality check OK.
    Max skewness = 2.620803113 OK.

Mesh OK.
"""


def expected(x: float) -> tuple[int, float]:
    for bound, n, u in render.MESH_NUMERICS:
        if x < bound:
            return n, u
    return render.MESH_NUMERICS[-1][1], render.MESH_NUMERICS[-1][2]


def choose(tmp_path: Path, x: float | None) -> str | None:
    """Run the rendered run.sh's `write_mesh_numerics` on a checker log with
    maximum non-orthogonality ``x``; the written system/meshNumerics."""
    files = render.render_case(make_spec())
    script = files["run.sh"].text
    case = tmp_path / f"case-{x}"
    (case / "logs").mkdir(parents=True)
    (case / "system").mkdir()
    if x is not None:
        (case / "logs" / "checkMesh.log").write_text(CHECKMESH.format(x=x))
    # the script's functions without its stage loop
    body = script.split('\nif [ $# -eq 0 ]; then', 1)[0]
    (case / "functions.sh").write_text(body)
    r = subprocess.run(["bash", "-c", 'source ./functions.sh && write_mesh_numerics'], cwd=case,
                       capture_output=True, text=True, timeout=30)
    assert r.returncode == 0, r.stdout + r.stderr
    out = case / "system" / "meshNumerics"
    return out.read_text() if out.exists() else None


@pytest.mark.skipif(shutil.which("bash") is None or shutil.which("awk") is None, reason="needs bash and awk")
@pytest.mark.parametrize("x", [12.0, 59.99, 60.0, 64.25586641, 69.9, 70.0, 79.0, 85.0, 95.0])
def test_run_script_follows_the_declared_rule(tmp_path, x):
    text = choose(tmp_path, x)
    got = sl.parse_mesh_numerics(text)
    n, u = expected(x)
    assert got == {"non_orthogonal_correctors": n, "momentum_relaxation": pytest.approx(u)}
    assert f"meshMaxNonOrthogonality {x}" in text or f"meshMaxNonOrthogonality {x:g}" in text


def test_no_checker_figure_keeps_the_defaults(tmp_path):
    assert choose(tmp_path, None) is None


def test_defaults_are_the_first_row_and_included_last():
    fv = render.render_case(make_spec())["system/fvSolution"].text
    n0, u0 = render.MESH_NUMERICS[0][1], render.MESH_NUMERICS[0][2]
    assert f"nNonOrthogonalCorrectors {n0};" in fv
    assert fv.rstrip().endswith('#includeIfPresent "meshNumerics"')
    assert f"U               {u0:g};" in fv or f"U               {u0};" in fv
    # the rule is monotonic: a worse mesh never gets fewer correctors or more relaxation
    rows = render.MESH_NUMERICS
    assert all(a[0] < b[0] and a[1] <= b[1] and a[2] >= b[2] for a, b in zip(rows, rows[1:]))


def test_parse_mesh_numerics_rejects_partial_text():
    assert sl.parse_mesh_numerics("SIMPLE { nNonOrthogonalCorrectors 1; }") is None
    assert sl.parse_mesh_numerics("") is None


def test_runner_records_the_choice(tmp_path):
    from caseprep.run.runner import summarize_logs

    text = choose(tmp_path, 64.25586641)
    case = tmp_path / "case-64.25586641"
    assert (case / "system" / "meshNumerics").read_text() == text
    out = summarize_logs(case, ["mesh"])
    assert out["numerics"] == {"non_orthogonal_correctors": 1, "momentum_relaxation": pytest.approx(0.7)}
    assert out["max_non_orthogonality"] == pytest.approx(64.25586641)
