"""The sweep's per-case flow columns equal what `postproc flow` gives for the
same case, and the diffuser columns follow one-dimensional theory on a
synthetic channel case written like a solver export inside a sweep folder.

The case: the ground (z = 0) and a floor rising from H1 to H2 between XT
and XE (test_diffuser.py's channel), a uniform 1-D flow u = Q/(W h(x)) with
Bernoulli pressure (White, *Fluid Mechanics*, 7th ed. 2011, §6.11), two
counter-rotating Lamb–Oseen vortices under the floor (Lamb 1932,
*Hydrodynamics* §334a) and a floor wall shear that reverses at XS.
"""
from __future__ import annotations

import json
import math
import warnings

import numpy as np
import pytest
from click.testing import CliRunner

from caseprep.contract.frames import place_body
from caseprep.contract.manifest import CaseRecord, Manifest, Reference, write_manifest
from postproc.cli import main
from postproc.io import flow as flowio
from postproc.pipelines.flow_columns import FlowOptions, analyse_case_flow, flow_metrics
from postproc.pipelines.sweep import SweepOptions, postprocess_sweep

from flow_meshes import box_grid, box_patch, lamb_oseen

warnings.filterwarnings("ignore", category=DeprecationWarning)

NX, NY, NZ = 40, 100, 10
W = 0.5
H1, H2 = 0.04, 0.08
XT, XE, XS = 0.3, 0.8, 0.7
QV = 2.0
RHO = 1.2
V = 50.0
GAMMA, RC, YV, ZV = 1.0, 0.012, 0.1, 0.02


def h_of_x(x):
    return np.interp(x, [0.0, XT, XE, 1.0], [H1, H1, H2, H2])


def write_case(root):
    import pyvista as pv

    g = box_grid(NX, NY, NZ, (0, 1, -W / 2, W / 2, 0, 1), zmap=lambda X, Y, S: S * h_of_x(X))
    X = flowio.cell_centres(g)
    u = QV / (W * h_of_x(X[:, 0]))
    U = np.column_stack([u, np.zeros_like(u), np.zeros_like(u)])
    # a counter-rotating pair in the cross-flow (no net flow through a station)
    U += lamb_oseen(X, +GAMMA, RC, (-YV, ZV)) + lamb_oseen(X, -GAMMA, RC, (YV, ZV))
    g.cell_data["U"] = U
    g.cell_data["p"] = 10.0 - 0.5 * u**2
    top, bottom = box_patch(g, NX, NY, NZ, "top"), box_patch(g, NX, NY, NZ, "bottom")
    for s in (top, bottom):
        c = s.cell_centers().points
        s.cell_data["p"] = 10.0 - 0.5 * (QV / (W * h_of_x(c[:, 0]))) ** 2
        s.cell_data["U"] = np.zeros((s.n_cells, 3))
        tau = np.zeros((s.n_cells, 3))
        tau[:, 0] = np.where(c[:, 0] < XS, 1.0, -1.0)
        s.cell_data["wallShearStress"] = tau
    case = root / "cases" / "chan-0001"
    (case / "VTK").mkdir(parents=True)
    (case / "logs").mkdir()
    (case / "logs" / "export.done").write_text("")
    mb = pv.MultiBlock()
    mb["internal"] = g
    b = pv.MultiBlock()
    b["floor"] = top.extract_surface(algorithm=None) if not isinstance(top, pv.PolyData) else top
    b["ground"] = bottom.extract_surface(algorithm=None) if not isinstance(bottom, pv.PolyData) else bottom
    mb["boundary"] = b
    mb.save(str(case / "VTK" / "chan-0001_100.vtm"))
    placement = place_body(np.array([0.1, 0.0, H1]), np.array([0.25, 0.0, H1]), H1, H1)
    ref = Reference(area=0.02, length=1.0, wheelbase=0.8, front_axle=(0.1, 0.0, 0.0), rear_axle=(0.9, 0.0, 0.0),
                    moment_point=(0.5, 0.0, 0.0), rho=RHO, nu=1.5e-5, speed=V)
    rec = CaseRecord(case_id="chan-0001", folder="cases/chan-0001", variant="chan",
                     params={"ride_height_front": H1, "ride_height_rear": H1, "pitch_deg": 0.0, "yaw_deg": 0.0,
                             "speed": V, "mesh_level": 0},
                     yaw_mode="crosswind", ground="moving", mesh_frame="body", placement=placement,
                     wind_direction_body=(1.0, 0.0, 0.0), reference=ref,
                     patches={"body": ["floor"], "wheels": [], "ground": "ground"}, fidelity="smoke")
    write_manifest(Manifest(cases=(rec,), tool_version="test", config_file="", config_hash="", created_utc="",
                            study="DEMO channel"), root)
    (root / "cases.txt").write_text("chan-0001\n")
    return case


@pytest.fixture(scope="module")
def sweep(tmp_path_factory):
    root = tmp_path_factory.mktemp("flowcols") / "sw"
    case = write_case(root)
    analysis = postprocess_sweep(root)
    return root, case, analysis


