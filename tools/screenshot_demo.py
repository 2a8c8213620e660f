"""Screenshot of the demo's report for the README: ``python tools/screenshot_demo.py``.

Runs ``unmix demo`` into ``--demo`` (unless a report is already there), checks the page in headless
Chromium (problems are printed as warnings), photographs ``report/report.html`` at ``--width`` CSS px
and writes the top ``--height`` px of it to ``--out`` (default ``docs/report-screenshot.png``). The
colours are rounded to fewer bits per channel until the file is under ``--max-kb`` (the noisy maps
barely compress otherwise).
"""

from __future__ import annotations

import argparse
import sys
import tempfile
from pathlib import Path

import imagecodecs

from unmix.cli.main import main as unmix_main
from unmix.io.browser import Browser


def run(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--demo", type=Path, default=Path("/tmp/unmix-demo"), help="folder of the demo run")
    parser.add_argument("--out", type=Path, default=Path(__file__).parent.parent / "docs" / "report-screenshot.png")
    parser.add_argument("--width", type=int, default=1200, help="page width [CSS px]")
    parser.add_argument("--height", type=int, default=1100, help="height of the picture [CSS px]")
    parser.add_argument("--max-kb", type=float, default=380, help="largest file size [KiB]")
    args = parser.parse_args(argv)
    page = args.demo / "report" / "report.html"
    if not page.exists():
        code = unmix_main(["demo", "--out", str(args.demo)])
        if code != 0:
            return code
    with Browser() as browser:
        check = browser.inspect(page)
        for line in check.problems:
            print(f"warning: {line}", file=sys.stderr)
        with tempfile.TemporaryDirectory() as tmp:
            raw = browser.screenshot(page, Path(tmp) / "shot.png", width=args.width, height=args.height)
            rgb = imagecodecs.png_decode(raw.read_bytes())[..., :3]
    for bits in range(8, 3, -1):
        drop = 8 - bits
        png = imagecodecs.png_encode((rgb >> drop << drop) | (rgb >> drop << drop >> bits), level=9)
        if len(png) <= args.max_kb * 1024:
            break
    args.out.parent.mkdir(parents=True, exist_ok=True)
    args.out.write_bytes(png)
    print(f"{args.out}: {args.width} x {args.height} px, {bits} bits per channel, {len(png) / 1024:.0f} KiB")
    return 0


if __name__ == "__main__":
    sys.exit(run())
