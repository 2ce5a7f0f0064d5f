"""The value stage in one call: from the extract and the fitted hazard models to customer values,
remaining lifetimes, the active base's value and forecast, revenue retention and the price
scenario, as tables with intervals.

    from churnlife.value.valuation import value_customers
    v = value_customers(run.extract, run.config, run.models, run.tables["km"])
    v.tables["value_new_customer"]      # per cohort, with intervals and payback
    v.tables["value_active_base"]       # the base today, per cohort and in all

Every figure follows one path a reader can retrace: the cohort's counts (queries/counts.sql)
give the curve (churnlife.value.curves: Kaplan–Meier joined to the chosen model's tail), the
payments in the log give the revenue path (queries/revenue_by_tenure.sql), and
churnlife.value.worth sums them with the discount rate of [value].
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import polars as pl

from churnlife.config import Config
from churnlife.errors import UserError, did_you_mean
from churnlife.extract import Extract
from churnlife.models.base import ModelFit
from churnlife.value.curves import LifeCurve, life_curve
from churnlife.value.forecast import forecast_draws, forecast_table
from churnlife.value.revenue import RevenuePath, revenue_counts, revenue_path, revenue_retention
from churnlife.value.scenario import (
    SWEEP,
    PriceResponse,
    ScenarioInputs,
    combined,
    price_responses,
)
from churnlife.value.scenario import scenario as price_scenario
from churnlife.value.settings import ValueSettings
from churnlife.value.sql import run_value_query
from churnlife.value.worth import (
    interval,
    mean_remaining_lifetime,
    median_remaining_lifetime,
    model_mean_residual_life,
    new_customer_value,
    payback_tenure,
    per_unit_rate,
    residual_value,
    sbg_del,
    truncation_bound,
    unit_years,
)

CAUTIONS = (
    "Values past the longest tenure observed rest on the chosen model's form, which the data "
    "have not checked there; another model that fits the observed tenures as well can give a "
    "different value (compare the models section).",
    "Intervals cover sampling and parameter uncertainty within the chosen model only, not the "
    "choice of model, future changes in the business, or the revenue path held flat past the "
    "observed tenures.",
    "Cohorts were not randomised: differences between them mix the effect of plan or channel "
    "with who chose it.",
    "The price response is estimated from who received past increases, chosen by the business, "
    "not at random; it is only as wide as the increases seen. churnlife supports a pricing "
    "decision, it does not guarantee its outcome.",
    "The base forecast's band treats customers as churning independently given cohort and "
    "tenure; an event that moves a whole cohort at once (a price increase, a wave of failed "
    "payments) spreads real outcomes wider. `churnlife value --backtest 12` shows how often "
    "the band covered what happened on this log.",
)


TAIL_FREE = ("piecewise",)  # models "best" passes over for the tail (name them to use them)


class NothingToValue(UserError):
    """No cohort has a usable model: the run goes on without the value stage (with a note)."""


@dataclass
class CohortValue:
    """One cohort's inputs to valuation."""

    cohort: str
    fit: ModelFit
    curve: LifeCurve
    revenue: RevenuePath
    rate: float  # per tenure unit
    cash: np.ndarray
    active: np.ndarray  # active customers by tenure 0..H
    expected_active: np.ndarray  # less those a pending failed payment is expected to end
    pending: np.ndarray  # active customers with a failed payment still in its grace period
    scenario_inputs: ScenarioInputs


