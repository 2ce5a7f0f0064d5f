"""Altair charts of the value stage: value per new customer by cohort, value per active customer
by tenure, the base forecast, revenue retention and the price sweep. Each function takes a result
table (churnlife.value.valuation) and returns a chart; nothing here computes statistics."""

from __future__ import annotations

import altair as alt
import polars as pl

from churnlife.charts import PALETTE, _theme


def _cohort_colour(cohorts: list[str]) -> alt.Color:
    return alt.Color(
        "cohort:N",
        title="Cohort",
        scale=alt.Scale(domain=cohorts, range=(PALETTE * 4)[: max(len(cohorts), 1)]),
    )


def _band_and_line(
    table: pl.DataFrame,
    x: alt.X,
    y: alt.Y,
    lower: str,
    upper: str,
    colour: alt.Color,
    tooltip: list[alt.Tooltip],
    points: bool = True,
    opacity: float = 0.18,
) -> tuple[alt.Chart, alt.Chart]:
    """A per-cohort estimate as a line over its interval band (same colour, band faint)."""
    band = (
        alt.Chart(table)
        .mark_area(opacity=opacity)
        .encode(x=x, y=f"{lower}:Q", y2=f"{upper}:Q", color=colour)
    )
    line = (
        alt.Chart(table)
        .mark_line(point=points, strokeWidth=2)
        .encode(x=x, y=y, color=colour, tooltip=tooltip)
    )
    return band, line


def new_customer_value_chart(table: pl.DataFrame, confidence: float) -> alt.LayerChart:
    """Value per new customer by cohort, a bar with its interval."""
    pct = round(confidence * 100)
    cohorts = table["cohort"].to_list()
    y = alt.Y("cohort:N", title=None, sort=cohorts)
    bars = (
        alt.Chart(table)
        .mark_bar(height=18, opacity=0.85)
        .encode(
            x=alt.X("value:Q", title="Discounted value per new customer (money units)"),
            y=y,
            color=_cohort_colour(cohorts),
            tooltip=[
                alt.Tooltip("cohort:N", title="Cohort"),
                alt.Tooltip("value:Q", title="Value", format=",.0f"),
                alt.Tooltip("lower:Q", title=f"{pct}% lower", format=",.0f"),
                alt.Tooltip("upper:Q", title=f"{pct}% upper", format=",.0f"),
                alt.Tooltip("model:N", title="Tail model"),
            ],
        )
    )
    whiskers = alt.Chart(table).mark_rule(color="#1d2a2e", strokeWidth=2).encode(
        x="lower:Q", x2="upper:Q", y=y
    )
    return _theme(
        alt.layer(bars, whiskers).properties(
            width=560, height=36 * max(len(cohorts), 1) + 20,
            title=f"What a new customer is worth, with {pct}% interval",
        )
    )


def value_by_tenure_chart(table: pl.DataFrame, unit: str, confidence: float) -> alt.LayerChart:
    """Value per active customer against their current tenure, per cohort, with band."""
    pct = round(confidence * 100)
    cohorts = table["cohort"].unique(maintain_order=True).to_list()
    x = alt.X("tenure:Q", title=f"Current tenure ({unit})", scale=alt.Scale(nice=False))
    band, line = _band_and_line(
        table,
        x,
        alt.Y("value_per_customer:Q", title="Expected discounted value ahead (money)"),
        "value_lower",
        "value_upper",
        _cohort_colour(cohorts),
        [
            alt.Tooltip("cohort:N", title="Cohort"),
            alt.Tooltip("tenure:Q", title=f"Tenure ({unit})"),
            alt.Tooltip("value_per_customer:Q", title="Value", format=",.0f"),
            alt.Tooltip("mean_remaining:Q", title=f"Mean remaining ({unit})", format=".1f"),
            alt.Tooltip("active_customers:Q", title="Active now"),
        ],
        points=False,
    )
    return _theme(
        alt.layer(band, line).properties(
            width=640, height=300,
            title=f"Value of an active customer by tenure so far ({pct}% band)",
        )
    )


