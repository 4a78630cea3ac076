"""Writing a sweep folder (caseprep.casefiles.writer): layout, shared geometry, the
only-new / --force rules, the manifest and the run scripts' contract."""
from __future__ import annotations

import hashlib
import os
import struct
import subprocess
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest

from caseprep.contract.errors import UserError
from caseprep.contract.manifest import read_manifest
from caseprep.casefiles.render import OUTPUTS
from caseprep.casefiles.writer import write_sweep
from caseprep.geometry.stl import stl_solid_names
from uf_specs import demo_wheel, make_spec, write_body_stl


@pytest.fixture
def src(tmp_path):
    d = tmp_path / "src"
    d.mkdir()
    write_body_stl(d / "body.stl")
    (d / "sweep.toml").write_text("# demo sweep config\n")
    return d


def specs3():
    return [make_spec("c-1"), make_spec("c-2", beta_deg=5.0), make_spec("c-3", beta_deg=5.0, yaw_mode="yawed-model")]


def tree_state(root: Path) -> dict[str, tuple[int, int]]:
    return {str(p.relative_to(root)): (p.lstat().st_mtime_ns, p.lstat().st_ino) for p in root.rglob("*")}


def test_layout_shared_geometry_and_manifest(src, tmp_path):
    out = tmp_path / "out"
    specs = specs3()
    s = write_sweep(specs, out, src / "sweep.toml")
    assert s.written == ("c-1", "c-2", "c-3") and not s.unchanged and s.geometry_written == ("body.stl",)
    assert (out / "geometry" / "body.stl").read_bytes() == (src / "body.stl").read_bytes()
    for cid in ("c-1", "c-2", "c-3"):
        case = out / "cases" / cid
        link = case / "constant" / "triSurface" / "body.stl"
        assert link.is_symlink() and not os.path.isabs(os.readlink(link))
        assert link.resolve() == (out / "geometry" / "body.stl").resolve()
        assert os.access(case / "run.sh", os.X_OK)
        assert (case.stat().st_mode & 0o777) == 0o755
    # exactly one real copy of the geometry in the sweep
    stls = [p for p in out.rglob("*.stl") if not p.is_symlink()]
    assert stls == [out / "geometry" / "body.stl"]
    assert (out / "cases.txt").read_text().split() == ["c-1", "c-2", "c-3"]
    for sh in ("run_all.sh", "slurm_array.sh"):
        assert os.access(out / sh, os.X_OK)
        subprocess.run(["bash", "-n", str(out / sh)], check=True)
    subprocess.run(["bash", "-n", str(out / "cases" / "c-1" / "run.sh")], check=True)
    m = read_manifest(out)
    assert [c.case_id for c in m.cases] == ["c-1", "c-2", "c-3"]
    assert m.config_hash == "sha256:" + hashlib.sha256((src / "sweep.toml").read_bytes()).hexdigest()
    assert m.study == "sweep"
    rec = m.case("c-2")
    assert rec.folder == "cases/c-2" and rec.mesh_frame == "body"
    assert rec.outputs["forces"] == OUTPUTS["forces"]
    assert rec.patches == {"body": ["body", "floor"], "wheels": [], "ground": "ground"}
    np.testing.assert_allclose(rec.placement.rotation, specs[1].placement.rotation)
    # no temporary folders left behind
    assert not [p for p in (out / "cases").iterdir() if p.name.startswith(".")]


def test_rerun_leaves_identical_cases_alone_and_adds_new(src, tmp_path):
    out = tmp_path / "out"
    write_sweep(specs3()[:2], out, src / "sweep.toml")
    # the user ran case c-1: results and logs appear inside it
    (out / "cases" / "c-1" / "logs").mkdir()
    (out / "cases" / "c-1" / "logs" / "mesh.done").write_text("")
    (out / "notes.txt").write_text("mine")
    before = tree_state(out / "cases")
    s = write_sweep(specs3(), out, src / "sweep.toml")
    assert s.written == ("c-3",) and s.unchanged == ("c-1", "c-2") and s.geometry_written == ()
    after = tree_state(out / "cases")
    for k, v in before.items():
        assert after[k] == v, k  # not rewritten
    assert (out / "cases" / "c-1" / "logs" / "mesh.done").exists()
    assert (out / "notes.txt").read_text() == "mine"
    assert [c.case_id for c in read_manifest(out).cases] == ["c-1", "c-2", "c-3"]


