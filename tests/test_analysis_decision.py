"""Honest ranking (postproc.kernels.decision): common points, completeness,
ties, area basis, constraints, weight stability, and the GCI carried into
the ranking through the analysis pipeline."""
from __future__ import annotations

import math

import pytest

from caseprep.contract.errors import UserError
from postproc.io.analysis_config import AnalysisConfig
from postproc.kernels.decision import DecisionOptions, PointData, decide, point_key
from postproc.kernels.meshstudy import grid_convergence

HEIGHTS = (0.02, 0.03, 0.04)


def _pts(downforce, flagged=(), cd=0.40, area=math.nan, u=0.0, yaw=0.0, clf=None):
    out = []
    for i, (h, df) in enumerate(zip(HEIGHTS, downforce)):
        f = -0.45 * df if clf is None else clf[i]
        out.append(PointData(point_key(h, h + 0.01, yaw, 40.0), ("not-converged",) if i in flagged else (),
                             -df, cd, f, -df - f, area, u_cl=u * df, u_cd=0.0))
    return out


def _by(res, name):
    return next(v for v in res["variants"] if v["variant"] == name)


def test_survivorship_variant_with_a_flagged_point_is_no_clean_winner():
    # The constructed example: A gives −C_L 1.30/1.25/1.10 at three ride
    # heights; B gives 0.70 (flagged)/1.32/1.15. Scored on its own unflagged
    # points B would look best; here B is incomplete and cannot win cleanly.
    res = decide({"A": _pts([1.30, 1.25, 1.10]), "B": _pts([0.70, 1.32, 1.15], flagged=(0,))},
                 DecisionOptions(weights={"downforce": 1.0}))
    a, b = _by(res, "A"), _by(res, "B")
    assert b["complete"] is False and a["complete"] is True
    assert b["flagged_points"][0]["ride_height_front"] == 0.02 and b["flagged_points"][0]["flags"] == ["not-converged"]
    assert len(res["common_points"]) == 2 and len(res["envelope"]) == 3
    # on the common points the scores follow the data: mean(1.32, 1.15) > mean(1.25, 1.10)
    assert b["metrics"]["downforce"]["value"] == pytest.approx((1.32 + 1.15) / 2)
    assert a["metrics"]["downforce"]["value"] == pytest.approx((1.25 + 1.10) / 2)
    assert b["score"] > a["score"]
    d = res["decision"]
    assert d["status"] == "incomplete" and d["winner"] is None and d["best_complete"] == "A"


def test_two_variants_0p1_percent_apart_with_1_percent_uncertainty_tie():
    # |Δs| = 0.001 relative ≤ √(0.01² + 0.01²): a tie (GUM-style combination,
    # JCGM 100:2008; the tie rule is ours: common practice, no source)
    res = decide({"A": _pts([1.000] * 3, u=0.01), "B": _pts([1.001] * 3, u=0.01)},
                 DecisionOptions(weights={"downforce": 1.0}))
    assert _by(res, "A")["tie_with"] == ["B"] and _by(res, "B")["tie_with"] == ["A"]
    assert res["decision"]["status"] == "tie" and res["decision"]["tied"] == ["A", "B"]
    # without uncertainty the same data give a (noted) clear winner
    clear = decide({"A": _pts([1.000] * 3), "B": _pts([1.001] * 3)}, DecisionOptions(weights={"downforce": 1.0}))
    assert clear["decision"]["winner"] == "B"
    assert any("ties cannot be judged" in n for n in clear["notes"])


def test_differences_inside_the_noise_stay_small():
    # no min–max stretching: 0.1 % more downforce is 0.001 of score, not 0.55
    res = decide({"A": _pts([1.000] * 3), "B": _pts([1.001] * 3)}, DecisionOptions(weights={"downforce": 1.0}))
    assert _by(res, "B")["score"] - _by(res, "A")["score"] == pytest.approx(0.001 / 1.0005, rel=1e-9)


def test_different_reference_areas_compare_force_areas():
    # A: C_L on 1.0 m², B: on 1.2 m². −C_L·A: A 1.2, B 1.2·1.1 = 1.32 m² → B more downforce
    res = decide({"A": _pts([1.2] * 3, area=1.0), "B": _pts([1.1] * 3, area=1.2)},
                 DecisionOptions(weights={"downforce": 1.0}))
    assert res["basis"] == "area"
    assert _by(res, "B")["metrics"]["downforce"]["value"] == pytest.approx(1.32)
    assert _by(res, "B")["metrics"]["downforce"]["unit"] == "m²"
    assert res["decision"]["winner"] == "B"


def test_constraints_and_weight_stability():
    # B has more downforce but its balance leaves the band [0.40, 0.48]
    a = _pts([1.20] * 3, clf=[-0.53, -0.54, -0.55])       # balance 0.44–0.46
    b = _pts([1.30] * 3, clf=[-0.70, -0.70, -0.70])       # balance 0.54
    res = decide({"A": a, "B": b}, DecisionOptions(weights={"downforce": 1.0},
                                                   constraints={"balance_min": 0.40, "balance_max": 0.48}))
    assert _by(res, "B")["constraints"]["balance_max"]["status"] == "violated"
    assert _by(res, "B")["eligible"] is False and res["decision"]["winner"] == "A"
    ws = res["weight_stability"]
    assert ws["stable"] and {c["factor"] for c in ws["checks"]} == {0.75, 1.25}


