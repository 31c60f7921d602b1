"""The report as one self-contained HTML page (inline CSS, figures as base64 PNG).

Pure: a :class:`ReportContent` in, a string out. Every piece of text is HTML-escaped here, at
the one place it enters the page, so names from the user's data (columns, classes, row ids,
method names read from files) can never become markup. No scripts, no external links.
"""

from __future__ import annotations

import base64
import html
import math
import re
from collections.abc import Sequence
from dataclasses import dataclass, field

__all__ = ["Picture", "ReportContent", "Section", "Table", "render_html"]

_CSS = """
body{font-family:system-ui,-apple-system,"Segoe UI",Roboto,Helvetica,Arial,sans-serif;
 margin:0;color:#1d2329;background:#fafafa;line-height:1.45}
main{max-width:1060px;margin:0 auto;padding:24px 28px 48px;background:#fff}
h1{font-size:1.6em;margin:0 0 4px}h2{font-size:1.25em;margin:32px 0 8px;
 border-bottom:2px solid #e3e6ea;padding-bottom:4px}h3{font-size:1.05em;margin:18px 0 6px}
.sub{color:#5b6570;margin:0 0 16px}
.decision{background:#eef5fb;border-left:5px solid #1b6ca8;padding:10px 14px;margin:10px 0}
.decision.none{background:#fdf1ef;border-left-color:#d1495b}
.decision p{margin:4px 0}
.note{color:#5b6570;font-size:.92em}
p,li,figcaption,caption{overflow-wrap:anywhere}td,th{overflow-wrap:break-word}td:first-child{min-width:9.5em}
.scroll{overflow-x:auto;max-width:100%;margin:8px 0 14px}
.scroll:focus{outline:2px solid #1b6ca8}
table{border-collapse:collapse;font-size:.9em}
caption{caption-side:top;text-align:left;padding:2px 0}
th,td{border:1px solid #dde1e5;padding:4px 8px;text-align:left;vertical-align:top}
th{background:#f1f3f5}td.num{text-align:right;font-variant-numeric:tabular-nums}
tr.hl td{background:#fff7dc;font-weight:600}
ul.warn li{color:#8a4b00}ul.caution li{color:#6b1f1f}
figure{margin:12px 0 20px}figure img{max-width:100%;height:auto;border:1px solid #e3e6ea}
figure .narrow{display:none}figure .narrow img{display:block;margin:0 0 8px}
details{margin:4px 0 14px}summary{cursor:pointer;color:#1b6ca8}
th{overflow-wrap:normal;word-break:normal;hyphens:manual}
figcaption{font-size:.88em;color:#5b6570}
code{background:#f1f3f5;padding:1px 4px;border-radius:3px}
nav ul{list-style:none;padding:0;margin:0;display:flex;flex-wrap:wrap;gap:4px 14px}
nav a{color:#1b6ca8}
@media (max-width:600px){main{padding:14px 12px 32px}h1{font-size:1.3em}
 figure img.wide{display:none}figure .narrow{display:block}
 td:first-child{min-width:0}th,td{padding:3px 5px}}
"""

#: Text of a cell that reads as a number (right-aligned): 1,234 / 0.812 / 80% / -0.013.
_NUMERIC = re.compile(r"[<>+\-−]?\d[\d,]*(\.\d+)?[%+]?")


def esc(value: object) -> str:
    """HTML-escaped text of ``value`` (quotes included)."""
    return html.escape(str(value), quote=True)


def fmt(value: object, digits: int = 3) -> str:
    """Readable text of a cell: floats rounded, None/NaN as an en dash."""
    if value is None:
        return "\u2013"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, float):
        if math.isnan(value):
            return "\u2013"
        if value == int(value) and abs(value) >= 1000:
            return f"{int(value):,}"
        text = f"{value:.{digits}f}"
        return text[1:] if text.startswith("-") and float(text) == 0 else text  # no "-0.000"
    return str(value)


@dataclass
class Table:
    headers: Sequence[str]
    rows: Sequence[Sequence[object]]
    highlight: set[int] = field(default_factory=set)
    caption: str = ""
    #: format spec per column index, e.g. {3: ",.2f"}; other numbers use :func:`fmt`
    formats: dict[int, str] = field(default_factory=dict)
    #: the decisive columns (put first by the caller): marked class "key" so a check can
    #: find them; they must be visible on a phone without scrolling
    key_columns: set[int] = field(default_factory=set)


@dataclass
class Picture:
    """A figure: the whole image for wide screens and, optionally, one image per panel
    shown instead on narrow screens (CSS only). ``text_px`` is the size of the smallest
    text in PNG pixels (``data-text-px``, so a check can compute its size as shown)."""

    png: bytes
    caption: str
    alt: str
    panels: Sequence[tuple[bytes, float]] = ()
    text_px: float | None = None


@dataclass
class Section:
    """A titled part of the report: paragraphs, bullet lists, tables and figures in order."""

    anchor: str
    title: str
    blocks: list[tuple[str, object]] = field(default_factory=list)

    def para(self, text: str, cls: str = "") -> Section:
        self.blocks.append(("p", (text, cls)))
        return self

    def bullets(self, items: Sequence[str], cls: str = "") -> Section:
        self.blocks.append(("ul", (list(items), cls)))
        return self

    def table(self, table: Table) -> Section:
        self.blocks.append(("table", table))
        return self

    def figure(self, figure: Picture) -> Section:
        self.blocks.append(("figure", figure))
        return self

    def heading(self, text: str) -> Section:
        self.blocks.append(("h3", text))
        return self

    def details(self, summary: str, table: Table) -> Section:
        """A table folded away under a one-line summary (HTML ``<details>``, no script)."""
        self.blocks.append(("details", (summary, table)))
        return self

    def decision(self, lines: Sequence[str], reached: bool) -> Section:
        self.blocks.append(("decision", (list(lines), reached)))
        return self


