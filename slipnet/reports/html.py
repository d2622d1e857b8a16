"""Self-contained HTML pages: escaped text, tables with units in the headers, embedded pictures.

Built from the standard library only: every text goes through :func:`html.escape`, pictures are
PNG data URIs, the style sheet is inline (a screen layout and a print layout with a page break
before each section), and the page holds no script and loads nothing from elsewhere.
"""

from __future__ import annotations

import base64
import html
import io
import math
from collections.abc import Iterable, Sequence

import numpy as np
import pandas as pd

__all__ = ["CSS", "column_header", "esc", "figure_html", "format_cell", "html_page", "html_table", "section"]

#: Column-name suffixes and the units they stand for (longest first).
_UNITS: tuple[tuple[str, str], ...] = (
    ("_um_per_cycle", "µm/cycle"), ("_mpa_um", "MPa·µm"), ("_um2", "µm²"), ("_um", "µm"), ("_mpa", "MPa"),
    ("_gpa", "GPa"), ("_deg", "°"), ("_pct", "%"),
)
#: Columns that are counts.
_COUNTS = {"order", "rank", "barrier_rank", "barriers_on_path", "rate_dips", "n_points", "iterations", "samples",
           "points", "count", "grain", "boundary_id", "barrier", "cycles"}
#: Columns that hold identifiers or words (no unit).
_WORDS = {"notch", "boundary", "grains", "grain_label", "site", "edge", "stop_reason", "boundary_class", "plane",
          "against_grain", "root_grain", "first_barrier", "strongest_barrier", "step", "status", "key", "item",
          "value", "unit", "section", "option", "parameter", "score", "zone_state", "reason", "kind", "arrest",
          "arrest_here", "valid", "name", "source", "file", "sha256"}

CSS = """
:root { --ink: #1b1b1b; --muted: #555; --rule: #c9c9c9; --band: #f3f3f0; --accent: #8a3b00; --warn: #fff4d6; }
* { box-sizing: border-box; }
body { font-family: "DejaVu Sans", "Helvetica Neue", Arial, sans-serif; color: var(--ink); margin: 0 auto;
       max-width: 68rem; padding: 1.2rem 1.6rem 3rem; line-height: 1.45; font-size: 15px; }
h1 { font-size: 1.7rem; margin: 0.2rem 0 0.3rem; }
h2 { font-size: 1.3rem; border-bottom: 2px solid var(--ink); padding-bottom: 0.15rem; margin-top: 2.2rem; }
h3 { font-size: 1.06rem; margin: 1.3rem 0 0.4rem; }
p.lead { font-size: 1.08rem; }
.meta { color: var(--muted); font-size: 0.88rem; }
.caution { border-left: 5px solid var(--accent); background: var(--band); padding: 0.6rem 0.9rem; }
.warnings { border-left: 5px solid #b8860b; background: var(--warn); padding: 0.5rem 0.9rem; }
.warnings li { margin: 0.2rem 0; }
table { border-collapse: collapse; margin: 0.4rem 0 1rem; font-size: 0.82rem; }
caption { text-align: left; font-weight: bold; padding: 0.2rem 0; caption-side: top; }
th, td { border-bottom: 1px solid var(--rule); padding: 0.18rem 0.5rem; vertical-align: top; }
th { background: var(--band); text-align: left; font-weight: 600; }
td.num { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
tr.best td { font-weight: 600; }
.scroll { overflow-x: auto; max-width: 100%; }
figure { margin: 0.6rem 0 1.2rem; }
figure img { max-width: 100%; height: auto; border: 1px solid var(--rule); }
figcaption { font-size: 0.85rem; color: var(--muted); }
.grid { display: grid; grid-template-columns: repeat(auto-fit, minmax(19rem, 1fr)); gap: 0.8rem; }
nav ol { columns: 2; font-size: 0.9rem; }
code { font-size: 0.9em; }
@page { size: A4; margin: 14mm 12mm; }
@media print {
  body { max-width: none; padding: 0; font-size: 10.5pt; }
  section { break-before: page; page-break-before: always; }
  section.first { break-before: auto; page-break-before: auto; }
  nav { display: none; }
  h2, h3, caption { break-after: avoid; page-break-after: avoid; }
  figure, tr { break-inside: avoid; page-break-inside: avoid; }
  .scroll { overflow: visible; }
  table { font-size: 7.5pt; }
  a { color: inherit; text-decoration: none; }
}
"""


def esc(text) -> str:
    """``text`` as HTML text (``&``, ``<``, ``>`` and quotes escaped)."""
    return html.escape(str(text), quote=True)


def column_header(name: str, dtype=None) -> str:
    """A readable header with the unit: ``distance_from_root_um`` → ``distance from root (µm)``.

    Examples
    --------
    >>> column_header("distance_from_root_um"), column_header("p_arrest_here"), column_header("order")
    ('distance from root (µm)', 'p arrest here (0–1)', 'order (count)')
    """
    name = str(name)
    for suffix, unit in _UNITS:
        if name.endswith(suffix):
            return f"{name[: -len(suffix)].replace('_', ' ')} ({unit})"
    words = name.replace("_", " ")
    if dtype is not None and (pd.api.types.is_bool_dtype(dtype) or not pd.api.types.is_numeric_dtype(dtype)):
        return words
    if name.startswith("p_") or "probability" in name:
        return f"{words} (0–1)"
    if name in _COUNTS or name.startswith("n_"):
        return f"{words} (count)"
    if name == "seconds":
        return "time (s)"
    if name in _WORDS:
        return words
    return f"{words} (–)"