def test_differing_case_is_refused_then_replaced_with_force(src, tmp_path):
    out = tmp_path / "out"
    write_sweep(specs3()[:2], out, src / "sweep.toml")
    (out / "cases" / "c-1" / "logs").mkdir()
    (out / "cases" / "c-2" / "logs").mkdir()
    (out / "cases" / "c-2" / "logs" / "keep.log").write_text("other case")
    changed = [make_spec("c-1", speed=30.0), make_spec("c-2", beta_deg=5.0), make_spec("c-3")]
    with pytest.raises(UserError) as ei:
        write_sweep(changed, out, src / "sweep.toml")
    msg = str(ei.value)
    assert "c-1" in msg and "0/U" in msg and "--force" in msg
    assert not (out / "cases" / "c-3").exists()  # refused run wrote nothing
    s = write_sweep(changed, out, src / "sweep.toml", force=True)
    assert s.replaced == ("c-1",) and s.written == ("c-3",) and s.unchanged == ("c-2",)
    assert not (out / "cases" / "c-1" / "logs").exists()  # replaced as a whole
    assert (out / "cases" / "c-2" / "logs" / "keep.log").read_text() == "other case"
    assert "uniform (30 0" not in (out / "cases" / "c-2" / "0" / "U").read_text()
    assert not [p for p in (out / "cases").iterdir() if p.name.startswith(".")]


def test_changed_geometry_is_refused_without_force(src, tmp_path):
    out = tmp_path / "out"
    write_sweep(specs3()[:1], out, src / "sweep.toml")
    text = (src / "body.stl").read_text().replace("vertex 1 ", "vertex 1.01 ")
    (src / "body.stl").write_text(text)
    with pytest.raises(UserError, match="geometry/body.stl"):
        write_sweep(specs3()[:1], out, src / "sweep.toml")
    s = write_sweep(specs3()[:1], out, src / "sweep.toml", force=True)
    assert s.geometry_written == ("body.stl",)
    assert (out / "geometry" / "body.stl").read_text() == text


def test_solid_names_are_checked(src, tmp_path):
    spec = make_spec("c-1", extra_solids=("spoiler",))
    with pytest.raises(UserError, match="spoiler"):
        write_sweep([spec], tmp_path / "o1", src / "sweep.toml")
    # a binary STL has no solid names: only a single-solid body is possible
    tri = np.zeros(1, dtype=[("n", "<f4", 3), ("v", "<f4", (3, 3)), ("a", "<u2")])
    (src / "bin.stl").write_bytes(b"\0" * 80 + struct.pack("<I", 1) + tri.tobytes())
    assert stl_solid_names((src / "bin.stl").read_bytes()) is None
    with pytest.raises(UserError, match="binary STL"):
        write_sweep([replace(make_spec("c-1"), geometry="bin.stl")], tmp_path / "o2", src / "sweep.toml")
    one = replace(make_spec("c-1"), geometry="bin.stl", geometry_solid_names=("car",))
    write_sweep([one], tmp_path / "o3", src / "sweep.toml")
    assert (tmp_path / "o3" / "geometry" / "bin.stl").stat().st_size == 84 + 50


