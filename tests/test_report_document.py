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