@dataclass
class Valuation:
    """Everything the value stage computed; ``tables`` are written beside the report."""

    settings: ValueSettings
    unit: str
    confidence: float
    cohorts: list[CohortValue]
    responses: list[PriceResponse]
    tables: dict[str, pl.DataFrame] = field(default_factory=dict)
    skipped: list[tuple[str, str]] = field(default_factory=list)  # cohort, reason

    def headline(self) -> dict:
        """A few figures for the summary: value per new customer, base value, scenario."""
        out: dict = {}
        new = self.tables.get("value_new_customer")
        if new is not None and new.height:
            out["value_per_new_customer"] = {
                r["cohort"]: {"value": r["value"], "lower": r["lower"], "upper": r["upper"]}
                for r in new.to_dicts()
            }
        base = self.tables.get("value_active_base")
        if base is not None and base.height:
            total = base.filter(pl.col("cohort") == "all cohorts").to_dicts()
            if total:
                t = total[0]
                out["active_base_value"] = {
                    "customers": t["active_customers"],
                    "value": t["value"],
                    "lower": t["lower"],
                    "upper": t["upper"],
                }
        sc = self.tables.get("price_scenario")
        if sc is not None and sc.height:
            t = sc.filter(pl.col("cohort") == "all cohorts").to_dicts()
            if t:
                out["price_scenario"] = {
                    k: t[0][k]
                    for k in (
                        "price_change",
                        "change_in_base_value",
                        "change_in_base_lower",
                        "change_in_base_upper",
                        "break_even_hazard_ratio",
                    )
                }
        return out


def choose_fit(models, cohort: str, name: str) -> ModelFit:
    """The cohort's model for valuation: ``name``, or for "best" the converged fit with the
    lowest AIC whose covariance is finite (intervals need it), leaving out TAIL_FREE models."""
    fits = [f for f in models.for_cohort(cohort) if f.convergence.converged]
    if name != "best":
        known = sorted({f.name for f in models.fits})
        chosen = [f for f in fits if f.name == name]
        if not chosen:
            raise UserError(
                f'[value] model = "{name}" was not fitted (or did not converge) for cohort '
                f"{cohort!r}.{did_you_mean(name, known)} Fitted models: {', '.join(known)}; "
                'or use "best".'
            )
        return chosen[0]
    # the piecewise model's tail is its last band's constant hazard, an assumption rather than
    # a fitted shape: "best" looks among the models whose form carries past the data
    usable = [f for f in fits if np.all(np.isfinite(f.cov)) and f.name not in TAIL_FREE]
    if not usable:
        raise UserError(f"no model with a usable covariance for cohort {cohort!r}.")
    return min(usable, key=lambda f: f.aic)


def _cohort_period_months(config: Config, counts: pl.DataFrame, cohort: str) -> float:
    """Billing period length in months of a cohort's plan (for the "periods" tenure unit)."""
    if "plan" in counts.columns:
        plans = counts.filter(pl.col("cohort") == cohort)["plan"].unique().to_list()
        if len(plans) == 1 and plans[0] in config.period_months:
            return config.period_months[plans[0]]
    return config.default_period_months


