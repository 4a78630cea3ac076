"""Confinement: every path taken from a manifest, a run record or a .vtm
stays inside the sweep folder; outputs are never written through links.

Each test reproduces one escape (a hostile manifest, export or output
folder) and asserts a clear refusal (exit code 2, the record or key named)
and that nothing outside the folders was read or written.
"""
from __future__ import annotations

import json
import os
import sys
from pathlib import Path

import pytest
from click.testing import CliRunner

sys.path.insert(0, str(Path(__file__).parent / "hostile"))

from builders import edit_manifest, finished_case, finished_sweep  # noqa: E402
from caseprep.cli import main as caseprep_main  # noqa: E402
from caseprep.contract.atomicio import write_text_atomic  # noqa: E402
from caseprep.contract.errors import UserError  # noqa: E402
from caseprep.contract.untrusted import confined  # noqa: E402
from planning_helpers import write_config  # noqa: E402
from postproc.cli import main as postproc_main  # noqa: E402


def _files(root: Path) -> set[str]:
    """Every path below ``root`` but the sweep lock's file (created by whoever takes the lock)."""
    return {str(p.relative_to(root)) for p in root.rglob("*") if p.name != ".underfloor.lock"}


def _invoke(main, args):
    r = CliRunner().invoke(main, [str(a) for a in args])
    assert "Traceback" not in r.output and not isinstance(r.exception, (AssertionError,)) , r.output
    if r.exception is not None and not isinstance(r.exception, SystemExit):
        raise r.exception
    return r


@pytest.mark.parametrize("bad_id", ["../../x", "../outside", "/ABS/x", "a/b", ".hidden", "x\ny", "a" * 80])
def test_sweep_refuses_case_ids_that_are_not_names(tmp_path, bad_id):
    root = finished_sweep(tmp_path / "sw", ["a"])
    bad_id = bad_id.replace("/ABS", str(tmp_path / "abs"))
    edit_manifest(root, lambda d: d["cases"][0].update(case_id=bad_id))
    before = _files(tmp_path)
    r = _invoke(postproc_main, ["sweep", root, "-q"])
    assert r.exit_code == 2, r.output
    assert "cases[0].case_id" in r.output and "manifest.json" in r.output
    assert _files(tmp_path) == before  # nothing written, inside or out


@pytest.mark.parametrize("folder", ["../../../../etc", "/etc", "cases/../../x", "cases/./a", "", "cases//a"])
def test_sweep_refuses_case_folders_leaving_the_sweep(tmp_path, folder):
    root = finished_sweep(tmp_path / "sw", ["a"])
    edit_manifest(root, lambda d: d["cases"][0].update(folder=folder))
    r = _invoke(postproc_main, ["sweep", root, "-q"])
    assert r.exit_code == 2, r.output
    assert "cases[0] (a).folder" in r.output
    assert not (root / "results.csv").exists()


def test_sweep_refuses_a_symlinked_case_folder_leaving_the_sweep(tmp_path):
    outside = finished_case(tmp_path / "elsewhere" / "a", "a")  # valid data, but not the sweep's
    root = finished_sweep(tmp_path / "sw", ["a"])
    import shutil

    shutil.rmtree(root / "cases" / "a")
    os.symlink(outside, root / "cases" / "a")
    r = _invoke(postproc_main, ["sweep", root, "-q"])
    assert r.exit_code == 2 and "symbolic link" in r.output and str(outside) in r.output, r.output


def test_a_link_inside_the_sweep_is_followed(tmp_path):
    """A link that stays inside the sweep (the writer links the shared geometry) is fine."""
    root = finished_sweep(tmp_path / "sw", ["a"])
    os.rename(root / "cases" / "a", root / "cases" / "a_real")
    os.symlink("a_real", root / "cases" / "a")
    r = _invoke(postproc_main, ["sweep", root, "-q"])
    assert r.exit_code == 0, r.output


@pytest.mark.parametrize("how", ["absolute", "dotdot", "symlink"])
def test_vtm_blocks_outside_the_export_are_refused(tmp_path, how):
    root = finished_sweep(tmp_path / "sw", ["a"])
    outside = finished_case(tmp_path / "elsewhere", "a")
    vtm = root / "cases" / "a" / "VTK" / "a_100.vtm"
    target = outside / "VTK" / "a_100" / "boundary" / "body.vtp"
    text = vtm.read_text()
    if how == "absolute":
        text = text.replace("a_100/boundary/body.vtp", str(target))
    elif how == "dotdot":
        text = text.replace("a_100/boundary/body.vtp", os.path.relpath(target, vtm.parent))
    else:
        blk = root / "cases" / "a" / "VTK" / "a_100" / "boundary" / "body.vtp"
        blk.unlink()
        os.symlink(target, blk)
    vtm.write_text(text)
    r = _invoke(postproc_main, ["sweep", root, "-q"])
    # the case is flagged (its forces are not computed from outside data), the batch goes on
    assert r.exit_code == 0, r.output
    row = json.loads((root / "results.json").read_text())["cases"][0]
    assert "forces-failed" in row["flags"]
    assert "block 'body' file" in row["notes"] or "block file" in row["notes"], row["notes"]
    # and the forces command on that file says so
    r = _invoke(postproc_main, ["forces", vtm, "--patches", "body", "--rho", "1"])
    assert r.exit_code == 2 and "inside" in r.output, r.output


