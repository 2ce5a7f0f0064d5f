"""A self-contained HTML report: sections of text, tables and altair charts in one file that opens
with no network (the Vega libraries are inlined once, from vl-convert's bundle)."""

from __future__ import annotations

import html
import json
import urllib.parse
from dataclasses import dataclass, field
from typing import Any

import polars as pl

from churnlife.notes import json_safe


@dataclass
class Block:
    """Base class of report content."""


@dataclass
class Text(Block):
    html: str  # trusted HTML written by churnlife (user values escaped with esc())


@dataclass
class Table(Block):
    frame: pl.DataFrame
    caption: str = ""
    csv_name: str | None = None  # the file beside the report holding the full table
    max_rows: int = 40
    formats: dict[str, str] = field(default_factory=dict)  # column → format spec, e.g. ".1%"


@dataclass
class Chart(Block):
    chart: Any  # an altair chart
    name: str  # file stem for the chart's own files
    caption: str = ""


def range_text(lo: float | None, hi: float | None, fmt: str) -> str:
    """An interval as the report writes it: "60.1–62.3%", "−270 to +790" (a range with signs
    reads better with "to"), "13–not reached"; one number when both ends format alike (a
    median interval on whole tenures can be a single tenure); "" when an end is missing."""
    if lo is None or hi is None or lo != lo or hi != hi:
        return ""
    lo_s = "−∞" if lo == float("-inf") else format(lo, fmt)
    hi_s = "not reached" if hi == float("inf") else format(hi, fmt)
    if lo_s == hi_s:
        return lo_s.replace("-", "−")
    if fmt.endswith("%") and lo_s.endswith("%") and hi_s.endswith("%"):
        lo_s = lo_s[:-1]
    signed = lo < 0 or "+" in fmt
    text = f"{lo_s} to {hi_s}" if signed else f"{lo_s}–{hi_s}"
    return text.replace("-", "−")


def estimate_text(value: float | None, lo: float | None, hi: float | None, fmt: str) -> str:
    """ "588 (567–631)": an estimate with its interval in brackets, for compact tables; "—"
    for a missing estimate, the estimate alone when the interval is missing."""
    if value is None or value != value:
        return "—"
    shown = format(value, fmt).replace("-", "−")
    span = range_text(lo, hi, fmt)
    return f"{shown} ({span})" if span else shown


def estimate_column(frame: pl.DataFrame, est: str, lo: str, hi: str, fmt: str) -> list[str]:
    """``estimate_text`` for each row of a frame (rows are cohorts or tenures, never customers)."""
    return [
        estimate_text(e, a, b, fmt)
        for e, a, b in zip(frame[est], frame[lo], frame[hi], strict=True)
    ]


@dataclass(frozen=True)
class Headline:
    """One figure for the report's "At a glance" summary. Any section may carry headlines
    (``Section.headlines``); the summary collects them in section order and groups them by
    ``key``: a group whose items vary by cohort and by label is shown as a grid, otherwise as
    cards. ``value`` is None when the figure could not be computed (``missing`` says why)."""

    key: str  # stable group id: "retention", "median_tenure", "value_new_customer", …
    title: str  # the group's heading in plain words
    label: str  # what this item is within the group, e.g. "after 12 months"
    value: float | None
    lower: float | None = None
    upper: float | None = None
    fmt: str = ".3g"  # format spec of value and interval, e.g. ".1%", ",.0f"
    unit: str = ""  # written after the number, e.g. "months" or a currency code
    cohort: str = ""
    interval: str = ""  # what the interval is, e.g. "95% interval"
    caution: str = ""  # plain words the reader needs beside this figure
    missing: str = "not available"  # shown instead of a value that is None
    section: str = ""  # key of the section with the details

    def number(self, value: float | None = None) -> str:
        v = self.value if value is None else value
        if v is None or v != v:
            return self.missing
        if v in (float("inf"), float("-inf")):
            return "not reached" if v > 0 else "−∞"
        text = format(v, self.fmt).replace("-", "−")
        return f"{text} {self.unit}" if self.unit else text

    def interval_text(self) -> str:
        """ "60.1–62.3%" or "13–15 months"; "" when there is no interval to show."""
        if self.value is None:
            return ""
        text = range_text(self.lower, self.upper, self.fmt)
        if text and self.unit and self.upper != float("inf"):
            return f"{text} {self.unit}"
        return text

    def as_dict(self) -> dict[str, Any]:
        def num(v: float | None) -> float | None:
            return None if v is None or v != v or v in (float("inf"), float("-inf")) else v

        return {
            "key": self.key,
            "label": self.label,
            "cohort": self.cohort or None,
            "value": num(self.value),
            "lower": num(self.lower),
            "upper": None if self.upper == float("inf") else num(self.upper),
            "upper_not_reached": self.upper == float("inf"),
            "unit": self.unit or None,
            "interval": self.interval or None,
            "caution": self.caution or None,
        }


