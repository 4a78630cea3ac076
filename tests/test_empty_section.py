"""Empty test section (a variant with geometry = "none"): config rules,
planning (graded background mesh, lead-in floor) and the rendered case."""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from caseprep.casefiles import foamdict as fd
from caseprep.config.load import load_config
from caseprep.planning.empty_section import ground_grading
from caseprep.contract.errors import UserError, UserErrors
from caseprep.planning.planner import plan
from caseprep.casefiles.render import render_case
from planning_helpers import car_box

EXAMPLES = Path(__file__).resolve().parent.parent / "example_cases"

EMPTY = """\
[study]
name = "empty"
[air]
speed = 1.0
density = 1.0
kinematic_viscosity = 1.0e-5
[ground]
mode = "stationary"
[variants.empty]
geometry = "none"
[mesh]
base_cell = 0.025
ground_first_cell = 0.0005
[domain]
length = 1.25
lead_in = 0.25
width = 0.05
height = 0.4
"""


def _load(tmp_path, text):
    p = tmp_path / "sweep.toml"
    p.write_text(text)
    return load_config(p)


def _messages(tmp_path, text) -> str:
    with pytest.raises((UserError, UserErrors)) as ei:
        _load(tmp_path, text)
    e = ei.value
    errs = e.errors if isinstance(e, UserErrors) else [e]
    return "\n".join(str(x) for x in errs)


def test_example_plans_a_graded_two_block_section():
    cfg = load_config(EXAMPLES / "ground_boundary_layer" / "sweep.toml")
    assert cfg.empty_section
    (spec,) = plan(cfg)
    d = spec.domain
    assert spec.geometry_solid_names == () and spec.wheels == ()
    assert d.ground == "stationary" and d.lead_in == 0.25 and d.lead_in_cells == 10
    assert d.cells[0] == 50 and d.cells[1] == 2  # 1.25 m / 25 mm; 50 mm / 25 mm
    assert np.allclose(d.box.lengths, (1.25, 0.05, 0.4))
    # reference values of a section without a body: inlet face and section length
    assert spec.reference.area == pytest.approx(0.05 * 0.4) and spec.reference.length == pytest.approx(1.25)
    assert spec.extra["ground_leading_edge"] == 0.25 and spec.extra["ground_first_cell"] == 0.0005
    rec = spec.record("cases/x")
    assert rec.patches == {"body": [], "wheels": [], "ground": "ground"}


def test_ground_grading_fills_the_height_from_the_first_cell():
    for H, h1, d in ((0.4, 5e-4, 0.025), (1.0, 1e-3, 0.05), (0.1, 1e-4, 0.05)):
        n, r, g = ground_grading(H, h1, d)
        sizes = h1 * r ** np.arange(n)
        # geometric series: the cells fill the height exactly, the first is h1, the last about Δ
        assert sizes.sum() == pytest.approx(H, rel=1e-9)
        assert g == pytest.approx(sizes[-1] / sizes[0], rel=1e-9)
        assert 0.8 * d < sizes[-1] <= 1.0001 * d
    with pytest.raises(ValueError):
        ground_grading(0.04, 1e-3, 0.025)  # less than two top cells high


def test_rendered_case_has_no_snapping_and_a_slip_lead_in(tmp_path):
    (spec,) = plan(load_config(EXAMPLES / "ground_boundary_layer" / "sweep.toml"))
    files = render_case(spec)
    assert "system/snappyHexMeshDict" not in files and "system/surfaceFeatureExtractDict" not in files
    assert not any(k.startswith("constant/triSurface") for k in files)
    run = files["run.sh"].text
    assert "run_tool snappyHexMesh" not in run and "run_tool surfaceFeatureExtract" not in run and "run_tool blockMesh blockMesh" in run
    bm = fd.parse(files["system/blockMeshDict"].text)
    assert len(bm["vertices"]) == 12
    blocks = bm["blocks"]
    lists = [b for b in blocks if isinstance(b, list)]  # per block: vertices, cells, grading
    assert lists[1] == [10, 2, 63] and lists[4] == [40, 2, 63]
    assert lists[0] == [0, 8, 9, 3, 4, 10, 11, 7] and lists[3] == [8, 1, 2, 9, 10, 5, 6, 11]
    assert lists[2][:2] == [1, 1] and lists[2][2] == pytest.approx(spec.domain.ground_grading, rel=1e-9)
    assert spec.domain.ground_grading > 40  # 0.5 mm on the ground growing to ~25 mm at the top
    patches = dict(fd.named_items(bm["boundary"]))
    assert patches["ground"]["type"] == "wall" and patches["lead_in"]["type"] == "patch"
    U = fd.parse(files["0/U"].text)["boundaryField"]
    assert U["lead_in"]["type"] == "slip" and U["ground"]["type"] == "noSlip"
    ctl = files["system/controlDict"].text
    assert "uf_forces" not in ctl and "uf_wall_shear" in ctl  # no body to monitor; wall shear on the ground


def test_body_cases_render_as_before(tmp_path):
    """A body case still gets one block, uniform cells (the new fields' defaults)."""
    from uf_specs import make_spec

    files = render_case(make_spec("c1"))
    bm = files["system/blockMeshDict"].text
    assert "simpleGrading (1 1 1)" in bm and bm.count("hex (") == 1
    assert "lead_in" not in bm


@pytest.mark.parametrize("edit, key, words", [
    (lambda t: t.replace('[variants.empty]', '[variants.car]\ngeometry = "car.stl"\n[variants.empty]'),
     "variants.empty.geometry", "only variant"),
    (lambda t: t.replace('mode = "stationary"', 'mode = "none"'), "ground.mode", "a ground"),
    (lambda t: t.replace("length = 1.25\n", ""), "domain.length", "empty test section"),
    (lambda t: t.replace("height = 0.4\n", ""), "domain.height", "empty test section"),
    (lambda t: t.replace("base_cell = 0.025\n", ""), "mesh.base_cell", "empty test section"),
    (lambda t: t + "[sweep]\nride_height = [0.03]\n", "sweep.ride_height", "no ride heights"),
    (lambda t: t + "[sweep]\npitch_deg = [1.0]\n", "sweep.pitch_deg", "no pitch"),
    (lambda t: t.replace("lead_in = 0.25", "lead_in = 1.5"), "domain.lead_in", "shorter than domain.length"),
    (lambda t: t.replace("ground_first_cell = 0.0005", "ground_first_cell = 0.03"), "mesh.ground_first_cell",
     "smaller than mesh.base_cell"),
    (lambda t: t.replace("height = 0.4", "height = 0.03"), "domain.height", "two base cells"),
])
def test_empty_section_config_errors(tmp_path, edit, key, words):
    car_box(tmp_path)
    msg = _messages(tmp_path, edit(EMPTY))
    assert key in msg and words in msg and "Fix:" in msg


def test_empty_section_keys_are_refused_with_a_body(tmp_path):
    car_box(tmp_path)
    text = """\
[study]
name = "car"
[air]
speed = 30.0
[ground]
mode = "none"
[body]
reference_length = 1.0
[variants.car]
geometry = "car.stl"
[mesh]
ground_first_cell = 0.001
[domain]
length = 4.0
lead_in = 1.0
"""
    msg = _messages(tmp_path, text)
    for key in ("mesh.ground_first_cell", "domain.length", "domain.lead_in"):
        assert key in msg and "only for an empty test section" in msg