def test_export_folder_linked_out_of_the_case_is_refused(tmp_path):
    root = finished_sweep(tmp_path / "sw", ["a"])
    outside = finished_case(tmp_path / "elsewhere", "a")
    import shutil

    shutil.rmtree(root / "cases" / "a" / "VTK")
    os.symlink(outside / "VTK", root / "cases" / "a" / "VTK")
    r = _invoke(postproc_main, ["sweep", root, "-q"])
    assert r.exit_code == 0, r.output
    row = json.loads((root / "results.json").read_text())["cases"][0]
    assert "forces-failed" in row["flags"] and "link" in row["notes"]


def test_results_folder_linked_elsewhere_is_never_written_through(tmp_path):
    root = finished_sweep(tmp_path / "sw", ["a"])
    victim = tmp_path / "victim"
    victim.mkdir()
    os.symlink(victim, root / "results")
    r = _invoke(postproc_main, ["sweep", root, "-q"])
    assert r.exit_code == 2 and "symbolic link" in r.output, r.output
    assert list(victim.iterdir()) == []


def test_output_file_that_is_a_link_is_replaced_not_followed(tmp_path):
    victim = tmp_path / "victim.json"
    victim.write_text("precious")
    out = tmp_path / "out"
    out.mkdir()
    os.symlink(victim, out / "results.json")
    write_text_atomic(out / "results.json", "new", root=out)
    assert victim.read_text() == "precious"
    assert not (out / "results.json").is_symlink() and (out / "results.json").read_text() == "new"


def test_confined_rejects_every_escape(tmp_path):
    (tmp_path / "in").mkdir()
    os.symlink("/", tmp_path / "in" / "root_link")
    for bad in ("/etc", "../x", "a/../../x", "a\\b", "a\0b", "", "~/x", "root_link/etc", 3, None):
        with pytest.raises(UserError):
            confined(tmp_path / "in", bad, file="f.json", key="k")
    assert confined(tmp_path / "in", "a/b", file="f.json", key="k") == tmp_path / "in" / "a" / "b"


# ------------------------------------------------------------------ caseprep write

def _written_sweep(tmp_path: Path) -> tuple[Path, Path]:
    cfg = write_config(tmp_path)
    out = tmp_path / "out"
    r = _invoke(caseprep_main, ["write", cfg, "-o", out])
    assert r.exit_code == 0, r.output
    return cfg, out


def test_write_refuses_to_keep_a_foreign_record(tmp_path):
    cfg, out = _written_sweep(tmp_path)

    def add_foreign(d):
        rec = dict(d["cases"][0], case_id="evil", folder="../../../../etc")
        d["cases"].append(rec)

    edit_manifest(out, add_foreign)
    r = _invoke(caseprep_main, ["write", cfg, "-o", out])
    assert r.exit_code == 2 and "cases[1] (evil).folder" in r.output and "--force" in r.output, r.output
    r = _invoke(caseprep_main, ["write", cfg, "-o", out, "--force"])
    assert r.exit_code == 0, r.output
    ids = [c["case_id"] for c in json.loads((out / "manifest.json").read_text())["cases"]]
    assert "evil" not in ids and len(ids) == 1


def test_write_refuses_a_foreign_id_with_a_slash(tmp_path):
    cfg, out = _written_sweep(tmp_path)
    edit_manifest(out, lambda d: d["cases"].append(dict(d["cases"][0], case_id="x/../../y", folder="cases/y")))
    r = _invoke(caseprep_main, ["write", cfg, "-o", out])
    assert r.exit_code == 2 and "cases[1].case_id" in r.output, r.output


@pytest.mark.parametrize("sub", ["cases", "geometry"])
def test_write_never_follows_a_linked_subfolder(tmp_path, sub):
    cfg = write_config(tmp_path)
    out = tmp_path / "out"
    out.mkdir()
    victim = tmp_path / "victim"
    victim.mkdir()
    os.symlink(victim, out / sub)
    r = _invoke(caseprep_main, ["write", cfg, "-o", out])
    assert r.exit_code == 2 and "symbolic link" in r.output and sub in r.output, r.output
    assert list(victim.iterdir()) == []


def test_run_refuses_a_case_folder_outside_the_sweep(tmp_path):
    cfg, out = _written_sweep(tmp_path)
    edit_manifest(out, lambda d: d["cases"][0].update(folder=str(tmp_path)))
    r = _invoke(caseprep_main, ["run", out, "--skip-solver-check"])
    assert r.exit_code == 2 and "cases[0]" in r.output and "folder" in r.output, r.output
