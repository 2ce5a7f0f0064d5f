"""Charts for cohort comparisons: a cohort × tenure retention heatmap, a hazard-ratio forest plot
and cumulative incidence of churn by cause. Each takes a result and returns an altair chart;
nothing here computes statistics."""

from __future__ import annotations

import altair as alt
import numpy as np
import polars as pl

from churnlife.causes import CauseResult
from churnlife.charts import MIN_AT_RISK, PALETTE, _theme


def retention_heatmap(grid: pl.DataFrame, unit: str, by: str) -> alt.Chart:
    """Retention per signup cohort (rows, oldest first) and tenure (columns). Cells are left
    empty where fewer than 10 customers were still at risk, or the cohort is not that old."""
    cohorts = sorted(grid["cohort"].unique().to_list())
    # label every tenure on short grids, every 3rd or 6th on long ones (labels must not touch)
    longest = int(grid["tenure"].max()) if grid.height else 1
    step = 1 if longest <= 15 else 3 if longest <= 36 else 6
    ticks = sorted({1, *range(step, longest + 1, step)})
    chart = (
        alt.Chart(grid)
        .mark_rect()
        .encode(
            x=alt.X(
                "tenure:O",
                title=f"Tenure ({unit})",
                axis=alt.Axis(labelAngle=0, values=ticks),
            ),
            y=alt.Y("cohort:N", title=by.replace("_", " ").capitalize(), sort=cohorts),
            color=alt.Color(
                "retention:Q",
                title="Still subscribed",
                scale=alt.Scale(domain=[0, 1], range=["#fbf3df", PALETTE[6], PALETTE[0]]),
                legend=alt.Legend(format="%"),
            ),
            tooltip=[
                alt.Tooltip("cohort:N", title="Cohort"),
                alt.Tooltip("tenure:O", title=f"Tenure ({unit})"),
                alt.Tooltip("retention:Q", title="Retention", format=".1%"),
                alt.Tooltip("at_risk:Q", title="At risk"),
            ],
        )
        .properties(
            width=640,
            height=max(120, 16 * len(cohorts)),
            title=f"Retention by {by.replace('_', ' ')} and tenure (Kaplan–Meier)",
        )
    )
    return _theme(chart)


def hazard_ratio_forest(
    hazard_ratios: pl.DataFrame, confidence: float, ties: str, strata: str | None
) -> alt.LayerChart:
    """Hazard ratios with Wald intervals on a log scale (``churnlife.compare.hazard_ratio_table``);
    the rule at 1 means "same hazard as the reference level". Right of it: churns faster."""
    table = hazard_ratios.with_columns(
        pl.when(pl.col("reference") != "")
        .then(pl.format("{}: {} vs {}", "term", "level", "reference"))
        .otherwise(pl.format("{} (per unit)", "term"))
        .alias("label")
    )
    order = table["label"].to_list()
    lo = float(np.nanmin(table["lower"].to_numpy()))
    hi = float(np.nanmax(table["upper"].to_numpy()))
    domain = [min(lo, 1.0) / 1.1, max(hi, 1.0) * 1.1]
    pct = round(confidence * 100)
    base = alt.Chart(table).encode(
        y=alt.Y("label:N", title=None, sort=order, axis=alt.Axis(labelLimit=360)),
        color=alt.Color("term:N", title="Term", scale=alt.Scale(range=PALETTE)),
    )
    log_scale = alt.Scale(type="log", domain=domain, nice=False)
    x = alt.X(
        "hazard_ratio:Q", title=f"Hazard ratio ({pct}% Wald interval, log scale)", scale=log_scale
    )
    bars = base.mark_rule(strokeWidth=2).encode(x=alt.X("lower:Q", scale=log_scale), x2="upper:Q")
    dots = base.mark_point(filled=True, size=70, opacity=1).encode(
        x=x,
        tooltip=[
            alt.Tooltip("label:N", title="Comparison"),
            alt.Tooltip("hazard_ratio:Q", title="Hazard ratio", format=".3f"),
            alt.Tooltip("lower:Q", title=f"{pct}% lower", format=".3f"),
            alt.Tooltip("upper:Q", title=f"{pct}% upper", format=".3f"),
            alt.Tooltip("p:Q", title="p", format=".2g"),
        ],
    )
    one = (
        alt.Chart(pl.DataFrame({"one": [1.0]}))
        .mark_rule(strokeDash=[4, 3], color="#5f6b6d")
        .encode(x="one:Q")
    )
    where = f", strata {strata}" if strata else ""
    chart = alt.layer(one, bars, dots).properties(
        width=560,
        height=max(80, 28 * table.height),
        title=f"Hazard ratios (Cox, {ties} ties{where})",
    )
    return _theme(chart)


def cause_incidence(causes: CauseResult, unit: str, min_at_risk: int = MIN_AT_RISK) -> alt.Chart:
    """Cumulative incidence of churn by cause (one panel per cause), a line per cohort, drawn
    while at least ``min_at_risk`` customers are at risk."""
    data = causes.incidence.filter(pl.col("at_risk") >= min_at_risk).select(
        "cohort", "cause", "tenure", "cif", "lower", "upper", "at_risk"
    )
    cohorts = data["cohort"].unique(maintain_order=True).to_list()
    scale = alt.Scale(domain=cohorts, range=PALETTE[: max(1, len(cohorts))])
    pct = round(causes.confidence * 100)
    base = alt.Chart().encode(
        x=alt.X("tenure:Q", title=f"Tenure ({unit})", scale=alt.Scale(nice=False)),
        color=alt.Color(
            "cohort:N", title="Cohort", scale=scale, legend=alt.Legend(symbolOpacity=1)
        ),
    )
    band = base.mark_area(opacity=0.14, interpolate="step-after").encode(
        y=alt.Y("lower:Q", title="Share churned by this cause", axis=alt.Axis(format="%")),
        y2="upper:Q",
    )
    line = base.mark_line(interpolate="step-after", strokeWidth=2).encode(
        y="cif:Q",
        tooltip=[
            alt.Tooltip("cohort:N", title="Cohort"),
            alt.Tooltip("cause:N", title="Cause"),
            alt.Tooltip("tenure:Q", title=f"Tenure ({unit})"),
            alt.Tooltip("cif:Q", title="Churned by this cause", format=".1%"),
            alt.Tooltip("lower:Q", title=f"{pct}% lower", format=".1%"),
            alt.Tooltip("upper:Q", title=f"{pct}% upper", format=".1%"),
        ],
    )
    chart = (
        alt.layer(band, line, data=data)
        .properties(width=300, height=240)
        .facet(column=alt.Column("cause:N", title=None, sort=list(causes.causes)))
        .properties(title="Cumulative incidence of churn by cause (Aalen–Johansen)")
    )
    return _theme(chart)
