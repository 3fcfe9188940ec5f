"""The HTML page: one self-contained file, images as data URIs, no scripts.

The functions here only build markup from plain values; what goes on the
page is decided in :mod:`tinyconv.report.sections`. Every value that comes from
the run (names, architecture texts, paths, configuration) is escaped.
"""

from __future__ import annotations

import base64
import html
import math
from dataclasses import dataclass, field
from typing import Callable, Iterable, Mapping, Sequence

import pandas as pd

from tinyconv import fmt
from tinyconv.report.axes import DPI, SCREEN_DPI
from tinyconv.report.palette import PALETTE

esc = html.escape


def data_uri(png: bytes) -> str:
    """``data:image/png;base64,...`` for embedding PNG bytes."""
    return "data:image/png;base64," + base64.b64encode(png).decode("ascii")


@dataclass(frozen=True)
class Section:
    """One numbered part of the page."""

    key: str          # anchor id (letters, digits, '-')
    title: str
    body: str         # markup, already escaped where needed
    lead: str = ""    # one plain sentence under the heading (escaped here)


@dataclass(frozen=True)
class Column:
    """A table column: header, source column, formatter, alignment."""

    header: str
    key: str
    fmt: Callable[[object], str] = field(default=lambda v: esc(str(v)))
    numeric: bool = True
    title: str = ""   # a longer explanation, shown as the header's tooltip


def png_size(png: bytes) -> tuple[int, int]:
    """(width, height) in pixels from a PNG's header (PNG spec, IHDR chunk)."""
    if png[:8] != b"\x89PNG\r\n\x1a\n" or png[12:16] != b"IHDR":
        raise ValueError("not a PNG image (bad signature or first chunk)")
    return int.from_bytes(png[16:20], "big"), int.from_bytes(png[20:24], "big")


def figure(png: bytes, alt: str, caption: str, *, wide: bool = False) -> str:
    """An embedded figure with its caption, shown at most at its drawn size."""
    cls = "fig wide" if wide else "fig"
    w, _h = png_size(png)
    css_w = round(w * SCREEN_DPI / DPI)
    return (f'<figure class="{cls}"><img src="{data_uri(png)}" alt="{esc(alt)}" '
            f'style="max-width:{css_w}px">'
            f"<figcaption>{esc(caption)}</figcaption></figure>")


def table(frame: pd.DataFrame, columns: Sequence[Column], *,
          highlight: Sequence[bool] | None = None, css: str = "") -> str:
    """A table of ``frame`` with the given columns; highlighted rows get a marker."""
    head = "".join(
        f'<th class="{"num" if c.numeric else "txt"}"'
        + (f' title="{esc(c.title)}"' if c.title else "") + f">{esc(c.header)}</th>"
        for c in columns)
    rows = []
    for i, (_, row) in enumerate(frame.iterrows()):
        mark = bool(highlight[i]) if highlight is not None else False
        cells = "".join(f'<td class="{"num" if c.numeric else "txt"}">{c.fmt(row[c.key])}</td>'
                        for c in columns)
        rows.append(f'<tr class="pick">{cells}</tr>' if mark else f"<tr>{cells}</tr>")
    return (f'<div class="tablewrap"><table class="{esc(css)}"><thead><tr>{head}</tr></thead>'
            f"<tbody>{''.join(rows)}</tbody></table></div>")


def definitions(items: Iterable[tuple[str, str]]) -> str:
    """A two-column list of (name, markup value)."""
    body = "".join(f"<dt>{esc(k)}</dt><dd>{v}</dd>" for k, v in items)
    return f'<dl class="defs">{body}</dl>'


def tiles(items: Iterable[tuple[str, str, str]]) -> str:
    """Headline numbers: (label, value, note) each."""
    body = "".join(f'<div class="tile"><div class="tl">{esc(a)}</div><div class="tv">{esc(b)}</div>'
                   f'<div class="tn">{esc(c)}</div></div>' for a, b, c in items)
    return f'<div class="tiles">{body}</div>'


def notice(text: str) -> str:
    """A boxed remark (something left out of the report and why)."""
    return f'<p class="notice">{esc(text)}</p>'


def paragraph(text: str) -> str:
    """A plain escaped paragraph."""
    return f"<p>{esc(text)}</p>"


def bullet_list(items: Iterable[str]) -> str:
    """An escaped bulleted list."""
    return "<ul>" + "".join(f"<li>{esc(t)}</li>" for t in items) + "</ul>"