def value_customers(
    extract: Extract,
    config: Config,
    models,
    km_table: pl.DataFrame,
    price_change: float | None = None,
    seed: int = 0,
    scenario: bool = True,
) -> Valuation:
    """Value every cohort that has a usable model (see the module docstring); ``scenario``
    False leaves out the price response and scenario."""
    settings = config.value
    rng = np.random.default_rng(seed)
    change = settings.price_change if price_change is None else price_change
    if not -0.9 <= change <= 5:
        raise UserError("the price change must be between -0.9 (-90 %) and 5 (+500 %).")
    revenue = revenue_counts(extract, config)
    active_rows = run_value_query("active_base", extract, config, {})
    pending_rows, recovery = _pending_failures(extract, config)
    cohorts: list[CohortValue] = []
    skipped: list[tuple[str, str]] = []
    for cohort in models.cohorts:  # a few cohorts
        if not models.has_converged(cohort):
            skipped.append((cohort, "no hazard model converged"))
            continue
        try:
            fit = choose_fit(models, cohort, settings.model)
        except UserError as err:
            if settings.model != "best":
                raise
            skipped.append((cohort, str(err)))
            continue
        years = unit_years(
            config.tenure_unit, _cohort_period_months(config, extract.counts, cohort)
        )
        rate = per_unit_rate(settings.discount_rate, years)
        horizon = max(math.ceil(settings.horizon_years / years), 2)
        data = models.data[cohort]
        curve = life_curve(data, fit, horizon, settings.draws, rng, settings.curve)
        trend = (1 + settings.revenue_trend) ** years - 1
        path = revenue_path(revenue, cohort, horizon, trend)
        cost = settings.cost_for(cohort)
        cash = settings.margin_rate * path.per_customer - cost
        active = np.zeros(horizon + 1)
        part = active_rows.filter(pl.col("cohort") == cohort)
        t = np.clip(part["tenure"].to_numpy(), 0, horizon)
        np.add.at(active, t, part["active"].to_numpy().astype(float))
        pending = np.zeros(horizon + 1)
        if pending_rows.height:
            part = pending_rows.filter(pl.col("cohort") == cohort)
            t = np.clip(part["tenure"].to_numpy(), 0, horizon)
            np.add.at(pending, t, part["n"].to_numpy().astype(float))
        # a customer whose failed payment is still in its grace period stays with the share of
        # failures the log shows recovered
        expected = active - pending * (1 - recovery)
        inputs = ScenarioInputs(
            curve, path.per_customer, settings.margin_rate, cost, rate, settings.timing, expected
        )
        cohorts.append(
            CohortValue(cohort, fit, curve, path, rate, cash, active, expected, pending, inputs)
        )
    if not cohorts:
        raise NothingToValue(
            "no cohort could be valued: no hazard model converged with a usable covariance. "
            "Fit models (drop --no-models) or group small cohorts together."
        )
    responses, response_table = (
        price_responses(extract, config, [c.cohort for c in cohorts])
        if scenario
        else ([], pl.DataFrame())
    )
    v = Valuation(settings, config.tenure_unit, config.confidence, cohorts, responses)
    v.skipped = skipped
    v.tables = {
        "value_new_customer": _new_customer_table(v, config),
        "value_by_tenure": _by_tenure_table(v),
        "value_active_base": _base_table(v),
        "base_forecast": _forecast(v, rng),
        "revenue_by_tenure": revenue,
        "revenue_retention": revenue_retention(revenue, km_table),
    }
    if config.columns.get("channel") and "channel" not in extract.cohort_columns:
        v.tables["value_by_channel"] = _channel_table(v, extract, config, rng)
    if responses:
        v.tables["price_response"] = response_table
        v.tables["price_scenario"], v.tables["price_sweep"] = _scenarios(v, change, rng)
    return v


def _pending_failures(extract: Extract, config: Config) -> tuple[pl.DataFrame, float]:
    """Active spells holding a failed payment still in its grace period (per cohort × tenure),
    and the share of decided failures that were recovered (queries/pending_failures.sql)."""
    codes = config.event_codes
    if not codes.get("payment_failed"):
        return pl.DataFrame(), 1.0
    rows = run_value_query(
        "pending_failures",
        extract,
        config,
        {
            "log_start": config.log_start,
            "as_of": config.as_of,
            "grace_days": config.grace_days,
            "payment_failed_codes": list(codes["payment_failed"]),
            "ok_codes": [*codes["payment_recovered"], *codes["renewal"]] or [""],
        },
    )
    decided = rows.filter(pl.col("kind") == "decided")
    failures = int(decided["n"].sum()) if decided.height else 0
    recovered = int(decided["recovered"].sum()) if decided.height else 0
    rate = recovered / failures if failures else 1.0
    return rows.filter(pl.col("kind") == "pending"), rate


def _share_beyond(c: CohortValue) -> float:
    """Share of a new customer's value that comes from tenures past the longest observed."""
    s, k = c.curve.survival, np.arange(c.curve.survival.size)
    parts = s * c.cash * (1 / (1 + c.rate)) ** k
    total = parts.sum()
    return float(parts[c.curve.observed_to + 1 :].sum() / total) if total > 0 else float("nan")


