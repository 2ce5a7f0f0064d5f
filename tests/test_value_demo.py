"""The value stage on the demo business (12 000 customers), checked against the generator's
truth (demo/generate.py writes the true hazards to truth.json) and against the log itself.

* Value of a new customer computed from the true hazards lies inside churnlife's interval
  (plans without the price rise: the rise changes both churn and revenue of the monthly plan).
* The true price-rise effect on voluntary churn (hazard ratio 1.35 in truth.json) lies inside
  the estimated voluntary-churn hazard-ratio interval.
* The base forecast, with the as-of date moved back 12 months, against what the log then shows.
"""

from __future__ import annotations

import dataclasses
import json

import numpy as np
import polars as pl
import pytest
from churnlife.demo.generate import true_period_survival

from churnlife.km import kaplan_meier
from churnlife.models.suite import fit_models
from churnlife.value.backtest import BACKTEST_MODELS, forecast_backtest
from churnlife.value.scenario import _scaled_rows
from churnlife.value.settings import ValueSettings
from churnlife.value.valuation import value_customers


@pytest.fixture(scope="module")
def truth(demo_folder):
    return json.loads((demo_folder / "truth.json").read_text())


@pytest.fixture(scope="module")
def valuation(demo_config, demo_extract):
    """Valued in revenue (margin 1, no cost to serve), so the truth needs only the price."""
    config = dataclasses.replace(demo_config, value=ValueSettings())
    models = fit_models(demo_extract.counts, confidence=config.confidence)
    km = kaplan_meier(demo_extract.counts, config.confidence).to_polars()
    return value_customers(demo_extract, config, models, km, seed=11)


def _true_new_customer_value(truth: dict, plan: str, annual_rate: float, years: float) -> float:
    """price × Σ_j E[payment at period j] / (1+d)^(j·p/12): the first payment at signup, then
    one per billing period survived, unless the renewal charge fails and is not recovered."""
    p = truth["plans"][plan]
    per = p["period_months"]
    fail = p["p_fail"] * (1 - p["p_recover"])
    j = np.arange(0, int(years * 12 / per) + 1, dtype=float)
    mix = truth["acquisition"]["channel_mix"]
    s = sum(w * true_period_survival(truth, plan, ch, j) for ch, w in mix.items())
    paid = np.where(j == 0, 1.0, s * (1 - fail))
    return float(p["price"] * np.sum(paid * (1 + annual_rate) ** (-j * per / 12)))


@pytest.mark.parametrize("plan", ["beans_plus_monthly", "beans_annual"])
def test_true_value_inside_the_interval(valuation, truth, plan):
    row = valuation.tables["value_new_customer"].filter(pl.col("cohort") == plan).to_dicts()[0]
    st = valuation.settings
    true = _true_new_customer_value(truth, plan, st.discount_rate, st.horizon_years)
    print(f"{plan}: true {true:.1f}, churnlife {row['value']:.1f} "
          f"({row['lower']:.1f} to {row['upper']:.1f}), tail {row['model']}")
    assert row["lower"] <= true <= row["upper"]


def test_true_price_effect_inside_the_voluntary_interval(valuation, truth):
    table = valuation.tables["price_response"]
    row = table.filter(
        (pl.col("cohort") == truth["price_change"]["plan"]) & (pl.col("churn") == "voluntary")
    ).to_dicts()[0]
    true = truth["price_change"]["hazard_ratio"]
    print(f"voluntary hazard ratio after the rise: {row['hazard_ratio']:.3f} "
          f"({row['lower']:.3f} to {row['upper']:.3f}); true {true}")
    assert row["lower"] <= true <= row["upper"]
    rise = truth["price_change"]["new_price"] / truth["price_change"]["old_price"] - 1
    assert row["mean_price_rise"] == pytest.approx(rise, abs=1e-9)


def test_break_even_ratio_leaves_the_base_value_unchanged(valuation):
    """At the break-even hazard ratio the base's value under the price change equals today's."""
    sc = valuation.tables["price_scenario"]
    for c in valuation.cohorts:
        row = sc.filter(pl.col("cohort") == c.cohort).to_dicts()[0]
        hr = row["break_even_hazard_ratio"]
        inputs = c.scenario_inputs
        today = inputs.values(c.curve.survival, 0.0)[1][0]
        after = inputs.values(_scaled_rows(c.curve.survival, hr), row["price_change"])[1][0]
        assert after == pytest.approx(today, rel=1e-8)
        # a rise pays only if churn does not rise by more than the break-even ratio
        assert hr > 1


def test_base_value_adds_up_from_the_per_tenure_values(valuation):
    by_tenure = valuation.tables["value_by_tenure"]
    base = valuation.tables["value_active_base"]
    for c in valuation.cohorts:
        part = by_tenure.filter(pl.col("cohort") == c.cohort)
        # customers with a failed payment in its grace period count with the recovery share
        total = float((part["expected_active"] * part["value_per_customer"]).sum())
        row = base.filter(pl.col("cohort") == c.cohort).to_dicts()[0]
        assert row["active_customers"] == int(part["active_customers"].sum())
        assert row["failed_payment_pending"] == int(part["failed_payment_pending"].sum())
        assert row["active_customers"] - row["failed_payment_pending"] <= row["expected_active"]
        assert row["expected_active"] <= row["active_customers"]
        assert row["value"] == pytest.approx(total, rel=1e-9)


def test_forecast_backtest_a_year_back(demo_config):
    """Forecast made with the as-of date 12 months earlier against the customers the log shows
    still active: error of the whole base within 3 % at every month (the error and the
    interval coverage are printed for the record)."""
    bt = forecast_backtest(demo_config, 12, BACKTEST_MODELS, seed=3)
    total = bt.filter(pl.col("cohort") == "all cohorts").sort("units_ahead")
    assert total.height == 12
    err = total["relative_error"].to_numpy()
    print("relative error by month:", np.round(err, 4).tolist())
    print("covered by the interval:", bt["covered"].mean(), "of", bt.height, "cohort-months")
    assert np.all(np.abs(err) < 0.03)