def format_cell(v, digits: int = 4) -> tuple[str, bool]:
    """``(text, is_number)`` of a table cell: numbers to ``digits`` significant digits.

    A missing value shows as ``—`` and an infinite one (a crack that never gets there) as
    ``not reached``; neither is a number.
    """
    if v is None:
        return "—", False
    if isinstance(v, (bool, np.bool_)):
        return ("yes" if v else "no"), False
    if isinstance(v, (int, np.integer)):
        return f"{int(v)}", True
    if isinstance(v, (float, np.floating)):
        f = float(v)
        if math.isnan(f):
            return "—", False
        if math.isinf(f):
            return ("not reached" if f > 0 else "−∞ (none)"), False
        if f != 0.0 and (abs(f) >= 10 ** (digits + 2) or abs(f) < 1e-3):
            return f"{f:.{max(digits - 1, 1)}e}", True
        return f"{f:.{digits}g}", True
    if isinstance(v, (list, tuple)):
        return ", ".join(format_cell(x, digits)[0] for x in v), False
    return str(v), False


def html_table(table: pd.DataFrame, *, caption: str = "", columns: Sequence[str] | None = None,
               max_rows: int | None = None, digits: int = 4, highlight_first: bool = False,
               note: str = "") -> str:
    """A DataFrame as an HTML table with units in the headers (see :func:`column_header`).

    Parameters
    ----------
    table
        The table.
    caption
        Caption above it.
    columns
        Columns to show, in order (default all; missing ones are skipped).
    max_rows
        Show at most this many rows (a note says how many more are in the CSV file).
    digits
        Significant digits of numbers.
    highlight_first
        Bold the first row (the recommendation).
    note
        Text under the table.
    """
    cols = [c for c in (columns or table.columns) if c in table.columns]
    t = table[cols]
    shown = t if max_rows is None else t.head(max_rows)
    head = "".join(f"<th scope=\"col\">{esc(column_header(c, t[c].dtype))}</th>" for c in cols)
    body = []
    for i, row in enumerate(shown.itertuples(index=False)):
        cells = []
        for v in row:
            text, num = format_cell(v, digits)
            cells.append(f"<td class=\"num\">{esc(text)}</td>" if num else f"<td>{esc(text)}</td>")
        cls = " class=\"best\"" if highlight_first and i == 0 else ""
        body.append(f"<tr{cls}>{''.join(cells)}</tr>")
    more = ""
    if max_rows is not None and len(t) > max_rows:
        more = f"<p class=\"meta\">First {max_rows} of {len(t)} rows; all in the CSV file.</p>"
    cap = f"<caption>{esc(caption)}</caption>" if caption else ""
    if not body:
        body = [f"<tr><td colspan=\"{max(len(cols), 1)}\">(none)</td></tr>"]
    tail = f"<p class=\"meta\">{esc(note)}</p>" if note else ""
    return (f"<div class=\"scroll\"><table>{cap}<thead><tr>{head}</tr></thead><tbody>{''.join(body)}</tbody>"
            f"</table></div>{more}{tail}")


def figure_html(fig, caption: str, *, alt: str | None = None, dpi: int = 110) -> str:
    """A matplotlib figure as an embedded PNG (data URI) with a caption; the figure is closed."""
    import matplotlib.pyplot as plt

    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=dpi, bbox_inches="tight", metadata={"Software": None})
    plt.close(fig)
    data = base64.b64encode(buf.getvalue()).decode("ascii")
    return (f"<figure><img src=\"data:image/png;base64,{data}\" alt=\"{esc(alt or caption)}\">"
            f"<figcaption>{esc(caption)}</figcaption></figure>")


def section(anchor: str, title: str, parts: Iterable[str], *, first: bool = False) -> str:
    """A ``<section>`` with an ``<h2>`` and the given HTML parts."""
    cls = " class=\"first\"" if first else ""
    return f"<section id=\"{esc(anchor)}\"{cls}><h2>{esc(title)}</h2>{''.join(parts)}</section>"


def html_page(title: str, body: Iterable[str], *, lang: str = "en") -> str:
    """A whole HTML document: inline style sheet, no scripts, nothing loaded from elsewhere."""
    return (f"<!DOCTYPE html>\n<html lang=\"{esc(lang)}\"><head><meta charset=\"utf-8\">"
            "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">"
            "<meta http-equiv=\"Content-Security-Policy\" content=\"default-src 'none'; img-src data:; "
            "style-src 'unsafe-inline'\">"
            f"<title>{esc(title)}</title><style>{CSS}</style></head><body>{''.join(body)}</body></html>\n")