def _new_customer_table(v: Valuation, config: Config) -> pl.DataFrame:
    conf, st = v.confidence, v.settings
    rows = []
    for c in v.cohorts:
        s, d = c.curve.survival, c.curve.draws
        value = new_customer_value(s, c.cash, c.rate, st.timing)[0]
        (lo,), (hi,) = interval(new_customer_value(d, c.cash, c.rate, st.timing)[:, None], conf)
        ones = np.ones_like(c.cash)
        del_point = new_customer_value(s, ones, c.rate, st.timing)[0]
        (dl_lo,), (dl_hi,) = interval(new_customer_value(d, ones, c.rate, st.timing)[:, None], conf)
        mrl = mean_remaining_lifetime(d)[:, 0]
        (m_lo,), (m_hi,) = interval(mrl[:, None], conf)
        med = median_remaining_lifetime(d, np.array([0]))[:, 0]
        (md_lo,), (md_hi,) = interval(np.where(np.isnan(med), np.inf, med)[:, None], conf)
        closed = float("nan")
        if c.fit.name == "sbg" and c.curve.kind == "model" and c.rate > 0:
            closed = sbg_del(c.fit.alpha, c.fit.beta, c.rate) * (
                1 / (1 + c.rate) if st.timing == "end" else 1.0
            )
        acq = st.acquisition_for(c.cohort)
        pay = pay_lo = pay_hi = float("nan")
        if acq is not None:
            pay = float(payback_tenure(s, c.cash, c.rate, acq, st.timing)[0])
            pb = payback_tenure(d, c.cash, c.rate, acq, st.timing)
            (pay_lo,), (pay_hi,) = interval(np.where(np.isnan(pb), np.inf, pb)[:, None], conf)
        bound = float(truncation_bound(s, c.cash, c.rate, 0)) / (1 + c.rate)
        rows.append(
            {
                "cohort": c.cohort,
                "model": c.fit.name,
                "curve": c.curve.label,
                "value": float(value),
                "lower": float(lo),
                "upper": float(hi),
                "discounted_lifetime": float(del_point),
                "discounted_lifetime_lower": float(dl_lo),
                "discounted_lifetime_upper": float(dl_hi),
                "discounted_lifetime_closed_form": closed,
                "mean_lifetime": float(mean_remaining_lifetime(s)[0, 0]),
                "mean_lifetime_lower": float(m_lo),
                "mean_lifetime_upper": float(m_hi),
                "median_lifetime": float(median_remaining_lifetime(s, np.array([0]))[0, 0]),
                "median_lifetime_lower": float(md_lo),
                "median_lifetime_upper": float(md_hi),
                "first_payment": float(c.revenue.per_customer[0]),
                "acquisition_cost": acq if acq is not None else float("nan"),
                "value_after_acquisition": float(value - acq) if acq is not None else float("nan"),
                "payback_tenure": pay,
                "payback_lower": float(pay_lo),
                "payback_upper": float(pay_hi),
                "share_of_value_beyond_data": _share_beyond(c),
                "truncation_bound": bound,
                "discount_rate_per_unit": c.rate,
            }
        )
    out = pl.DataFrame(rows)
    return out.with_columns(pl.col(pl.Float64).replace([np.inf], [None]).fill_nan(None))