@dataclass
class Section:
    key: str
    title: str
    blocks: list[Block]
    lead: str = ""  # one sentence in plain words under the title
    headlines: list[Headline] = field(default_factory=list)  # figures for "At a glance"


def esc(value: object) -> str:
    return html.escape(str(value), quote=True)


# The page's look: paper background, deep-teal masthead and contents rail, amber rules. The
# Content-Security-Policy lets the page load nothing at all: no script, style, image, font or
# connection from anywhere but the page itself (Vega compiles expressions, hence 'unsafe-eval').
CSP = (
    "default-src 'none'; script-src 'unsafe-inline' 'unsafe-eval'; style-src 'unsafe-inline'; "
    "img-src data:; font-src data:; base-uri 'none'; form-action 'none'"
)

_CSS = """
:root { --ink:#1d2a2e; --paper:#fbf8f1; --rule:#d9d1bf; --teal:#1f6f78; --teal-dark:#174f55;
        --amber:#d98e04; --muted:#5f6b6d; --card:#ffffff; --sans: system-ui, 'Segoe UI',
        'DejaVu Sans', sans-serif; }
* { box-sizing: border-box; }
html { scroll-behavior: smooth; }
body { margin:0; background:var(--paper); color:var(--ink);
       font: 16px/1.55 Georgia, 'Times New Roman', serif; }
header.masthead { background:var(--teal); color:#fff; padding:26px 40px 20px;
                  border-bottom:5px solid var(--amber); }
header.masthead h1 { margin:0 0 4px; font-size:29px; letter-spacing:.3px; }
header.masthead p { margin:0; opacity:.92; font: 15px/1.5 var(--sans); }
div.page { display:grid; grid-template-columns: 236px minmax(0, 1fr); align-items:start; }
nav.contents { position:sticky; top:0; max-height:100vh; overflow-y:auto; padding:22px 14px 30px
               26px; font: 13.5px/1.45 var(--sans); border-right:1px solid var(--rule);
               background:#f3eee2; min-height:100vh; }
nav.contents h2 { font: 600 12px/1 var(--sans); text-transform:uppercase; letter-spacing:1.2px;
                  color:var(--muted); margin:0 0 10px; }
nav.contents ol { list-style:none; margin:0; padding:0; counter-reset: toc; }
nav.contents li { counter-increment: toc; margin:0 0 6px; display:flex; gap:6px; }
nav.contents li::before { content: counter(toc); color:var(--amber); font-weight:700;
                          min-width:1.4em; text-align:right; }
nav.contents a { color:var(--teal-dark); text-decoration:none; }
nav.contents a:hover { text-decoration:underline; }
main { max-width:1060px; padding:6px 40px 64px; min-width:0; }
section { margin-top:30px; }
section h2 { font-size:23px; border-bottom:2px solid var(--amber); padding-bottom:4px;
             display:inline-block; margin-bottom:10px; }
section h2 .no { color:var(--amber); margin-right:10px; font-weight:400; }
p.lead { color:var(--muted); margin-top:-2px; }
table { border-collapse:collapse; margin:10px 0 4px; font: 13.5px/1.4 var(--sans); }
th, td { border-bottom:1px solid var(--rule); padding:4px 10px; text-align:right; }
th { background:#efe8d8; font-weight:600; }
td:first-child, th:first-child { text-align:left; }
.table-wrap { overflow-x:auto; max-width:100%; }
.caption { font: 13px/1.45 var(--sans); color:var(--muted); margin:2px 0 14px; }
.caption a, .files a { color:var(--teal); }
.files { font: 12.5px/1.4 var(--sans); color:var(--muted); margin:2px 0 16px; }
a.download { display:inline-block; border:1px solid var(--teal); border-radius:3px;
             padding:0 6px; text-decoration:none; margin-right:4px; }
.caution { border-left:4px solid var(--amber); background:#fff6e0; padding:10px 16px;
           margin:12px 0; }
.figure { margin:14px 0; overflow-x:auto; }
dl.params { display:grid; grid-template-columns: max-content auto; gap:2px 18px;
            font: 14px/1.5 var(--sans); }
dl.params dt { color:var(--muted); } dl.params dd { margin:0; }
p.gist { font-size:19px; line-height:1.45; margin:14px 0 6px; max-width:860px; }
.glance-group { margin:18px 0 8px; }
.glance-group h3 { font: 600 15px/1.3 var(--sans); margin:0 0 8px; color:var(--teal-dark); }
.glance-group h3 a { font-weight:400; font-size:12.5px; margin-left:8px; color:var(--teal); }
.cards { display:flex; flex-wrap:wrap; gap:12px; }
.card { background:var(--card); border:1px solid var(--rule); border-top:4px solid var(--teal);
        padding:10px 14px 10px; min-width:190px; max-width:330px; flex:1 1 200px; }
.card .who { font: 13px/1.3 var(--sans); color:var(--muted); }
.card .fig { font-size:27px; line-height:1.2; margin:4px 0 2px; }
.card .iv, .grid .iv { font: 12.5px/1.35 var(--sans); color:var(--muted); }
.card.empty { border-top-color:var(--rule); background:transparent; border-style:dashed; }
.card.empty .fig { font-size:15px; color:var(--muted); }
table.grid td { text-align:center; padding:6px 12px; background:var(--card); }
table.grid td:first-child { text-align:left; background:transparent; }
table.grid .fig { font-size:17px; }
.glance-cautions { font: 13px/1.45 var(--sans); margin:6px 0 0; padding-left:18px;
                   color:#6b4a00; }
footer { color:var(--muted); font: 13px var(--sans); padding: 0 40px 30px 276px; }
@media (max-width: 900px) {
  div.page { display:block; }
  nav.contents { position:static; min-height:0; max-height:none; border-right:0;
                 border-bottom:1px solid var(--rule); }
  main { padding:6px 18px 48px; } footer { padding:0 18px 30px; }
}
@media print { nav.contents { display:none; } div.page { display:block; } }
"""


