"""The Kaplan–Meier part of the report: curves, retention at chosen tenures, median tenure."""

from __future__ import annotations

import polars as pl

from churnlife.charts import MIN_AT_RISK, retention_curves
from churnlife.km import KaplanMeierResult
from churnlife.report import Chart, Section, Table
from churnlife.sections.glance import km_headlines


def retention_section(km: KaplanMeierResult, unit: str, retention_at: tuple[int, ...]) -> Section:
    pct = round(km.confidence * 100)
    table = km.retention_at(retention_at)
    wide = table.with_columns(
        pl.format(
            "{} ({}–{})",
            (pl.col("retention") * 100).round(1),
            (pl.col("lower") * 100).round(1),
            (pl.col("upper") * 100).round(1),
        ).alias("value")
    ).pivot(on="tenure", index="cohort", values="value")
    wide = wide.rename({c: f"{c} {unit}" for c in wide.columns if c != "cohort"})
    return Section(
        "retention",
        "Retention by cohort",
        [
            Chart(
                retention_curves(km, unit),
                "retention_curves",
                caption=f"Share of each cohort still subscribed by tenure, with {pct}% pointwise "
                f"{km.interval} intervals (Greenwood variance). Curves are drawn to the longest "
                f"tenure observed while at least {MIN_AT_RISK} customers are still at risk.",
            ),
            Table(
                wide,
                caption=f"Retention in % at chosen tenures ({pct}% interval in brackets); "
                "blank where a cohort has not been observed that long.",
                csv_name="retention_at.csv",
            ),
            Table(
                km.medians_table(),
                caption=f"Median tenure ({unit}): the first tenure at which retention is at or "
                f"below 50%, with a {pct}% interval (Brookmeyer–Crowley, log-log). Blank: not yet "
                "reached.",
                csv_name="median_tenure.csv",
                formats={"median_tenure": ".0f", "lower": ".0f", "upper": ".0f"},
            ),
        ],
        lead="What share of each cohort is still subscribed after each tenure, as observed.",
        headlines=km_headlines(km, unit, retention_at),
    )
