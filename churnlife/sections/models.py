"""The hazard-models part of the report: which models describe each cohort (ranking), how they
look against the data (hazard and Kaplan–Meier charts), a holdout backtest, and retention extended
past the data with bands and cautions."""

from __future__ import annotations

from collections.abc import Sequence

import polars as pl

from churnlife.charts_models import extrapolation_chart, fits_on_km_chart, hazard_chart
from churnlife.models.suite import DEFAULT_MODELS, HazardModels, fit_models
from churnlife.report import Chart, Section, Table, Text, esc
from churnlife.sections.glance import model_headlines

CAUTIONS = (
    "Past the longest tenure a cohort has been observed, every figure comes from the model's "
    "form, not from data. Models that fit the observed tenures equally well can part ways there; "
    "compare several before relying on one.",
    "The bands show the uncertainty of the model's parameters only. They do not include the "
    "chance that the model's form is wrong, which dominates far past the data.",
    "A never-churn share is read off where the curve levels off, at the longest and thinnest "
    "tenures: treat it as an extrapolation.",
    "Cohorts are not randomised: differences between them are associations, and a model fitted "
    "to past cohorts describes new customers only if they resemble them.",
)


def model_results(
    counts: pl.DataFrame,
    unit: str,
    confidence: float = 0.95,
    retention_at: Sequence[int] = (1, 3, 6, 12, 24),
    models: Sequence[str] = DEFAULT_MODELS,
    horizon: int | None = None,
    band: str = "delta",
) -> tuple[HazardModels, dict[str, pl.DataFrame], list[Section]]:
    """Fit the models, build their tables (written beside the report) and the report sections:
    the models and their fit checks, then the extrapolation (when any model could be fitted)."""
    fitted = fit_models(counts, models, confidence)
    ranking = fitted.ranking()
    tables: dict[str, pl.DataFrame] = {"model_ranking": ranking}
    if fitted.fits:
        observed = fitted.observed_vs_fitted()
        bands = fitted.extrapolation(horizon, method=band)
        # the report shows each cohort's best model and three reference models: refit only those
        shown = {"weibull", "sbg", "piecewise"} | {
            fitted.best(c).name for c in fitted.cohorts if fitted.has_converged(c)
        }
        backtests = fitted.backtest_table(models=sorted(shown & set(models)))
        tables.update(
            {
                "model_parameters": fitted.parameters(),
                "model_fit_by_tenure": observed,
                "model_extrapolation": bands,
                "model_backtest": backtests,
            }
        )
    else:
        observed = bands = backtests = pl.DataFrame()
    sections = models_section(fitted, ranking, observed, bands, backtests, unit, retention_at)
    sections[-1].headlines = model_headlines(fitted, bands, unit)
    return fitted, tables, sections


def _top_models(ranking: pl.DataFrame, n: int = 3) -> list[str]:
    ok = ranking.filter(pl.col("converged"))
    if ok.height == 0:
        return []
    # models most often among each cohort's best n, in order of their mean rank
    top = ok.filter(pl.col("rank") <= n).group_by("model").agg(pl.col("rank").mean()).sort("rank")
    return top["model"].to_list()[: max(n, 1)]


