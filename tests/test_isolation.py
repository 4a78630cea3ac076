"""Isolation of bad files: one VTK file that lies about its size or crashes
the reader must not end the post-processing of a sweep.

Surfaces are read in a child process with a memory and a time limit
(postproc.io.isolation); a file whose header declares more data than the
file can hold is refused before any reader allocates for it. The case is
flagged ``unreadable`` with the reason; the other cases are processed.
"""
from __future__ import annotations

import json
import os
import re
import subprocess
import sys
import time
from pathlib import Path

import pytest
from click.testing import CliRunner

sys.path.insert(0, str(Path(__file__).parent / "hostile"))

from builders import edit_manifest, finished_sweep, run_record  # noqa: E402
from postproc.cli import main as postproc_main  # noqa: E402
from postproc.io.isolation import UnreadableFile, isolated  # noqa: E402
from postproc.io.surfaces import check_declared_sizes  # noqa: E402

BLOCK = Path("VTK/a_100/boundary/body.vtp")


def _lying(good: bytes, points: int, pad: int = 0) -> bytes:
    """``good`` with its header declaring ``points`` points, cut to 497 bytes or padded with noise."""
    data = good.replace(b'NumberOfPoints="42"', f'NumberOfPoints="{points}"'.encode())
    return data[:497] if pad == 0 else data + os.urandom(pad)


def _sweep_cli(root: Path):
    r = CliRunner().invoke(postproc_main, ["sweep", str(root)])
    assert r.exception is None or isinstance(r.exception, SystemExit), r.exception
    assert "Traceback" not in r.output
    rows = {x["case_id"]: x for x in json.loads((root / "results.json").read_text())["cases"]} if r.exit_code == 0 else {}
    return r, rows


@pytest.mark.parametrize("how", ["declares-4e9-points-in-497-bytes", "crashes-the-reader"])
def test_one_bad_file_does_not_stop_the_sweep(tmp_path, how):
    root = finished_sweep(tmp_path / "sw", ["a", "b"])
    f = root / "cases" / "a" / BLOCK
    good = f.read_bytes()
    # the second passes the size check (compressed data may be dense) and makes VTK throw std::bad_alloc
    f.write_bytes(_lying(good, 4_000_000_000) if how.startswith("declares") else _lying(good, 1_000_000_000, 400_000))
    r, rows = _sweep_cli(root)
    assert r.exit_code == 0, r.output
    assert "unreadable" in rows["a"]["flags"] and "body.vtp" in rows["a"]["notes"]
    reason = "header declaring" if how.startswith("declares") else "SIGABRT"
    assert reason in rows["a"]["notes"], rows["a"]["notes"]
    assert rows["b"]["flags"] == "" and rows["b"]["cd"] == pytest.approx(0.0, abs=1e-9)  # a closed surface, uniform p
    assert "a: " in r.output and "unreadable" in r.output


def test_forces_command_on_a_crashing_file_gives_a_message(tmp_path):
    root = finished_sweep(tmp_path / "sw", ["a"])
    f = root / "cases" / "a" / BLOCK
    f.write_bytes(_lying(f.read_bytes(), 1_000_000_000, 400_000))
    r = CliRunner().invoke(postproc_main, ["forces", str(f), "--rho", "1"])
    assert r.exit_code == 2 and "crashed the reader" in r.output and "Traceback" not in r.output, r.output
    # as a real process: exit code 2 with the message, not 134 (abort) without one
    p = subprocess.run([sys.executable, "-m", "postproc.cli", "forces", str(f), "--rho", "1"], capture_output=True,
                       text=True, timeout=300)
    assert p.returncode == 2 and "crashed the reader" in p.stderr, (p.returncode, p.stderr[-500:])


def test_time_and_memory_limits():
    t0 = time.monotonic()
    with pytest.raises(UnreadableFile, match="in time"):
        isolated(time.sleep, 30, what="slow.vtp", timeout=0.5)
    assert time.monotonic() - t0 < 20
    with pytest.raises(UnreadableFile, match="memory limit"):
        isolated(bytearray, 3_000_000_000, what="big.vtp", memory=1_000_000_000)
    assert isolated(sum, [1, 2, 3], what="x") == 6