def pct(v: object, digits: int = 1) -> str:
    """0.9234 -> '92.3%'; missing -> an en dash (:func:`tinyconv.fmt.percent`)."""
    return fmt.percent(v, digits)


def num(v: object, digits: int = 0) -> str:
    """Thousands-separated number; missing -> an en dash."""
    try:
        f = float(v)  # type: ignore[arg-type]
    except (TypeError, ValueError):
        return "\u2013"
    if not math.isfinite(f):
        return "\u2013"
    text = f"{f:,.{digits}f}"
    return text[1:] if text.startswith("-") and not text.strip("-0.,") else text  # no "-0.000"


def pvalue(v: object) -> str:
    """p-value to 3 digits, '<0.001' below; missing -> an en dash."""
    try:
        f = float(v)  # type: ignore[arg-type]
    except (TypeError, ValueError):
        return "\u2013"
    if not math.isfinite(f):
        return "\u2013"
    return "&lt;0.001" if f < 0.001 else f"{f:.3f}"


def _css() -> str:
    """The page's style sheet (colours from the shared palette)."""
    p = PALETTE
    return f"""
:root {{ --ink:{p.ink}; --paper:{p.paper}; --held:{p.held_out}; --pick:{p.pick};
  --rule:{p.rule}; --band:{p.band}; --muted:{p.muted_text}; --train:{p.training}; }}
* {{ box-sizing: border-box; }}
html {{ background: var(--paper); }}
body {{ margin: 0; color: var(--ink); font: 15px/1.55 "Liberation Sans", "DejaVu Sans",
  system-ui, sans-serif; font-variant-numeric: tabular-nums; }}
.page {{ max-width: 1180px; margin: 0 auto; padding: 0 32px 64px; }}
header.top {{ border-bottom: 3px solid var(--ink); padding: 36px 0 18px; margin-bottom: 8px;
  display: grid; grid-template-columns: 1fr auto; gap: 8px 32px; align-items: end; }}
header.top .kicker {{ text-transform: uppercase; letter-spacing: .14em; font-size: 12px;
  color: var(--muted); }}
header.top h1 {{ font: 700 34px/1.15 "DejaVu Serif", Georgia, serif; margin: 4px 0 0; }}
header.top .meta {{ font-size: 13px; color: var(--muted); text-align: right; }}
nav.toc {{ display: flex; flex-wrap: wrap; gap: 4px 18px; font-size: 13px; padding: 10px 0 22px;
  border-bottom: 1px solid var(--rule); }}
nav.toc a {{ color: var(--held); text-decoration: none; }}
nav.toc a span {{ color: var(--muted); margin-right: 4px; }}
.decision {{ display: grid; grid-template-columns: minmax(280px, 1fr) 2fr; gap: 28px;
  margin: 28px 0 8px; padding: 22px 24px; background: #fff; border: 1px solid var(--rule);
  border-left: 6px solid var(--pick); }}
.decision h2 {{ margin: 0 0 6px; font-size: 13px; letter-spacing: .12em; text-transform: uppercase;
  color: var(--pick); }}
.decision .arch {{ font: 600 17px/1.35 "DejaVu Sans Mono", "Liberation Mono", monospace;
  word-break: break-all; margin: 0 0 10px; }}
.decision p {{ margin: 0; font-size: 14px; }}
.decision p.tocautions {{ margin-top: 10px; font-size: 13px; color: var(--muted); }}
.decision p.tocautions a {{ color: var(--held); font-weight: 600; }}
.decision p.flag {{ margin-top: 10px; padding: 6px 10px; background: var(--band);
  border-left: 3px solid var(--pick); }}
.tiles {{ display: grid; grid-template-columns: repeat(3, minmax(120px, 1fr)); gap: 16px 14px; }}
.tile {{ border-top: 2px solid var(--held); padding: 6px 2px 0; }}
.tile .tl {{ font-size: 11px; text-transform: uppercase; letter-spacing: .08em; color: var(--muted); }}
.tile .tv {{ font-size: 24px; font-weight: 700; line-height: 1.2; }}
.tile .tn {{ font-size: 12px; color: var(--muted); }}
section {{ margin-top: 44px; }}
section > h2 {{ font: 700 22px/1.2 "DejaVu Serif", Georgia, serif; margin: 0 0 4px;
  display: flex; align-items: baseline; gap: 12px; }}
section > h2 .no {{ font: 600 13px/1 "DejaVu Sans Mono", monospace; color: var(--paper);
  background: var(--ink); padding: 4px 7px; border-radius: 2px; }}
section > p.lead {{ margin: 0 0 14px; color: var(--muted); max-width: 80ch; }}
h3 {{ font-size: 15px; margin: 22px 0 6px; }}
.tablewrap {{ overflow-x: auto; border: 1px solid var(--rule); background: #fff; }}
table {{ border-collapse: collapse; width: 100%; font-size: 13px; }}
th, td {{ padding: 6px 8px; border-bottom: 1px solid var(--rule); white-space: nowrap; }}
td.txt {{ white-space: normal; }}
table.ranking td.txt {{ min-width: 11em; }}
table.ranking th, table.ranking td {{ padding: 5px 5px; }}
th {{ text-align: left; font-size: 11px; text-transform: uppercase; letter-spacing: .03em;
  white-space: normal; vertical-align: bottom;
  color: var(--muted); background: #f3eee3; border-bottom: 1.5px solid var(--ink); }}
td.num, th.num {{ text-align: right; }}
td.txt code {{ font: 12px "DejaVu Sans Mono", "Liberation Mono", monospace;
  word-break: break-all; }}
td.txt code.arch {{ word-break: normal; }}
tbody tr:nth-child(even) td {{ background: #fcfaf6; }}
tr.pick td {{ background: var(--band) !important; font-weight: 700; }}
tr.pick td:first-child {{ box-shadow: inset 5px 0 0 var(--pick); }}
.figs {{ display: grid; grid-template-columns: repeat(auto-fit, minmax(460px, 1fr)); gap: 18px; }}
figure.fig {{ margin: 0; background: #fff; border: 1px solid var(--rule); padding: 10px; }}
figure.fig img {{ display: block; width: 100%; height: auto; margin: 0 auto; }}
figure.fig figcaption {{ font-size: 13px; color: var(--muted); padding: 8px 4px 2px; }}
figure.wide {{ grid-column: 1 / -1; }}
.notice {{ border: 1px dashed var(--muted); background: #fff; padding: 10px 14px; font-size: 14px; }}
dl.defs {{ display: grid; grid-template-columns: max-content 1fr; gap: 4px 20px; margin: 0;
  background: #fff; border: 1px solid var(--rule); padding: 14px 18px; font-size: 13.5px; }}
dl.defs dt {{ color: var(--muted); }}
dl.defs dd {{ margin: 0; word-break: break-word; }}
dl.defs pre, pre.space {{ margin: 0; font: 12.5px/1.45 "DejaVu Sans Mono", monospace;
  white-space: pre-wrap; }}
.cautions {{ background: var(--ink); color: var(--paper); padding: 20px 26px 14px; }}
.cautions li {{ margin-bottom: 8px; max-width: 95ch; }}
.two {{ display: grid; grid-template-columns: repeat(auto-fit, minmax(420px, 1fr)); gap: 18px;
  align-items: start; }}
footer {{ margin-top: 56px; padding-top: 12px; border-top: 1px solid var(--rule);
  font-size: 12px; color: var(--muted); }}
@media print {{ .page {{ max-width: none; }} nav.toc {{ display: none; }} }}
"""