@dataclass
class ReportContent:
    title: str
    subtitle: str
    sections: list[Section]


def _table_html(t: Table) -> str:
    label = t.caption or ", ".join(str(h) for h in t.headers)
    out = [f"<div class=\"scroll\" tabindex=\"0\" role=\"region\" aria-label=\"{esc(label)}\">"
           "<table>"]
    if t.caption:
        out.append(f"<caption class=\"note\">{esc(t.caption)}</caption>")
    def key(j: int) -> str:
        return " class=\"key\"" if j in t.key_columns else ""
    out.append("<thead><tr>" + "".join(f"<th{key(j)}>{esc(h)}</th>"
                                       for j, h in enumerate(t.headers))
               + "</tr></thead><tbody>")
    for i, row in enumerate(t.rows):
        cls = " class=\"hl\"" if i in t.highlight else ""
        cells = []
        for j, v in enumerate(row):
            num = isinstance(v, (int, float)) and not isinstance(v, bool)
            if num and j in t.formats and not (isinstance(v, float) and math.isnan(v)):
                text = format(v, t.formats[j])
            else:
                text = fmt(v)
            num = num or (isinstance(v, str) and _NUMERIC.fullmatch(v.strip()) is not None)
            classes = " ".join(c for c in ("num" if num else "",
                                           "key" if j in t.key_columns else "") if c)
            attr = f" class=\"{classes}\"" if classes else ""
            cells.append(f"<td{attr}>{esc(text)}</td>")
        out.append(f"<tr{cls}>" + "".join(cells) + "</tr>")
    out.append("</tbody></table></div>")
    return "".join(out)


def _block_html(kind: str, payload: object) -> str:
    if kind == "p":
        text, cls = payload  # type: ignore[misc]
        return f"<p class=\"{esc(cls)}\">{esc(text)}</p>" if cls else f"<p>{esc(text)}</p>"
    if kind == "h3":
        return f"<h3>{esc(payload)}</h3>"
    if kind == "ul":
        items, cls = payload  # type: ignore[misc]
        attr = f" class=\"{esc(cls)}\"" if cls else ""
        return f"<ul{attr}>" + "".join(f"<li>{esc(i)}</li>" for i in items) + "</ul>"
    if kind == "table":
        return _table_html(payload)  # type: ignore[arg-type]
    if kind == "figure":
        fig: Picture = payload  # type: ignore[assignment]
        return _figure_html(fig)
    if kind == "details":
        summary, table = payload  # type: ignore[misc]
        return f"<details><summary>{esc(summary)}</summary>{_table_html(table)}</details>"
    if kind == "decision":
        lines, reached = payload  # type: ignore[misc]
        cls = "decision" if reached else "decision none"
        return f"<div class=\"{cls}\">" + "".join(f"<p>{esc(x)}</p>" for x in lines) + "</div>"
    raise ValueError(f"unknown block kind {kind!r}")


def _img(png: bytes, alt: str, cls: str, text_px: float | None) -> str:
    data = base64.b64encode(png).decode("ascii")
    size = f" data-text-px=\"{text_px:.2f}\"" if text_px else ""
    return (f"<img class=\"{cls}\" src=\"data:image/png;base64,{data}\" alt=\"{esc(alt)}\""
            f"{size}>")


def _figure_html(fig: Picture) -> str:
    """The whole figure; with panels, one image per panel for narrow screens beside it."""
    if not fig.panels:
        return (f"<figure>{_img(fig.png, fig.alt, 'whole', fig.text_px)}"
                f"<figcaption>{esc(fig.caption)}</figcaption></figure>")
    narrow = "".join(_img(png, f"{fig.alt}, panel {i + 1} of {len(fig.panels)}", "panel", px)
                     for i, (png, px) in enumerate(fig.panels))
    return (f"<figure>{_img(fig.png, fig.alt, 'wide', fig.text_px)}"
            f"<div class=\"narrow\">{narrow}</div>"
            f"<figcaption>{esc(fig.caption)}</figcaption></figure>")


def render_html(content: ReportContent) -> str:
    """The whole page."""
    nav = "".join(f"<li><a href=\"#{esc(s.anchor)}\">{esc(s.title)}</a></li>"
                  for s in content.sections)
    body = []
    for s in content.sections:
        body.append(f"<section id=\"{esc(s.anchor)}\"><h2>{esc(s.title)}</h2>")
        body.extend(_block_html(kind, payload) for kind, payload in s.blocks)
        body.append("</section>")
    return (
        "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
        "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">"
        f"<title>{esc(content.title)}</title><style>{_CSS}</style></head><body><main>"
        f"<h1>{esc(content.title)}</h1><p class=\"sub\">{esc(content.subtitle)}</p>"
        f"<nav aria-label=\"sections\"><ul>{nav}</ul></nav>"
        + "".join(body) + "</main></body></html>\n"
    )