def test_wheel_files_shared_and_scaled_geometry(src, tmp_path):
    write_body_stl(src / "wheel_src.stl")
    text = (src / "wheel_src.stl").read_text().replace("solid body", "solid w").replace("solid floor", "solid w2")
    (src / "wheel_src.stl").write_text(text)
    spec = make_spec("c-1", wheels=(demo_wheel(),))
    spec = replace(spec, extra={"geometry_scale": 2.0})
    with pytest.raises(UserError, match="wheel_fl"):  # two solids but one wheel patch
        write_sweep([spec], tmp_path / "o", src / "sweep.toml", geometry_sources={"wheel_fl.stl": src / "wheel_src.stl"})
    one = "\n".join(l for l in text.splitlines() if "w2" not in l)  # keep only the first solid
    one = one.split("solid w\n", 1)[1].split("endsolid w")[0]
    (src / "wheel_src.stl").write_text("solid w\n" + one + "endsolid w\n")
    s = write_sweep([make_spec("c-1", wheels=(demo_wheel(),)), make_spec("c-2", wheels=(demo_wheel(),))],
                    tmp_path / "o", src / "sweep.toml", geometry_sources={"wheel_fl.stl": src / "wheel_src.stl"})
    assert sorted(s.geometry_written) == ["body.stl", "wheel_fl.stl"]
    for cid in ("c-1", "c-2"):
        link = tmp_path / "o" / "cases" / cid / "constant" / "triSurface" / "wheel_fl.stl"
        assert link.resolve() == (tmp_path / "o" / "geometry" / "wheel_fl.stl").resolve()
    write_sweep([replace(make_spec("c-1"), extra={"geometry_scale": 2.0})], tmp_path / "o2", src / "sweep.toml")
    orig = [l for l in (src / "body.stl").read_text().splitlines() if "vertex" in l]
    new = [l for l in (tmp_path / "o2" / "geometry" / "body.stl").read_text().splitlines() if "vertex" in l]
    a = np.array([[float(v) for v in l.split()[1:]] for l in orig])
    b = np.array([[float(v) for v in l.split()[1:]] for l in new])
    np.testing.assert_allclose(b, 2.0 * a, rtol=1e-9)
    assert stl_solid_names((tmp_path / "o2" / "geometry" / "body.stl").read_bytes()) == ["body", "floor"]


def test_non_stl_source_is_converted_once(src, tmp_path):
    (src / "shape.obj").write_text("v 0 0 0\nv 1 0 0\nv 0 1 0\nv 0 0 1\nf 1 3 2\nf 1 2 4\nf 1 4 3\nf 2 3 4\n")
    spec = replace(make_spec("c-1"), geometry="shape.stl", geometry_solid_names=("shape",))
    write_sweep([spec], tmp_path / "o", src / "sweep.toml", geometry_sources={"shape.stl": src / "shape.obj"})
    data = (tmp_path / "o" / "geometry" / "shape.stl").read_bytes()
    assert stl_solid_names(data) == ["shape"]
    assert data.count(b"facet normal") == 4


def test_missing_geometry_and_empty_plan_are_user_errors(src, tmp_path):
    with pytest.raises(UserError, match="geometry"):
        write_sweep([replace(make_spec(), geometry="nope.stl")], tmp_path / "o", src / "sweep.toml")
    with pytest.raises(UserError):
        write_sweep([], tmp_path / "o", src / "sweep.toml")
    with pytest.raises(ValueError):
        write_sweep([make_spec("a"), make_spec("a")], tmp_path / "o", src / "sweep.toml")


def test_input_list_not_modified(src, tmp_path):
    specs = specs3()
    ids = [s.case_id for s in specs]
    write_sweep(specs, tmp_path / "o", src / "sweep.toml")
    assert [s.case_id for s in specs] == ids


# ---------------------------------------------------------------------- scripts
def _fake_tools(tmp_path: Path, failing: str) -> dict:
    """PATH with a stand-in for one solver tool that fails, to exercise the
    scripts' failure handling (no solver output is faked for any result)."""
    d = tmp_path / "fakebin"
    d.mkdir(exist_ok=True)
    (d / failing).write_text("#!/bin/sh\necho 'boom: cannot do it'\nexit 7\n")
    (d / failing).chmod(0o755)
    env = dict(os.environ)
    env["PATH"] = f"{d}:{env['PATH']}"
    return env


def test_run_script_contract_on_failure(src, tmp_path):
    out = tmp_path / "out"
    write_sweep(specs3()[:1], out, src / "sweep.toml")
    env = _fake_tools(tmp_path, "blockMesh")
    r = subprocess.run([str(out / "cases" / "c-1" / "run.sh"), "mesh"], cwd=tmp_path, env=env,
                       capture_output=True, text=True)
    assert r.returncode == 7
    assert "boom: cannot do it" in r.stderr  # tail of the failing tool's log
    assert (out / "cases" / "c-1" / "logs" / "blockMesh.log").read_text().startswith("boom")
    assert not (out / "cases" / "c-1" / "logs" / "mesh.done").exists()
    r = subprocess.run([str(out / "cases" / "c-1" / "run.sh"), "bogus"], capture_output=True, text=True)
    assert r.returncode == 2 and "expected stages" in r.stderr
    r = subprocess.run([str(out / "cases" / "c-1" / "run.sh"), "solve"], capture_output=True, text=True,
                       env=dict(os.environ, UF_RANKS="x"))
    assert r.returncode == 2 and "UF_RANKS" in r.stderr


