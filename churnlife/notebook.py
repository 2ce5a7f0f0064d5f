"""How results show in a notebook (``_repr_html_``): a few small tables in plain HTML with
inline styles (a notebook has none of the report's stylesheet), each figure with its interval.
The result classes call these; nothing here computes statistics."""

from __future__ import annotations

from typing import Any

import polars as pl

from churnlife.report import Headline, esc

_BOX = "font-family:system-ui,sans-serif;font-size:13px;line-height:1.4;color:#1d2a2e"
_HEAD = "margin:6px 0 4px;font-size:14px;color:#174f55"
_TH = "text-align:left;padding:2px 10px;border-bottom:2px solid #d98e04;background:#f3eee2"
_TD = "text-align:left;padding:2px 10px;border-bottom:1px solid #d9d1bf"
_MUTED = "color:#5f6b6d"


def _cell(value: Any, fmt: str | None) -> str:
    if value is None or (isinstance(value, float) and value != value):
        return "—"
    if isinstance(value, float):
        if value == float("inf"):
            return "not reached"
        return format(value, fmt or ".4g")
    return esc(value)


def frame_html(frame: pl.DataFrame, formats: dict[str, str] | None = None, rows: int = 20) -> str:
    formats = formats or {}
    head = "".join(f'<th style="{_TH}">{esc(c)}</th>' for c in frame.columns)
    body = "".join(
        "<tr>"
        + "".join(
            f'<td style="{_TD}">{_cell(v, formats.get(c))}</td>'
            for c, v in zip(frame.columns, r, strict=True)
        )
        + "</tr>"
        for r in frame.head(rows).iter_rows()
    )
    more = (
        f'<div style="{_MUTED}">first {rows} of {frame.height:,} rows</div>'
        if frame.height > rows
        else ""
    )
    return (
        f'<table style="border-collapse:collapse"><thead><tr>{head}</tr></thead>'
        f"<tbody>{body}</tbody></table>{more}"
    )


def _box(title: str, *parts: str) -> str:
    return (
        f'<div style="{_BOX}"><div style="{_HEAD}"><b>{esc(title)}</b></div>{"".join(parts)}</div>'
    )


def _p(text: str) -> str:
    return f'<p style="margin:4px 0;{_MUTED}">{esc(text)}</p>'


def headlines_html(items: list[Headline]) -> str:
    """One row per figure and cohort; figures at several tenures share the row."""
    groups: dict[tuple[str, str], list[Headline]] = {}
    for h in items:
        groups.setdefault((h.title, h.cohort), []).append(h)
    rows = []
    for (title, cohort), hs in groups.items():
        values = []
        for h in hs:
            iv = h.interval_text()
            values.append(
                (f"{h.label}: " if h.label else "") + h.number() + (f" ({iv})" if iv else "")
            )
        rows.append(
            {
                "figure": title,
                "cohort": cohort,
                f"value ({hs[0].interval or 'interval'})": " · ".join(values),
                "caution": " ".join(dict.fromkeys(h.caution for h in hs if h.caution)),
            }
        )
    if not rows:
        return _p("No headline figures.")
    return frame_html(pl.DataFrame(rows), rows=60)


def analysis_html(analysis: Any) -> str:
    from churnlife.report import headlines_in

    tables = pl.DataFrame(
        {
            "table": list(analysis.tables),
            "rows": [f.height for f in analysis.tables.values()],
            "columns": [", ".join(f.columns[:8]) for f in analysis.tables.values()],
        }
    )
    warnings = [n for n in analysis.notes if n.level == "warning"]
    notes = "".join(
        f"<li>{esc(n.cohort + ': ' if n.cohort else '')}{esc(n.text)}</li>" for n in warnings
    )
    cfg = analysis.config
    return _box(
        f"churnlife analysis: {cfg.log_start} to {cfg.as_of}, tenure in {cfg.tenure_unit}",
        headlines_html(headlines_in(analysis.sections)),
        f'<div style="{_HEAD}">Warnings ({len(warnings)})</div><ul>{notes}</ul>'
        if warnings
        else _p("No warnings."),
        f'<div style="{_HEAD}">Tables (analysis.tables)</div>',
        frame_html(tables, rows=60),
        _p(
            "Past the longest observed tenure, figures come from a model's form; cohorts are "
            "not randomised, so their differences are associations."
        ),
    )


def km_html(km: Any, tenures: tuple[int, ...] = (1, 3, 6, 12, 24, 36)) -> str:
    longest = max((int(c.tenure.max()) for c in km.curves if c.tenure.size), default=0)
    at = [t for t in tenures if t <= longest] or [longest]
    pct = round(km.confidence * 100)
    table = km.retention_at(at).with_columns(
        pl.format(
            "{}% ({}–{})",
            (pl.col("retention") * 100).round(1),
            (pl.col("lower") * 100).round(1),
            (pl.col("upper") * 100).round(1),
        ).alias("value")
    )
    wide = table.pivot(on="tenure", index="cohort", values="value")
    wide = wide.rename({c: f"t = {c}" for c in wide.columns if c != "cohort"})
    return _box(
        f"Kaplan–Meier retention, {len(km.curves)} cohort(s), {pct}% {km.interval} intervals",
        frame_html(wide),
        f'<div style="{_HEAD}">Median tenure</div>',
        frame_html(km.medians_table(), {"median_tenure": ".0f", "lower": ".0f", "upper": ".0f"}),
        _p(
            "Blank: not observed that long, or not reached. km.retention_at([...]) for other "
            "tenures; km.to_polars() for every tenure."
        ),
    )


def comparison_html(cmp: Any) -> str:
    parts = [
        frame_html(cmp.tests, {"chi_square": ".2f", "p": ".3g"}),
    ]
    if cmp.hazard_ratios is not None:
        parts += [
            f'<div style="{_HEAD}">Hazard ratios (Cox)</div>',
            frame_html(
                cmp.hazard_ratios.select(
                    "term", "level", "reference", "hazard_ratio", "lower", "upper", "p"
                ),
                {"hazard_ratio": ".3f", "lower": ".3f", "upper": ".3f", "p": ".3g"},
            ),
        ]
    if cmp.ph_check is not None:
        parts.append(_p(f"Proportional hazards: {cmp.ph_check.verdict}"))
    parts += [
        f'<div style="{_HEAD}">Restricted mean tenure to {cmp.horizon:g}</div>',
        frame_html(
            cmp.rmst.to_polars().select("cohort", "restricted_mean", "lower", "upper"),
            {"restricted_mean": ".2f", "lower": ".2f", "upper": ".2f"},
        ),
        _p("Cohorts are not randomised: differences are associations, not effects."),
    ]
    return _box(f"Cohort comparison by {' × '.join(cmp.by)}", *parts)


def models_html(models: Any) -> str:
    ranking = models.ranking()
    top = ranking.filter(pl.col("rank") <= 3).select(
        "cohort", "rank", "model", "aic", "delta_aic", "max_deviation", "converged"
    )
    failed = (
        _p(f"{len(models.failures)} model fit(s) failed; see models.failures.")
        if models.failures
        else ""
    )
    return _box(
        f"Hazard models: {len({f.name for f in models.fits})} model(s) × "
        f"{len(models.cohorts)} cohort(s), best three per cohort by AIC",
        frame_html(top, {"aic": ".1f", "delta_aic": ".1f", "max_deviation": ".3f"}, rows=40),
        failed,
        _p(
            "models.ranking() for all; models.best(cohort).survival([...]) to read a curve. Past "
            "the longest observed tenure the curves are extrapolations."
        ),
    )
