"""Progress of long work: the estimate of the time left, the bar on a
terminal and one line per finished case with the estimate otherwise, in
`caseprep run` and `postproc sweep`. The estimate's rule (mean time per
finished item so far, items without work left out) is common practice, no
source; the checks below are its arithmetic."""
from __future__ import annotations

import io
import re
import sys
from pathlib import Path

import pytest
from click.testing import CliRunner

from caseprep.contract.cli_progress import ProgressDisplay
from caseprep.contract.progress import ProgressMeter, format_duration

sys.path.insert(0, str(Path(__file__).parent))
from tiny_case import write_manifest_only  # noqa: E402
from test_runner import make_case  # noqa: E402


class Clock:
    def __init__(self):
        self.t = 100.0

    def __call__(self):
        return self.t


def test_eta_arithmetic():
    c = Clock()
    m = ProgressMeter(10, clock=c)
    assert m.eta() is None and "ETA -" in m.line()
    c.t += 20.0
    m.finish()
    m.finish()  # two cases in 20 s (side by side or not): 10 s each on average
    assert m.eta() == pytest.approx(80.0)
    for _ in range(3):
        m.finish(worked=False)  # skipped or reused: no work, and no longer to do
    assert m.eta() == pytest.approx(50.0) and m.finished == 5
    assert m.line() == "5/10 (50%), elapsed 20.0s, ETA 50.0s"
    assert m.bar(width=10).startswith("[#####-----] 5/10 (50%)")
    for _ in range(5):
        m.finish()
    assert m.eta() == 0.0


@pytest.mark.parametrize("t, text", [(None, "-"), (3.25, "3.2s"), (65, "1m05s"), (3600 + 7 * 60, "1h07m")])
def test_format_duration(t, text):
    assert format_duration(t) == text


def test_display_lines_and_bar():
    out = io.StringIO()
    d = ProgressDisplay(2, tty=False, stream=out)
    d.message("starting")
    d.item_done("case a: ok")
    first, second = out.getvalue().splitlines()
    assert first == "starting"
    assert re.fullmatch(r"case a: ok  \[1/2 \(50%\), elapsed [\d.]+s, ETA [\d.]+s\]", second)
    tty = io.StringIO()
    d = ProgressDisplay(2, tty=True, stream=tty)
    d.draw("a: solve 3.0s")
    d.item_done("case a: ok")
    d.close()
    text = tty.getvalue()
    assert "[------------------------] 0/2 (0%)" in text and "a: solve 3.0s" in text
    assert "\r\x1b[2K" in text and "case a: ok\n" in text and "1/2 (50%)" in text


def test_run_prints_one_line_per_case_with_eta(tmp_path):
    from caseprep.cli import main

    root = tmp_path / "s"
    write_manifest_only(root, ["a", "b", "c"])
    for cid in ("a", "b", "c"):
        make_case(root, cid)
    r = CliRunner().invoke(main, ["run", str(root), "--skip-solver-check", "-j", "1"])
    assert r.exit_code == 0, r.output
    done = [ln for ln in r.output.splitlines() if re.match(r"\[\d/3\] \w: ok in", ln)]
    assert len(done) == 3 and all(re.search(r"\[\d/3 \(\d+%\), elapsed .*, ETA .*\]$", ln) for ln in done)
    assert done[-1].endswith("ETA 0.0s]")
    # the next run has nothing to do: every case skipped, one line each
    r = CliRunner().invoke(main, ["run", str(root), "--skip-solver-check"])
    assert r.output.count("skipped (done before") == 3


def test_postproc_sweep_lines_with_eta(tmp_path):
    from postproc.cli import main

    root = write_manifest_only(tmp_path / "sw", ["a", "b"])
    r = CliRunner().invoke(main, ["sweep", str(root)])
    lines = [ln for ln in r.output.splitlines() if ln.startswith("[")]
    assert r.exit_code == 0 and len(lines) == 2 and all("ETA" in ln for ln in lines)
    r = CliRunner().invoke(main, ["sweep", str(root), "--force"])
    assert "nothing changed" in r.output  # every result reused and the tables made from them: left alone
    (root / "cases" / "b" / "underfloor-run.json").write_text('{"case_id": "b", "folder": "cases/b", "status": "ok"}')
    r = CliRunner().invoke(main, ["sweep", str(root), "--force"])
    assert r.output.count("(reused: inputs unchanged)") == 1 and r.output.count("ETA") == 2
