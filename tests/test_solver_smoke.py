"""Smoke test with the real solver: a written case meshes, solves a few
iterations serially and on 2 ranks, and exports VTK, through run.sh."""
from __future__ import annotations

import os
import subprocess
from pathlib import Path

import numpy as np
import pytest

from caseprep.casefiles import foamdict as fd
from caseprep.contract.manifest import read_manifest
from caseprep.casefiles.render import all_patches
from caseprep.casefiles.writer import write_sweep
from uf_specs import make_spec, write_body_stl

pytestmark = pytest.mark.solver

ITER = 20


def run(case: Path, *stages: str, ranks: int | None = None) -> subprocess.CompletedProcess:
    env = dict(os.environ)
    env.pop("UF_RANKS", None)
    if ranks is not None:
        env["UF_RANKS"] = str(ranks)
    # run from another folder: run.sh must work from any cwd
    r = subprocess.run([str(case / "run.sh"), *stages], cwd=case.parent.parent, env=env,
                       capture_output=True, text=True, timeout=300)
    assert r.returncode == 0, r.stdout + r.stderr
    return r


def mesh_boundary(case: Path) -> dict[str, dict]:
    """Patches of the mesh as written by the mesher (name → entries)."""
    text = (case / "constant" / "polyMesh" / "boundary").read_text()
    body = text.split("}", 1)[1]  # after the FoamFile header: "N ( name { … } … )"
    d = fd.parse("b " + body + "\n;")
    return dict(fd.named_items(d["b"][1]))


def test_case_meshes_solves_and_exports(tmp_path):
    src = tmp_path / "src"
    src.mkdir()
    write_body_stl(src / "body.stl")
    (src / "sweep.toml").write_text("# demo smoke sweep\n")
    # a yawed model with rake: the domain box is rotated in the body frame
    spec = make_spec("smoke-1", beta_deg=5.0, yaw_mode="yawed-model", n_iterations=ITER)
    out = tmp_path / "sweep"
    write_sweep([spec], out, src / "sweep.toml")
    case = out / "cases" / "smoke-1"
    rec = read_manifest(out).case("smoke-1")

    run(case, "mesh")
    log = (case / "logs" / "checkMesh.log").read_text()
    assert "Mesh OK" in log
    cells = int(log.split("cells:", 1)[1].split()[0])
    assert 5_000 < cells < 50_000  # smoke-sized (estimate 30 k)
    # patch names as the mesher made them are the manifest's and the fields'
    patches = mesh_boundary(case)
    assert sorted(patches) == sorted(all_patches(spec))
    assert set(rec.patches["body"]) | {rec.patches["ground"]} <= set(patches)
    assert (case / "logs" / "mesh.done").exists()
    # the mesher read the body through the relative symlink to the shared copy
    assert (case / "constant" / "triSurface" / "body.stl").is_symlink()
    # (snapped faces on every body solid prove it was read)
    for p in rec.patches["body"]:
        assert patches[p]["nFaces"] > 0 and patches[p]["type"] == "wall", p

    run(case, "solve")
    forces = case / rec.outputs["forces"]
    rows = [l for l in forces.read_text().splitlines() if l and not l.startswith("#")]
    assert len(rows) == ITER
    total = np.array(rows[-1].split("(")[1].split(")")[0].split(), dtype=float)
    wind = np.asarray(rec.wind_direction_body)
    # drag (force along the relative wind) is positive on a bluff body in a
    # viscous flow (d'Alembert's paradox only holds for inviscid flow; common practice)
    assert total @ wind > 0
    assert (case / rec.outputs["residuals"]).is_file()
    assert (case / str(ITER) / "U").is_file()

    run(case, "export")
    vtm = case / "VTK" / f"smoke-1_{ITER}.vtm"
    assert vtm.is_file()
    for p in patches:
        assert (case / "VTK" / f"smoke-1_{ITER}" / "boundary" / f"{p}.vtp").is_file(), p
    assert (case / "VTK" / f"smoke-1_{ITER}" / "internal.vtu").is_file()
    assert all((case / "logs" / f"{s}.done").exists() for s in ("mesh", "solve", "export"))

    # the same case on 2 ranks (decompose, mpirun, reconstruct), fewer iterations are enough
    if (os.cpu_count() or 1) >= 2:
        run(case, "solve", "export", ranks=2)
        log = (case / "logs" / "simpleFoam.log").read_text()
        assert "nProcs : 2" in log
        assert (case / "logs" / "reconstructPar.log").is_file()
        assert (case / "VTK" / f"smoke-1_{ITER}.vtm").is_file()
        rows = [l for l in forces.read_text().splitlines() if l and not l.startswith("#")]
        assert len(rows) == ITER


def test_single_solid_body_and_wheel_file_patch_names(tmp_path):
    """Single-solid surfaces are named by the mesher after their entry: the
    body file's one solid (whatever its name inside) becomes the patch named in
    the spec, a wheel file becomes the wheel's patch with a rotating wall."""
    from dataclasses import replace

    from uf_specs import demo_wheel, write_box_stl

    src = tmp_path / "src"
    src.mkdir()
    text = write_body_stl(src / "two.stl").read_text()
    lines = [l for l in text.splitlines() if not l.startswith(("solid", "endsolid"))]
    (src / "car.stl").write_text("solid shell\n" + "\n".join(lines) + "\nendsolid shell\n")
    write_box_stl(src / "wheel_fl.stl", (0.15, -0.28, 0.0), (0.25, -0.22, 0.1), "tyre")
    (src / "sweep.toml").write_text("# demo smoke sweep\n")
    spec = make_spec("smoke-2", layers=False, n_iterations=3, wheels=(demo_wheel(),))
    spec = replace(spec, geometry="car.stl", geometry_solid_names=("car",))
    out = tmp_path / "sweep"
    write_sweep([spec], out, src / "sweep.toml")
    case = out / "cases" / "smoke-2"
    run(case, "mesh", "solve")
    patches = mesh_boundary(case)
    assert sorted(patches) == sorted(all_patches(spec))
    assert patches["car"]["nFaces"] > 0 and patches["wheel_fl"]["nFaces"] > 0
    assert read_manifest(out).case("smoke-2").patches["wheels"] == ["wheel_fl"]
