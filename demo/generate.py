"""Build the demo business: *Tidewell Coffee Club*, a fictional coffee-bean subscription.

The generator simulates every customer from the day the club opens (2021-01-01) to the as-of date
(2025-12-31) with a known ("true") model, then writes only what a real event log would hold: the
events from the log's first day (2022-07-01) on, into a DuckDB file with two tables,
``accounts`` and ``subscription_events``. The true model is written to ``truth.json`` so tests can
compare churnlife's estimates with the values they should recover. demo/README.md describes the
business, the tables and every rule of the model.

The simulation is vectorised over customers: it steps over billing periods (at most 60 for a
monthly plan over five years) with numpy arrays holding every active spell.

    python -m churnlife.demo.generate tidewell.duckdb
"""

from __future__ import annotations

import argparse
import json
import os
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import duckdb
import numpy as np
import polars as pl

# --------------------------------------------------------------------------------------------
# The true model. Everything here is written to truth.json.
# --------------------------------------------------------------------------------------------

BUSINESS = "Tidewell Coffee Club"
OPENS = "2021-01-01"
SIGNUPS_TO = "2025-12-31"
LOG_START = "2022-07-01"
AS_OF = "2025-12-31"

PLANS = ("beans_monthly", "beans_plus_monthly", "beans_annual")
CHANNELS = ("organic_search", "paid_social", "referral", "podcast_ad")
KINDS = (
    "subscribed",
    "resubscribed",
    "renewed",
    "cancelled",
    "charge_failed",
    "charge_recovered",
    "price_changed",
    "plan_switched",
)
REASONS = (
    "too_expensive",
    "not_drinking_enough",
    "moved_to_competitor",
    "delivery_issues",
    "other",
)

# Per plan: billing period, list price, discrete Weibull voluntary hazard (lambda, gamma) for a
# customer who can cancel, share who never cancel voluntarily, and the renewal charge's failure and
# recovery probabilities.
PLAN_PARAMS: dict[str, dict[str, float]] = {
    "beans_monthly": {
        "period_months": 1,
        "price": 18.00,
        "lambda": 0.0325,
        "gamma": 0.60,
        "cure_share": 0.20,
        "p_fail": 0.04,
        "p_recover": 0.55,
    },
    "beans_plus_monthly": {
        "period_months": 1,
        "price": 29.00,
        "lambda": 0.0280,
        "gamma": 0.55,
        "cure_share": 0.15,
        "p_fail": 0.04,
        "p_recover": 0.55,
    },
    "beans_annual": {
        "period_months": 12,
        "price": 180.00,
        "lambda": 0.18,
        "gamma": 0.70,
        "cure_share": 0.35,
        "p_fail": 0.06,
        "p_recover": 0.55,
    },
}
PLAN_MIX = {"beans_monthly": 0.58, "beans_plus_monthly": 0.24, "beans_annual": 0.18}
CHANNEL_MIX = {"organic_search": 0.38, "paid_social": 0.30, "referral": 0.20, "podcast_ad": 0.12}
CHANNEL_HR = {"organic_search": 1.00, "paid_social": 1.45, "referral": 0.70, "podcast_ad": 1.15}
GROWTH_PER_YEAR = 0.22  # signups per day grow as exp(0.22 * years since opening)
SEASON_AMPLITUDE = 0.20  # and peak each year in mid December (gift subscriptions)
SEASON_PEAK_DAY_OF_YEAR = 349

GRACE_DAYS = 14
RECOVERY_DELAY_DAYS = (1, 13)

REACTIVATION_SHARE = 0.12
SHORT_GAP_SHARE = 0.15
SHORT_GAP_DAYS = (1, 29)
LONG_GAP_MIN_DAYS = 30
LONG_GAP_EXTRA_MEAN_DAYS = 150.0

PRICE_CHANGE_DATE = "2024-03-01"
PRICE_CHANGE_PLAN = "beans_monthly"
PRICE_CHANGE_STARTED_BEFORE = "2023-01-01"
PRICE_CHANGE_NEW_PRICE = 20.00
PRICE_CHANGE_HR = 1.35