def _fmt(value: object, spec: str | None) -> str:
    if value is None:
        return "—"
    if isinstance(value, float):
        if value != value:  # NaN
            return "—"
        if value in (float("inf"), float("-inf")):
            return "not reached" if value > 0 else "−∞"
        return format(value, spec or ".4g")
    return esc(value)


MAX_INLINE_CSV = 2_000_000  # characters; larger tables are linked beside the report only


def csv_data_uri(frame: pl.DataFrame) -> str | None:
    """The table as a ``data:`` link (opens or saves with no request), or None if too large."""
    text = frame.write_csv()
    if len(text) > MAX_INLINE_CSV:
        return None
    return "data:text/csv;charset=utf-8," + urllib.parse.quote(text, safe="")


def table_html(t: Table) -> str:
    frame = t.frame
    shown = frame.head(t.max_rows)
    head = "".join(f"<th>{esc(c)}</th>" for c in shown.columns)
    rows = "".join(
        "<tr>"
        + "".join(
            f"<td>{_fmt(v, t.formats.get(c))}</td>" for c, v in zip(shown.columns, r, strict=True)
        )
        + "</tr>"
        for r in shown.iter_rows()
    )
    more = ""
    if frame.height > t.max_rows:
        more = f" Showing {t.max_rows} of {frame.height} rows."
    caption = f'<p class="caption">{esc(t.caption)}{more}</p>'
    links = []
    uri = csv_data_uri(frame)
    stem = (t.csv_name or "table.csv").removesuffix(".csv")
    if uri is not None:
        name = f"{stem}-as-shown.csv" if t.csv_name else "table.csv"
        links.append(
            f'<a class="download" download="{esc(name)}" href="{esc(uri)}">CSV</a> '
            f"this table ({frame.height:,} rows)"
        )
    if t.csv_name:
        links.append(
            f'full table beside this file: <a href="{esc(t.csv_name)}">{esc(t.csv_name)}</a>'
        )
    files = f'<p class="files">Download: {" · ".join(links)}</p>' if links else ""
    return (
        f'<div class="table-wrap"><table><thead><tr>{head}</tr></thead><tbody>{rows}</tbody>'
        f"</table></div>{caption}{files}"
    )


