"""The report's value section: what customers are worth, the active base and its forecast,
revenue retention, and the price scenario, each figure with its interval and the settings and
cautions it rests on."""

from __future__ import annotations

import polars as pl

from churnlife.charts_value import (
    forecast_chart,
    new_customer_value_chart,
    price_sweep_chart,
    revenue_retention_chart,
    value_by_tenure_chart,
)
from churnlife.notes import Note, info
from churnlife.report import Chart, Section, Table, Text, esc, params_html
from churnlife.value.valuation import CAUTIONS, Valuation

MONEY = ",.0f"


def _pct(confidence: float) -> int:
    return round(confidence * 100)


def value_section(v: Valuation, unit: str) -> Section:
    pct = _pct(v.confidence)
    t = v.tables
    blocks: list = [
        Text(
            "<p>Money is counted as set in [value]: "
            + params_html(v.settings.describe())
            + "</p><p>Each cohort's curve is Kaplan–Meier over the tenures observed with at least "
            "50 customers at risk, then the cohort's chosen hazard model; revenue per customer "
            "by tenure is read from the payments in the log and repeated by billing cycle past "
            f"the data. Intervals ({pct}%) come from redrawing the churn counts and the model's "
            "parameters.</p>"
        ),
        Text("".join(f'<div class="caution">{esc(c)}</div>' for c in CAUTIONS)),
    ]
    new = t["value_new_customer"]
    blocks.append(
        Chart(new_customer_value_chart(new, v.confidence), "value_new_customer",
              caption="Bars: expected discounted value of a customer who starts today in each "
              f"cohort; lines: {pct}% interval.")
    )
    blocks.append(
        Table(
            new.select(
                "cohort", "model", "value", "lower", "upper", "discounted_lifetime",
                "mean_lifetime", "median_lifetime", "payback_tenure",
                "share_of_value_beyond_data", "truncation_bound",
            ),
            caption=f"Per new customer: value ({pct}% interval), discounted expected lifetime "
            f"and mean and median lifetime ({unit}), payback tenure against the acquisition "
            "cost (when given), the share of the value that comes from tenures no customer has "
            "reached yet (the part resting on the model alone), and a bound on what stopping "
            "the sums at the horizon leaves out.",
            csv_name="value_new_customer.csv",
            formats={
                "value": MONEY, "lower": MONEY, "upper": MONEY, "discounted_lifetime": ".1f",
                "mean_lifetime": ".1f", "median_lifetime": ".0f", "payback_tenure": ".0f",
                "share_of_value_beyond_data": ".0%", "truncation_bound": ".3g",
            },
        )
    )
    channels = t.get("value_by_channel")
    if channels is not None and channels.height:
        blocks.append(
            Table(
                channels,
                caption="Per new customer by cohort and acquisition channel: each cell's own "
                "curve (its cohort's model refitted) and revenue; payback tenure against the "
                f"channel's acquisition cost ({unit}; 0 = the first payment covers it). "
                "Channels differ in who they bring, not only in what they cost.",
                csv_name="value_by_channel.csv",
                formats={"value": MONEY, "lower": MONEY, "upper": MONEY,
                         "acquisition_cost": MONEY, "value_after_acquisition": MONEY,
                         "payback_tenure": ".0f", "payback_lower": ".0f",
                         "payback_upper": ".0f"},
            )
        )
    base = t["value_active_base"]
    blocks.append(
        Table(
            base,
            caption="Today's active customers and what they are expected to bring from now on "
            f"({pct}% interval), each valued on their cohort and current tenure.",
            csv_name="value_active_base.csv",
            formats={"value": MONEY, "lower": MONEY, "upper": MONEY,
                     "value_per_customer": MONEY},
        )
    )
    by_tenure = t["value_by_tenure"]
    blocks.append(
        Chart(value_by_tenure_chart(by_tenure, unit, v.confidence), "value_by_tenure",
              caption="A customer who has stayed longer is usually worth more from here on: "
              "churn falls with tenure. Full table (with mean and median remaining lifetime) in "
              "value_by_tenure.csv.")
    )
    fc = t["base_forecast"]
    blocks.append(
        Chart(forecast_chart(fc, unit, v.confidence), "base_forecast",
              caption=f"Expected active customers from today's base ({pct}% prediction band); "
              "new sign-ups are not included.")
    )
    last = int(fc["units_ahead"].max())
    shown = fc.filter(pl.col("units_ahead").is_in(sorted({1, max(last // 2, 1), last})))
    blocks.append(
        Table(
            shown,
            caption=f"Forecast of today's base: active customers and revenue collected, "
            f"{unit} ahead (full table in base_forecast.csv).",
            csv_name="base_forecast.csv",
            formats={c: MONEY for c in fc.columns if c not in ("cohort", "units_ahead")},
        )
    )
    rr = t["revenue_retention"]
    if rr.height:
        blocks.append(
            Chart(revenue_retention_chart(rr, unit), "revenue_retention",
                  caption="Revenue kept by tenure relative to the first payment: net includes "
                  "upgrades and price changes, gross caps each payment at the starting price. "
                  "Plans billed less often than the tenure unit show points on billing dates "
                  "only.")
        )
    if "price_scenario" in t:
        blocks += _price_blocks(v, unit)
    else:
        blocks.append(
            Text("<p>No price scenario: the log has no price increases to estimate the churn "
                 "response from (list the price_change codes in [event_codes]).</p>")
        )
    return Section(
        "value",
        "What customers are worth",
        blocks,
        lead="Discounted value of new and current customers, the base's forecast and what a "
        "price change would do to it.",
    )


def _price_blocks(v: Valuation, unit: str) -> list:
    pct = _pct(v.confidence)
    t = v.tables
    scen = t["price_scenario"]
    change = float(scen["price_change"][0])
    total = scen.filter(pl.col("cohort") == "all cohorts")
    head = total.to_dicts()[0] if total.height else scen.to_dicts()[0]
    verdict = (
        "gains" if head["change_in_base_lower"] > 0
        else "loses" if head["change_in_base_upper"] < 0
        else "may gain or lose (the interval includes no change)"
    )
    blocks: list = [
        Table(
            t["price_response"],
            caption="Churn hazard after a customer's first price increase relative to before, "
            f"at the same tenure ({pct}% interval), and the elasticity it implies per unit of "
            "log price. The scenario uses the all-causes response; voluntary churn alone is "
            "shown for comparison. A cohort that never had an increase borrows the pooled "
            "estimate (estimated_from).",
            csv_name="price_response.csv",
            formats={"hazard_ratio": ".3f", "lower": ".3f", "upper": ".3f",
                     "mean_price_rise": "+.1%", "elasticity": ".2f", "elasticity_lower": ".2f",
                     "elasticity_upper": ".2f"},
        ),
        Text(
            f"<p><strong>Scenario: price {change:+.0%}.</strong> The active base "
            f"{esc(verdict)}: estimated change {head['change_in_base_value']:,.0f} "
            f"({pct}% interval {head['change_in_base_lower']:,.0f} to "
            f"{head['change_in_base_upper']:,.0f}). It breaks even if churn hazards rise by a "
            f"factor of {head['break_even_hazard_ratio']:.3f}.</p>"
        ),
        Table(
            scen,
            caption="Value before and after the price change, per new customer and for the "
            "active base, with the churn hazard ratio applied and the break-even ratio (the "
            "hazard ratio at which the base's value is unchanged).",
            csv_name="price_scenario.csv",
            formats={
                c: (".3f" if "ratio" in c else "+.0%" if c == "price_change" else MONEY)
                for c in scen.columns
                if c != "cohort"
            },
        ),
        Chart(
            price_sweep_chart(t["price_sweep"], change, v.confidence), "price_sweep",
            caption="Change in the active base's value for price changes from -30 % to +50 %, "
            "churn scaled by the estimated response; the dashed rule marks the scenario. Far "
            "from the increases actually seen, the response is an extrapolation.",
        ),
    ]
    return blocks


def value_notes(v: Valuation) -> list[Note]:
    """What the empty cells of the value tables mean."""
    notes = [
        info(
            "value",
            "Empty payback or acquisition cells mean no acquisition cost was given ([value] "
            "acquisition_cost); an empty closed-form lifetime means the sBG closed form does "
            'not apply (it needs curve = "model" with the sbg model).',
            covers=(
                "value_new_customer.acquisition_cost",
                "value_new_customer.value_after_acquisition",
                "value_new_customer.payback_tenure",
                "value_new_customer.payback_lower",
                "value_new_customer.payback_upper",
                "value_new_customer.discounted_lifetime_closed_form",
                "value_by_channel.acquisition_cost",
                "value_by_channel.value_after_acquisition",
                "value_by_channel.payback_tenure",
                "value_by_channel.payback_lower",
                "value_by_channel.payback_upper",
            ),
        ),
        info(
            "value",
            "An empty median remaining lifetime (or its upper limit) means more than half of "
            "the customers are still expected to be active at the horizon.",
            covers=(
                "value_new_customer.median_lifetime",
                "value_new_customer.median_lifetime_lower",
                "value_new_customer.median_lifetime_upper",
                "value_by_tenure.median_remaining",
                "value_by_tenure.median_remaining_lower",
                "value_by_tenure.median_remaining_upper",
                "value_by_tenure.truncation_bound",
                "value_new_customer.truncation_bound",
            ),
        ),
        info(
            "value",
            "Per-new-customer columns are empty on the 'all cohorts' rows of the price "
            "scenario (new customers arrive per cohort); an empty break-even ratio means no "
            "churn response between 0.01 and 100 balances the change.",
            covers=(
                "price_scenario.*",
                "price_sweep.*",
                "value_active_base.value_per_customer",
                "revenue_by_tenure.revenue_per_customer",
            ),
        ),
    ]
    for cohort, reason in v.skipped:
        notes.append(info("value", f"Not valued: {reason}.", cohort))
    return notes


def value_lines(v: Valuation, unit: str, full: bool = False) -> list[str]:
    """Plain-text lines for the terminal: values per new customer, the base, the scenario."""
    pct = _pct(v.confidence)
    lines = []
    base = v.tables["value_active_base"].filter(pl.col("cohort") == "all cohorts").to_dicts()
    if base:
        b = base[0]
        lines.append(
            f"  active base: {b['active_customers']:,} customers worth {b['value']:,.0f} "
            f"({pct}% interval {b['lower']:,.0f} to {b['upper']:,.0f})"
        )
    if full:
        for r in v.tables["value_new_customer"].to_dicts():
            lines.append(
                f"  new customer, {r['cohort']}: {r['value']:,.0f} ({r['lower']:,.0f} to "
                f"{r['upper']:,.0f}); mean lifetime {r['mean_lifetime']:.1f} {unit}; "
                f"{r['share_of_value_beyond_data']:.0%} of it past the longest tenure seen"
            )
        by_cohort = v.tables["value_active_base"].filter(pl.col("cohort") != "all cohorts")
        for r in by_cohort.to_dicts():
            lines.append(
                f"  active, {r['cohort']}: {r['active_customers']:,} customers, "
                f"{r['value_per_customer']:,.0f} each on average"
            )
    if "price_scenario" in v.tables:
        scen = v.tables["price_scenario"]
        total = scen.filter(pl.col("cohort") == "all cohorts")
        rows = total.to_dicts() if total.height else scen.to_dicts()[:1]
        r = rows[0]
        lines.append(
            f"  price {r['price_change']:+.0%}: base value changes by "
            f"{r['change_in_base_value']:,.0f} ({pct}% interval {r['change_in_base_lower']:,.0f} "
            f"to {r['change_in_base_upper']:,.0f}); break-even churn hazard ratio "
            f"{r['break_even_hazard_ratio']:.3f}"
        )
    if full:
        lines.append(
            "  cautions: values past the longest observed tenure rest on the model; cohorts "
            "and price increases were not randomised; this supports a decision, it does not "
            "guarantee one (see the report's value section)."
        )
    return lines
