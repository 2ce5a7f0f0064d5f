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
from churnlife.report import (
    Chart,
    Section,
    Table,
    Text,
    esc,
    estimate_column,
    params_html,
)
from churnlife.value.valuation import CAUTIONS, Valuation

MONEY = ",.0f"


def _span(frame: pl.DataFrame, est: str, lo: str, hi: str, spec: str = MONEY) -> list[str]:
    """'estimate (interval)' per row, for the report's compact tables (the CSV beside keeps
    the numbers in their own columns)."""
    return estimate_column(frame, est, lo, hi, spec)


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
            pl.DataFrame(
                {
                    "cohort": new["cohort"],
                    "tail model": new["model"],
                    f"value ({pct}% interval)": _span(new, "value", "lower", "upper"),
                    f"discounted lifetime ({unit})": _span(
                        new, "discounted_lifetime", "discounted_lifetime_lower",
                        "discounted_lifetime_upper", ".1f",
                    ),
                    f"mean lifetime ({unit})": _span(
                        new, "mean_lifetime", "mean_lifetime_lower", "mean_lifetime_upper", ".1f"
                    ),
                    f"median lifetime ({unit})": _span(
                        new, "median_lifetime", "median_lifetime_lower", "median_lifetime_upper",
                        ".0f",
                    ),
                    "value from beyond the data": new["share_of_value_beyond_data"],
                }
            ),
            caption=f"Per new customer: discounted value, discounted expected lifetime and mean "
            f"and median lifetime ({unit}), and the share of the value that comes from tenures no "
            "customer has reached yet (the part resting on the model alone). Payback, the "
            "truncation bound and more in the CSV.",
            csv_name="value_new_customer.csv",
            formats={"value from beyond the data": ".0%"},
        )
    )
    channels = t.get("value_by_channel")
    if channels is not None and channels.height:
        blocks.append(
            Table(
                pl.DataFrame(
                    {
                        "cohort": channels["cohort"],
                        "channel": channels["channel"],
                        "customers": channels["customers"],
                        f"value ({pct}% interval)": _span(channels, "value", "lower", "upper"),
                        "acquisition cost": channels["acquisition_cost"],
                        "value after acquisition": channels["value_after_acquisition"],
                        f"payback ({unit})": _span(
                            channels, "payback_tenure", "payback_lower", "payback_upper", ".0f"
                        ),
                    }
                ),
                caption="Per new customer by cohort and acquisition channel: each cell's own "
                "curve (its cohort's model refitted) and revenue; payback tenure against the "
                f"channel's acquisition cost ({unit}; 0 = the first payment covers it). "
                "Channels differ in who they bring, not only in what they cost.",
                csv_name="value_by_channel.csv",
                formats={"acquisition cost": MONEY, "value after acquisition": MONEY},
            )
        )

    base = t["value_active_base"]
    blocks.append(
        Table(
            pl.DataFrame(
                {
                    "cohort": base["cohort"],
                    "active customers": base["active_customers"],
                    f"value from now on ({pct}% interval)": _span(base, "value", "lower", "upper"),
                    "per customer": base["value_per_customer"],
                }
            ),
            caption="Today's active customers and what they are expected to bring from now on, "
            "each valued on their cohort and current tenure.",
            csv_name="value_active_base.csv",
            formats={"per customer": MONEY},
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
    resp = t["price_response"]
    blocks: list = [
        Table(
            pl.DataFrame(
                {
                    "cohort": resp["cohort"],
                    "churn": resp["churn"],
                    f"hazard ratio ({pct}% interval)": _span(
                        resp, "hazard_ratio", "lower", "upper", ".3f"
                    ),
                    "mean price rise seen": resp["mean_price_rise"],
                    "elasticity": _span(
                        resp, "elasticity", "elasticity_lower", "elasticity_upper", ".2f"
                    ),
                    "spells with a rise": resp["spells_with_rise"],
                    "estimated from": resp["estimated_from"],
                }
            ),
            caption="Churn hazard after a customer's first price increase relative to before, "
            "at the same tenure, and the elasticity it implies per unit of log price (about "
            "per 1 % of price). The scenario uses the all-causes response; voluntary churn alone "
            "is shown for comparison. A cohort that never had an increase borrows the pooled "
            "estimate.",
            csv_name="price_response.csv",
            formats={"mean price rise seen": "+.1%"},
        ),
        Text(
            f"<p><strong>Scenario: price {change:+.0%}.</strong> The active base "
            f"{esc(verdict)}: estimated change {head['change_in_base_value']:,.0f} "
            f"({pct}% interval {head['change_in_base_lower']:,.0f} to "
            f"{head['change_in_base_upper']:,.0f}). It breaks even if churn hazards rise by a "
            f"factor of {head['break_even_hazard_ratio']:.3f}.</p>"
        ),
        Table(
            pl.DataFrame(
                {
                    "cohort": scen["cohort"],
                    "churn hazard ratio": scen["hazard_ratio"],
                    "per new customer: before": scen["value_new_before"],
                    "after": scen["value_new_after"],
                    f"change ({pct}% interval)": _span(
                        scen, "change_per_new_customer", "change_per_new_lower",
                        "change_per_new_upper",
                    ),
                    "active base: before": scen["base_value_before"],
                    "after ": scen["base_value_after"],
                    f"change ({pct}% interval) ": _span(
                        scen, "change_in_base_value", "change_in_base_lower",
                        "change_in_base_upper",
                    ),
                    "break-even hazard ratio": scen["break_even_hazard_ratio"],
                }
            ),
            caption=f"Price {change:+.0%}: value before and after, per new customer and for the "
            "active base, with the estimated churn response applied; the break-even ratio is the "
            "hazard ratio at which the base's value would be unchanged.",
            csv_name="price_scenario.csv",
            formats={
                "churn hazard ratio": ".3f", "per new customer: before": MONEY, "after": MONEY,
                "active base: before": MONEY, "after ": MONEY, "break-even hazard ratio": ".3f",
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
