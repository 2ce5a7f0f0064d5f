"""Altair charts of the hazard models: period hazard over tenure (empirical vs fitted), fitted
curves on Kaplan–Meier, and extrapolation bands with the region past the data marked. Each function
takes result tables and returns a chart; nothing here computes statistics."""

from __future__ import annotations

import altair as alt
import polars as pl

from churnlife.charts import FONT, PALETTE, _theme


def _model_colour(models: list[str]) -> alt.Color:
    return alt.Color(
        "model:N",
        title="Model",
        scale=alt.Scale(domain=models, range=PALETTE[1 : 1 + len(models)] or PALETTE[:1]),
    )


def _per_cohort(charts: list, title: str):
    if not charts:
        return _theme(alt.Chart(pl.DataFrame({"x": []})).mark_point())
    return _theme(alt.vconcat(*charts).properties(title=title))


def hazard_chart(observed: pl.DataFrame, models: list[str], unit: str) -> alt.VConcatChart:
    """Per cohort: empirical churn rate of each tenure (churned / at risk; point size = at risk)
    and the fitted period hazard of the chosen models."""
    charts = []
    data = observed.filter(pl.col("model").is_in(models))
    for (cohort,), part in data.group_by("cohort", maintain_order=True):
        emp = part.filter(pl.col("model") == models[0]).filter(pl.col("at_risk") > 0)
        x = alt.X("tenure:Q", title=f"Tenure ({unit})", scale=alt.Scale(nice=False))
        points = (
            alt.Chart(emp)
            .mark_circle(color="#1d2a2e", opacity=0.45)
            .encode(
                x=x,
                y=alt.Y(
                    "empirical_hazard:Q",
                    title=f"Churned per {unit.removesuffix('s')} (share of those at risk)",
                    axis=alt.Axis(format="%"),
                ),
                size=alt.Size("at_risk:Q", title="At risk", scale=alt.Scale(range=[8, 120])),
                tooltip=[
                    alt.Tooltip("tenure:Q", title=f"Tenure ({unit})"),
                    alt.Tooltip("empirical_hazard:Q", title="Observed", format=".2%"),
                    alt.Tooltip("at_risk:Q", title="At risk"),
                ],
            )
        )
        lines = (
            alt.Chart(part)
            .mark_line(strokeWidth=2)
            .encode(
                x=x,
                y="fitted_hazard:Q",
                color=_model_colour(models),
                tooltip=[
                    alt.Tooltip("model:N", title="Model"),
                    alt.Tooltip("tenure:Q", title=f"Tenure ({unit})"),
                    alt.Tooltip("fitted_hazard:Q", title="Fitted", format=".2%"),
                ],
            )
        )
        charts.append(alt.layer(points, lines).properties(width=620, height=220, title=str(cohort)))
    return _per_cohort(charts, "Churn rate by tenure: observed (dots) and fitted (lines)")


def fits_on_km_chart(observed: pl.DataFrame, models: list[str], unit: str) -> alt.VConcatChart:
    """Per cohort: the Kaplan–Meier curve (dark step line) with the fitted survival curves."""
    charts = []
    data = observed.filter(pl.col("model").is_in(models))
    for (cohort,), part in data.group_by("cohort", maintain_order=True):
        km = part.filter(pl.col("model") == models[0]).select("tenure", "km_survival")
        km = pl.concat(
            [pl.DataFrame({"tenure": [0], "km_survival": [1.0]}), km], how="vertical_relaxed"
        )
        x = alt.X("tenure:Q", title=f"Tenure ({unit})", scale=alt.Scale(nice=False))
        step = (
            alt.Chart(km)
            .mark_line(interpolate="step-after", color="#1d2a2e", strokeWidth=2.5)
            .encode(
                x=x,
                y=alt.Y(
                    "km_survival:Q",
                    title="Share still subscribed",
                    scale=alt.Scale(domain=[0, 1]),
                    axis=alt.Axis(format="%"),
                ),
            )
        )
        lines = (
            alt.Chart(part)
            .mark_line(strokeWidth=1.6, strokeDash=[5, 3])
            .encode(
                x=x,
                y="fitted_survival:Q",
                color=_model_colour(models),
                tooltip=[
                    alt.Tooltip("model:N", title="Model"),
                    alt.Tooltip("tenure:Q", title=f"Tenure ({unit})"),
                    alt.Tooltip("fitted_survival:Q", title="Fitted", format=".1%"),
                    alt.Tooltip("km_survival:Q", title="Kaplan–Meier", format=".1%"),
                ],
            )
        )
        charts.append(alt.layer(step, lines).properties(width=620, height=220, title=str(cohort)))
    return _per_cohort(charts, "Fitted curves (dashed) on Kaplan–Meier (dark steps)")


