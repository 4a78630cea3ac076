"""The report's plots (postproc.report.plots) from plain data: well-formed
SVG with the labels as text, NaN values skipped, user strings kept literal
(no markup, no math mode). DEMO data."""
from __future__ import annotations

import xml.dom.minidom

import numpy as np

from postproc.pipelines.report_data import Curve, History, MapData, Panel, ParetoPoint, PlatformCurve
from postproc.report import plots as pl


def _svg(b: bytes) -> str:
    doc = xml.dom.minidom.parseString(b)
    assert doc.documentElement.tagName == "svg"
    return b.decode("utf-8")


def test_line_panels_skip_nan_and_keep_names_literal():
    c = [Curve("fl<at>", "yaw 0°", [20, 30, 40], [0.3, float("nan"), 0.35], flagged=[False, False, True]),
         Curve("$x$ & co", "yaw 4°", [20, 30], [0.5, 0.6], yerr=[0.01, 0.02])]
    text = _svg(pl.line_panels([Panel("−C_L", c), Panel("C_D", c)], "mean ride height (mm)"))
    assert "fl&lt;at&gt;" in text and "$x$ &amp; co" in text and "mean ride height (mm)" in text


def test_map_pareto_platform_histories():
    f, r = np.linspace(0.02, 0.04, 5), np.linspace(0.03, 0.05, 4)
    F, R = np.meshgrid(f, r)
    m = MapData("ramp", "−C_L", f, r, 1.0 - 5 * F + 3 * R, [0.02, 0.04], [0.03, 0.05], [0.93, 0.95], [0.01, -0.02])
    assert "ramp" in _svg(pl.map_contours([m, m]))
    pts = [ParetoPoint("a", "a", 0.2, 1.0, 0.002, 0.01, True, 1), ParetoPoint("b", "b", 0.21, 1.005, None, 0.01, True, 1),
           ParetoPoint("c", "c", 0.25, 0.8)]
    text = _svg(pl.pareto_plot(pts))
    assert "tie 1" in text
    text = _svg(pl.platform_plot([PlatformCurve("a", "front", [20, 40, 60], [0.03, 0.025, 0.018])],
                                 limits=[(0.0, "ground")]))
    assert "ground" in text
    it = np.arange(1, 101.0)
    h = [History(f"case-{k}", it, {"F_x": 1 + np.exp(-it / 10), "F_z": -3 + 0.01 * np.sin(it)}, 70.0, "converged",
                 k == 2) for k in range(5)]
    assert "case-4" in _svg(pl.history_multiples(h))
