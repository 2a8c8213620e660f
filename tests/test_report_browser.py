"""The report in a real browser: headless Chromium loads the demo's report, prints it and photographs it.

Without Chromium these tests skip, unless ``UNMIX_REQUIRE_BROWSER`` is set (``.ci/run`` sets it and
installs Debian's ``chromium`` first), where a missing browser fails them.
"""

from __future__ import annotations

import base64
import os
import re
import struct
import zlib

import imagecodecs
import numpy as np
import pytest

from unmix.demo.run import run_demo
from unmix.errors import BrowserError, OutputExistsError
from unmix.io.browser import Browser, find_chromium, print_pdf, write_report_pdf
from unmix.io.products.claim import ProductSet
from unmix.io.report import write_report
from unmix.report.print_css import PRINT_CSS

# A4 in PostScript points: 210 x 297 mm (ISO 216) at 72 points per inch (PDF user space, ISO 32000-1 8.3.2.3)
A4_PT = (210 / 25.4 * 72, 297 / 25.4 * 72)


@pytest.fixture(scope="module")
def browser():
    try:
        find_chromium()
    except BrowserError as exc:
        if os.environ.get("UNMIX_REQUIRE_BROWSER"):
            pytest.fail(f"UNMIX_REQUIRE_BROWSER is set but {exc}")
        pytest.skip(f"no headless Chromium here ({exc}); set UNMIX_REQUIRE_BROWSER=1 to make this a failure")
    with Browser(timeout=120) as b:
        yield b


@pytest.fixture(scope="module")
def demo_page(tmp_path_factory):
    # the size tests/test_demo.py runs: every section of the report has data at it
    out = tmp_path_factory.mktemp("demo")
    run_demo(out, size=96, n_time=32, echo=lambda *_: None)
    return out / "report" / "report.html"


def _png_sizes(html: str) -> list[tuple[int, int]]:
    """(width, height) of every PNG data URI of a page, read from its IHDR chunk (PNG spec, ISO 15948 11.2.2)."""
    sizes = []
    for data in re.findall(r'src="data:image/png;base64,([^"]+)"', html):
        head = base64.b64decode(data[:64])
        assert head[:8] == b"\x89PNG\r\n\x1a\n" and head[12:16] == b"IHDR"
        sizes.append(struct.unpack(">II", head[16:24]))
    return sizes


def _pdf_pages(data: bytes) -> tuple[int, int, list[tuple[float, float]]]:
    """Page objects, the root page tree's /Count and each /MediaBox's size of an uncompressed-object PDF
    (ISO 32000-1 7.7.3: the root /Pages node has no /Parent; its /Count is the number of pages)."""
    objects = re.findall(rb"\d+ 0 obj(.*?)endobj", data, flags=re.S)
    pages = [o for o in objects if re.search(rb"/Type\s*/Page(?![A-Za-z])", o)]
    roots = [o for o in objects if re.search(rb"/Type\s*/Pages\b", o) and b"/Parent" not in o]
    assert len(roots) == 1
    count = int(re.search(rb"/Count\s+(\d+)", roots[0]).group(1))
    boxes = [tuple(float(v) for v in m.split()) for m in re.findall(rb"/MediaBox\s*\[([^\]]*)\]", data)]
    return len(pages), count, [(b[2] - b[0], b[3] - b[1]) for b in boxes]


def _png_uri(width: int, height: int) -> str:
    rgb = (np.arange(width * height * 3) % 251).astype(np.uint8).reshape(height, width, 3)
    return "data:image/png;base64," + base64.b64encode(imagecodecs.png_encode(rgb)).decode()


def _page(tmp_path, body: str, *, css: str = "", name: str = "page.html"):
    path = tmp_path / name
    path.write_text(f"<!doctype html><html><head><meta charset='utf-8'><title>t</title><style>{css}</style>"
                    f"</head><body>{body}</body></html>", encoding="utf-8")
    return path


def test_demo_report_images_load_without_errors(browser, demo_page):
    check = browser.inspect(demo_page)
    html = demo_page.read_text(encoding="utf-8")
    sizes = _png_sizes(html)
    assert len(check.images) == html.count("<img") and len(sizes) >= 1
    assert check.broken_images == (), check.problems
    # Chromium's decoded sizes agree with the sizes written in the PNG headers themselves (ISO 15948)
    assert sorted((im.width, im.height) for im in check.images) == sorted(sizes)
    assert check.errors == (), check.errors
    assert check.external == (), "the report must be self-contained"


