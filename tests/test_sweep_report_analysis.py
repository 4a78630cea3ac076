"""The sweep's report renders the analysis of its results table
(postproc.pipelines.analysis, what analysis.json holds): standing,
recommendation, maps and cautions come from it, never from a scoring of
the report's own."""
from __future__ import annotations

import numpy as np
import pytest

from caseprep.contract.records import Flag
from postproc.pipelines.sweep import analyse_results
from postproc.pipelines.sweep_rows import CaseResult
from postproc.report import write_report


def _quadratic(hf, hr):
    """C_L of an invented floor: a quadratic in the ride heights (m)."""
    return -(1.2 - 30.0 * hf + 12.0 * hr + 400.0 * hf**2 - 150.0 * hf * hr + 90.0 * hr**2)


def _rows(variant, k, balance_slope, flags_at=None):
    rows = []
    for i, (hf, hr, yaw) in enumerate([(0.02, 0.04, 0), (0.03, 0.05, 0), (0.02, 0.04, 5), (0.03, 0.05, 5)]):
        cl = -k * (1.0 - 0.02 * yaw)
        rows.append(CaseResult(f"{variant}-{i}", variant, hf, hr, -0.3, yaw, cl, 0.4, 0.02 * yaw,
                               cl_front=cl * (0.45 + balance_slope * (hf - 0.02)),
                               cl_rear=cl * (0.55 - balance_slope * (hf - 0.02)),
                               balance=0.45 + balance_slope * (hf - 0.02), stability_margin=0.1 if yaw else None,
                               flags=(Flag.NOT_CONVERGED,) if flags_at == i else (), speed=40.0))
    return rows


def test_report_is_self_contained_and_cautions(tmp_path):
    rows = _rows("flat", 1.0, 1.0) + _rows("ramp", 1.3, 2.0, flags_at=2)
    a = analyse_results(rows, title="Demo <study>", notes=["a <b> note"])
    p = write_report(a, tmp_path / "report.html")
    text = p.read_text()
    assert "validate every decision by physical test" in text.lower()
    assert "qualified engineers" in text
    # plots embedded as data URIs (SVG), nothing fetched from the network, no scripts
    assert "data:image/svg+xml;base64," in text and "http://" not in text and "https://" not in text
    assert "<script" not in text.lower()
    assert "Demo &lt;study&gt;" in text and "a &lt;b&gt; note" in text
    assert "ramp-2" in text and "not-converged" in text
    assert not list(tmp_path.glob(".*.tmp"))
    # ramp has 30 % more downforce but a flagged point: the analysis marks it incomplete, and the
    # report's standing is the analysis's, variant by variant
    ranking = a.analysis["ranking"]
    ramp = next(v for v in ranking["variants"] if v["variant"] == "ramp")
    assert ramp["complete"] is False and ramp["flagged_points"][0]["flags"] == ["not-converged"]
    data = a.report_data
    assert data.recommended == (ranking["decision"].get("winner") or None)
    assert {f.variant: f.rank for f in data.variants} == {v["variant"]: v["rank"] for v in ranking["variants"]}
    assert {f.variant: f.complete for f in data.variants} == {"flat": True, "ramp": False}


def test_aero_map_is_data_before_it_is_a_picture(tmp_path):
    # a 4 × 3 grid of unflagged points of one variant at zero yaw on the quadratic above: the
    # analysis carries the fitted map as numbers (a polynomial reproduces a quadratic to round-off:
    # linear algebra, no outside source needed); the report only draws them
    pts = [(hf, hr) for hf in (0.02, 0.03, 0.04, 0.05) for hr in (0.03, 0.045, 0.06)]
    rows = [CaseResult(f"m-{i}", "m", hf, hr, -0.3, 0.0, float(_quadratic(hf, hr)), 0.4, speed=40.0)
            for i, (hf, hr) in enumerate(pts)]
    a = analyse_results(rows, title="map")
    (m,) = a.analysis["maps"]
    assert m["variant"] == "m" and m["design"]["dim"] == 2
    F, R = (np.asarray(m["grid"][k], dtype=float) for k in ("ride_height_front", "ride_height_rear"))
    np.testing.assert_allclose(np.asarray(m["grid"]["cl"], dtype=float), _quadratic(F, R), rtol=0, atol=1e-9)
    (shown,) = a.report_data.maps
    np.testing.assert_allclose(shown.value, -np.asarray(m["grid"]["cl"], dtype=float), rtol=0, atol=0)
    text = write_report(a, tmp_path / "r.html").read_text()
    assert "Fitted ride-height maps" in text and "data:image/svg+xml;base64," in text


def test_a_table_the_analysis_refuses_gives_no_recommendation(tmp_path):
    # ride heights in mm: the analysis refuses the table (with its fix); the report still shows the
    # rows, says why there is no standing, and recommends nothing
    rows = [CaseResult(f"x-{i}", "x", 20.0 + i, 30.0 + i, 0.0, 0.0, -1.0, 0.4, speed=40.0) for i in range(3)]
    a = analyse_results(rows, title="mm")
    assert a.analysis is None and any("millimetres" in n for n in a.notes)
    assert a.report_data.recommended is None and a.report_data.variants == ()
    assert any(c.kind == "decision" for c in a.report_data.cautions)
    text = write_report(a, tmp_path / "r.html").read_text()
    assert "x-2" in text and "millimetres" in text