def test_run_all_skips_finished_and_reports_failures(src, tmp_path):
    out = tmp_path / "out"
    write_sweep(specs3(), out, src / "sweep.toml")
    for cid in ("c-1", "c-3"):
        (out / "cases" / cid / "logs").mkdir()
        (out / "cases" / cid / "logs" / "export.done").write_text("")
    env = _fake_tools(tmp_path, "blockMesh")
    r = subprocess.run(["./run_all.sh", "-j", "2", "-r", "1"], cwd=out, env=env, capture_output=True, text=True)
    assert r.returncode == 1
    assert "FAILED  c-2" in r.stdout and "1 started, 2 skipped" in r.stdout
    assert "boom" in (out / "cases" / "c-2" / "logs" / "run.log").read_text()
    # slurm task 2 = case c-2 (fails the same way), task 1 = c-1 (already exported)
    r = subprocess.run(["bash", "slurm_array.sh"], cwd=out, capture_output=True, text=True,
                       env=dict(env, SLURM_ARRAY_TASK_ID="1", SLURM_SUBMIT_DIR=str(out)))
    assert r.returncode == 0 and "already exported" in r.stdout
    # without caseprep on PATH the task runs the case's run.sh itself
    r = subprocess.run(["bash", str(out / "slurm_array.sh")], cwd=tmp_path, capture_output=True, text=True,
                       env=dict(env, SLURM_ARRAY_TASK_ID="2", SLURM_SUBMIT_DIR=str(out), SLURM_NTASKS="1",
                                UF_CASEPREP="no-such-caseprep"))
    assert r.returncode == 7 and "c-2" in r.stdout
    text = (out / "slurm_array.sh").read_text()
    assert "#SBATCH --array=1-3" in text and "#SBATCH --ntasks=1" in text


# ---------------------------------------------------------------------- CLI
def test_write_command_on_the_example_config(tmp_path):
    """`caseprep write` driven by the bundled demo config: --fidelity override,
    only-new re-runs, refusal of a changed case without --force."""
    import shutil

    from click.testing import CliRunner

    from caseprep.cli import main

    root = Path(__file__).resolve().parent.parent / "example_cases" / "floor_study"
    src = tmp_path / "study"
    shutil.copytree(root, src)
    cfg = str(src / "sweep.toml")
    out = tmp_path / "out"
    r = CliRunner().invoke(main, ["write", cfg, "-o", str(out), "--fidelity", "smoke"])
    assert r.exit_code == 0, r.output
    m = read_manifest(out)
    assert len(m.cases) == 12 and {c.fidelity for c in m.cases} == {"smoke"}
    assert m.study == "demo-floor-study"
    r = CliRunner().invoke(main, ["write", cfg, "-o", str(out), "--fidelity", "smok"])
    assert r.exit_code == 2 and "Did you mean 'smoke'" in r.output and "Traceback" not in r.output
    r = CliRunner().invoke(main, ["write", cfg, "-o", str(out), "--fidelity", "smoke"])
    assert r.exit_code == 0 and "0 new, 0 replaced, 12 unchanged" in r.output
    text = (src / "sweep.toml").read_text()
    # a warmer day changes ρ and ν in every case but no case id
    (src / "sweep.toml").write_text(text.replace("temperature = 293.15", "temperature = 303.15", 1))
    assert "303.15" in (src / "sweep.toml").read_text()
    r = CliRunner().invoke(main, ["write", cfg, "-o", str(out), "--fidelity", "smoke"])
    assert r.exit_code == 2 and "--force" in r.output and "Traceback" not in r.output
    r = CliRunner().invoke(main, ["write", cfg, "-o", str(out), "--fidelity", "smoke", "--force"])
    assert r.exit_code == 0 and "12 replaced" in r.output, r.output


def test_cases_of_an_earlier_plan_stay_listed(src, tmp_path):
    out = tmp_path / "out"
    write_sweep(specs3()[:2], out, src / "sweep.toml")
    s = write_sweep(specs3()[2:], out, src / "sweep.toml")
    assert s.written == ("c-3",)
    assert [c.case_id for c in read_manifest(out).cases] == ["c-1", "c-2", "c-3"]
    assert (out / "cases.txt").read_text().split() == ["c-1", "c-2", "c-3"]
    assert "#SBATCH --array=1-3" in (out / "slurm_array.sh").read_text()