def _by_tenure_table(v: Valuation) -> pl.DataFrame:
    """Per cohort × tenure τ (0..longest observed): remaining lifetime (mean, median),
    discounted remaining lifetime and value per active customer, with intervals."""
    conf, st = v.confidence, v.settings
    frames = []
    for c in v.cohorts:
        top = min(c.curve.observed_to, c.curve.horizon - 1)
        taus = np.arange(top + 1)
        s, d = c.curve.survival, c.curve.draws
        ones = np.ones_like(c.cash)
        mrl_d = mean_remaining_lifetime(d)[:, taus]
        med_d = median_remaining_lifetime(d, taus)
        derl_d = residual_value(d, ones, c.rate, st.timing)[:, taus]
        val_d = residual_value(d, c.cash, c.rate, st.timing)[:, taus]
        lo = {}
        for key, arr in (("mrl", mrl_d), ("med", np.where(np.isnan(med_d), np.inf, med_d)),
                         ("derl", derl_d), ("value", val_d)):
            lo[key] = interval(arr, conf)
        frames.append(
            pl.DataFrame(
                {
                    "cohort": c.cohort,
                    "tenure": taus.astype(np.int64),
                    "active_customers": c.active[taus].astype(np.int64),
                    "failed_payment_pending": c.pending[taus].astype(np.int64),
                    "expected_active": c.expected_active[taus],
                    "mean_remaining": mean_remaining_lifetime(s)[0, taus],
                    "mean_remaining_model": model_mean_residual_life(
                        c.fit.survival, taus, c.curve.horizon
                    ),
                    "mean_remaining_lower": lo["mrl"][0],
                    "mean_remaining_upper": lo["mrl"][1],
                    "median_remaining": median_remaining_lifetime(s, taus)[0],
                    "median_remaining_lower": lo["med"][0],
                    "median_remaining_upper": lo["med"][1],
                    "discounted_remaining": residual_value(s, ones, c.rate, st.timing)[0, taus],
                    "discounted_remaining_lower": lo["derl"][0],
                    "discounted_remaining_upper": lo["derl"][1],
                    "value_per_customer": residual_value(s, c.cash, c.rate, st.timing)[0, taus],
                    "value_lower": lo["value"][0],
                    "value_upper": lo["value"][1],
                    "truncation_bound": truncation_bound(s, c.cash, c.rate, taus),
                }
            )
        )
    out = pl.concat(frames)
    return out.with_columns(pl.col(pl.Float64).replace([np.inf], [None]).fill_nan(None))


def _base_table(v: Valuation) -> pl.DataFrame:
    """The active base's value today per cohort and in all: Σ_τ n_τ V(τ), with intervals."""
    conf, st = v.confidence, v.settings
    rows, total_draws, total_point, total_n = [], None, 0.0, 0
    total_pending, total_eff = 0, 0.0
    for c in v.cohorts:
        n_eff = c.expected_active
        point = float(residual_value(c.curve.survival, c.cash, c.rate, st.timing)[0] @ n_eff)
        draws = residual_value(c.curve.draws, c.cash, c.rate, st.timing) @ n_eff
        (lo,), (hi,) = interval(draws[:, None], conf)
        n, pend = int(c.active.sum()), int(c.pending.sum())
        rows.append(
            {"cohort": c.cohort, "active_customers": n, "failed_payment_pending": pend,
             "expected_active": float(n_eff.sum()), "value": point, "lower": float(lo),
             "upper": float(hi), "value_per_customer": point / n if n else float("nan")}
        )
        total_draws = draws if total_draws is None else total_draws + draws
        total_point += point
        total_n += n
        total_pending += pend
        total_eff += float(n_eff.sum())
    (lo,), (hi,) = interval(total_draws[:, None], conf)
    rows.append(
        {"cohort": "all cohorts", "active_customers": total_n,
         "failed_payment_pending": total_pending, "expected_active": total_eff,
         "value": total_point, "lower": float(lo), "upper": float(hi),
         "value_per_customer": total_point / total_n if total_n else float("nan")}
    )
    return pl.DataFrame(rows).with_columns(pl.col(pl.Float64).fill_nan(None))


def _forecast(v: Valuation, rng: np.random.Generator) -> pl.DataFrame:
    periods = v.settings.forecast_periods
    frames, sums = [], None
    for c in v.cohorts:
        parts = forecast_draws(c.curve, c.expected_active, c.revenue.per_customer, periods, rng)
        frames.append(forecast_table(c.cohort, *parts, v.confidence))
        sums = list(parts) if sums is None else [a + b for a, b in zip(sums, parts, strict=True)]
    if len(v.cohorts) > 1:
        frames.append(forecast_table("all cohorts", *sums, v.confidence))
    return pl.concat(frames)


