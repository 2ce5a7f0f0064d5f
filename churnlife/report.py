"""A self-contained HTML report: sections of text, tables and altair charts in one file that opens
with no network (the Vega libraries are inlined once, from vl-convert's bundle)."""

from __future__ import annotations

import html
import json
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


@dataclass
class Section:
    key: str
    title: str
    blocks: list[Block]
    lead: str = ""  # one sentence in plain words under the title


def esc(value: object) -> str:
    return html.escape(str(value), quote=True)


_CSS = """
:root { --ink:#1d2a2e; --paper:#fbf8f1; --rule:#d9d1bf; --teal:#1f6f78; --amber:#d98e04;
        --muted:#5f6b6d; }
* { box-sizing: border-box; }
body { margin:0; background:var(--paper); color:var(--ink);
       font: 16px/1.55 Georgia, 'Times New Roman', serif; }
header.masthead { background:var(--teal); color:#fff; padding:28px 48px 22px; }
header.masthead h1 { margin:0 0 4px; font-size:28px; letter-spacing:.3px; }
header.masthead p { margin:0; opacity:.9; }
nav.contents { padding:10px 48px; border-bottom:1px solid var(--rule); background:#f3eee2;
               font: 14px/1.6 system-ui, sans-serif; }
nav.contents a { color:var(--teal); margin-right:18px; text-decoration:none; }
main { max-width:1040px; padding:8px 48px 64px; }
section { margin-top:34px; }
section h2 { font-size:22px; border-bottom:2px solid var(--amber); padding-bottom:4px;
             display:inline-block; }
p.lead { color:var(--muted); margin-top:-6px; }
table { border-collapse:collapse; margin:10px 0 4px; font: 13.5px/1.4 system-ui, sans-serif; }
th, td { border-bottom:1px solid var(--rule); padding:4px 10px; text-align:right; }
th { background:#efe8d8; font-weight:600; }
td:first-child, th:first-child { text-align:left; }
.caption { font: 13px/1.4 system-ui, sans-serif; color:var(--muted); margin:2px 0 14px; }
.caption a { color:var(--teal); }
.caution { border-left:4px solid var(--amber); background:#fff6e0; padding:10px 16px;
           margin:12px 0; }
.figure { margin:14px 0; }
dl.params { display:grid; grid-template-columns: max-content auto; gap:2px 18px;
            font: 14px/1.5 system-ui, sans-serif; }
dl.params dt { color:var(--muted); } dl.params dd { margin:0; }
footer { color:var(--muted); font: 13px system-ui, sans-serif; padding: 0 48px 30px; }
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
    link = f' Full table: <a href="{esc(t.csv_name)}">{esc(t.csv_name)}</a>.' if t.csv_name else ""
    caption = f'<p class="caption">{esc(t.caption)}{more}{link}</p>'
    return f"<table><thead><tr>{head}</tr></thead><tbody>{rows}</tbody></table>{caption}"


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
    """The whole report page as one HTML string."""
    bundle = vega_bundle() if bundle is None else bundle
    bundle = bundle.replace("</script", "<\\/script")
    charts: list[tuple[str, dict]] = []
    body = []
    for sec in sections:
        parts = [f'<section id="{esc(sec.key)}"><h2>{esc(sec.title)}</h2>']
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
                parts.append(f'<div class="figure"><div id="{div}"></div>{cap}</div>')
        parts.append("</section>")
        body.append("".join(parts))
    nav = "".join(f'<a href="#{esc(s.key)}">{esc(s.title)}</a>' for s in sections)
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
        f"<title>{esc(title)}</title><style>{_CSS}</style>"
        f"<script>{bundle}</script></head><body>"
        f'<header class="masthead"><h1>{esc(title)}</h1><p>{esc(subtitle)}</p></header>'
        f'<nav class="contents">{nav}</nav><main>{"".join(body)}</main>'
        f"<footer>{footer}</footer><script>{script}</script></body></html>"
    )


def params_html(params: dict[str, Any]) -> str:
    items = "".join(f"<dt>{esc(k)}</dt><dd>{esc(v)}</dd>" for k, v in params.items())
    return f'<dl class="params">{items}</dl>'


def charts_in(sections: list[Section]) -> list[Chart]:
    return [b for s in sections for b in s.blocks if isinstance(b, Chart)]


def tables_in(sections: list[Section]) -> list[Table]:
    return [b for s in sections for b in s.blocks if isinstance(b, Table) and b.csv_name]


__all__ = ["Block", "Chart", "Section", "Table", "Text", "esc", "render"]
