"""Presentation: renders the sweep's data as a self-contained HTML report,
with flow pictures and plots. Computes nothing: every number arrives from
the pipelines (``SweepAnalysis.report_data``, see
:mod:`postproc.pipelines.report_data`), read by attribute.

* :mod:`postproc.report.scales` — the colour scales (one fixed diverging
  scale for pressure coefficients, categorical colours);
* :mod:`postproc.report.pictures` — off-screen VTK pictures of the flow
  (PNG/WebP bytes), one fixed camera per view for every variant;
* :mod:`postproc.report.plots` — matplotlib (Agg/SVG) plots;
* :mod:`postproc.report.document` — the self-contained HTML document.
"""
from __future__ import annotations

from .document import RenderInfo, render_report, write_report  # noqa: F401
