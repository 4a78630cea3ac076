"""A demo-sized sweep report from invented data (DEMO): three variants, two
ride heights, two yaw angles (12 cases), picture scenes on synthetic
plates, force histories and flow columns — for the report tests, without
running the solver."""
from __future__ import annotations

import numpy as np

from postproc.pipelines.sweep_rows import CaseResult
from postproc.pipelines.case_scene import scene_difference
from postproc.pipelines.report_data import PictureCase, ReportOptions, assemble, history_from_monitor

from test_pictures import cp_field, scene

NASTY_TITLE = 'Floor <script>alert("x")</script> & "quotes" \'single\' <b>bold</b>'
NASTY_NOTE = "note with <script>document.write('owned')</script> & an ampersand"


def demo_rows(variants):
    rows = []
    k = 0
    for i, v in enumerate(variants):
        for h in (0.020, 0.030):
            for yaw in (0.0, 4.0):
                k += 1
                cl = -(0.3 + 0.5 * i) * (1.0 + 3.0 * (0.03 - h)) * (1.0 - 0.02 * yaw)
                rows.append(CaseResult(case_id=f"{v}-{k:04d}", variant=v, ride_height_front=h,
                                       ride_height_rear=h + 0.007, pitch_deg=-0.6, yaw_deg=yaw, cl=cl,
                                       cd=0.2 + 0.01 * i + 0.1 * (0.03 - h), cs=0.012 * yaw,
                                       cl_front=0.5 * cl, cl_rear=0.5 * cl, balance=0.45 + 0.05 * i,
                                       stability_margin=-0.1 if yaw else None,
                                       flags=("not-converged",) if (i == 2 and k % 4 == 0) else (), speed=40.0))
    return rows


def demo_analysis(rows) -> dict:
    """The analysis of the demo rows (``postproc analyse`` with the default settings)."""
    from dataclasses import asdict

    from postproc.io.analysis_config import AnalysisConfig
    from postproc.io.results_table import rows_table
    from postproc.pipelines.analysis import analyse_table

    return analyse_table(rows_table([asdict(r) for r in rows], "demo rows"), AnalysisConfig())


def demo_report_data(variants=("flat", "ramp8", "ramp14"), title="DEMO floor study", notes=(),
                     pictures=True, max_bytes=5_000_000):
    rows = demo_rows(variants)
    scenes, pcs = [], []
    if pictures:
        for i, v in enumerate(variants):
            scenes.append(scene(v, cp=lambda x, y, i=i: cp_field(x, y) - 0.2 * i))
            r = next(r for r in rows if r.variant == v and r.yaw_deg == 0.0)
            pcs.append(PictureCase(v, r.case_id, r.ride_height_front, r.ride_height_rear, 0.0))
        scenes = [scene_difference(s, scenes[0]) for s in scenes]
    hist = []
    it = np.arange(1.0, 181.0)
    for r in rows:
        mon = {"Time": it, "force.total_x": 10 + np.exp(-it / 30.0) + 0.01 * np.sin(it),
               "force.total_z": -30 - 5 * np.exp(-it / 25.0) + 0.02 * np.cos(it)}
        hist.append(history_from_monitor(r.case_id, mon, 54, "converged", bool(r.flags)))
    flow_rows = {r.case_id: {"variant": r.variant, "diffuser_cpr": 0.3 + 0.1 * j % 3, "diffuser_cpr_ideal": 0.85,
                             "diffuser_cpr_ideal_bulk": 0.5, "diffuser_effectiveness": 0.5,
                             "diffuser_side_inflow": 0.8, "diffuser_cp_throat": -0.7,
                             "separation_fraction": 0.24 if j == 5 else None, "floor_suction_area": 0.2,
                             "floor_cp_mean": -0.4, "vortex_70_circulation": 0.01, "vortex_70_y": 0.2,
                             "vortex_70_height": 0.006}
                 for j, r in enumerate(rows)}
    return assemble(rows, title=title, study="DEMO <study> & co", notes=list(notes), flow_rows=flow_rows,
                    scenes=scenes, picture_cases=pcs, histories=hist, analysis=demo_analysis(rows),
                    options=ReportOptions(pictures=pictures, baseline=variants[0] if pictures else None,
                                          max_bytes=max_bytes))