def models_section(
    fitted: HazardModels,
    ranking: pl.DataFrame,
    observed: pl.DataFrame,
    bands: pl.DataFrame,
    backtests: pl.DataFrame,
    unit: str,
    retention_at: Sequence[int],
) -> list[Section]:
    pct = round(fitted.confidence * 100)
    blocks: list = []  # the models and how well they fit
    beyond: list = []  # what they say past the data
    if not fitted.fits:
        reasons = "".join(f"<li>{esc(c)} · {esc(m)}: {esc(r)}</li>" for c, m, r in fitted.failures)
        blocks.append(Text(f"<p>No model could be fitted.</p><ul>{reasons}</ul>"))
        return [Section("models", "Hazard models and how well they fit", blocks)]
    shown = ranking.drop("note").filter(pl.col("rank") <= 6)
    blocks.append(
        Table(
            shown,
            caption="Models per cohort, best first by AIC (interval-censored log-likelihood on the "
            "counts; BIC uses the number of spells). max/area deviation: largest gap and area "
            f"between the fitted curve and Kaplan–Meier over the observed tenures ({unit}). "
            "Top six per cohort shown.",
            csv_name="model_ranking.csv",
            formats={
                "loglik": ".1f",
                "aic": ".1f",
                "delta_aic": ".1f",
                "bic": ".1f",
                "max_deviation": ".3f",
                "area_deviation": ".2f",
            },
        )
    )
    top = _top_models(ranking)
    if top:
        blocks.append(
            Chart(
                hazard_chart(observed, top, unit),
                "model_hazard",
                caption="Share of customers at risk who churned in each tenure interval (dots, "
                "sized by the number at risk) and the period hazard of the best-ranked models.",
            )
        )
        blocks.append(
            Chart(
                fits_on_km_chart(observed, top, unit),
                "model_fits_on_km",
                caption="Fitted survival curves over the Kaplan–Meier estimate of each cohort.",
            )
        )
    if bands.height:
        beyond.append(
            Chart(
                extrapolation_chart(bands, unit, fitted.confidence),
                "model_extrapolation",
                caption=f"Each cohort's best model by AIC with {pct}% pointwise "
                f"{bands['band'][0]} band. Right of the thin dashed rule the curve is "
                "extrapolated: no customer has been observed that long.",
            )
        )
        at = sorted({*retention_at, *(int(t) for t in _beyond_points(bands))})
        wide = (
            bands.filter(pl.col("tenure").is_in(at))
            .with_columns(
                pl.format(
                    "{}{} ({}–{})",
                    (pl.col("survival") * 100).round(1),
                    pl.when(pl.col("beyond_data")).then(pl.lit("*")).otherwise(pl.lit("")),
                    (pl.col("lower") * 100).round(1),
                    (pl.col("upper") * 100).round(1),
                ).alias("value")
            )
            .pivot(on="tenure", index=["cohort", "model"], values="value")
        )
        wide = wide.rename({c: f"{c} {unit}" for c in wide.columns if c not in ("cohort", "model")})
        beyond.append(
            Table(
                wide,
                caption=f"Model retention in % with {pct}% interval. * = past the longest "
                "observed tenure of the cohort (extrapolated; see the cautions below).",
                csv_name="model_extrapolation.csv",
            )
        )
    if backtests.height:
        keep = pl.DataFrame(
            [
                (c, m)
                for c in fitted.cohorts
                if fitted.has_converged(c)
                for m in {fitted.best(c).name, "weibull", "sbg", "piecewise"}
            ],
            schema=["cohort", "model"],
            orient="row",
        )
        bt = backtests.join(keep, on=["cohort", "model"], how="semi").sort("cohort", "model")
        blocks.append(
            Table(
                bt,
                caption="Holdout backtest: each model refitted on the first half of the observed "
                f"tenures, its retention for the later half compared with Kaplan–Meier on all the "
                f"data (absolute error in retention; coverage = share of those tenures where "
                f"Kaplan–Meier lies inside the model's {pct}% band, which holds parameter "
                "uncertainty only). Shown: each cohort's best model, Weibull, sBG, piecewise.",
                csv_name="model_backtest.csv",
                formats={"mean_abs_error": ".3f", "max_abs_error": ".3f", "coverage": ".0%"},
            )
        )
    if fitted.failures:
        items = "".join(
            f"<li>{esc(c)} · {esc(m)}: {esc(r)}</li>" for c, m, r in fitted.failures[:20]
        )
        blocks.append(Text(f"<p>Not fitted:</p><ul>{items}</ul>"))
    body = "".join(f'<div class="caution">{esc(t)}</div>' for t in CAUTIONS)
    fits = Section(
        "models",
        "Hazard models and how well they fit",
        blocks,
        lead="Smooth models of churn by tenure, and how well each matches the observed curves "
        "and predicts tenures it was not fitted on.",
    )
    past = Section(
        "extrapolation",
        "Past the data: extrapolation",
        [*beyond, Text(body)],
        lead="What the best-fitting model of each cohort implies past the longest tenure "
        "observed: a scenario resting on the model's form.",
    )
    return [fits, past]


def price_effect_block(extract, config) -> tuple[pl.DataFrame, Table] | None:
    """The "after a price increase" hazard ratio per cohort (queries/episodes.sql), or None when
    the config lists no price_change codes or no spell had an increase."""
    from churnlife.models.covariates import episodes_counts, price_effects

    if not config.event_codes.get("price_change"):
        return None
    table = price_effects(episodes_counts(extract, config), config.confidence)
    if table.height == 0:
        return None
    pct = round(config.confidence * 100)
    block = Table(
        table,
        caption="Churn hazard after a customer's first price increase relative to before, at the "
        f"same tenure ({pct}% interval): each spell is split at the increase. All causes of churn "
        "together; customers who got an increase were chosen by the business, not at random, so "
        "this is an association.",
        csv_name="model_price_effect.csv",
        formats={"hazard_ratio": ".3f", "lower": ".3f", "upper": ".3f"},
    )
    return table, block


def _beyond_points(bands: pl.DataFrame) -> list[int]:
    """A few tenures past the data to tabulate: the horizon and its midpoint."""
    horizon = int(bands["tenure"].max())
    return [horizon // 2, horizon]
