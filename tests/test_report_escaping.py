"""The report escapes every value it prints; the CSV never hands a spreadsheet a formula.

Stored script injection: text read from disk (manifest, run records, VTK
patch names) reaches the report's tables. The report template renders with
autoescape on; these tests put markup into run records and names and check
that none of it comes out live (tests/test_report_document.py poisons every
field of the report's data). CSV: cells starting with = + - @
tab or CR are prefixed with an apostrophe (OWASP, "CSV Injection"; common
practice).
"""
from __future__ import annotations

import csv
import io
import json
import sys
from pathlib import Path

from click.testing import CliRunner

sys.path.insert(0, str(Path(__file__).parent / "hostile"))

from builders import edit_manifest, finished_sweep, run_record  # noqa: E402
from caseprep.contract.templating import environment  # noqa: E402
from postproc.cli import main as postproc_main  # noqa: E402
from postproc.pipelines.sweep_rows import spreadsheet_safe  # noqa: E402

TEMPLATE = "report/sweep_report.html.j2"


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
