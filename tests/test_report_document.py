"""The sweep report document (postproc.report.document): the summary first
and the caution at the top, user strings shown as text, one self-contained
file (no network, no scripts), every embedded image decodable, the
`--no-pictures` path and the size limit. Data: report_fixtures (DEMO)."""
from __future__ import annotations

import base64
import io
import re
import xml.dom.minidom

import pytest

from postproc.report import RenderInfo, render_report, write_report
from postproc.report import pictures as pics

from report_fixtures import NASTY_NOTE, NASTY_TITLE, demo_report_data


def _images(text):
    return re.findall(r'<img src="data:([a-z/+]+);base64,([A-Za-z0-9+/=]+)"', text)


def test_no_pictures_report_is_self_contained_and_escaped(tmp_path):
    data = demo_report_data(variants=('fl<at', 'ra"mp', "r&x"), title=NASTY_TITLE, notes=[NASTY_NOTE],
                            pictures=False)
    info = RenderInfo()
    p = write_report(data, tmp_path / "report.html", info=info)
    text = p.read_text(encoding="utf-8")
    # caution first, then the verdict and the watch list, before any table
    i_caution, i_verdict, i_watch = text.index("Caution."), text.index('id="verdict"'), text.index('id="watch"')
    assert i_caution < i_verdict < i_watch < text.index('id="standings"')
    assert "qualified engineers" in text and "permitted and safe" in text
    # user strings are text: no markup of theirs survives, the escaped forms are there
    assert "<script" not in text.lower()
    assert "&lt;script&gt;alert(&#34;x&#34;)&lt;/script&gt; &amp; &#34;quotes&#34; &#39;single&#39;" in text
    assert "fl&lt;at" in text and "ra&#34;mp" in text and "r&amp;x" in text
    assert "<b>bold</b>" not in text and "&lt;b&gt;bold&lt;/b&gt;" in text
    # no network: nothing refers to a remote resource, and the page forbids it
    assert not re.search(r"(src|href)=\"(https?:)?//", text) and "url(" not in text
    assert "default-src 'none'" in text
    # every image decodes: SVG plots are well-formed XML
    imgs = _images(text)
    assert len(imgs) >= 3
    for mime, b64 in imgs:
        assert mime == "image/svg+xml"
        xml.dom.minidom.parseString(base64.b64decode(b64))
    assert "pictures switched off" in text
    assert info.size == len(text.encode("utf-8")) < 5_000_000


def test_pictures_embedded_and_decodable(tmp_path):
    problem = pics.rendering_problem()
    if problem is not None:
        pytest.skip(problem)
    from PIL import Image

    data = demo_report_data()
    text, info = render_report(data, pics.PictureOptions(width=480, height=200))
    pngs = [b for m, b in _images(text) if m == "image/png"]
    # five views for the two non-baseline variants, four for the baseline
    assert len(pngs) == 5 + 5 + 4
    for b64 in pngs:
        im = Image.open(io.BytesIO(base64.b64decode(b64)))
        im.load()
        assert im.size == (480, 200)
    assert info.backend and set(info.picture_seconds) == {s.case_id for s in data.scenes}
    # the verdict names the recommended variant first
    assert re.search(r'<p class="headline">[^<]*(ramp14|ramp8|flat)', text)


def test_size_limit_is_stated_when_exceeded(tmp_path):
    data = demo_report_data(pictures=False, max_bytes=10_000)
    text, info = render_report(data)
    assert info.size > 10_000 and "above the 0.0 MB aimed at" in text


def test_rendering_unavailable_still_writes_the_report(tmp_path, monkeypatch):
    monkeypatch.setattr(pics, "_STATUS", {})
    monkeypatch.setattr(pics, "_probe", lambda: (None, "no display and no EGL library (libEGL) installed"))
    data = demo_report_data()
    info = RenderInfo()
    p = write_report(data, tmp_path / "report.html", info=info)
    text = p.read_text(encoding="utf-8")
    assert "pictures not drawn" in text and "libegl1" in text
    assert 'id="envelope"' in text and info.backend is None


def _analysis(status="clear", winner="ramp14", tied=()):
    """An analysis.json as postproc.pipelines.analysis writes it (the parts the report reads; DEMO values)."""
    def var(name, rank, score, ties=()):
        return {"variant": name, "rank": rank, "score": score, "score_uncertainty": 0.01, "complete": True,
                "tie_with": list(ties), "pareto": rank < 3,
                "metrics": {"downforce": {"value": 0.3 * (4 - rank), "uncertainty": 0.02},
                            "drag": {"value": 0.2 + 0.01 * rank, "uncertainty": 0.003}}}
    return {
        "ranking": {"variants": [var("ramp14", 1, 0.9, tied), var("ramp8", 2, 0.88, tied), var("flat", 3, 0.1)],
                    "decision": {"status": status, "winner": winner, "best_complete": winner or "ramp14",
                                 "tied": list(tied), "message": "the two best scores differ by less than their "
                                                                "uncertainty" if tied else ""},
                    "weight_stability": {"stable": True, "top": "ramp14", "checks": []}},
        "peaks": [{"variant": "ramp14", "yaw_deg": 0.0, "speed": 40.0, "stall": True, "peak_h": 0.022}],
        "platform": [{"variant": "ramp14", "status": "ok", "bottoming_speed": 61.0, "bottoming_mode": "front",
                      "states": [{"speed": v, "ride_height_front": 0.03 - 0.004 * v / 20,
                                  "ride_height_rear": 0.04 - 0.003 * v / 20} for v in (0.0, 20.0, 40.0, 60.0)]}],
        "maps": [], "points": [],
    }


def test_analysis_results_drive_the_verdict_cautions_and_platform(tmp_path):
    from dataclasses import replace

    from postproc.pipelines.report_data import assemble

    base = demo_report_data(pictures=False)
    from report_fixtures import demo_rows

    rows = demo_rows(("flat", "ramp8", "ramp14"))
    data = assemble(rows, title="DEMO", analysis=_analysis())
    assert data.recommended == "ramp14" and data.decision["status"] == "clear"
    kinds = {c.kind for c in data.cautions}
    assert {"stall-in-envelope", "bottoming"} <= kinds
    assert [c.style for c in data.platform] == ["front", "rear"]
    text, _ = render_report(data)
    assert '<p class="headline">Build ramp14.</p>' in text
    assert "0.900 ± 0.01" in text and 'id="platform"' in text
    assert "falls again below it" in text and "reaches the ground at 61 m/s" in text
    # a tie: no winner is named, the tied variants are
    tie = assemble(rows, title="DEMO", analysis=_analysis("tie", None, ("ramp8",)))
    text, _ = render_report(replace(tie, options=base.options))
    assert "A tie: ramp8 cannot be told apart" in text and "Build" not in text.split('id="watch"')[0]
