"""The report escapes every value it prints; the CSV never hands a spreadsheet a formula.

Stored script injection: text read from disk (manifest, run records, VTK
patch names) reaches the report's tables. The report template renders with
autoescape on; these tests put markup into every text field of every table
and check that none of it comes out live. CSV: cells starting with = + - @
tab or CR are prefixed with an apostrophe (OWASP, "CSV Injection"; common
practice).
"""
from __future__ import annotations

import csv
import io
import json
import sys
from html.parser import HTMLParser
from pathlib import Path

from click.testing import CliRunner
from markupsafe import Markup

sys.path.insert(0, str(Path(__file__).parent / "hostile"))

from builders import edit_manifest, finished_sweep, run_record  # noqa: E402
from caseprep.contract.records import Flag  # noqa: E402
from caseprep.contract.templating import environment  # noqa: E402
from postproc.cli import main as postproc_main  # noqa: E402
from postproc.kernels.ranking import CaseResult  # noqa: E402
from postproc.pipelines.sweep import analyse_results, spreadsheet_safe  # noqa: E402
from postproc.report.sweep_report import build_context  # noqa: E402

TEMPLATE = "report/sweep_report.html.j2"


def _analysis():
    rows = []
    for v, k in (("flat", 1.0), ("ramp", 1.2)):
        for i, (hf, hr, yaw) in enumerate([(0.02, 0.04, 0), (0.03, 0.05, 0), (0.025, 0.06, 0), (0.02, 0.04, 5)]):
            for lvl in (0, 1, 2):
                rows.append(CaseResult(f"{v}-{i}-{lvl}", v, hf, hr, -0.3, yaw, -k * (1 + 0.01 * lvl), 0.4, 0.01 * yaw,
                                       -0.4 * k, -0.6 * k, 0.4, 0.1 if yaw else None,
                                       flags=(Flag.NOT_CONVERGED,) if (i, lvl) == (1, 2) and v == "ramp" else (),
                                       mesh_level=lvl, speed=40.0))
    checks = [{"case_id": r.case_id, "status": "ok", "cells": 1000, "layers": "body 80 %", "iterations": 100,
               "convergence": "converged", "yplus_median": 40.0, "yplus_p95": 80.0, "yplus_share_in_range": 0.9,
               "yplus_range": "30-300"} for r in rows]
    return analyse_results(rows, title="t", study="s", notes=["n"], checks=checks)


class _Tags(HTMLParser):
    def __init__(self):
        super().__init__()
        self.tags: list[str] = []
        self.attrs: list[str] = []

    def handle_starttag(self, tag, attrs):
        self.tags.append(tag)
        self.attrs += [a for a, _ in attrs]


def _poison(obj, markers: list[str]):
    """``obj`` with every text leaf replaced by a unique piece of live markup."""
    if isinstance(obj, Markup):
        return obj  # the charts: markup made by the report itself
    if isinstance(obj, str):
        markers.append(f"<script>alert({len(markers)})</script><img src=x onerror=alert({len(markers)})>")
        return markers[-1]
    if isinstance(obj, dict):
        return {k: _poison(v, markers) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return type(obj)(_poison(v, markers) for v in obj)
    return obj


def test_every_text_field_of_every_table_is_escaped():
    ctx = build_context(_analysis())
    assert ctx["mesh_study"] and ctx["maps"] and ctx["checks"] and ctx["flagged"] and ctx["ranking"]
    markers: list[str] = []
    hostile = _poison(ctx, markers)
    html = environment().get_template(TEMPLATE).render(**hostile)
    p = _Tags()
    p.feed(html)
    assert "script" not in p.tags and "img" not in p.tags and "onerror" not in p.attrs
    shown = [i for i in range(len(markers)) if f"&lt;script&gt;alert({i})&lt;/script&gt;" in html]
    # every table row's text cells are printed: the tables alone give hundreds of fields
    assert len(shown) > 300, len(shown)
    for table in ("ranking", "maps", "table", "flagged", "checks", "mesh_study"):
        for k, v in hostile[table][0].items():
            if isinstance(v, str) and k not in ("rank",):
                i = markers.index(v)
                assert i in shown or k in _NOT_PRINTED.get(table, ()), (table, k)


#: context keys the template does not print (they drive layout only)
_NOT_PRINTED = {"table": ("speed", "mesh_level"), "flagged": ("ride_height_front", "ride_height_rear", "pitch_deg",
                "yaw_deg", "cl", "cd", "cs", "cl_front", "cl_rear", "balance", "stability_margin", "speed",
                "mesh_level")}


def test_numbers_from_a_hostile_run_record_never_reach_the_report(tmp_path):
    root = finished_sweep(tmp_path / "sw", ["a", "b"])
    (root / "cases" / "a" / "underfloor-run.json").write_text(json.dumps(
        run_record("a", cells="<script>alert(1)</script>", iterations="<b>many</b>")))
    (root / "cases" / "b" / "underfloor-run.json").write_text(json.dumps(
        run_record("b", layers=[{"patch": "<script>alert(2)</script>", "thickness_percent": 50.0}],
                   end_reason="<script>alert(3)</script>")))
    edit_manifest(root, lambda d: d["cases"][1].update(variant="=HYPERLINK(\"http://x\")"))
    r = CliRunner().invoke(postproc_main, ["sweep", str(root), "-q"])
    assert r.exit_code == 0, r.output
    text = (root / "report.html").read_text()
    assert "<script" not in text and "&lt;script&gt;alert(2)" in text
    rows = json.loads((root / "results.json").read_text())["cases"]
    a = next(x for x in rows if x["case_id"] == "a")
    assert "record-unreadable" in a["flags"] and "at cells" in a["notes"]
    cells = list(csv.reader(io.StringIO((root / "results.csv").read_text())))
    assert "'=HYPERLINK(\"http://x\")" in [c for row in cells for c in row]
    assert not any(c.startswith(("=", "+", "@")) for row in cells for c in row)


def test_spreadsheet_safe_neutralises_formula_starts_only_in_text():
    # OWASP "CSV Injection": = + - @ tab CR start a formula (common practice, no single source)
    for s in ("=1+1", "+1", "-1+2", "@SUM(A1)", "\t=1", "\r=1"):
        assert spreadsheet_safe(s) == "'" + s
    for v in ("flat", "30-300", "", 3, -2.5, None):
        assert spreadsheet_safe(v) == v


def test_case_templates_are_not_html_escaped():
    """The solver's dictionaries are not HTML: quotes and < stay as written."""
    env = environment()
    t = env.from_string("{{ x }}")
    assert t.render(x="a<b>'\"") == "a<b>'\""
    names = [n for n in env.list_templates() if n.endswith(".j2") and not n.endswith(".html.j2")]
    assert names and all(not env.autoescape(n) for n in names)
    assert env.autoescape(TEMPLATE)
    # a dictionary renders quotes and angle brackets as written
    assert "<" in env.from_string("{{ '<' }}").render()