def _scenarios(
    v: Valuation, change: float, rng: np.random.Generator
) -> tuple[pl.DataFrame, pl.DataFrame]:
    by_cohort = {r.cohort: r for r in v.responses}
    valued = [c for c in v.cohorts if c.cohort in by_cohort]

    def rows_for(x: float) -> list[dict]:
        results = [
            price_scenario(c.scenario_inputs, by_cohort[c.cohort], x, rng) for c in valued
        ]
        out = [r.row(v.confidence) for r in results]
        if len(results) > 1:
            out.append(combined(results, [c.scenario_inputs for c in valued]).row(v.confidence))
        return out

    table = pl.DataFrame(rows_for(change))
    sweep = pl.DataFrame([row for x in SWEEP for row in rows_for(x)])  # 17 price changes
    return (
        table.with_columns(pl.col(pl.Float64).fill_nan(None)),
        sweep.with_columns(pl.col(pl.Float64).fill_nan(None)),
    )


def _channel_table(
    v: Valuation, extract: Extract, config: Config, rng: np.random.Generator
) -> pl.DataFrame:
    """Value of a new customer per cohort × acquisition channel: each cell's own Kaplan–Meier
    and revenue path, with its cohort's chosen model family refitted to the cell; payback
    against the channel's acquisition cost when given."""
    from churnlife.models.base import cohorts_of, grouped_from_counts
    from churnlife.models.suite import model_fitter

    keys = (*extract.cohort_columns, "channel")
    counts = extract.counts_by(keys)
    revenue = revenue_counts(extract, config, keys)
    family = {c.cohort: c for c in v.cohorts}
    st, rows = v.settings, []
    for cell in cohorts_of(counts):  # cohorts × channels, a few dozen
        part = counts.filter(pl.col("cohort") == cell)
        parent = " · ".join(str(part[k][0]) for k in extract.cohort_columns) or "all customers"
        if parent not in family:
            continue
        base = family[parent]
        data = grouped_from_counts(part)
        try:
            fit = model_fitter(base.fit.name, config.confidence)(data)
            curve = life_curve(data, fit, base.curve.horizon, st.draws, rng, st.curve)
        except (UserError, np.linalg.LinAlgError, ValueError):
            continue  # too few churns in the cell for its cohort's model
        path = revenue_path(revenue, cell, base.curve.horizon, 0.0)
        cash = st.margin_rate * path.per_customer - st.cost_for(parent)
        value = float(new_customer_value(curve.survival, cash, base.rate, st.timing)[0])
        draws = new_customer_value(curve.draws, cash, base.rate, st.timing)
        (lo,), (hi,) = interval(draws[:, None], v.confidence)
        channel = str(part["channel"][0])
        acq = st.acquisition_for(cell, channel, parent)
        pay = pay_lo = pay_hi = float("nan")
        if acq is not None:
            pay = float(payback_tenure(curve.survival, cash, base.rate, acq, st.timing)[0])
            pb = payback_tenure(curve.draws, cash, base.rate, acq, st.timing)
            (pay_lo,), (pay_hi,) = interval(
                np.where(np.isnan(pb), np.inf, pb)[:, None], v.confidence
            )
        rows.append(
            {
                "cohort": parent,
                "channel": channel,
                "customers": data.n_subjects,
                "model": fit.name,
                "value": value,
                "lower": float(lo),
                "upper": float(hi),
                "acquisition_cost": acq if acq is not None else float("nan"),
                "value_after_acquisition": value - acq if acq is not None else float("nan"),
                "payback_tenure": pay,
                "payback_lower": float(pay_lo),
                "payback_upper": float(pay_hi),
            }
        )
    if not rows:
        return pl.DataFrame()
    out = pl.DataFrame(rows)
    return out.with_columns(pl.col(pl.Float64).replace([np.inf], [None]).fill_nan(None))