def forecast_chart(table: pl.DataFrame, unit: str, confidence: float) -> alt.LayerChart:
    """Expected active customers over the next units, per cohort (and all cohorts)."""
    pct = round(confidence * 100)
    cohorts = table["cohort"].unique(maintain_order=True).to_list()
    x = alt.X("units_ahead:Q", title=f"{unit.capitalize()} ahead of the as-of date",
              scale=alt.Scale(nice=False), axis=alt.Axis(format="d", tickMinStep=1))
    band, line = _band_and_line(
        table,
        x,
        alt.Y("expected_active:Q", title="Active customers (today's base)"),
        "active_lower",
        "active_upper",
        _cohort_colour(cohorts),
        [
            alt.Tooltip("cohort:N", title="Cohort"),
            alt.Tooltip("units_ahead:Q", title=f"{unit} ahead"),
            alt.Tooltip("expected_active:Q", title="Expected active", format=",.0f"),
            alt.Tooltip("active_lower:Q", title=f"{pct}% lower", format=",.0f"),
            alt.Tooltip("active_upper:Q", title=f"{pct}% upper", format=",.0f"),
            alt.Tooltip("expected_revenue:Q", title="Expected revenue", format=",.0f"),
        ],
    )
    return _theme(
        alt.layer(band, line).properties(
            width=640, height=300,
            title=f"Where today's active customers are expected to be ({pct}% prediction band)",
        )
    )


def revenue_retention_chart(table: pl.DataFrame, unit: str) -> alt.Chart:
    """Net (solid) and gross (dashed) revenue retention per cohort at billing tenures."""
    long = table.unpivot(
        index=["cohort", "tenure"],
        on=["net_revenue_retention", "gross_revenue_retention"],
        variable_name="measure",
        value_name="retention",
    ).with_columns(
        pl.col("measure").replace(
            {"net_revenue_retention": "net", "gross_revenue_retention": "gross"}
        )
    )
    long = long.filter(pl.col("retention") > 0.02)  # tenures between billing dates drop out
    cohorts = table["cohort"].unique(maintain_order=True).to_list()
    chart = (
        alt.Chart(long)
        .mark_line(point=True, strokeWidth=2)
        .encode(
            x=alt.X("tenure:Q", title=f"Tenure ({unit})", scale=alt.Scale(nice=False)),
            y=alt.Y("retention:Q", title="Revenue kept from the first payment",
                    axis=alt.Axis(format="%")),
            color=_cohort_colour(cohorts),
            strokeDash=alt.StrokeDash(
                "measure:N", title="Revenue", scale=alt.Scale(domain=["net", "gross"],
                                                              range=[[1, 0], [5, 3]])
            ),
            tooltip=[
                alt.Tooltip("cohort:N", title="Cohort"),
                alt.Tooltip("tenure:Q", title=f"Tenure ({unit})"),
                alt.Tooltip("measure:N", title="Revenue"),
                alt.Tooltip("retention:Q", title="Retention", format=".1%"),
            ],
        )
    )
    return _theme(chart.properties(width=640, height=280, title="Revenue retention by tenure"))


def price_sweep_chart(sweep: pl.DataFrame, chosen: float, confidence: float) -> alt.LayerChart:
    """Change in the active base's value against the price change, with band; zero line and
    the chosen scenario marked."""
    pct = round(confidence * 100)
    data = sweep.filter(pl.col("change_in_base_value").is_not_null())
    cohorts = data["cohort"].unique(maintain_order=True).to_list()
    x = alt.X("price_change:Q", title="Price change", axis=alt.Axis(format="+%"))
    band, line = _band_and_line(
        data,
        x,
        alt.Y("change_in_base_value:Q", title="Change in the active base's value (money)"),
        "change_in_base_lower",
        "change_in_base_upper",
        _cohort_colour(cohorts),
        [
            alt.Tooltip("cohort:N", title="Cohort"),
            alt.Tooltip("price_change:Q", title="Price change", format="+.0%"),
            alt.Tooltip("hazard_ratio:Q", title="Churn hazard ratio", format=".3f"),
            alt.Tooltip("change_in_base_value:Q", title="Change", format=",.0f"),
            alt.Tooltip("change_in_base_lower:Q", title=f"{pct}% lower", format=",.0f"),
            alt.Tooltip("change_in_base_upper:Q", title=f"{pct}% upper", format=",.0f"),
            alt.Tooltip("break_even_hazard_ratio:Q", title="Break-even ratio", format=".3f"),
        ],
        opacity=0.16,
    )
    zero = alt.Chart(pl.DataFrame({"y": [0.0]})).mark_rule(color="#5f6b6d").encode(y="y:Q")
    mark = (
        alt.Chart(pl.DataFrame({"x": [chosen]}))
        .mark_rule(color="#d98e04", strokeDash=[4, 3], strokeWidth=2)
        .encode(x="x:Q")
    )
    return _theme(
        alt.layer(band, line, zero, mark).properties(
            width=640, height=320,
            title=f"What a price change does to the value of today's customers ({pct}% band)",
        )
    )