SWITCH_RATE_PER_YEAR = 0.02
SWITCH_PER_PERIOD = 1.0 - (1.0 - SWITCH_RATE_PER_YEAR) ** (1.0 / 12.0)

CANCEL_REASON_MIX = {
    "too_expensive": 0.28,
    "not_drinking_enough": 0.30,
    "moved_to_competitor": 0.17,
    "delivery_issues": 0.13,
    "other": 0.12,
}
DUPLICATE_RATE = 0.001

# --------------------------------------------------------------------------------------------
# Internals: dates are int64 day numbers since 1970-01-01, times of day are seconds.
# --------------------------------------------------------------------------------------------

_K = {name: i for i, name in enumerate(KINDS)}
_PERIOD = np.array([PLAN_PARAMS[p]["period_months"] for p in PLANS], dtype=np.int64)
_PRICE = np.array([PLAN_PARAMS[p]["price"] for p in PLANS])
_LAM = np.array([PLAN_PARAMS[p]["lambda"] for p in PLANS])
_GAM = np.array([PLAN_PARAMS[p]["gamma"] for p in PLANS])
_CURE = np.array([PLAN_PARAMS[p]["cure_share"] for p in PLANS])
_PFAIL = np.array([PLAN_PARAMS[p]["p_fail"] for p in PLANS])
_PREC = np.array([PLAN_PARAMS[p]["p_recover"] for p in PLANS])
_CHAN_HR = np.array([CHANNEL_HR[c] for c in CHANNELS])
_MONTHLY, _PLUS, _ANNUAL = 0, 1, 2
_NO_END = np.iinfo(np.int64).max // 4
_LAST_SECOND = 86_398  # times of day are drawn in [1, 86398]; price changes run at 00:00:00


def _day(iso: str) -> int:
    return int(np.datetime64(iso, "D").astype(np.int64))


def _month_start(month_index: np.ndarray) -> np.ndarray:
    """Day number of the first day of each month (months counted from 1970-01)."""
    return month_index.astype("datetime64[M]").astype("datetime64[D]").astype(np.int64)


def _anniversary(month0: np.ndarray, dom: np.ndarray, months: np.ndarray | int) -> np.ndarray:
    """The date ``months`` calendar months after a start (same day of month, clamped to its end)."""
    m = month0 + months
    first = _month_start(m)
    days_in_month = _month_start(m + 1) - first
    return first + np.minimum(dom, days_in_month) - 1


