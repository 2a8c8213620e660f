"""A report page in headless Chromium: checked, printed to PDF, photographed.

:class:`Browser` starts one headless Chromium (Debian's package ``chromium``; ``UNMIX_CHROMIUM`` may
name another executable) and talks to it over the DevTools protocol (:mod:`._devtools`). For a page it

* **inspects** (:meth:`Browser.inspect`): whether every ``<img>`` loaded (complete, with a natural
  width above zero), every uncaught exception, ``console.error`` call, browser error message and failed
  resource, every request that left the machine's files (a self-contained page makes none), and, laid
  out for print at the A4 text width, every element that reaches past the page or is clipped;
* **prints** it to an A4 PDF (:meth:`Browser.print_pdf`), and
* **photographs** it (:meth:`Browser.screenshot`).

The module-level functions start a browser for one call. :func:`write_report_pdf` prints a report
page as one more product of a claimed :class:`~unmix.io.products.claim.ProductSet`.
"""

from __future__ import annotations

import base64
import contextlib
import json
import os
import re
import shutil
import tempfile
from dataclasses import dataclass
from pathlib import Path

from ..errors import BrowserError
from ..report.print_css import CONTENT_WIDTH_PX, MARGIN_MM, PAGE_MM
from ._devtools import DevTools
from .products.claim import ProductSet

__all__ = ["Browser", "ImageState", "Overflow", "PageCheck", "find_chromium", "inspect_page", "print_pdf",
           "screenshot", "write_report_pdf"]

#: Names tried on PATH, in order, when ``UNMIX_CHROMIUM`` is not set.
CHROMIUM_NAMES = ("chromium", "chromium-browser", "google-chrome", "google-chrome-stable")
_INSTALL = "install Debian's package 'chromium' (apt-get install chromium) or set UNMIX_CHROMIUM to a Chromium executable"
_MM_PER_INCH = 25.4

# After the load event: images marked lazy are loaded as a reader scrolling (or printing) would load them,
# then every image has loaded or failed and the fonts are ready (at most 20 s, so a stuck request cannot
# hang the check; such an image is reported as not loaded).
_SETTLE_JS = """(async () => {
  const images = Array.from(document.images);
  images.forEach(im => { if (im.loading === 'lazy') im.loading = 'eager'; });
  const done = images.map(im => im.complete ? null :
    new Promise(ok => { im.addEventListener('load', ok); im.addEventListener('error', ok); }));
  await Promise.race([Promise.all([...done, document.fonts.ready]), new Promise(ok => setTimeout(ok, 20000))]);
  return true;
})()"""
# Image states and the outermost elements that reach past the text width or clip their content.
_IMAGES_JS = """JSON.stringify(Array.from(document.images, im => ({src: im.currentSrc || im.src || '',
  alt: im.alt || '', complete: im.complete, width: im.naturalWidth, height: im.naturalHeight})))"""
_OVERFLOW_JS = """((limit) => {
  const found = [];
  const name = el => el.tagName.toLowerCase() + (el.id ? '#' + el.id : '') +
    Array.from(el.classList, c => '.' + c).join('');
  const beyond = r => r.right > limit + 0.5 || r.left < -0.5;
  for (const el of document.body.querySelectorAll('*')) {
    if (found.some(f => f.el.contains(el))) continue;
    const r = el.getBoundingClientRect();
    if (r.width === 0 && r.height === 0) continue;
    const cs = getComputedStyle(el);
    // hidden or scrolled content; or its own text running past the page (no child element explains it)
    const clipped = cs.overflowX !== 'visible' && el.clientWidth > 0 && el.scrollWidth > el.clientWidth + 1;
    const text = cs.overflowX === 'visible' && r.left + el.scrollWidth > limit + 0.5 &&
      !Array.from(el.children).some(c => beyond(c.getBoundingClientRect()));
    if (beyond(r) || clipped || text)
      found.push({el, element: name(el), text: (el.textContent || '').trim().replace(/\\s+/g, ' ').slice(0, 60),
                  left: r.left, right: Math.max(r.right, r.left + el.scrollWidth), scroll_width: el.scrollWidth,
                  client_width: el.clientWidth, clipped});
  }
  return JSON.stringify(found.map(({el, ...rest}) => rest));
})"""