def test_weight_stability_reports_a_fragile_winner():
    # A: more downforce, B: less drag; with equal weights the lead is small
    # and a 25 % change of either weight flips it
    a = _pts([1.30] * 3, cd=0.400)
    b = _pts([1.25] * 3, cd=0.385)
    res = decide({"A": a, "B": b}, DecisionOptions(weights={"downforce": 1.0, "drag": 1.0}))
    ws = res["weight_stability"]
    assert not ws["stable"] and any(c["changed"] for c in ws["checks"])


def test_unknown_metric_gets_a_did_you_mean_error():
    from postproc.pipelines.analysis import resolve_options

    with pytest.raises(UserError) as e:
        resolve_options(AnalysisConfig(file="ANALYSIS.toml", weights={"downforse": 1.0}))
    msg = str(e.value)
    assert "Did you mean 'downforce'" in msg and "efficiency" in msg and "ANALYSIS.toml" in msg


# --------------------------------------------------------------------------- GCI into the ranking

def test_celik_2008_worked_example_still_reproduces():
    # Celik et al. (2008), J. Fluids Eng. 130(7) 078001, Table 1, first
    # column (quoted from memory): φ = 6.063, 5.972, 5.863 on N = 18000,
    # 8000, 4500 cells (2-D) → p = 1.53, φ_ext = 6.1685, GCI_fine = 2.2 %.
    h = [(1.0 / n) ** 0.5 for n in (18000, 8000, 4500)]
    r = grid_convergence(6.063, 5.972, 5.863, *h)
    assert r.order == pytest.approx(1.53, abs=0.005)
    assert r.extrapolated == pytest.approx(6.1685, abs=5e-5)
    assert 100 * r.gci_fine == pytest.approx(2.2, abs=0.05)


def _mesh_rows(variant, shift, levels=(0, 1, 2)):
    # second-order convergence on the √2 levels: φ(level) = φ_fine − 0.025·(2^(2−m) − 1)
    # → C_L −1.10/−1.15/−1.175 on levels 0/1/2, p = 2, GCI_fine = 1.25·0.025/1.175 ≈ 2.7 %
    rows = []
    for m in levels:
        cl = -1.175 - shift + 0.025 * (2 ** (2 - m) - 1)
        rows.append(f"{variant},0.030,0.040,0,40,{m},{cl:.6f},0.40,0,{0.45 * cl:.6f},{0.55 * cl:.6f},")
    return rows


def test_pair_within_the_gci_is_a_tie(tmp_path):
    from postproc.io.results_table import read_results_csv
    from postproc.pipelines.analysis import analyse_table

    head = "variant,ride_height_front,ride_height_rear,yaw_deg,speed,mesh_level,cl,cd,cs,cl_front,cl_rear,flags"
    cfg = AnalysisConfig(weights={"downforce": 1.0})
    p = tmp_path / "mesh.csv"
    p.write_text("\n".join([head, *_mesh_rows("A", 0.0), *_mesh_rows("B", 0.005)]) + "\n")
    d = analyse_table(read_results_csv(p), cfg)
    gci = next(s for s in d["mesh_study"] if s["variant"] == "A" and s["coefficient"] == "cl")
    assert gci["order"] == pytest.approx(2.0, rel=1e-6)
    assert gci["gci_fine"] == pytest.approx(1.25 * 0.025 / 1.175, rel=1e-6)   # Celik et al. 2008, GCI_fine^21
    ranking = d["ranking"]
    assert ranking["decision"]["status"] == "tie"               # 0.4 % apart, GCI ≈ 2.7 % each
    assert next(v for v in ranking["variants"] if v["variant"] == "A")["tie_with"] == ["B"]
    # the same finest-level values without the mesh axis: no uncertainty, B wins
    q = tmp_path / "fine.csv"
    q.write_text("\n".join([head, *_mesh_rows("A", 0.0, (2,)), *_mesh_rows("B", 0.005, (2,))]) + "\n")
    assert analyse_table(read_results_csv(q), cfg)["ranking"]["decision"]["winner"] == "B"


def test_yaw_retention_on_matched_ride_heights():
    # yawed runs only at the highest ride height: retention compares them with the
    # unyawed run at that same height, not with the mean over every height
    pts = _pts([1.30, 1.20, 1.00]) + [PointData(point_key(0.04, 0.05, 4.0, 40.0), (), -0.90, 0.40, -0.405, -0.495)]
    res = decide({"A": pts}, DecisionOptions(weights={"yaw_retention": 1.0}))
    assert res["variants"][0]["metrics"]["yaw_retention"]["value"] == pytest.approx(0.90 / 1.00)