def test_declared_sizes_checked_against_the_file_size(tmp_path):
    p = tmp_path / "x.vtk"
    p.write_bytes(b"# vtk DataFile Version 3.0\nx\nBINARY\nDATASET POLYDATA\nPOINTS 4000000000 float\n" + b"\0" * 100)
    with pytest.raises(UnreadableFile, match="declaring at least 12,000,000,000 bytes"):
        check_declared_sizes(p)
    p.write_bytes(b"# vtk DataFile Version 3.0\nx\nASCII\nDATASET POLYDATA\nPOINTS 1 float\n0 0 0\n")
    check_declared_sizes(p)


@pytest.mark.parametrize("edit,key", [
    (lambda d: d.update(cases="all"), "at cases"),
    (lambda d: d.update(cases={"a": 1}), "at cases"),
    (lambda d: d["cases"].__setitem__(0, "a"), "at cases[0]"),
    (lambda d: d["cases"][0]["params"].update(yaw_deg="four"), "cases[0] (a).params.yaw_deg"),
    (lambda d: d["cases"][0]["reference"].update(area=-1.0), "cases[0] (a).reference.area"),
    (lambda d: d["cases"].append(dict(d["cases"][0])), "cases[1].case_id"),
])
def test_malformed_manifests_name_the_key(tmp_path, edit, key):
    root = finished_sweep(tmp_path / "sw", ["a"])
    edit_manifest(root, edit)
    r = CliRunner().invoke(postproc_main, ["sweep", str(root)])
    assert r.exit_code == 2 and key in r.output and "Traceback" not in r.output, r.output


def test_deeply_nested_manifest_is_refused(tmp_path):
    root = finished_sweep(tmp_path / "sw", ["a"])
    (root / "manifest.json").write_text("[" * 100_000 + "]" * 100_000)
    r = CliRunner().invoke(postproc_main, ["sweep", str(root)])
    assert r.exit_code == 2 and "nested" in r.output, r.output


@pytest.mark.parametrize("over,key", [({"iterations": "many"}, "at iterations"), ({"cells": -3}, "at cells"),
                                      ({"stages": "all"}, "at stages"), ({"final_residuals": {"p": "low"}},
                                                                         "final_residuals.p")])
def test_malformed_run_record_flags_the_case_and_names_the_key(tmp_path, over, key):
    root = finished_sweep(tmp_path / "sw", ["a", "b"])
    (root / "cases" / "a" / "underfloor-run.json").write_text(json.dumps(run_record("a", **over)))
    r, rows = _sweep_cli(root)
    assert r.exit_code == 0, r.output
    assert "record-unreadable" in rows["a"]["flags"] and key in rows["a"]["notes"]
    assert rows["b"]["flags"] == ""
    # a flagged row is never compared by the analysis (tests/test_analysis_decision.py); these stand-in
    # cases have no operating point, so the analysis refuses the table and says so in a note
    assert "analysis.json not written" in " ".join(r.output.split())


def test_a_volume_that_crashes_the_reader_flags_its_case_only(tmp_path):
    """The flow columns read each case's volume (internal.vtu): also in a child process."""
    from builders import volume_vtu

    root = finished_sweep(tmp_path / "sw", ["a", "b"])
    vtu = root / "cases" / "a" / "VTK" / "a_100" / "internal.vtu"
    good = volume_vtu(vtu).read_bytes()
    # 48 GB of points declared in 1.5 MB of dense data: beyond the machine's memory (the analysis' limit)
    vtu.write_bytes(re.sub(rb'NumberOfPoints="\s*64', b'NumberOfPoints="4000000000', good) + os.urandom(1_500_000))
    r, rows = _sweep_cli(root)
    assert r.exit_code == 0, r.output
    assert "unreadable" in rows["a"]["flags"] and "SIGABRT" in rows["a"]["notes"], rows["a"]
    assert "unreadable" not in rows["b"]["flags"]
