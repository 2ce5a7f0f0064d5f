"""Backtest of the base forecast: move the as-of date back, forecast the base that was active
then, and compare with what the log shows afterwards.

The forecast side runs the whole flow (extract → models → value) with ``as_of`` moved back by
``units_back`` tenure units; the actual side stages the full log's spells in the same engine and
counts how many of the spells active on the earlier date (matched by customer and start) were
still active ``j`` units later (queries/base_followup.sql). Reported per cohort and step:
forecast, interval, actual, relative
error and whether the interval covered the actual count.
"""

from __future__ import annotations

import dataclasses
import datetime as dt

import polars as pl

from churnlife.config import Config
from churnlife.errors import UserError
from churnlife.extract import parameters, run_extract, stage_spells
from churnlife.km import kaplan_meier
from churnlife.models.suite import fit_models
from churnlife.source import open_source
from churnlife.value.sql import run_value_query
from churnlife.value.valuation import value_customers

BACKTEST_MODELS = ("weibull", "lognormal", "loglogistic", "piecewise", "sbg", "bdw", "cure_weibull")


def shift(day: dt.date, unit: str, units: int) -> dt.date:
    """``day`` moved by whole tenure units (calendar months clamp to the month's last day)."""
    if unit == "days":
        return day + dt.timedelta(days=units)
    if unit == "weeks":
        return day + dt.timedelta(weeks=units)
    if unit == "months":
        m = day.month - 1 + units
        year, month = day.year + m // 12, m % 12 + 1
        nxt = dt.date(year + month // 12, month % 12 + 1, 1)
        return dt.date(year, month, min(day.day, (nxt - dt.timedelta(days=1)).day))
    raise UserError(
        'the forecast backtest needs tenure unit "days", "weeks" or "months" ([tenure] unit).'
    )


def forecast_backtest(
    config: Config, units_back: int = 12, models=BACKTEST_MODELS, seed: int = 0
) -> pl.DataFrame:
    """Forecast from ``units_back`` units before the as-of date against what happened."""
    back = shift(config.as_of, config.tenure_unit, -units_back)
    if back <= config.log_start:
        raise UserError(
            f"moving the as-of date back {units_back} {config.tenure_unit} puts it before the "
            "log starts; use a shorter backtest."
        )
    earlier = dataclasses.replace(
        config, as_of=back, value=dataclasses.replace(config.value, forecast_periods=units_back)
    )
    source = open_source(earlier)
    extract = run_extract(earlier, source)
    fitted = fit_models(extract.counts, models, config.confidence)
    km = kaplan_meier(extract.counts, config.confidence, config.interval).to_polars()
    forecast = value_customers(extract, earlier, fitted, km, seed=seed, scenario=False).tables[
        "base_forecast"
    ]
    later = stage_spells(config, source, parameters(config))
    actual = []
    for j in range(1, units_back + 1):  # one small query per step
        on = shift(back, config.tenure_unit, j)
        rows = run_value_query(
            "base_followup", extract, earlier, {"on_date": on}, extra_slots={"later_spells": later}
        ).drop("active_then")
        actual.append(rows.with_columns(pl.lit(j, dtype=pl.Int64).alias("units_ahead")))
    seen = pl.concat(actual)
    if forecast["cohort"].n_unique() > 1 and "all cohorts" in forecast["cohort"].to_list():
        seen = pl.concat(
            [
                seen,
                seen.group_by("units_ahead")
                .agg(pl.col("still_active").sum())
                .with_columns(pl.lit("all cohorts").alias("cohort"))
                .select(seen.columns),
            ]
        )
    out = forecast.join(seen, on=["cohort", "units_ahead"], how="inner")
    return out.with_columns(
        pl.lit(back).alias("backtest_as_of"),
        ((pl.col("expected_active") - pl.col("still_active")) / pl.col("still_active")).alias(
            "relative_error"
        ),
        (
            (pl.col("active_lower") <= pl.col("still_active"))
            & (pl.col("still_active") <= pl.col("active_upper"))
        ).alias("covered"),
    )
