"""Small HTML building blocks for the self-contained report.

Every piece of user-supplied text goes through :func:`esc`; figures are embedded as base64
PNG so the file needs no other file and makes no network request.
"""

from __future__ import annotations

import base64
import html
import io
import math
from collections.abc import Iterable, Mapping
from pathlib import Path

import numpy as np
import pandas as pd


def esc(value: object) -> str:
    """HTML-escape any value (quotes included)."""
    return html.escape(str(value), quote=True)


def fmt(value: object, digits: int = 3) -> str:
    """A table cell: numbers to ``digits`` significant figures; NaN shown as an en dash."""
    if value is None or (isinstance(value, float) and math.isnan(value)) or value is pd.NA:
        return "–"
    if isinstance(value, (bool, np.bool_)):
        return "yes" if value else "no"
    if isinstance(value, (int, np.integer)):
        return str(int(value))
    if isinstance(value, (float, np.floating)):
        v = float(value)
        if math.isinf(v):
            return "∞" if v > 0 else "−∞"
        if v != 0 and (abs(v) < 1e-3 or abs(v) >= 1e6):
            return f"{v:.{digits - 1}e}"
        if abs(v) >= 10 ** (digits + 1):
            return f"{v:.0f}"
        text = f"{v:.{digits + 1}g}"
        return "0" if text == "-0" else text
    return str(value)


def table(
    frame: pd.DataFrame,
    *,
    columns: Mapping[str, str] | None = None,
    digits: int = 3,
    caption: str | None = None,
    max_rows: int = 200,
    css_class: str = "data",
) -> str:
    """An escaped HTML table; ``columns`` maps column -> heading (and selects the columns)."""
    if columns is not None:
        frame = frame[[c for c in columns if c in frame.columns]]
        heads = [columns[c] for c in frame.columns]
    else:
        heads = list(frame.columns)
    shown = frame.head(max_rows)
    parts = [f'<table class="{css_class}">']
    if caption:
        parts.append(f"<caption>{esc(caption)}</caption>")
    parts.append("<thead><tr>" + "".join(f"<th>{esc(h)}</th>" for h in heads) + "</tr></thead>")
    parts.append("<tbody>")
    for row in shown.itertuples(index=False):
        cells = []
        for value in row:
            numeric = isinstance(value, (int, float, np.integer, np.floating)) and not isinstance(
                value, bool
            )
            cls = ' class="num"' if numeric else ""
            cells.append(f"<td{cls}>{esc(fmt(value, digits))}</td>")
        parts.append("<tr>" + "".join(cells) + "</tr>")
    parts.append("</tbody></table>")
    if len(frame) > max_rows:
        parts.append(f'<p class="more">{len(frame) - max_rows} more rows in the tables folder.</p>')
    return "\n".join(parts)


EMBED_MAX_WIDTH = 1600
"""Widest PNG embedded in the report, in pixels (a double-column figure at about 220 dpi):
wider figures are scaled down for the page only; the files in ``figures/`` keep 300 dpi."""


def _for_page(raw: bytes) -> bytes:
    """A PNG as the page embeds it: at most :data:`EMBED_MAX_WIDTH` wide and reduced to a
    256-colour palette (a third of the bytes; the figure files are unchanged)."""
    from PIL import Image

    with Image.open(io.BytesIO(raw)) as image:
        image.load()
        if image.width > EMBED_MAX_WIDTH:
            height = round(image.height * EMBED_MAX_WIDTH / image.width)
            image = image.resize((EMBED_MAX_WIDTH, height), Image.Resampling.LANCZOS)
        small = image.convert("RGB").quantize(256, method=Image.Quantize.FASTOCTREE)
        out = io.BytesIO()
        small.save(out, format="PNG", optimize=True)
    return out.getvalue() if out.tell() < len(raw) else raw