def vega_bundle() -> str:
    """The vega-embed JavaScript bundle (Vega and Vega-Lite inside), for offline rendering."""
    import vl_convert as vlc
    from altair.utils._importers import vl_version_for_vl_convert

    return vlc.javascript_bundle(vl_version=vl_version_for_vl_convert())


def render(
    title: str,
    subtitle: str,
    sections: list[Section],
    footer: str = "",
    bundle: str | None = None,
) -> str:
    """The whole report page as one HTML string: masthead, a numbered contents rail, the
    sections in order. It loads nothing from anywhere (see CSP)."""
    bundle = vega_bundle() if bundle is None else bundle
    bundle = bundle.replace("</script", "<\\/script")
    charts: list[tuple[str, dict]] = []
    body = []
    for number, sec in enumerate(sections, start=1):
        parts = [
            f'<section id="{esc(sec.key)}"><h2><span class="no">{number}</span>'
            f"{esc(sec.title)}</h2>"
        ]
        if sec.lead:
            parts.append(f'<p class="lead">{esc(sec.lead)}</p>')
        for block in sec.blocks:
            if isinstance(block, Text):
                parts.append(block.html)
            elif isinstance(block, Table):
                parts.append(table_html(block))
            elif isinstance(block, Chart):
                div = f"chart-{len(charts)}"
                # NaN is not JSON: missing points become null (churnlife.notes explains them)
                charts.append((div, json_safe(block.chart.to_dict())))
                cap = f'<p class="caption">{esc(block.caption)}</p>' if block.caption else ""
                files = " · ".join(
                    f'<a href="{esc(block.name)}.{ext}">{ext.upper()}</a>' for ext in ("png", "svg")
                )
                parts.append(
                    f'<div class="figure"><div class="chart" id="{div}" '
                    f'data-name="{esc(block.name)}"></div></div>{cap}'
                    f'<p class="files">Chart files beside this report: {files}</p>'
                )
        parts.append("</section>")
        body.append("".join(parts))
    nav = "".join(f'<li><a href="#{esc(s.key)}">{esc(s.title)}</a></li>' for s in sections)
    # json.dumps output is safe inside <script> once "</" is broken up.
    specs = json.dumps({div: spec for div, spec in charts}).replace("</", "<\\/")
    script = (
        "const specs = " + specs + ";\n"
        "for (const [id, spec] of Object.entries(specs)) {\n"
        "  vegaEmbed('#' + id, spec, {actions: false, renderer: 'svg'})"
        ".catch(err => { document.getElementById(id).textContent = 'Chart failed: ' + err; "
        "console.error(err); });\n}\n"
    )
    return (
        '<!DOCTYPE html>\n<html lang="en"><head><meta charset="utf-8">'
        f'<meta http-equiv="Content-Security-Policy" content="{CSP}">'
        '<meta name="viewport" content="width=device-width, initial-scale=1">'
        f"<title>{esc(title)}</title><style>{_CSS}</style>"
        f"<script>{bundle}</script></head><body>"
        f'<header class="masthead"><h1>{esc(title)}</h1><p>{esc(subtitle)}</p></header>'
        f'<div class="page"><nav class="contents"><h2>In this report</h2><ol>{nav}</ol></nav>'
        f"<main>{''.join(body)}</main></div>"
        f"<footer>{footer}</footer><script>{script}</script></body></html>"
    )


def params_html(params: dict[str, Any]) -> str:
    items = "".join(f"<dt>{esc(k)}</dt><dd>{esc(v)}</dd>" for k, v in params.items())
    return f'<dl class="params">{items}</dl>'


def charts_in(sections: list[Section]) -> list[Chart]:
    return [b for s in sections for b in s.blocks if isinstance(b, Chart)]


def tables_in(sections: list[Section]) -> list[Table]:
    return [b for s in sections for b in s.blocks if isinstance(b, Table) and b.csv_name]


def headlines_in(sections: list[Section]) -> list[Headline]:
    return [h for s in sections for h in s.headlines]


__all__ = ["Block", "Chart", "Headline", "Section", "Table", "Text", "esc", "render"]