def test_sweep_columns_equal_postproc_flow(sweep):
    root, case, analysis = sweep
    row = json.loads((root / "results.json").read_text())["cases"][0]
    r = CliRunner().invoke(main, ["flow", str(case), "--json"])
    assert r.exit_code == 0, r.output
    cli = flow_metrics(json.loads(r.output)).to_dict()
    flow_keys = [k for k in cli if k.startswith(("diffuser_", "vortex_", "separation_", "floor_"))]
    assert len(flow_keys) >= 20
    for k in flow_keys:
        a, b = row.get(k), cli[k]
        if b is None:
            assert a is None, k
        else:
            assert a == pytest.approx(b, rel=1e-12, abs=1e-15), k
    # and the CSV carries the same columns
    head = (root / "results.csv").read_text().splitlines()[0].split(",")
    assert all(k in head for k in flow_keys)


def test_diffuser_columns_follow_one_dimensional_theory(sweep):
    _, _, analysis = sweep
    row = analysis.outcomes[0].flow
    ideal = 1.0 - (H1 / H2) ** 2  # White §6.11: closed duct, uniform inviscid flow
    assert row["diffuser_cpr_ideal"] == pytest.approx(ideal, rel=0.03)
    # a closed channel: the bulk velocities decelerate as the areas grow, nothing enters from the sides
    assert row["diffuser_cpr_ideal_bulk"] == pytest.approx(row["diffuser_cpr_ideal"], rel=0.02)
    assert abs(row["diffuser_side_inflow"]) < 0.02
    assert row["diffuser_cpr"] == pytest.approx(ideal, rel=0.05)
    u1 = QV / (W * H1)
    # Cp at the throat against the free stream: (p − p_ref)/(½ρV²) of the Bernoulli pressure (kinematic, p_ref 0)
    assert row["diffuser_cp_throat"] == pytest.approx((10.0 - 0.5 * u1**2) / (0.5 * V**2), rel=0.02)
    # stations found from the floor: the throat at the end of the low part, the exit at the trailing edge
    tx, ex = row["diffuser_throat_x"], row["diffuser_exit_x"]
    assert tx == pytest.approx(XT, abs=0.02) and ex > 0.95
    # the floor's wall shear reverses at XS, between throat and exit
    assert row["separation_x"] == pytest.approx(XS, abs=0.03)
    assert row["separation_fraction"] == pytest.approx((XS - tx) / (ex - tx), abs=0.05)


def test_vortex_pair_columns(sweep):
    _, _, analysis = sweep
    row = analysis.outcomes[0].flow
    for s in ("70", "85"):
        # the pair sits at y = ±YV, ZV above the ground; |Γ| of the Q > threshold core is a part of the
        # vortex's total (Lamb–Oseen: 1 − e^{−r²/rc²} of Γ inside r), so less than GAMMA but of its order
        assert row[f"vortex_{s}_y"] == pytest.approx(YV, abs=0.006)
        assert row[f"vortex_{s}_height"] == pytest.approx(ZV, abs=0.004)
        assert 0.4 * GAMMA < row[f"vortex_{s}_circulation"] < GAMMA


def test_case_without_volume_result_is_reported_not_fatal(tmp_path):
    root = tmp_path / "sw"
    case = write_case(root)
    (case / "VTK" / "chan-0001_100.vtm").unlink()
    analysis = postprocess_sweep(root)
    o = analysis.outcomes[0]
    assert o.flow == {} and any(n.startswith("flow:") for n in o.notes)
    assert analysis.report_data.pictures_skipped  # nothing to picture, and the report says so


def test_missing_pressure_names_the_array(tmp_path):
    root = tmp_path / "sw"
    case = write_case(root)
    import pyvista as pv

    f = case / "VTK" / "chan-0001_100.vtm"
    mb = pv.read(str(f))
    del mb["internal"].cell_data["p"]
    mb.save(str(f))
    cf = analyse_case_flow(case, FlowOptions())
    assert "'p'" in (cf.payload["diffuser"].get("error") or "")
    assert math.isfinite(cf.metrics.columns["floor_suction_area"])  # the floor patch still has p


def test_missing_baseline_names_the_variants_and_config_sets_it(tmp_path):
    from caseprep.contract.errors import UserError
    from caseprep.contract.manifest import read_manifest, write_manifest
    from dataclasses import replace as dc_replace
    from postproc.pipelines.report_data import ReportOptions

    root = tmp_path / "sw"
    write_case(root)
    with pytest.raises(UserError, match="choose one of: chan"):
        postprocess_sweep(root, SweepOptions(report=ReportOptions(baseline="wedge")))
    # the config's [report] section travels in the manifest records
    m = read_manifest(root)
    rec = dc_replace(m.cases[0], info={**m.cases[0].info, "report": {"baseline": "nope"}})
    write_manifest(dc_replace(m, cases=(rec,)), root)
    with pytest.raises(UserError, match="report.baseline"):
        postprocess_sweep(root, SweepOptions(force=True))
    a = postprocess_sweep(root, SweepOptions(force=True, report=ReportOptions(baseline="chan", pictures=False)))
    assert a.report_data.baseline == "chan"