@dataclass(frozen=True)
class ImageState:
    """One ``<img>`` of a page: its source (data URIs shortened), alt text and natural size [px]."""

    src: str
    alt: str
    loaded: bool
    width: int
    height: int


@dataclass(frozen=True)
class Overflow:
    """An element that, laid out for print, reaches past the text block or clips its content [CSS px]."""

    element: str
    text: str
    left: float
    right: float
    scroll_width: int
    client_width: int
    clipped: bool


@dataclass(frozen=True)
class PageCheck:
    """What :meth:`Browser.inspect` found on a page."""

    images: tuple[ImageState, ...]
    errors: tuple[str, ...]
    external: tuple[str, ...]
    overflow: tuple[Overflow, ...]
    print_width_px: float

    @property
    def broken_images(self) -> tuple[ImageState, ...]:
        return tuple(im for im in self.images if not im.loaded)

    @property
    def problems(self) -> list[str]:
        """One line per problem; empty when every image loaded, nothing failed and nothing is cut off."""
        lines = [f"image {im.src} ({im.alt or 'no alt text'}) did not load" for im in self.broken_images]
        lines += [f"error: {e}" for e in self.errors]
        lines += [f"request outside the page's files: {u}" for u in self.external]
        lines += [f"{o.element} ('{o.text}') spans {o.left:.0f}..{o.right:.0f} px (scroll width {o.scroll_width}) "
                  f"past the {self.print_width_px:.0f} px print width" for o in self.overflow]
        return lines


def find_chromium() -> str:
    """The Chromium executable: ``UNMIX_CHROMIUM`` if set, else the first of :data:`CHROMIUM_NAMES` on PATH."""
    named = os.environ.get("UNMIX_CHROMIUM")
    if named:
        found = shutil.which(named)
        if found is None:
            raise BrowserError(f"UNMIX_CHROMIUM={named} is not an executable; {_INSTALL}")
        return found
    for name in CHROMIUM_NAMES:
        found = shutil.which(name)
        if found is not None:
            return found
    raise BrowserError(f"no Chromium found on PATH (tried {', '.join(CHROMIUM_NAMES)}); {_INSTALL}")


def _short(src: str) -> str:
    return src if len(src) <= 80 or not src.startswith("data:") else f"{src[:60]}... ({len(src)} characters)"


