"""Presentation: the sweep report (HTML), its flow pictures and its plots.

Rendering only — every number shown here was computed before (pipelines and
kernels) and arrives as plain data (:class:`postproc.reportdata.ReportData`):

* :mod:`postproc.report.scales` — the colour scales (one fixed diverging
  scale for pressure coefficients, categorical colours);
* :mod:`postproc.report.pictures` — off-screen VTK pictures of the flow
  (PNG/WebP bytes), one fixed camera per view for every variant;
* :mod:`postproc.report.plots` — matplotlib (Agg/SVG) plots;
* :mod:`postproc.report.document` — the self-contained HTML document.
"""
from __future__ import annotations

from .document import RenderInfo, render_report, write_report  # noqa: F401


def make_sweep_report(sweep_dir, out_dir=None, *, title=None, force=False, progress=None, options=None,
                      flow=None, picture_options=None):
    """Post-process a sweep (:func:`postproc.sweep.postprocess_sweep`) and
    write its ``report.html``. Returns (outcomes, paths, render info)."""
    from ..reportdata import ReportOptions
    from ..sweep import postprocess_sweep
    from .pictures import PictureOptions

    outcomes, paths, data = postprocess_sweep(sweep_dir, out_dir, title=title, progress=progress, force=force,
                                              options=options or ReportOptions(), flow=flow)
    _, info = write_report(data, paths["report"], picture_options or PictureOptions())
    return outcomes, paths, info
