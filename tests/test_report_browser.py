"""The demo-sized report opened in a real browser (Debian's chromium,
headless, driven through its DevTools protocol by tests/_devtools.py): no
console errors, no network requests, every image decodes, the screenshot
is not blank, printing to PDF works, and a title, variant names and notes
full of markup, quotes and ampersands show as text.

Skipped when chromium is missing unless UNDERFLOOR_REQUIRE_BROWSER=1 (set by
.ci/run, which installs it), where it fails.
"""
from __future__ import annotations

import base64
import io
import os

import numpy as np
import pytest

from postproc.report import RenderInfo, write_report
from postproc.report import pictures as pics

from _devtools import Browser, find_browser
from report_fixtures import NASTY_NOTE, NASTY_TITLE, demo_report_data

pytestmark = pytest.mark.browser

VARIANTS = ("flat", '<img src=x onerror="alert(1)">', 'r&d "14"')


def _require_browser():
    if find_browser() is None:
        msg = "chromium not installed (apt-get install -y --no-install-recommends chromium)"
        if os.environ.get("UNDERFLOOR_REQUIRE_BROWSER") == "1":
            pytest.fail(msg)
        pytest.skip(msg)


@pytest.fixture(scope="module")
def opened(tmp_path_factory):
    _require_browser()
    d = tmp_path_factory.mktemp("browser")
    pictures = pics.rendering_problem() is None
    data = demo_report_data(variants=VARIANTS, title=NASTY_TITLE, notes=[NASTY_NOTE], pictures=pictures)
    info = RenderInfo()
    path = write_report(data, d / "report.html", pics.PictureOptions(width=640, height=260), info=info)
    b = Browser(d / "profile")
    try:
        for domain in ("Page", "Runtime", "Log", "Network"):
            b.call(f"{domain}.enable")
        url = path.resolve().as_uri()
        b.call("Page.navigate", url=url)
        b.wait_for("Page.loadEventFired")
        yield b, url, info, pictures
    finally:
        b.close()


def test_no_console_errors_and_no_network(opened):
    b, url, _, _ = opened
    b.evaluate("1")  # flush the events queued while loading
    errors = [e for e in b.events if e["method"] in ("Runtime.exceptionThrown",)
              or (e["method"] == "Runtime.consoleAPICalled")
              or (e["method"] == "Log.entryAdded" and e["params"]["entry"]["level"] in ("error", "warning"))]
    assert errors == []
    requests = [e["params"]["request"]["url"] for e in b.events if e["method"] == "Network.requestWillBeSent"]
    assert all(u == url or u.startswith("data:") for u in requests), requests


def test_every_image_decodes(opened):
    b, _, _, pictures = opened
    imgs = b.evaluate("Array.from(document.images).map(i => [i.complete, i.naturalWidth, i.naturalHeight])")
    assert len(imgs) >= (14 + 4 if pictures else 4)  # pictures; envelope, yaw, trade-off and settling plots
    assert all(c and w > 0 and h > 0 for c, w, h in imgs), imgs
    # decode() rejects an image the browser cannot decode
    n = b.evaluate("Promise.all(Array.from(document.images).map(i => i.decode())).then(r => r.length)")
    assert n == len(imgs)


def test_user_strings_show_as_text(opened):
    b, _, _, _ = opened
    assert b.evaluate("document.querySelectorAll('script').length") == 0
    assert b.evaluate("document.title") == NASTY_TITLE
    assert b.evaluate("document.querySelector('h1').textContent") == NASTY_TITLE
    body = b.evaluate("document.body.innerText")
    assert NASTY_NOTE in body
    for v in VARIANTS:
        assert v in body
    # the variant name's markup did not become an element
    assert b.evaluate("document.querySelectorAll('img[src=x]').length") == 0


def test_screenshot_not_blank_and_prints(opened):
    from PIL import Image

    b, _, _, _ = opened
    shot = b.call("Page.captureScreenshot", format="png")
    im = np.asarray(Image.open(io.BytesIO(base64.b64decode(shot["data"]))).convert("RGB"), dtype=float)
    assert im.shape[0] > 100 and im.shape[1] > 100
    assert im.reshape(-1, 3).std(axis=0).max() > 10.0
    # caution at the top of the first screen
    top = b.evaluate("document.querySelector('.safety').getBoundingClientRect().top")
    assert 0 <= top < 400
    pdf = b.call("Page.printToPDF", printBackground=False, preferCSSPageSize=True)
    raw = base64.b64decode(pdf["data"])
    assert raw.startswith(b"%PDF") and raw.count(b"/Type /Page") + raw.count(b"/Type/Page") >= 3