def figure(path: str | Path, caption: str, alt: str | None = None) -> str:
    """A PNG figure embedded as base64 with its caption (:func:`_for_page`)."""
    raw = Path(path).read_bytes()
    data = base64.b64encode(_for_page(raw)).decode("ascii")
    # a figure wider than a single journal column (about 1,100 px at 300 dpi: 90 mm) is
    # a multi-panel figure: shown at the page's full width (PNG width: bytes 16-20, IHDR)
    wide = raw[:8] == b"\x89PNG\r\n\x1a\n" and int.from_bytes(raw[16:20], "big") > 1400
    cls = ' class="wide"' if wide else ""
    return (
        f'<figure{cls}><img src="data:image/png;base64,{data}" alt="{esc(alt or caption)}">'
        f"<figcaption>{esc(caption)}</figcaption></figure>"
    )


def bullet_list(items: Iterable[str], css_class: str = "") -> str:
    cls = f' class="{css_class}"' if css_class else ""
    return f"<ul{cls}>" + "".join(f"<li>{esc(i)}</li>" for i in items) + "</ul>"


def section(anchor: str, title: str, body: str) -> str:
    return f'<section id="{esc(anchor)}"><h2>{esc(title)}</h2>\n{body}\n</section>'


CSS = """
:root { --ink:#1b1b1b; --muted:#555; --rule:#d0d0d0; --warn:#8a3b00; --warnbg:#fff4e5;
        --accent:#0b5394; }
* { box-sizing: border-box; }
body { font: 15px/1.5 system-ui, -apple-system, "Segoe UI", Roboto, sans-serif; color: var(--ink);
       max-width: 1100px; margin: 0 auto; padding: 24px; }
h1 { font-size: 26px; margin: 0 0 4px; } h2 { font-size: 20px; border-bottom: 2px solid var(--rule);
     padding-bottom: 4px; margin-top: 36px; } h3 { font-size: 16px; margin-top: 24px; }
.subtitle { color: var(--muted); margin: 0 0 16px; }
.caution { border: 2px solid var(--warn); background: var(--warnbg); padding: 10px 14px;
           border-radius: 6px; }
.alert { border-left: 6px solid var(--warn); background: var(--warnbg); padding: 8px 12px;
         margin: 8px 0; }
.ok { border-left: 6px solid #2e7d32; background: #eef7ee; padding: 8px 12px; margin: 8px 0; }
nav ol { columns: 2; font-size: 14px; }
table.data { border-collapse: collapse; font-size: 13px; margin: 8px 0 16px; display: block;
             overflow-x: auto; max-width: 100%; }
table.data th, table.data td { border-bottom: 1px solid var(--rule); padding: 3px 8px;
             text-align: left; white-space: nowrap; }
table.data th { background: #f4f4f4; position: sticky; top: 0; }
table.data td.num { text-align: right; font-variant-numeric: tabular-nums; }
table.overview { display: table; width: 100%; table-layout: auto; }
table.overview th, table.overview td { white-space: normal; vertical-align: top; }
caption { text-align: left; font-weight: 600; padding: 4px 0; }
figure { margin: 12px 0 20px; }
figure img { max-width: min(100%, 760px); height: auto; border: 1px solid #eee; }
figure.wide img { max-width: 100%; }
figcaption { font-size: 13px; color: var(--muted); }
.more { font-size: 13px; color: var(--muted); }
code, pre { font-family: ui-monospace, Menlo, Consolas, monospace; font-size: 13px; }
pre { background: #f6f6f6; padding: 8px; overflow-x: auto; }
footer { margin-top: 40px; font-size: 13px; color: var(--muted); }
@media print { body { max-width: none; padding: 0; } nav { display: none; }
  section { break-inside: auto; } figure, table { break-inside: avoid; } }
"""


def page(title: str, body: str) -> str:
    """A complete self-contained HTML page."""
    return (
        '<!DOCTYPE html>\n<html lang="en">\n<head>\n<meta charset="utf-8">\n'
        '<meta name="viewport" content="width=device-width, initial-scale=1">\n'
        '<meta http-equiv="Content-Security-Policy" content="default-src \'none\'; '
        "img-src data:; style-src 'unsafe-inline'\">\n"
        f"<title>{esc(title)}</title>\n<style>{CSS}</style>\n</head>\n<body>\n{body}\n"
        "</body>\n</html>\n"
    )
