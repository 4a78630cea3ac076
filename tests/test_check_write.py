"""check ⇔ write: what `caseprep check` accepts, `caseprep write` writes.

The whole hostile corpus runs both commands and requires the same verdict
(tests/hostile/test_corpus.py); these are the cases that used to disagree.
"""
from __future__ import annotations

import sys
from pathlib import Path

from click.testing import CliRunner

sys.path.insert(0, str(Path(__file__).parent / "hostile"))

from caseprep.cli import main as caseprep_main  # noqa: E402
from caseprep.geometry.stl import read_stl, stl_solid_names, with_solid_names_as_read  # noqa: E402
from corpus import _ascii, _box_parts  # noqa: E402
from planning_helpers import BASE_TOML  # noqa: E402


def test_solids_with_dashes_and_dots_are_written_as_read(tmp_path):
    floor, rest = _box_parts()
    (tmp_path / "car.stl").write_text(_ascii([("floor-main", floor), ("wing.rear", rest)]))
    (tmp_path / "sweep.toml").write_text(BASE_TOML)
    assert read_stl(tmp_path / "car.stl").solid_names == ("floor_main", "wing_rear")
    r = CliRunner().invoke(caseprep_main, ["check", str(tmp_path / "sweep.toml")])
    assert r.exit_code == 0, r.output
    r = CliRunner().invoke(caseprep_main, ["write", str(tmp_path / "sweep.toml"), "-o", str(tmp_path / "out")])
    assert r.exit_code == 0, r.output
    # the shared copy names its solids as the planner read them: the mesher's patches are the manifest's
    assert stl_solid_names((tmp_path / "out" / "geometry" / "base.stl").read_bytes()) == ["floor_main", "wing_rear"]


def test_renaming_keeps_the_coordinates_and_repeated_names_apart():
    floor, rest = _box_parts()
    data = _ascii([("a b", floor), ("a", rest), ("", rest)]).encode()
    out = with_solid_names_as_read(data)
    assert stl_solid_names(out) == ["a", "a_1", "solid2"]
    assert out.count(b"vertex") == data.count(b"vertex") and out.count(b"endsolid") == 3


def test_a_solid_named_like_a_domain_patch_is_refused_by_both(tmp_path):
    floor, rest = _box_parts()
    (tmp_path / "car.stl").write_text(_ascii([("ground", floor), ("body", rest)]))
    (tmp_path / "sweep.toml").write_text(BASE_TOML)
    for cmd in (["check"], ["write", "-o", str(tmp_path / "out")]):
        r = CliRunner().invoke(caseprep_main, [cmd[0], str(tmp_path / "sweep.toml"), *cmd[1:]])
        assert r.exit_code == 2 and "variants.base.geometry" in r.output and "ground" in r.output, r.output