class Browser:
    """A headless Chromium for several pages; a context manager.

    Parameters
    ----------
    executable : path, optional
        Chromium to run (default :func:`find_chromium`).
    timeout : float
        Seconds any single step may take (start, load, print, each command) [s].

    Examples
    --------
    >>> with Browser() as browser:  # doctest: +SKIP
    ...     check = browser.inspect("report/report.html")
    ...     browser.print_pdf("report/report.html", "report/report.pdf")
    """

    def __init__(self, executable: str | os.PathLike | None = None, *, timeout: float = 60.0) -> None:
        self._devtools = DevTools(executable or find_chromium(), timeout=timeout)

    def __enter__(self) -> Browser:
        self._devtools.start()
        return self

    def __exit__(self, *exc) -> None:
        self._devtools.close()

    @property
    def version(self) -> str:
        """Chromium's product name and version, e.g. ``Chrome/150.0.7871.100``."""
        return self._devtools.send("Browser.getVersion")["product"]

    @contextlib.contextmanager
    def _page(self, html_path: str | os.PathLike, width: int, height: int):
        """Open the page in a new tab of ``width`` x ``height`` CSS px; yield the tab's session id."""
        dt = self._devtools
        with _loadable(html_path) as url:
            target = dt.send("Target.createTarget", {"url": "about:blank"})["targetId"]
            session = None
            try:
                session = dt.send("Target.attachToTarget", {"targetId": target, "flatten": True})["sessionId"]
                for domain in ("Page", "Runtime", "Log", "Network"):
                    dt.send(f"{domain}.enable", session=session)
                self._viewport(session, width, height)
                nav = dt.send("Page.navigate", {"url": url}, session=session)
                if nav.get("errorText"):
                    raise BrowserError(f"Chromium cannot open {html_path}: {nav['errorText']}")
                dt.wait_event("Page.loadEventFired", session=session)
                self._evaluate(session, _SETTLE_JS)
                yield session
            finally:
                with contextlib.suppress(BrowserError):
                    dt.send("Target.closeTarget", {"targetId": target})
                dt.events = [e for e in dt.events if e.get("sessionId") not in (session, None)]

    def _viewport(self, session: str, width: float, height: float) -> None:
        self._devtools.send("Emulation.setDeviceMetricsOverride", {
            "width": int(round(width)), "height": int(round(height)), "deviceScaleFactor": 1, "mobile": False},
            session=session)

    def _evaluate(self, session: str, expression: str):
        result = self._devtools.send("Runtime.evaluate", {"expression": expression, "awaitPromise": True,
                                                          "returnByValue": True}, session=session)
        if "exceptionDetails" in result:
            raise BrowserError(f"a check script failed in Chromium: {result['exceptionDetails'].get('text')}")
        return result["result"].get("value")

    def inspect(self, html_path: str | os.PathLike, *, width: int = 1200, height: int = 900,
                print_width_px: float = CONTENT_WIDTH_PX) -> PageCheck:
        """Load the page at ``width`` x ``height`` CSS px and check it (see the module docstring).

        The overflow check then emulates print media at ``print_width_px``, the A4 text width of
        :mod:`unmix.report.print_css` by default.
        """
        with self._page(html_path, width, height) as session:
            images = tuple(ImageState(_short(im["src"]), im["alt"], bool(im["complete"] and im["width"] > 0),
                                      int(im["width"]), int(im["height"]))
                           for im in json.loads(self._evaluate(session, _IMAGES_JS)))
            self._devtools.send("Emulation.setEmulatedMedia", {"media": "print"}, session=session)
            self._viewport(session, print_width_px, PAGE_MM[1] / _MM_PER_INCH * 96)
            found = json.loads(self._evaluate(session, f"{_OVERFLOW_JS}({print_width_px})"))
            errors, external = _page_messages([e for e in self._devtools.events if e.get("sessionId") == session])
        return PageCheck(images, errors, external, tuple(Overflow(**o) for o in found), print_width_px)

    def print_pdf(self, html_path: str | os.PathLike, pdf_path: str | os.PathLike) -> Path:
        """Print the page to an A4 PDF (the page's own ``@page`` size and margins win when it sets them)."""
        inch = [v / _MM_PER_INCH for v in PAGE_MM]
        margin = MARGIN_MM / _MM_PER_INCH
        with self._page(html_path, 1200, 900) as session:
            pdf = self._devtools.send("Page.printToPDF", {
                "paperWidth": inch[0], "paperHeight": inch[1], "marginTop": margin, "marginBottom": margin,
                "marginLeft": margin, "marginRight": margin, "printBackground": True, "preferCSSPageSize": True,
                "displayHeaderFooter": False}, session=session)["data"]
        return _write_bytes(pdf_path, base64.b64decode(pdf))

    def screenshot(self, html_path: str | os.PathLike, png_path: str | os.PathLike, *, width: int = 1200,
                   height: int | None = 900) -> Path:
        """A PNG of the page at ``width`` CSS px; ``height`` px of it from the top, or all of it with ``None``."""
        with self._page(html_path, width, height or 900) as session:
            if height is None:
                size = self._devtools.send("Page.getLayoutMetrics", session=session)["cssContentSize"]
                self._viewport(session, width, min(max(int(size["height"]), 1), 16384))
            png = self._devtools.send("Page.captureScreenshot", {"format": "png"}, session=session)["data"]
        return _write_bytes(png_path, base64.b64decode(png))