def test_broken_page_is_caught(browser, tmp_path):
    body = (f"<img alt='good' src='{_png_uri(8, 6)}'>"
            "<img alt='corrupt' src='data:image/png;base64,iVBORw0KGgoAAAAA'>"
            "<img alt='missing' src='missing.png'>"
            "<img alt='remote' src='http://127.0.0.1:9/logo.png'>"
            "<script>console.error('deliberate failure'); undefinedFunction();</script>")
    check = browser.inspect(_page(tmp_path, body))
    assert [im.alt for im in check.images] == ["good", "corrupt", "missing", "remote"]
    assert [im.alt for im in check.broken_images] == ["corrupt", "missing", "remote"]
    assert (check.images[0].width, check.images[0].height) == (8, 6)
    text = "\n".join(check.errors)
    assert "ReferenceError" in text and "undefinedFunction" in text
    assert "console.error: deliberate failure" in text
    assert "missing.png" in text
    assert check.external == ("http://127.0.0.1:9/logo.png",)
    assert len(check.problems) >= 6


def test_lazy_images_below_the_screen_are_loaded_before_the_check(browser, tmp_path):
    body = (f"<div style='height: 5000px'>spacer</div><img alt='lazy' loading='lazy' src='{_png_uri(12, 7)}'>"
            "<img alt='lazy and missing' loading='lazy' src='gone.png'>")
    check = browser.inspect(_page(tmp_path, body), height=600)
    assert [(im.alt, im.loaded, im.width, im.height) for im in check.images] == [
        ("lazy", True, 12, 7), ("lazy and missing", False, 0, 0)]
    assert any("gone.png" in e for e in check.errors)


def test_print_css_keeps_wide_content_on_the_page(browser, tmp_path):
    cells = "".join(f"<td>c-{i} holds several words</td>" for i in range(12))
    body = (f"<h1>Wide things</h1><table><tr>{cells}</tr></table>"
            f"<figure><img alt='wide' src='{_png_uri(1600, 40)}'></figure>"
            f"<p>{'x' * 400}</p>"
            f"<div style='overflow:auto'><pre>{'long line of a log file ' * 12}</pre></div>")
    plain = browser.inspect(_page(tmp_path, body, name="plain.html"))
    cut = {o.element for o in plain.overflow}
    assert cut == {"table", "img", "p", "div"}, plain.problems
    assert all(o.right > plain.print_width_px or o.clipped for o in plain.overflow)
    printed = browser.inspect(_page(tmp_path, body, css=PRINT_CSS, name="printed.html"))
    assert printed.overflow == (), printed.problems
    assert printed.broken_images == () and printed.errors == ()


def test_overflow_check_still_sees_what_print_css_cannot_fix(browser, tmp_path):
    # 30 columns of 10-digit numbers: wider than A4 whatever the wrapping, as no number may be broken
    row = "".join(f"<td>{1234567.891 + i:.3f}</td>" for i in range(30))
    check = browser.inspect(_page(tmp_path, f"<table id='wide'><tr>{row}</tr></table>", css=PRINT_CSS))
    assert [o.element for o in check.overflow] == ["table#wide"]
    assert check.overflow[0].right > check.print_width_px


def test_demo_report_fits_the_a4_text_width(browser, demo_page, tmp_path):
    html = demo_page.read_text(encoding="utf-8")
    if PRINT_CSS not in html:  # until the page carries the print stylesheet itself
        html = html.replace("</head>", f"<style>{PRINT_CSS}</style></head>", 1)
    page = tmp_path / "report.html"
    page.write_text(html, encoding="utf-8")
    check = browser.inspect(page)
    assert check.overflow == (), check.problems


def test_demo_report_prints_to_a4_pdf(browser, demo_page, tmp_path):
    pdf = browser.print_pdf(demo_page, tmp_path / "report.pdf")
    data = pdf.read_bytes()
    assert data.startswith(b"%PDF-") and data.rstrip().endswith(b"%%EOF")  # ISO 32000-1 7.5.2, 7.5.5
    n_pages, count, boxes = _pdf_pages(data)
    assert n_pages == count >= 1
    assert len(boxes) >= n_pages and all(abs(w - A4_PT[0]) < 1.5 and abs(h - A4_PT[1]) < 1.5 for w, h in boxes)
    assert len(data) > 50_000  # the figures are in it (common practice: a text-only page is a few KB)


