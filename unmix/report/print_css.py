"""The report's print stylesheet: A4 pages on which nothing is cut off.

Include :data:`PRINT_CSS` in the page's ``<style>``. On screen it changes nothing (it is all inside
``@page`` and ``@media print``); printed, it lays the page out on A4 with :data:`MARGIN_MM` margins,
lets figures shrink to the page width, lets tables and long words wrap, keeps a figure or a table row
on one page and turns scrolled boxes into plain ones (a box that scrolls on screen is cut off on
paper). :func:`unmix.io.browser.Browser.inspect` checks the result in Chromium at
:data:`CONTENT_WIDTH_PX`.
"""

from __future__ import annotations

__all__ = ["CONTENT_WIDTH_PX", "MARGIN_MM", "PAGE_MM", "PRINT_CSS"]

#: A4 paper, width and height [mm] (ISO 216).
PAGE_MM = (210.0, 297.0)
#: Page margin on every side [mm].
MARGIN_MM = 15.0
#: Width of the printed text block in CSS pixels (96 per inch, 25.4 mm per inch: CSS Values 4).
CONTENT_WIDTH_PX = (PAGE_MM[0] - 2 * MARGIN_MM) / 25.4 * 96.0

PRINT_CSS = f"""
@page {{ size: A4; margin: {MARGIN_MM:g}mm; }}
@media print {{
  html, body {{ width: auto !important; max-width: none !important; min-width: 0 !important;
    margin: 0 !important; padding: 0 !important; background: #fff !important; }}
  body {{ font-size: 10pt; line-height: 1.35; }}
  * {{ min-width: 0 !important; box-shadow: none !important; }}
  img, svg, canvas, video, object, embed {{ max-width: 100% !important; height: auto !important; }}
  figure, .figure, img, svg {{ break-inside: avoid; page-break-inside: avoid; }}
  figure {{ margin: 0 0 4mm 0 !important; max-width: 100% !important; }}
  div, section, article, main, figure, pre, table {{ overflow: visible !important; max-height: none !important;
    max-width: 100% !important; }}
  table {{ border-collapse: collapse; font-size: 8.5pt; }}
  th, td {{ padding: 1px 4px !important; }}
  thead {{ display: table-header-group; }}
  tr, caption, figcaption, li {{ break-inside: avoid; page-break-inside: avoid; }}
  h1, h2, h3, h4 {{ break-after: avoid; page-break-after: avoid; }}
  /* a cell may break inside a word (else a table of long names cannot fit), but keeps 3 em of width (else
     a table with one long column gives the others one letter each) */
  th, td {{ overflow-wrap: anywhere; min-width: 3em !important; }}
  p, li, dd, dt, a, caption, figcaption, code {{ overflow-wrap: anywhere; }}
  pre, code {{ white-space: pre-wrap !important; word-break: break-all; }}
  nav, .no-print {{ display: none !important; }}
}}
"""