def _page_messages(events: list[dict]) -> tuple[tuple[str, ...], tuple[str, ...]]:
    """Errors (exceptions, console errors, browser errors, failed loads) and outside requests of one tab."""
    errors: list[str] = []
    external: list[str] = []
    urls: dict[str, str] = {}
    for event in events:
        method, p = event.get("method"), event.get("params", {})
        if method == "Runtime.exceptionThrown":
            d = p["exceptionDetails"]
            desc = (d.get("exception") or {}).get("description") or d.get("text", "")
            errors.append(f"uncaught {desc.splitlines()[0] if desc else 'exception'} "
                          f"(line {d.get('lineNumber', -1) + 1})")
        elif method == "Runtime.consoleAPICalled" and p.get("type") in ("error", "assert"):
            args = [str(a.get("value", a.get("description", ""))) for a in p.get("args", [])]
            errors.append(f"console.{p['type']}: {' '.join(args)}")
        elif method == "Log.entryAdded" and p["entry"].get("level") == "error":
            entry = p["entry"]
            errors.append(f"{entry.get('text', '')} {_short(entry.get('url', ''))}".strip())
        elif method == "Network.requestWillBeSent":
            url = p["request"]["url"]
            urls[p["requestId"]] = url
            if not url.startswith(("data:", "file:", "about:", "blob:")):
                external.append(url)
        elif method == "Network.loadingFailed" and not p.get("canceled"):
            errors.append(f"failed to load {_short(urls.get(p['requestId'], '?'))}: {p.get('errorText')}")
    return tuple(dict.fromkeys(errors)), tuple(dict.fromkeys(external))


@contextlib.contextmanager
def _loadable(html_path: str | os.PathLike):
    """A file URL Chromium opens as HTML. A page without an .html name (a product set's temporary file) is
    copied to a temporary .html file whose ``<base>`` points at the page's folder, so links still resolve."""
    path = Path(html_path).absolute()
    if not path.is_file():
        raise BrowserError(f"{path} does not exist; write the report first")
    if path.suffix.lower() in (".html", ".htm"):
        yield path.as_uri()
        return
    with tempfile.TemporaryDirectory(prefix="unmix-page-") as tmp:
        text = path.read_text(encoding="utf-8")
        base = f'<base href="{path.parent.as_uri()}/">'
        head = re.search(r"<head\b[^>]*>", text, flags=re.IGNORECASE)
        text = text[:head.end()] + base + text[head.end():] if head else base + text
        copy = Path(tmp) / "page.html"
        copy.write_text(text, encoding="utf-8")
        yield copy.as_uri()


def _write_bytes(path: str | os.PathLike, data: bytes) -> Path:
    path = Path(path)
    path.write_bytes(data)
    return path


def inspect_page(html_path: str | os.PathLike, *, timeout: float = 60.0, **kwargs) -> PageCheck:
    """:meth:`Browser.inspect` in a browser started for this call."""
    with Browser(timeout=timeout) as browser:
        return browser.inspect(html_path, **kwargs)


def print_pdf(html_path: str | os.PathLike, pdf_path: str | os.PathLike, *, timeout: float = 60.0) -> Path:
    """:meth:`Browser.print_pdf` in a browser started for this call."""
    with Browser(timeout=timeout) as browser:
        return browser.print_pdf(html_path, pdf_path)


def screenshot(html_path: str | os.PathLike, png_path: str | os.PathLike, width: int = 1200,
               height: int | None = 900, *, timeout: float = 60.0) -> Path:
    """:meth:`Browser.screenshot` in a browser started for this call."""
    with Browser(timeout=timeout) as browser:
        return browser.screenshot(html_path, png_path, width=width, height=height)


def write_report_pdf(page_path: str | os.PathLike, pdf_path: str | os.PathLike, *,
                     products: ProductSet | None = None, overwrite: bool = False, timeout: float = 60.0) -> Path:
    """Print the report page ``page_path`` to ``pdf_path`` as a product.

    With ``products`` (a claimed set), the PDF joins that set and appears with its other products at
    its commit; a page of the same set that is written but not yet committed is printed from its
    temporary file. Without it, the PDF is claimed and committed alone (``overwrite`` as for any
    product). A missing or failing Chromium raises :class:`~unmix.errors.BrowserError` and leaves
    nothing behind.
    """
    page = Path(page_path).absolute()
    with contextlib.ExitStack() as stack:
        if products is None:
            products = stack.enter_context(ProductSet([pdf_path], overwrite=overwrite, command="report pdf"))
        else:
            products.claim_more([pdf_path])
        source = products.staged(page) if page in products.paths else page
        with products.writing(pdf_path) as tmp:
            print_pdf(source, tmp, timeout=timeout)
    return Path(pdf_path)
