"""Altair charts of the results. Each function takes a result object and returns an altair chart;
nothing here computes statistics."""

from __future__ import annotations

import altair as alt
import polars as pl

from churnlife.km import KaplanMeierResult

# churnlife's own palette: deep teal, amber, plum, moss, brick, slate, and lighter partners.
PALETTE = [
    "#1f6f78",
    "#d98e04",
    "#7b3f61",
    "#5b7f2b",
    "#b5472f",
    "#4a5a70",
    "#63a8ae",
    "#f0b94d",
    "#b07aa1",
    "#9fbf6b",
]
FONT = "Georgia, 'Times New Roman', serif"


def _theme(chart: alt.Chart | alt.LayerChart) -> alt.Chart | alt.LayerChart:
    return (
        chart.configure_axis(
            labelFont=FONT, titleFont=FONT, gridColor="#e6e1d6", labelFontSize=11, titleFontSize=12
        )
        .configure_legend(labelFont=FONT, titleFont=FONT, labelLimit=260)
        .configure_title(font=FONT, anchor="start", fontSize=15)
        .configure_header(labelFont=FONT, titleFont=FONT, labelFontSize=13)
        .configure_view(stroke=None)
    )


MIN_AT_RISK = 10  # curves are drawn while at least this many customers are at risk


def retention_curves(
    km: KaplanMeierResult, unit: str, title: str | None = None, min_at_risk: int = MIN_AT_RISK
) -> alt.LayerChart:
    """Kaplan–Meier retention per cohort, step lines with shaded pointwise intervals. The tail
    where fewer than ``min_at_risk`` customers remain is not drawn: one churn among two customers
    would draw a 50-point drop that says nothing (the tables keep every tenure)."""
    table = km.to_polars()
    # Every curve starts at S = 1 at tenure 0, so steps are drawn from the first day.
    starts = pl.DataFrame(
        {
            "cohort": [c.cohort for c in km.curves],
            "tenure": [0] * len(km.curves),
            "survival": [1.0] * len(km.curves),
            "lower": [1.0] * len(km.curves),
            "upper": [1.0] * len(km.curves),
            "at_risk": [int(c.at_risk.max()) if c.at_risk.size else 0 for c in km.curves],
        }
    )
    data = pl.concat(
        [
            starts,
            table.filter((pl.col("tenure") > 0) & (pl.col("at_risk") >= min_at_risk)).select(
                "cohort", "tenure", "survival", "lower", "upper", "at_risk"
            ),
        ],
        how="vertical_relaxed",
    ).sort("cohort", "tenure")
    cohorts = [c.cohort for c in km.curves]
    scale = alt.Scale(domain=cohorts, range=PALETTE[: max(1, len(cohorts))])
    colour = alt.Color("cohort:N", title="Cohort", scale=scale)
    base = alt.Chart(data).encode(
        x=alt.X("tenure:Q", title=f"Tenure ({unit})", scale=alt.Scale(nice=False)),
        color=colour,
    )
    pct = round(km.confidence * 100)
    band = base.mark_area(opacity=0.16, interpolate="step-after").encode(
        color=alt.Color("cohort:N", scale=scale, legend=None),
        y=alt.Y(
            "lower:Q",
            title="Share still subscribed",
            scale=alt.Scale(domain=[0, 1]),
            axis=alt.Axis(format="%"),
        ),
        y2="upper:Q",
    )
    line = base.mark_line(interpolate="step-after", strokeWidth=2).encode(
        y="survival:Q",
        tooltip=[
            alt.Tooltip("cohort:N", title="Cohort"),
            alt.Tooltip("tenure:Q", title=f"Tenure ({unit})"),
            alt.Tooltip("survival:Q", title="Retention", format=".1%"),
            alt.Tooltip("lower:Q", title=f"{pct}% lower", format=".1%"),
            alt.Tooltip("upper:Q", title=f"{pct}% upper", format=".1%"),
            alt.Tooltip("at_risk:Q", title="At risk"),
        ],
    )
    chart = alt.layer(band, line).properties(
        width=640,
        height=340,
        title=title or f"Retention by cohort (Kaplan–Meier, {pct}% {km.interval} band)",
    )
    return _theme(chart)