def extrapolation_chart(bands: pl.DataFrame, unit: str, confidence: float) -> alt.LayerChart:
    """Survival of each cohort's chosen model with its pointwise band; the part past the longest
    observed tenure is dashed and its band paler, with a rule where the data end."""
    pct = round(confidence * 100)
    data = joined_regions(bands).with_columns(
        pl.format("{} ({})", pl.col("cohort"), pl.col("model")).alias("curve"),
        pl.when(pl.col("beyond_data"))
        .then(pl.lit("extrapolated"))
        .otherwise(pl.lit("observed"))
        .alias("region"),
    )
    curves = data["curve"].unique(maintain_order=True).to_list()
    colour = alt.Color(
        "curve:N",
        title="Cohort (model)",
        scale=alt.Scale(domain=curves, range=PALETTE[: len(curves)]),
        legend=alt.Legend(symbolType="stroke", symbolOpacity=1, symbolStrokeWidth=3),
    )
    ends = (
        data.filter(~pl.col("beyond_data"))
        .group_by("curve", maintain_order=True)
        .agg(pl.col("tenure").max().alias("last_observed"))
    )
    x = alt.X("tenure:Q", title=f"Tenure ({unit})", scale=alt.Scale(nice=False))
    base = alt.Chart(data).encode(x=x, color=colour)
    band = base.mark_area(opacity=0.18).encode(
        y=alt.Y(
            "lower:Q",
            title="Share still subscribed",
            scale=alt.Scale(domain=[0, 1]),
            axis=alt.Axis(format="%"),
        ),
        y2="upper:Q",
        opacity=alt.Opacity(
            "region:N",
            scale=alt.Scale(domain=["observed", "extrapolated"], range=[0.22, 0.1]),
            legend=None,
        ),
    )
    # the observed part ends where the extrapolated part begins, so both lines join
    line = base.mark_line(strokeWidth=2).encode(
        y="survival:Q",
        strokeDash=alt.StrokeDash(
            "region:N",
            title="Region",
            scale=alt.Scale(domain=["observed", "extrapolated"], range=[[1, 0], [6, 4]]),
        ),
        detail="curve:N",
        tooltip=[
            alt.Tooltip("curve:N", title="Cohort (model)"),
            alt.Tooltip("tenure:Q", title=f"Tenure ({unit})"),
            alt.Tooltip("survival:Q", title="Survival", format=".1%"),
            alt.Tooltip("lower:Q", title=f"{pct}% lower", format=".1%"),
            alt.Tooltip("upper:Q", title=f"{pct}% upper", format=".1%"),
            alt.Tooltip("region:N", title="Region"),
        ],
    )
    rules = (
        alt.Chart(ends)
        .mark_rule(strokeDash=[2, 2], strokeWidth=1)
        .encode(x="last_observed:Q", color="curve:N")
    )
    # the region where at least one curve is extrapolated, shaded and labelled
    horizon = float(data["tenure"].max())
    first_end = float(ends["last_observed"].min()) if ends.height else horizon
    region = pl.DataFrame({"start": [first_end], "end": [horizon], "label": ["past the data →"]})
    shade = (
        alt.Chart(region)
        .mark_rect(color="#e9e2d0", opacity=0.55)
        .encode(x=alt.X("start:Q", title=f"Tenure ({unit})"), x2="end:Q")
    )
    label = (
        alt.Chart(region)
        .mark_text(
            align="left", baseline="top", dx=6, dy=6, font=FONT, fontSize=12, color="#5f6b6d"
        )
        .encode(x=alt.X("start:Q", title=f"Tenure ({unit})"), y=alt.datum(1.0), text="label:N")
    )
    chart = alt.layer(shade, band, line, rules, label).properties(
        width=640,
        height=340,
        title=f"Retention extended past the data ({pct}% pointwise band; dashed = extrapolated)",
    )
    return _theme(chart)


def joined_regions(bands: pl.DataFrame) -> pl.DataFrame:
    """Repeat each curve's last observed tenure as the first extrapolated row, so the solid and
    dashed segments meet."""
    last = (
        bands.filter(~pl.col("beyond_data"))
        .sort("tenure")
        .group_by("cohort", "model", maintain_order=True)
        .tail(1)
        .with_columns(pl.lit(True).alias("beyond_data"))
    )
    return pl.concat([bands, last]).sort("cohort", "model", "beyond_data", "tenure")
