"""What a price change does to customer value: the churn response to price estimated from the
log, then value under a new price with churn scaled by that response, the break-even response,
and a sweep over price changes.

Churn response to price
-----------------------
Each spell is split at its first price increase (queries/episodes.sql); a piecewise-constant
hazard with an "after increase" indicator (churnlife.models.covariates.fit_piecewise_price,
Holford 1980) gives the hazard ratio HR after an increase, at the same tenure. With the observed
increases' mean log price ratio g (queries/price_rises.sql), the hazard elasticity is
ε = log HR / g, and a price change x scales the hazard by HR(x) = (1 + x)^ε. The estimate is
observational (the business chose who got the increase), it is only as wide as the increases
seen, and it is borrowed by cohorts that never had one.

Scenario
--------
For price change x: revenue r(k) becomes (1 + x) r(k) (cost to serve unchanged) and the period
hazards scale proportionally, S' = S^HR(x) (LifeCurve.scaled). The change in value per new
customer and for the active base (each active customer conditioned on tenure, the new price from
now on) is computed per simulation draw, with HR drawn from its estimate's normal distribution on
the log scale, so the interval carries both the curve's and the response's uncertainty.
The break-even response is the hazard ratio at which the active base's value is unchanged.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numpy as np
import polars as pl
from scipy import optimize, stats

from churnlife.config import Config
from churnlife.errors import UserError
from churnlife.extract import Extract
from churnlife.models.covariates import (
    episodes_counts,
    first_rises_sql,
    fit_piecewise_price,
)
from churnlife.value.curves import LifeCurve
from churnlife.value.sql import run_value_query
from churnlife.value.worth import interval, new_customer_value, residual_value

SWEEP = tuple(round(x, 2) for x in np.arange(-0.30, 0.501, 0.05))


@dataclass(frozen=True)
class PriceResponse:
    """Hazard ratio after a price increase and the elasticity it implies, for one cohort."""

    cohort: str
    cause: str  # "all causes" or "voluntary"
    hazard_ratio: float
    lower: float
    upper: float
    se_log: float
    mean_log_ratio: float  # mean log(new price / old price) of the increases seen
    spells_with_rise: int
    borrowed_from: str | None = None  # the cohort(s) whose estimate this one uses

    @property
    def elasticity(self) -> float:
        return float(np.log(self.hazard_ratio) / self.mean_log_ratio)

    @property
    def elasticity_se(self) -> float:
        return float(self.se_log / self.mean_log_ratio)

    def ratio_for(self, change: float) -> float:
        """HR(x) = (1 + x)^ε for a price change x (+0.10 = 10 % rise)."""
        return float((1 + change) ** self.elasticity)

    def draw_ratios(self, change: float, n: int, rng: np.random.Generator) -> np.ndarray:
        eps = rng.normal(self.elasticity, self.elasticity_se, size=n)
        return (1 + change) ** eps


def price_responses(
    extract: Extract, config: Config, cohorts: list[str]
) -> tuple[list[PriceResponse], pl.DataFrame]:
    """Per cohort: the all-cause response (used by the scenario) and the voluntary-churn response
    (involuntary churn counted as censoring: a cause-specific hazard ratio). Cohorts without an
    increase borrow the inverse-variance pooled all-cause estimate of those with one."""
    if not config.event_codes.get("price_change"):
        return [], pl.DataFrame()
    counts = episodes_counts(extract, config)
    rises = run_value_query(
        "price_rises",
        extract,
        config,
        {
            "log_start": config.log_start,
            "as_of": config.as_of,
            "price_change_codes": list(config.event_codes["price_change"]),
        },
        extra_slots={"first_rises": first_rises_sql(extract, config)},
    )
    size = {r["cohort"]: (r["mean_log_ratio"], r["spells_with_rise"]) for r in rises.to_dicts()}
    voluntary = counts.with_columns(
        pl.col("churned_voluntary").alias("churned"),
        (pl.col("censored") + pl.col("churned_involuntary")).alias("censored"),
    )
    z = float(stats.norm.ppf(0.5 + config.confidence / 2))
    own: list[PriceResponse] = []
    rows = []
    for cohort in cohorts:  # a few cohorts
        if cohort not in size or not size[cohort][0] or size[cohort][0] <= 0:
            continue
        g, n_rise = size[cohort]
        for cause, table in (("all causes", counts), ("voluntary", voluntary)):
            try:
                eff = fit_piecewise_price(table, cohort, confidence=config.confidence).effect()
            except (UserError, np.linalg.LinAlgError, ValueError):
                continue
            resp = PriceResponse(
                cohort, cause, eff["hazard_ratio"], eff["lower"], eff["upper"], eff["se_log"],
                float(g), int(n_rise),
            )
            rows.append(resp)
            if cause == "all causes":
                own.append(resp)
    responses = list(own)
    if own:
        w = np.array([1 / r.elasticity_se**2 for r in own])  # inverse variance of ε
        b = np.array([np.log(r.hazard_ratio) / r.mean_log_ratio for r in own])
        eps, se = float((w * b).sum() / w.sum()), float(1 / np.sqrt(w.sum()))
        g = float(np.mean([r.mean_log_ratio for r in own]))
        names = ", ".join(r.cohort for r in own)
        for cohort in cohorts:
            if cohort not in {r.cohort for r in own}:
                hr, se_log = float(np.exp(eps * g)), se * g
                responses.append(
                    PriceResponse(
                        cohort, "all causes", hr, float(np.exp(np.log(hr) - z * se_log)),
                        float(np.exp(np.log(hr) + z * se_log)), se_log, g, 0, names,
                    )
                )
    table = pl.DataFrame(
        [
            {
                "cohort": r.cohort,
                "churn": r.cause,
                "hazard_ratio": r.hazard_ratio,
                "lower": r.lower,
                "upper": r.upper,
                "mean_price_rise": float(np.expm1(r.mean_log_ratio)),
                "elasticity": r.elasticity,
                "elasticity_lower": r.elasticity - z * r.elasticity_se,
                "elasticity_upper": r.elasticity + z * r.elasticity_se,
                "spells_with_rise": r.spells_with_rise,
                "estimated_from": r.borrowed_from or "this cohort",
            }
            for r in rows + [r for r in responses if r.borrowed_from]
        ]
    )
    return responses, table


@dataclass(frozen=True)
class ScenarioInputs:
    """What a cohort's scenario needs: the curve, the revenue path, the money settings and the
    active customers by tenure."""

    curve: LifeCurve
    revenue: np.ndarray  # r(k), k = 0..H
    margin_rate: float
    cost: float
    rate: float  # per tenure unit
    timing: str
    active: np.ndarray  # active customers at tenure τ = 0..H (zeros beyond)

    def cash(self, change: float) -> np.ndarray:
        return self.margin_rate * self.revenue * (1 + change) - self.cost

    @cached_property
    def today(self) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """(new, base) at today's price for the point curve, then for the draws (computed once:
        every scenario compares against them)."""
        return (*self.values(self.curve.survival, 0.0), *self.values(self.curve.draws, 0.0))

    def values(self, curve_s: np.ndarray, change: float) -> tuple[np.ndarray, np.ndarray]:
        """(value per new customer, value of the active base) per row of ``curve_s``."""
        cash = self.cash(change)
        new = new_customer_value(curve_s, cash, self.rate, self.timing)
        base = residual_value(curve_s, cash, self.rate, self.timing) @ self.active
        return new, base


def _scaled_rows(s: np.ndarray, hr: np.ndarray | float) -> np.ndarray:
    with np.errstate(divide="ignore"):
        return np.exp(np.reshape(hr, (-1, 1)) * np.log(s))


@dataclass(frozen=True)
class ScenarioResult:
    """One cohort (or the total) under one price change: point changes and their draws."""

    cohort: str
    change: float
    hazard_ratio: float
    new_before: float
    new_after: float
    base_before: float
    base_after: float
    new_draws: np.ndarray  # change per new customer, per draw
    base_draws: np.ndarray  # change in the active base's value, per draw
    break_even: float

    def row(self, confidence: float) -> dict:
        (dn_lo,), (dn_hi,) = interval(self.new_draws[:, None], confidence)
        (db_lo,), (db_hi,) = interval(self.base_draws[:, None], confidence)
        return {
            "cohort": self.cohort,
            "price_change": self.change,
            "hazard_ratio": self.hazard_ratio,
            "value_new_before": self.new_before,
            "value_new_after": self.new_after,
            "change_per_new_customer": self.new_after - self.new_before,
            "change_per_new_lower": float(dn_lo),
            "change_per_new_upper": float(dn_hi),
            "base_value_before": self.base_before,
            "base_value_after": self.base_after,
            "change_in_base_value": self.base_after - self.base_before,
            "change_in_base_lower": float(db_lo),
            "change_in_base_upper": float(db_hi),
            "break_even_hazard_ratio": self.break_even,
        }


def scenario(
    inputs: ScenarioInputs, response: PriceResponse, change: float, rng: np.random.Generator
) -> ScenarioResult:
    """Value per new customer and of the active base under price change ``change`` (point and
    per-draw changes), and the break-even hazard ratio."""
    curve = inputs.curve
    hr = response.ratio_for(change)
    hr_draws = response.draw_ratios(change, curve.draws.shape[0], rng)
    new0, base0, d_new0, d_base0 = inputs.today
    new1, base1 = inputs.values(_scaled_rows(curve.survival, hr), change)
    d_new1, d_base1 = inputs.values(_scaled_rows(curve.draws, hr_draws), change)
    return ScenarioResult(
        curve.cohort, change, hr, float(new0[0]), float(new1[0]), float(base0[0]),
        float(base1[0]), d_new1 - d_new0, d_base1 - d_base0, break_even([inputs], change),
    )


def combined(results: list[ScenarioResult], inputs: list[ScenarioInputs]) -> ScenarioResult:
    """All cohorts together: base values and draws added (cohorts' draws are independent);
    the per-new-customer figures are left out (NaN): new customers come per cohort."""
    nan = float("nan")
    first = results[0]
    return ScenarioResult(
        "all cohorts", first.change, nan, nan, nan,
        sum(r.base_before for r in results), sum(r.base_after for r in results),
        np.full(first.new_draws.shape, np.nan), np.sum([r.base_draws for r in results], axis=0),
        break_even(inputs, first.change),
    )


def break_even(inputs: list[ScenarioInputs], change: float) -> float:
    """The hazard ratio (the same in every cohort given) at which the active base's value under
    ``change`` equals today's; NaN when nobody is active or no ratio in [0.01, 100] balances."""
    if change == 0 or sum(float(i.active.sum()) for i in inputs) == 0:
        return float("nan")
    today = sum(float(i.today[1][0]) for i in inputs)

    def gap(log_hr: float) -> float:
        hr = np.exp(log_hr)
        after = sum(
            float(i.values(_scaled_rows(i.curve.survival, hr), change)[1][0]) for i in inputs
        )
        return after - today

    lo, hi = np.log(1e-2), np.log(1e2)
    if np.sign(gap(lo)) == np.sign(gap(hi)):
        return float("nan")
    return float(np.exp(optimize.brentq(gap, lo, hi, xtol=1e-10)))