def page(title: str, kicker: str, meta: Mapping[str, str], decision: str,
         sections: Sequence[Section], footer: str) -> str:
    """The whole document.

    Parameters
    ----------
    title, kicker : plain text for the header
    meta : short facts shown at the header's right (plain text)
    decision : markup of the pick panel under the header
    sections : numbered in order; the table of contents links to them by anchor
    footer : plain text
    """
    toc = "".join(f'<a href="#{esc(s.key)}"><span>{i}</span>{esc(s.title)}</a>'
                  for i, s in enumerate(sections, 1))
    meta_html = "<br>".join(f"{esc(k)}: {esc(v)}" for k, v in meta.items())
    body = "".join(
        f'<section id="{esc(s.key)}"><h2><span class="no">{i:02d}</span>{esc(s.title)}</h2>'
        + (f'<p class="lead">{esc(s.lead)}</p>' if s.lead else "") + s.body + "</section>"
        for i, s in enumerate(sections, 1))
    return ("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
            "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">"
            f"<title>{esc(title)}</title><style>{_css()}</style></head><body><div class=\"page\">"
            f'<header class="top"><div><div class="kicker">{esc(kicker)}</div><h1>{esc(title)}</h1>'
            f'</div><div class="meta">{meta_html}</div></header>'
            f'<nav class="toc">{toc}</nav>{decision}{body}'
            f"<footer>{esc(footer)}</footer></div></body></html>\n")
