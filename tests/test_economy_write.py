"""Which cases share a mesh: the writer compares the rendered mesh
dictionaries' bytes and the surfaces (the demo floor with a speed axis), the
config switches, the manifest's new fields read from disk as untrusted input."""
from __future__ import annotations

import json
import shutil
from pathlib import Path

import pytest
from click.testing import CliRunner

from caseprep.cli import main
from caseprep.contract.errors import UserError
from caseprep.contract.manifest import read_manifest

DEMO = Path(__file__).resolve().parent.parent / "example_cases" / "floor_study"


def demo_config(tmp: Path, fidelity: str = "smoke", extra_mesh: str = "", extra_solver: str = "") -> Path:
    """The DEMO floor study, flat floor only, 3 ride heights × 2 speeds at yaw 0."""
    shutil.copytree(DEMO / "geometry", tmp / "geometry")
    text = (DEMO / "sweep.toml").read_text()
    text = text.replace("yaw_deg = [0.0, 4.0]", "yaw_deg = [0.0]\nspeed = [30.0, 40.0]")
    text = text.replace("ride_height = [0.020, 0.030]", "ride_height = [0.020, 0.025, 0.030]")
    for v, d in (("diffuser8", "8 deg ramp diffuser"), ("diffuser14", "14 deg ramp diffuser with two strakes")):
        text = text.replace(f'[variants.{v}]\ngeometry = "geometry/{v}.stl"\ndescription = "{d}"\n', "")
    text = text.replace('fidelity = "smoke"', f'fidelity = "{fidelity}"\n{extra_mesh}')
    text = text.replace('turbulence_intensity = 0.005', f'turbulence_intensity = 0.005\n{extra_solver}')
    p = tmp / "sweep.toml"
    p.write_text(text)
    return p


def write(cfg: Path, out: Path) -> list:
    r = CliRunner().invoke(main, ["write", str(cfg), "-o", str(out)])
    assert r.exit_code == 0, r.output
    return list(read_manifest(out).cases)


def test_a_speed_axis_shares_one_mesh_per_ride_height(tmp_path):
    cases = write(demo_config(tmp_path), tmp_path / "out")
    assert len(cases) == 6
    by_h: dict[float, list] = {}
    for c in cases:
        by_h.setdefault(c.params["ride_height_front"], []).append(c)
    keys = set()
    for h, cs in by_h.items():
        assert len(cs) == 2 and {c.params["speed"] for c in cs} == {30.0, 40.0}
        assert cs[0].mesh_key == cs[1].mesh_key  # the same mesh dictionaries and surfaces
        assert cs[0].mesh_owner == cs[1].mesh_owner == cs[0].case_id  # the first in the manifest meshes
        keys.add(cs[0].mesh_key)
        # the honest test: the mesh dictionaries are byte-identical, the flow files are not
        d0, d1 = (tmp_path / "out" / c.folder for c in cs)
        for f in ("system/blockMeshDict", "system/snappyHexMeshDict", "system/surfaceFeatureExtractDict"):
            assert (d0 / f).read_bytes() == (d1 / f).read_bytes()
        assert (d0 / "0/U").read_bytes() != (d1 / "0/U").read_bytes()
    assert len(keys) == 3  # each ride height places the ground elsewhere in the body frame
    assert all(c.warm_start == "off" and c.stop_rule == "budget" for c in cases)  # the defaults (opt-in economy)


def test_coarse_layers_sized_for_the_speed_are_not_shared(tmp_path):
    # with prism layers the first cell height follows the speed (y+ sizing): different meshes
    cases = write(demo_config(tmp_path, "coarse"), tmp_path / "out")
    assert len({c.mesh_key for c in cases}) == 6
    assert all(c.mesh_owner == c.case_id for c in cases)


def test_switches_reuse_off_and_warm_start(tmp_path):
    cfg = demo_config(tmp_path, extra_mesh='reuse = "off"', extra_solver='warm_start = "nearest"')
    cases = write(cfg, tmp_path / "out")
    assert all(c.mesh_key is None and c.mesh_owner == c.case_id for c in cases)
    assert all(c.warm_start == "nearest" for c in cases)


def test_bad_switch_values_are_refused(tmp_path):
    cfg = demo_config(tmp_path, extra_solver='warm_start = "always"')
    r = CliRunner().invoke(main, ["check", str(cfg)])
    assert r.exit_code == 2 and "solver.warm_start" in r.output and "nearest" in r.output


def test_manifest_mesh_fields_are_checked(tmp_path):
    write(demo_config(tmp_path), tmp_path / "out")
    p = tmp_path / "out" / "manifest.json"
    good = p.read_text()
    for key, bad, msg in (("mesh_owner", "../x", "mesh_owner"), ("warm_start", "hot", "warm_start"),
                          ("mesh_key", 5, "mesh_key")):
        d = json.loads(good)
        d["cases"][1][key] = bad
        p.write_text(json.dumps(d))
        with pytest.raises(UserError, match=msg):
            read_manifest(tmp_path / "out")


def test_switches_off_restore_the_plain_run(tmp_path):
    cfg = demo_config(tmp_path, extra_solver='warm_start = "off"\nstop_rule = "budget"')
    cases = write(cfg, tmp_path / "out")
    assert all(c.warm_start == "off" and c.stop_rule == "budget" for c in cases)
    text = (tmp_path / "out" / cases[0].folder / "system" / "controlDict").read_text()
    assert "abort" not in text  # no stop watch without the settled rule
    (tmp_path / "b").mkdir()
    cases = write(demo_config(tmp_path / "b", extra_solver='warm_start = "nearest"\nstop_rule = "settled"'), tmp_path / "out-b")
    text = (tmp_path / "out-b" / cases[0].folder / "system" / "controlDict").read_text()
    assert 'file            "$FOAM_CASE/logs/settled.stop";' in text and "writeNow" in text