def _split_date(day: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Month index (since 1970-01) and day of month of day numbers."""
    d = day.astype("datetime64[D]")
    month0 = d.astype("datetime64[M]").astype(np.int64)
    dom = day - _month_start(month0) + 1
    return month0, dom


def _tod(rng: np.random.Generator, n: int) -> np.ndarray:
    return rng.integers(1, _LAST_SECOND + 1, n)


def _uniform_offset(rng: np.random.Generator, lo: np.ndarray, hi: np.ndarray) -> np.ndarray:
    """Integer in [lo, hi) per element (hi > lo)."""
    return lo + np.floor(rng.random(lo.size) * (hi - lo)).astype(np.int64)


@dataclass
class _Events:
    """Event rows collected in chunks (one chunk per event kind and billing period)."""

    chunks: list[tuple[np.ndarray, ...]] = field(default_factory=list)

    def add(
        self,
        account: np.ndarray,
        day: np.ndarray,
        tod: np.ndarray | int,
        kind: str,
        plan: np.ndarray | int,
        amount: np.ndarray | float,
        reason: np.ndarray | int = -1,
    ) -> None:
        n = account.size
        if n == 0:
            return
        self.chunks.append(
            (
                account.astype(np.int64),
                day.astype(np.int64),
                np.broadcast_to(np.asarray(tod, dtype=np.int64), n).copy(),
                np.full(n, _K[kind], dtype=np.int8),
                np.broadcast_to(np.asarray(plan, dtype=np.int8), n).copy(),
                np.broadcast_to(np.asarray(amount, dtype=np.float64), n).copy(),
                np.broadcast_to(np.asarray(reason, dtype=np.int8), n).copy(),
            )
        )

    def arrays(self) -> dict[str, np.ndarray]:
        names = ("account", "day", "tod", "kind", "plan", "amount", "reason")
        return {name: np.concatenate([c[i] for c in self.chunks]) for i, name in enumerate(names)}


@dataclass
class _Spells:
    """Outcome of simulated spells (one element per spell)."""

    account: np.ndarray
    start_day: np.ndarray
    plan: np.ndarray  # plan at the spell's start (its hazards)
    channel: np.ndarray
    end_day: np.ndarray  # _NO_END if still active when the simulation stops (as-of date)
    cause: np.ndarray  # 0 active, 1 voluntary, 2 involuntary
    churn_period: np.ndarray  # billing period in which the spell ended (0 if active)
    last_plan: np.ndarray
    price_rise: np.ndarray  # got the price change (and its hazard ratio)


def _simulate_spells(
    rng: np.random.Generator,
    events: _Events,
    account: np.ndarray,
    start_day: np.ndarray,
    plan: np.ndarray,
    channel: np.ndarray,
    start_kind: str,
) -> _Spells:
    """Simulate spells that begin on ``start_day``, stepping over billing periods."""
    as_of, d_price, rule_day = (
        _day(AS_OF),
        _day(PRICE_CHANGE_DATE),
        _day(PRICE_CHANGE_STARTED_BEFORE),
    )
    n = account.size
    month0, dom = _split_date(start_day)
    period = _PERIOD[plan]
    cured = rng.random(n) < _CURE[plan]
    chan_hr = _CHAN_HR[channel]
    plan_cur = plan.astype(np.int8).copy()
    price_cur = _PRICE[plan].copy()
    affected = np.zeros(n, dtype=bool)
    end_day = np.full(n, _NO_END, dtype=np.int64)
    cause = np.zeros(n, dtype=np.int8)
    churn_period = np.zeros(n, dtype=np.int32)

    start_tod = _tod(rng, n)
    events.add(account, start_day, start_tod, start_kind, plan_cur, price_cur)

    active = np.flatnonzero(start_day <= as_of)
    k = 1
    while active.size:
        a = active
        m = a.size
        p_s = _anniversary(month0[a], dom[a], (k - 1) * period[a])
        p_e = _anniversary(month0[a], dom[a], k * period[a])
        length = p_e - p_s
        tod0 = start_tod[a]
        pl_a = plan[a]

        # Price change on a period's first day: before that day's renewal charge.
        top = (p_s == d_price) & (start_day[a] < rule_day) & (plan_cur[a] == _MONTHLY)
        if top.any():
            t = a[top]
            price_cur[t] = PRICE_CHANGE_NEW_PRICE
            affected[t] = True
            events.add(account[t], p_s[top], 0, "price_changed", _MONTHLY, PRICE_CHANGE_NEW_PRICE)

        lo = np.zeros(m, dtype=np.int64)  # first day offset open to a cancel or a switch
        lost = np.zeros(m, dtype=bool)
        if k >= 2:
            tod0 = _tod(rng, m)
            fail = rng.random(m) < _PFAIL[pl_a]
            recovered = fail & (rng.random(m) < _PREC[pl_a])
            lost = fail & ~recovered
            delay = rng.integers(RECOVERY_DELAY_DAYS[0], RECOVERY_DELAY_DAYS[1] + 1, m)
            ok = ~fail
            events.add(
                account[a[ok]], p_s[ok], tod0[ok], "renewed", plan_cur[a[ok]], price_cur[a[ok]]
            )
            events.add(
                account[a[fail]],
                p_s[fail],
                tod0[fail],
                "charge_failed",
                plan_cur[a[fail]],
                price_cur[a[fail]],
            )
            r = a[recovered]
            events.add(
                account[r],
                p_s[recovered] + delay[recovered],
                _tod(rng, r.size),
                "charge_recovered",
                plan_cur[r],
                price_cur[r],
            )
            lo = np.where(recovered, delay + 1, 0)
            t = a[lost]
            end_day[t] = p_s[lost]
            cause[t] = 2
            churn_period[t] = k

        # Voluntary cancellation: discrete Weibull hazard of the starting plan, proportional
        # hazards for channel and price rise (on the cumulative hazard of the period).
        d_hazard = _LAM[pl_a] ** _GAM[pl_a] * (k ** _GAM[pl_a] - (k - 1) ** _GAM[pl_a])
        hr = chan_hr[a] * np.where(affected[a], PRICE_CHANGE_HR, 1.0)
        h = 1.0 - np.exp(-hr * d_hazard)
        stay = ~lost
        cancel = stay & ~cured[a] & (rng.random(m) < h)
        c_off = _uniform_offset(rng, lo, length)
        c_tod = np.where(
            c_off == 0,
            tod0 + 1 + np.floor(rng.random(m) * (_LAST_SECOND + 1 - tod0)).astype(np.int64),
            _tod(rng, m),
        )
        c_day = p_s + c_off

        # Plan switch between the two monthly plans (not in the period a customer cancels).
        switch = stay & ~cancel & (plan_cur[a] != _ANNUAL) & (rng.random(m) < SWITCH_PER_PERIOD)
        s_day = p_s + _uniform_offset(rng, np.maximum(lo, 1), length)
        new_plan = (1 - plan_cur[a]).astype(np.int8)

        # Price change inside a period: customers active that day on beans_monthly.
        mid = (p_s < d_price) & (d_price < p_e) & stay & (start_day[a] < rule_day)
        mid &= ~(cancel & (c_day < d_price))
        plan_at_d = np.where(switch & (s_day < d_price), new_plan, plan_cur[a])
        mid &= plan_at_d == _MONTHLY
        if mid.any():
            t = a[mid]
            affected[t] = True
            events.add(
                account[t],
                np.full(t.size, d_price),
                0,
                "price_changed",
                _MONTHLY,
                PRICE_CHANGE_NEW_PRICE,
            )
        cancel_price = np.where(mid, PRICE_CHANGE_NEW_PRICE, price_cur[a])

        reason = rng.choice(len(REASONS), size=m, p=list(CANCEL_REASON_MIX.values()))
        c = a[cancel]
        events.add(
            account[c],
            c_day[cancel],
            c_tod[cancel],
            "cancelled",
            plan_cur[c],
            cancel_price[cancel],
            reason[cancel],
        )
        end_day[c] = c_day[cancel]
        cause[c] = 1
        churn_period[c] = k

        sw = a[switch]
        events.add(
            account[sw],
            s_day[switch],
            _tod(rng, sw.size),
            "plan_switched",
            new_plan[switch],
            _PRICE[new_plan[switch]],
        )
        new_price = np.where(switch, _PRICE[new_plan], price_cur[a])
        new_price = np.where(
            mid & ~(switch & (s_day >= d_price)), PRICE_CHANGE_NEW_PRICE, new_price
        )
        price_cur[a] = new_price
        plan_cur[a] = np.where(switch, new_plan, plan_cur[a])

        active = a[stay & ~cancel & (p_e <= as_of)]
        k += 1

    return _Spells(
        account=account,
        start_day=start_day,
        plan=plan.astype(np.int8),
        channel=channel.astype(np.int8),
        end_day=end_day,
        cause=cause,
        churn_period=churn_period,
        last_plan=plan_cur,
        price_rise=affected,
    )


@dataclass
class Simulation:
    """Everything the generator simulated (before the log window is applied)."""

    n_customers: int
    seed: int
    signup_day: np.ndarray
    channel: np.ndarray
    first: _Spells
    second: _Spells
    short_gap: np.ndarray  # per second spell: returned less than 30 days after the first ended
    events: dict[str, np.ndarray]


def _signup_days(rng: np.random.Generator, n: int) -> np.ndarray:
    """Signup dates: growing acquisition with a December peak."""
    days = np.arange(_day(OPENS), _day(SIGNUPS_TO) + 1)
    years = (days - days[0]) / 365.25
    jan1 = days.astype("datetime64[D]").astype("datetime64[Y]").astype("datetime64[D]")
    doy = (days - jan1.astype(np.int64)).astype(float)
    weight = np.exp(GROWTH_PER_YEAR * years) * (
        1.0 + SEASON_AMPLITUDE * np.cos(2 * np.pi * (doy - SEASON_PEAK_DAY_OF_YEAR) / 365.25)
    )
    return np.sort(rng.choice(days, size=n, p=weight / weight.sum()))


def simulate(n_customers: int = 60_000, seed: int = 20261202) -> Simulation:
    """Simulate the club's customers with the true model (no log window, no anomalies)."""
    rng = np.random.default_rng(seed)
    as_of = _day(AS_OF)
    signup = _signup_days(rng, n_customers)
    account = np.arange(100_001, 100_001 + n_customers, dtype=np.int64)
    channel = rng.choice(len(CHANNELS), size=n_customers, p=list(CHANNEL_MIX.values()))
    plan = rng.choice(len(PLANS), size=n_customers, p=list(PLAN_MIX.values()))

    events = _Events()
    first = _simulate_spells(rng, events, account, signup, plan, channel, "subscribed")

    # Reactivation: a share of ended first spells come back once, after a gap.
    ended = first.end_day <= as_of
    returns = ended & (rng.random(n_customers) < REACTIVATION_SHARE)
    short = rng.random(n_customers) < SHORT_GAP_SHARE
    gap = np.where(
        short,
        rng.integers(SHORT_GAP_DAYS[0], SHORT_GAP_DAYS[1] + 1, n_customers),
        LONG_GAP_MIN_DAYS
        + np.floor(rng.exponential(LONG_GAP_EXTRA_MEAN_DAYS, n_customers)).astype(np.int64),
    )
    back_day = np.where(returns, first.end_day + gap, _NO_END)
    back = np.flatnonzero(back_day <= as_of)
    second = _simulate_spells(
        rng,
        events,
        account[back],
        back_day[back],
        first.last_plan[back].astype(np.int64),
        channel[back],
        "resubscribed",
    )
    return Simulation(
        n_customers=n_customers,
        seed=seed,
        signup_day=signup,
        channel=channel,
        first=first,
        second=second,
        short_gap=short[back],
        events=events.arrays(),
    )


# --------------------------------------------------------------------------------------------
# The log, the database and truth.json
# --------------------------------------------------------------------------------------------


def _first_paid_on(sim: Simulation) -> np.ndarray:
    """The start of the spell in progress when the log begins, else the first signup date."""
    log_start = _day(LOG_START)
    first_paid = sim.signup_day.copy()
    s = sim.second
    in_progress = (s.start_day < log_start) & (s.end_day >= log_start)
    idx = s.account[in_progress] - 100_001
    first_paid[idx] = s.start_day[in_progress]
    return first_paid


def _log_rows(sim: Simulation, rng: np.random.Generator) -> tuple[dict[str, np.ndarray], int]:
    """Events inside the log window, plus a few exactly duplicated rows."""
    ev = sim.events
    keep = (ev["day"] >= _day(LOG_START)) & (ev["day"] <= _day(AS_OF))
    rows = {k: v[keep] for k, v in ev.items()}
    dup = np.flatnonzero(rng.random(rows["day"].size) < DUPLICATE_RATE)
    rows = {k: np.concatenate([v, v[dup]]) for k, v in rows.items()}
    order = np.lexsort((rows["kind"], rows["account"], rows["tod"], rows["day"]))
    return {k: v[order] for k, v in rows.items()}, int(dup.size)


def _write_database(path: Path, accounts: pl.DataFrame, events: pl.DataFrame) -> None:
    tmp = path.with_name(path.name + ".tmp")
    for p in (tmp, Path(str(tmp) + ".wal")):
        p.unlink(missing_ok=True)
    con = duckdb.connect(str(tmp))
    try:
        con.register("accounts_src", accounts.to_arrow())
        con.register("events_src", events.to_arrow())
        con.execute(
            """
            CREATE TABLE accounts AS
            SELECT CAST(account_id AS BIGINT) AS account_id,
                   CAST(DATE '1970-01-01' + CAST(first_paid_day AS INTEGER) AS DATE)
                       AS first_paid_on,
                   CAST($channels[channel + 1] AS VARCHAR) AS acquisition_channel
            FROM accounts_src
            ORDER BY account_id
            """,
            {"channels": list(CHANNELS)},
        )
        con.execute(
            """
            CREATE TABLE subscription_events AS
            SELECT CAST(account AS BIGINT) AS account_id,
                   CAST(TIMESTAMP '1970-01-01' + to_seconds(day * 86400 + tod) AS TIMESTAMP)
                       AS occurred_at,
                   CAST($kinds[kind + 1] AS VARCHAR) AS kind,
                   CAST($plans[plan + 1] AS VARCHAR) AS plan_code,
                   CAST(round(amount, 2) AS DOUBLE) AS amount,
                   CAST(CASE WHEN reason < 0 THEN NULL ELSE $reasons[reason + 1] END AS VARCHAR)
                       AS reason
            FROM events_src
            """,
            {"kinds": list(KINDS), "plans": list(PLANS), "reasons": list(REASONS)},
        )
        con.execute("CHECKPOINT")
    finally:
        con.close()
    os.replace(tmp, path)
    Path(str(path) + ".wal").unlink(missing_ok=True)


def model_parameters() -> dict[str, Any]:
    """The true model, as stored in truth.json (independent of size and seed)."""
    return {
        "business": BUSINESS,
        "dates": {
            "business_opens": OPENS,
            "signups_from": OPENS,
            "signups_to": SIGNUPS_TO,
            "log_start": LOG_START,
            "as_of": AS_OF,
        },
        "tables": {
            "accounts": ["account_id", "first_paid_on", "acquisition_channel"],
            "subscription_events": [
                "account_id",
                "occurred_at",
                "kind",
                "plan_code",
                "amount",
                "reason",
            ],
        },
        "event_kinds": list(KINDS),
        "cancel_reasons": list(REASONS),
        "acquisition": {
            "signup_intensity": "exp(growth_per_year * years_since_opening) * (1 + "
            "season_amplitude * cos(2*pi*(day_of_year0 - season_peak_day_of_year0)/365.25))",
            "growth_per_year": GROWTH_PER_YEAR,
            "season_amplitude": SEASON_AMPLITUDE,
            "season_peak_day_of_year0": SEASON_PEAK_DAY_OF_YEAR,
            "plan_mix": PLAN_MIX,
            "channel_mix": CHANNEL_MIX,
        },
        "voluntary_hazard": {
            "form": "h_k = 1 - exp(-HR * ((lambda*k)**gamma - (lambda*(k-1))**gamma)) in billing "
            "period k = 1, 2, ... of the spell, for the (1 - cure_share) who can cancel; "
            "HR = channel_multiplier * (price_change.hazard_ratio if the spell got the price "
            "change and the period starts on or after its date, else 1). Plan = the spell's "
            "starting plan. The cancel date is uniform over the days of period k (after a "
            "recovered charge of that period, if any).",
            "channel_multipliers": CHANNEL_HR,
        },
        "plans": PLAN_PARAMS,
        "involuntary": {
            "rule": "at each renewal (the start of period k >= 2) the charge fails with p_fail; a "
            "failed charge is recovered with p_recover (charge_recovered after the delay) and "
            "the spell goes on; otherwise the spell ends on the failed charge's date (counted "
            "in period k). Cured customers can churn this way too.",
            "grace_days": GRACE_DAYS,
            "recovery_delay_days_uniform": list(RECOVERY_DELAY_DAYS),
        },
        "true_survival": {
            "form": "S(k) = (1 - p_fail*(1 - p_recover))**max(k-1, 0) * (cure_share + "
            "(1 - cure_share) * exp(-channel_multiplier * (lambda*k)**gamma)): share of new "
            "first spells still active at the end of billing period k, no price change",
        },
        "reactivation": {
            "share_of_ended_first_spells": REACTIVATION_SHARE,
            "short_gap_share": SHORT_GAP_SHARE,
            "short_gap_days_uniform": list(SHORT_GAP_DAYS),
            "long_gap_days": f"{LONG_GAP_MIN_DAYS} + floor(Exponential(mean "
            f"{LONG_GAP_EXTRA_MEAN_DAYS:g}))",
            "long_gap_min_days": LONG_GAP_MIN_DAYS,
            "long_gap_extra_mean_days": LONG_GAP_EXTRA_MEAN_DAYS,
            "max_per_customer": 1,
            "plan": "the plan in force when the first spell ended",
            "tenure": "a fresh spell: its own cure draw and hazards from period 1",
            "not_observed_if_after_as_of": True,
        },
        "price_change": {
            "date": PRICE_CHANGE_DATE,
            "plan": PRICE_CHANGE_PLAN,
            "spell_started_before": PRICE_CHANGE_STARTED_BEFORE,
            "rule": "every spell active on the date, on beans_monthly that day, whose start is "
            "before spell_started_before gets price_changed (00:00:00) to new_price",
            "old_price": PLAN_PARAMS[PRICE_CHANGE_PLAN]["price"],
            "new_price": PRICE_CHANGE_NEW_PRICE,
            "hazard_ratio": PRICE_CHANGE_HR,
            "hazard_ratio_applies": "voluntary hazard of billing periods starting on or after the "
            "date, for the rest of the spell (also after a plan switch)",
        },
        "plan_switch": {
            "between": ["beans_monthly", "beans_plus_monthly"],
            "rate_per_year": SWITCH_RATE_PER_YEAR,
            "probability_per_monthly_period": SWITCH_PER_PERIOD,
            "not_in_the_period_of_a_cancel": True,
            "new_price": "list price of the new plan",
            "hazards_follow": "the spell's starting plan",
        },
        "cancel_reason_mix": CANCEL_REASON_MIX,
        "anomalies": {"duplicate_row_rate": DUPLICATE_RATE},
    }


def _counts(
    sim: Simulation, rows: dict[str, np.ndarray], n_dup: int, first_paid: np.ndarray
) -> dict[str, Any]:
    log_start, as_of = _day(LOG_START), _day(AS_OF)
    spells = [sim.first, sim.second]
    start = np.concatenate([s.start_day for s in spells])
    end = np.concatenate([s.end_day for s in spells])
    cause = np.concatenate([s.cause for s in spells])
    kinds = np.bincount(rows["kind"], minlength=len(KINDS))
    in_log = np.unique(rows["account"])
    seen = (end >= log_start) & (start <= as_of)
    late = (start < log_start) & (end >= log_start)
    return {
        "customers": int(sim.n_customers),
        "signups_before_log": int((sim.signup_day < log_start).sum()),
        "signups_in_log": int((sim.signup_day >= log_start).sum()),
        "customers_with_events": int(in_log.size),
        "customers_without_events": int(sim.n_customers - in_log.size),
        "late_entry_customers": int(late.sum()),
        "pre_log_customers_first_seen_resubscribing": int(
            (
                (first_paid < log_start)
                & np.isin(np.arange(100_001, 100_001 + sim.n_customers), in_log)
            ).sum()
            - late.sum()
        ),
        "spells_simulated": int(start.size),
        "spells_in_log_window": int(seen.sum()),
        "spells_in_progress_at_log_start": int(late.sum()),
        "reactivations": int(sim.second.account.size),
        "reactivations_short_gap": int(sim.short_gap.sum()),
        "reactivations_in_log": int((sim.second.start_day >= log_start).sum()),
        "reactivations_short_gap_in_log": int(
            (sim.short_gap & (sim.second.start_day >= log_start)).sum()
        ),
        "voluntary_ends_by_as_of": int(((cause == 1) & (end <= as_of)).sum()),
        "involuntary_ends_by_as_of": int(((cause == 2) & (end <= as_of)).sum()),
        "voluntary_ends_in_log": int(((cause == 1) & (end <= as_of) & (end >= log_start)).sum()),
        "involuntary_ends_in_log": int(((cause == 2) & (end <= as_of) & (end >= log_start)).sum()),
        "active_at_as_of": int((end > as_of).sum()),
        "price_rise_spells": int(sum(int(s.price_rise.sum()) for s in spells)),
        "events": int(rows["day"].size),
        "events_distinct": int(rows["day"].size - n_dup),
        "duplicate_rows": n_dup,
        "events_by_kind": {k: int(kinds[i]) for i, k in enumerate(KINDS)},
    }


def build_demo(
    path: str | Path,
    n_customers: int = 60_000,
    seed: int = 20261202,
    *,
    truth_path: str | Path | None = None,
) -> dict:
    """Write the demo DuckDB file at ``path`` and ``truth.json`` beside it (or at truth_path).

    Returns a small summary: customers, events, spells, duplicates, file paths.
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    sim = simulate(n_customers, seed)
    rng = np.random.default_rng([seed, 1])  # the anomalies' own stream
    rows, n_dup = _log_rows(sim, rng)
    first_paid = _first_paid_on(sim)

    accounts = pl.DataFrame(
        {
            "account_id": np.arange(100_001, 100_001 + n_customers, dtype=np.int64),
            "first_paid_day": first_paid,
            "channel": sim.channel.astype(np.int64),
        }
    )
    events = pl.DataFrame(
        {k: rows[k] for k in ("account", "day", "tod", "kind", "plan", "amount", "reason")}
    )
    _write_database(path, accounts, events)

    truth = model_parameters()
    truth["generator"] = {"n_customers": n_customers, "seed": seed}
    truth["counts"] = _counts(sim, rows, n_dup, first_paid)
    truth_file = Path(truth_path) if truth_path is not None else path.parent / "truth.json"
    truth_file.write_text(json.dumps(truth, indent=2) + "\n")

    c = truth["counts"]
    return {
        "customers": c["customers"],
        "events": c["events"],
        "spells": c["spells_in_log_window"],
        "spells_simulated": c["spells_simulated"],
        "late_entry_customers": c["late_entry_customers"],
        "duplicate_rows": c["duplicate_rows"],
        "database": str(path),
        "truth": str(truth_file),
    }


def true_period_survival(
    truth: dict, plan: str, channel: str, periods: np.ndarray, hazard_ratio: float = 1.0
) -> np.ndarray:
    """P(a new customer's first spell is still active at the end of billing period k), no price
    change: voluntary (cure mixture of a discrete Weibull, channel multiplier) and involuntary
    (unrecovered renewal failures at the start of periods 2, 3, ...) churn. S(0) = 1.

    ``hazard_ratio`` multiplies the voluntary hazard of every period (1: the plain curve)."""
    p = truth["plans"][plan]
    hr = truth["voluntary_hazard"]["channel_multipliers"][channel] * hazard_ratio
    k = np.asarray(periods, dtype=float)
    voluntary = p["cure_share"] + (1.0 - p["cure_share"]) * np.exp(
        -hr * (p["lambda"] * k) ** p["gamma"]
    )
    involuntary = (1.0 - p["p_fail"] * (1.0 - p["p_recover"])) ** np.maximum(k - 1.0, 0.0)
    return voluntary * involuntary


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(
        prog="python -m churnlife.demo.generate",
        description=f"Build the {BUSINESS} demo database (DuckDB) and its truth.json.",
    )
    parser.add_argument(
        "out", nargs="?", default="tidewell.duckdb", help="the DuckDB file to write"
    )
    parser.add_argument("--customers", type=int, default=60_000, help="customers to simulate")
    parser.add_argument("--seed", type=int, default=20261202, help="random seed")
    parser.add_argument(
        "--truth", default=None, help="where to write truth.json (default: beside the database)"
    )
    args = parser.parse_args(argv)
    t0 = time.perf_counter()
    info = build_demo(args.out, n_customers=args.customers, seed=args.seed, truth_path=args.truth)
    info["seconds"] = round(time.perf_counter() - t0, 2)
    print(json.dumps(info, indent=2))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
