"""Aero-map fitting, variant ranking and the HTML report."""
from __future__ import annotations

import numpy as np
import pytest

from caseprep.contract.records import Flag
from postproc.kernels.aeromap import fit_response_surface
from postproc.kernels.ranking import CaseResult, rank_variants, variant_metrics
from postproc.pipelines.sweep import analyse_results
from postproc.report import write_report


def _quadratic(hf, hr):
    return 1.2 - 30.0 * hf + 12.0 * hr + 400.0 * hf**2 - 150.0 * hf * hr + 90.0 * hr**2


def test_quadratic_map_recovered_exactly():
    # Least squares reproduces any polynomial in its own span to round-off
    # (linear algebra; no outside source needed).
    hf, hr = np.meshgrid([0.02, 0.03, 0.04, 0.05], [0.03, 0.045, 0.06])
    hf, hr = hf.ravel(), hr.ravel()
    fit = fit_response_surface(hf, hr, _quadratic(hf, hr))
    assert fit.degree == 2
    assert fit.r2 == pytest.approx(1.0, abs=1e-12)
    q = np.array([0.025, 0.041]), np.array([0.035, 0.05])
    np.testing.assert_allclose(fit(*q), _quadratic(*q), rtol=1e-10)
    # gradient against the analytic derivative
    g = fit.gradient(0.033, 0.047)
    np.testing.assert_allclose(g, [-30.0 + 800.0 * 0.033 - 150.0 * 0.047, 12.0 - 150.0 * 0.033 + 180.0 * 0.047], rtol=1e-8)


def test_degree_lowered_with_few_points_and_constant_axis():
    fit = fit_response_surface([0.02, 0.03, 0.04], [0.05, 0.05, 0.05], [1.0, 2.0, 3.0])
    # rear ride height constant → only h_f terms; 3 points → quadratic in h_f
    assert all(j == 0 for _, j in fit.powers)
    np.testing.assert_allclose(fit([0.035], [0.05]), [2.5], rtol=1e-12)
    one = fit_response_surface([0.02], [0.03], [1.5])
    assert one.degree == 0 and one(0.1, 0.1) == pytest.approx(1.5)


def test_fit_does_not_modify_inputs():
    hf = np.array([0.02, 0.03, 0.04, 0.02, 0.03, 0.04]); hr = np.array([0.03] * 3 + [0.05] * 3)
    y = _quadratic(hf, hr)
    c = hf.copy(), hr.copy(), y.copy()
    fit_response_surface(hf, hr, y)
    for a, b in zip((hf, hr, y), c):
        np.testing.assert_array_equal(a, b)


def _rows(variant, k, balance_slope, flags_at=None):
    rows = []
    for i, (hf, hr, yaw) in enumerate([(0.02, 0.04, 0), (0.03, 0.05, 0), (0.02, 0.04, 5), (0.03, 0.05, 5)]):
        cl = -k * (1.0 - 0.02 * yaw)
        rows.append(CaseResult(f"{variant}-{i}", variant, hf, hr, -0.3, yaw, cl, 0.4, 0.02 * yaw,
                               balance=0.45 + balance_slope * (hf - 0.02), stability_margin=0.1 if yaw else None,
                               flags=(Flag.NOT_CONVERGED,) if flags_at == i else ()))
    return rows


def test_metrics_by_hand():
    m, notes = variant_metrics(_rows("a", 1.0, 2.0))
    assert m["downforce"] == pytest.approx((1.0 + 1.0 + 0.9 + 0.9) / 4)
    assert m["efficiency"] == pytest.approx(m["downforce"] / 0.4)
    assert m["balance_range"] == pytest.approx(2.0 * 0.01)
    assert m["yaw_retention"] == pytest.approx(0.9)
    assert m["min_stability_margin"] == pytest.approx(0.1)
    assert m["downforce_spread"] == pytest.approx(0.1 / 0.95)
    assert notes == []


def test_ranking_prefers_fast_and_robust_and_excludes_flagged():
    rows = _rows("robust", 1.0, 0.0) + _rows("twitchy", 1.02, 20.0) + _rows("slow", 0.6, 0.0, flags_at=1)
    scores = rank_variants(rows)
    names = [s.variant for s in scores]
    # twitchy has 2 % more downforce but its balance moves 20 percentage points
    assert names[0] == "robust"
    slow = next(s for s in scores if s.variant == "slow")
    assert slow.n_flagged == 1 and slow.flagged_cases == ("slow-1",)
    assert {s.variant for s in scores if s.pareto} == {"robust", "twitchy"}


def test_undefined_balance_is_noted_not_divided():
    rows = [CaseResult("z-0", "z", 0.02, 0.03, 0, 0, 0.0, 0.3, balance=None)]
    m, notes = variant_metrics(rows)
    assert m["balance_range"] is None and any("balance undefined" in n for n in notes)
    assert rank_variants(rows)[0].score >= 0.0


def test_report_is_self_contained_and_cautions(tmp_path):
    rows = _rows("flat", 1.0, 1.0) + _rows("ramp", 1.3, 2.0, flags_at=2)
    p = write_report(analyse_results(rows, title="Demo <study>", notes=["a <b> note"]), tmp_path / "report.html")
    text = p.read_text()
    assert "validate every decision by physical test" in text.lower()
    assert "qualified engineers" in text
    # plots embedded as data URIs (SVG), nothing fetched from the network, no scripts
    assert "data:image/svg+xml;base64," in text and "http://" not in text and "https://" not in text
    assert "<script" not in text.lower()
    assert "Demo &lt;study&gt;" in text and "a &lt;b&gt; note" in text
    assert "ramp-2" in text and "not-converged" in text
    assert not list(tmp_path.glob(".*.tmp"))


def test_aero_map_is_data_before_it_is_a_picture(tmp_path):
    # four unflagged points of one variant at zero yaw, on the quadratic above: the sweep's analysis
    # carries the fitted map as numbers (the report only draws them)
    pts = [(0.02, 0.03), (0.04, 0.03), (0.02, 0.06), (0.04, 0.06), (0.03, 0.045)]
    rows = [CaseResult(f"m-{i}", "m", hf, hr, -0.3, 0.0, float(-_quadratic(hf, hr)), 0.4) for i, (hf, hr) in enumerate(pts)]
    a = analyse_results(rows, title="map")
    (m,) = a.aero_maps
    assert m["variant"] == "m" and m["n_points"] == 5 and m["grid"] is not None
    front, rear, values = (np.asarray(m["grid"][k]) for k in ("front", "rear", "values"))
    assert front[0] == 0.02 and front[-1] == 0.04 and rear[0] == 0.03 and rear[-1] == 0.06
    fit = fit_response_surface([p[0] for p in pts], [p[1] for p in pts], [_quadratic(*p) for p in pts])
    F, R = np.meshgrid(front, rear)
    np.testing.assert_allclose(values, fit(F, R), rtol=1e-12)  # the same fit, evaluated on the grid
    text = write_report(a, tmp_path / "r.html").read_text()
    assert "Fitted ride-height maps" in text and "data:image/svg+xml;base64," in text