def test_page_breaks_give_pages(browser, tmp_path):
    # CSS Fragmentation 3: 'break-before: page' starts a new page, so three sections print on three pages
    body = "".join(f"<section style='break-before: page'><h2>Part {i}</h2></section>" for i in range(3))
    data = browser.print_pdf(_page(tmp_path, body), tmp_path / "three.pdf").read_bytes()
    assert _pdf_pages(data)[:2] == (3, 3)


def test_screenshot_of_demo_report(browser, demo_page, tmp_path):
    top = imagecodecs.png_decode(browser.screenshot(demo_page, tmp_path / "top.png", width=1000,
                                                    height=700).read_bytes())
    assert top.shape[:2] == (700, 1000)
    assert float(top.std()) > 5  # text and figures, not a blank page
    whole = imagecodecs.png_decode(browser.screenshot(demo_page, tmp_path / "all.png", width=1000,
                                                      height=None).read_bytes())
    assert whole.shape[1] == 1000 and whole.shape[0] > 700
    np.testing.assert_array_equal(whole[:700], top)  # the full page starts with the screen's view


def test_write_report_pdf_joins_the_report_set(browser, tmp_path):
    import pandas as pd

    out = tmp_path / "rep"
    page = _page(tmp_path, f"<h1>Areas</h1><img alt='map' src='{_png_uri(40, 30)}'>").read_text()
    table = pd.DataFrame({"class": ["a", "b"], "area_ha": [1.5, 2.5]})
    with ProductSet([out / "report.html", out / "areas.csv", out / "report.pdf"]) as products:
        written = write_report(page, {"areas": table}, out, products=products)
        pdf = write_report_pdf(written[0], out / "report.pdf", products=products)
        assert not pdf.exists()  # staged with the page, committed with it
    assert sorted(p.name for p in out.iterdir()) == ["areas.csv", "report.html", "report.pdf"]
    before = pdf.read_bytes()
    assert before.startswith(b"%PDF-") and _pdf_pages(before)[0] == 1
    with pytest.raises(OutputExistsError, match="--overwrite"):
        write_report_pdf(out / "report.html", pdf)
    assert pdf.read_bytes() == before
    write_report_pdf(out / "report.html", pdf, overwrite=True)
    assert sorted(p.name for p in out.iterdir()) == ["areas.csv", "report.html", "report.pdf"]


def test_missing_failing_or_silent_chromium_is_one_error(tmp_path, monkeypatch):
    page = _page(tmp_path, "<p>x</p>")
    monkeypatch.setenv("UNMIX_CHROMIUM", str(tmp_path / "no-such-browser"))
    with pytest.raises(BrowserError, match="apt-get install chromium") as err:
        write_report_pdf(page, tmp_path / "a.pdf")
    assert "\n" not in str(err.value)
    monkeypatch.setenv("UNMIX_CHROMIUM", "false")
    with pytest.raises(BrowserError, match="exited"):
        write_report_pdf(page, tmp_path / "a.pdf")
    silent = tmp_path / "silent.sh"
    silent.write_text(f"#!/bin/sh\necho $$ > {tmp_path / 'pid'}\nexec sleep 60\n")
    silent.chmod(0o755)
    monkeypatch.setenv("UNMIX_CHROMIUM", str(silent))
    with pytest.raises(BrowserError, match="within 1 s"):
        print_pdf(page, tmp_path / "b.pdf", timeout=1)
    pid = int((tmp_path / "pid").read_text())
    assert not os.path.exists(f"/proc/{pid}"), "the silent browser was left running"
    # nothing left of the failed runs but the page and the fake browser's files
    assert sorted(p.name for p in tmp_path.iterdir()) == ["page.html", "pid", "silent.sh"]


def test_pdf_stream_lengths_inflate(browser, tmp_path):
    """Every Flate stream of the printed PDF inflates with zlib (ISO 32000-1 7.4.4), so the file is whole."""
    data = browser.print_pdf(_page(tmp_path, f"<p>text</p><img src='{_png_uri(50, 50)}'>"),
                             tmp_path / "s.pdf").read_bytes()
    streams = re.findall(rb"/Filter\s*/FlateDecode.*?stream\r?\n(.*?)\r?\nendstream", data, flags=re.S)
    assert streams
    for s in streams:
        zlib.decompress(s)
