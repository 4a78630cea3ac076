"""Presentation: the sweep report (HTML), its flow pictures and its plots.

Rendering only — every number shown here was computed before (pipelines and
kernels) and arrives as plain data:

* :mod:`postproc.report.scales` — the colour scales (one fixed diverging
  scale for pressure coefficients, categorical colours);
* :mod:`postproc.report.pictures` — off-screen VTK pictures of the flow
  (PNG bytes), one fixed camera per view for every variant;
* :mod:`postproc.report.plots` — matplotlib (Agg) plots (SVG/PNG bytes);
* :mod:`postproc.report.tables` — the HTML document itself.
"""
from .tables import build_context, write_report  # noqa: F401
