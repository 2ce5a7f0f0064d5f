"""The demo business: Tidewell Coffee Club, a fictional coffee-bean subscription.

A seeded numpy simulation written into a DuckDB file with two tables, ``accounts`` and
``subscription_events`` (see demo/README.md). The true model behind it is saved in truth.json so
tests can check that churnlife's estimates recover it. Everything is vectorised over customers; the
only Python loop is over billing periods.

    python -m churnlife.demo.generate tidewell.duckdb
"""

from __future__ import annotations

import datetime as dt
import json
import sys
import time
from pathlib import Path
from typing import Any

import duckdb
import numpy as np
import pyarrow as pa

BUSINESS_OPENS = dt.date(2021, 1, 1)
LOG_START = dt.date(2022, 7, 1)
AS_OF = dt.date(2025, 12, 31)
PRICE_RISE_DATE = dt.date(2024, 3, 1)

TRUTH: dict[str, Any] = {
    "business": "Tidewell Coffee Club (fictional)",
    "business_opens": BUSINESS_OPENS.isoformat(),
    "log_start": LOG_START.isoformat(),
    "as_of": AS_OF.isoformat(),
    "plans": {
        # Voluntary hazard in billing period k (1-based), for a customer who is not "never-churn":
        #   h_k = 1 - exp(-m * ((lam*k)**gamma - (lam*(k-1))**gamma)),  m = channel multiplier
        #   (times the price-rise hazard ratio where it applies).
        "beans_monthly": {
            "share": 0.55,
            "price": 18.0,
            "period_months": 1,
            "lam": 0.0235,
            "gamma": 0.6,
            "never_churn": 0.15,
            "p_fail": 0.04,
        },
        "beans_plus_monthly": {
            "share": 0.20,
            "price": 29.0,
            "period_months": 1,
            "lam": 0.0220,
            "gamma": 0.65,
            "never_churn": 0.20,
            "p_fail": 0.04,
        },
        "beans_annual": {
            "share": 0.25,
            "price": 180.0,
            "period_months": 12,
            "lam": 0.169,
            "gamma": 0.7,
            "never_churn": 0.30,
            "p_fail": 0.06,
        },
    },
    "channels": {
        "organic_search": {"share": 0.35, "hazard_multiplier": 1.0},
        "paid_social": {"share": 0.30, "hazard_multiplier": 1.4},
        "referral": {"share": 0.20, "hazard_multiplier": 0.75},
        "podcast_ad": {"share": 0.15, "hazard_multiplier": 1.1},
    },
    "p_recover": 0.55,
    "grace_days": 14,
    "price_rise": {
        "date": PRICE_RISE_DATE.isoformat(),
        "rule": "beans_monthly spells that started before 2023-01-01 and are active on the date",
        "new_price": 20.0,
        "hazard_ratio": 1.35,
        "applies_to": "voluntary hazard of billing periods that start on or after the date",
    },
    "reactivation": {
        "share_of_churned": 0.12,
        "short_gap_share": 0.15,
        "short_gap_days": [3, 29],
        "long_gap_days": "30 + exponential(mean 120)",
        "second_spell": "same plan and channel, fresh tenure clock, never-churn drawn anew",
    },
    "plan_switch": {
        "monthly_rate_per_month": 0.02 / 12,
        "between": ["beans_monthly", "beans_plus_monthly"],
        "effect": "none: hazards stay tied to the plan the spell started on",
    },
    "duplicate_row_share": 0.001,
    "cancel_reasons": {
        "too_expensive": 0.30,
        "not_drinking_enough": 0.30,
        "moved_to_competitor": 0.15,
        "delivery_issues": 0.10,
        "other": 0.15,
    },
}

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


def true_period_survival(
    truth: dict, plan: str, channel: str, periods: np.ndarray, hazard_ratio: float = 1.0
) -> np.ndarray:
    """P(a new customer's first spell lasts at least k billing periods), no price rise.

    Survival through period k needs: no voluntary churn in periods 1..k, and every renewal charge
    at the end of periods 1..k-1 paid or recovered (a failure at the end of period k ends the spell
    at the start of period k+1, so it counts against k+1)."""
    p = truth["plans"][plan]
    m = truth["channels"][channel]["hazard_multiplier"] * hazard_ratio
    k = np.asarray(periods, dtype=float)
    lam, gam = p["lam"], p["gamma"]
    cured = p["never_churn"]
    vol = cured + (1 - cured) * np.exp(-m * (lam * k) ** gam)
    p_lose = p["p_fail"] * (1 - truth["p_recover"])
    invol = (1 - p_lose) ** np.maximum(k - 1, 0)
    return vol * invol


# --- calendar helpers (vectorised) -------------------------------------------------------------


def _to_days(d: dt.date) -> int:
    return (d - dt.date(1970, 1, 1)).days


def _add_months(days: np.ndarray, months: np.ndarray) -> np.ndarray:
    """Dates (days since epoch) plus whole months, clamped to month end."""
    d = days.astype("datetime64[D]")
    m = d.astype("datetime64[M]")
    day_of_month = (d - m.astype("datetime64[D]")).astype(np.int64)
    target = m + months.astype(np.int64)
    month_len = ((target + 1).astype("datetime64[D]") - target.astype("datetime64[D]")).astype(
        np.int64
    )
    out = target.astype("datetime64[D]") + np.minimum(day_of_month, month_len - 1)
    return out.astype(np.int64)


# --- simulation --------------------------------------------------------------------------------


def _simulate(
    rng: np.random.Generator,
    start: np.ndarray,
    plan: np.ndarray,
    channel: np.ndarray,
    first_kind: str,
    eligible_rise_before: int,
) -> tuple[dict[str, list[np.ndarray]], np.ndarray, np.ndarray]:
    """Simulate one spell per row from its start date. Returns event columns (lists of arrays),
    the spell's end date (days; -1 if active at as-of) and whether it ended."""
    n = start.size
    plans = list(TRUTH["plans"])
    pm = np.array([TRUTH["plans"][p]["period_months"] for p in plans])[plan]
    lam = np.array([TRUTH["plans"][p]["lam"] for p in plans])[plan]
    gam = np.array([TRUTH["plans"][p]["gamma"] for p in plans])[plan]
    cure = np.array([TRUTH["plans"][p]["never_churn"] for p in plans])[plan]
    p_fail = np.array([TRUTH["plans"][p]["p_fail"] for p in plans])[plan]
    price = np.array([TRUTH["plans"][p]["price"] for p in plans])[plan]
    mult = np.array([c["hazard_multiplier"] for c in TRUTH["channels"].values()])[channel]
    cured = rng.random(n) < cure
    rise_day = _to_days(PRICE_RISE_DATE)
    as_of = _to_days(AS_OF)
    hr = TRUTH["price_rise"]["hazard_ratio"]
    rise_eligible = (plan == plans.index("beans_monthly")) & (start < eligible_rise_before)
    risen = np.zeros(n, dtype=bool)
    cur_plan = plan.copy()
    cur_price = price.copy()
    reasons = np.array(list(TRUTH["cancel_reasons"]))
    reason_p = np.array(list(TRUTH["cancel_reasons"].values()))
    switch_rate = TRUTH["plan_switch"]["monthly_rate_per_month"]
    monthly_ids = np.array([plans.index("beans_monthly"), plans.index("beans_plus_monthly")])
    plan_price = np.array([TRUTH["plans"][p]["price"] for p in plans])

    cols: dict[str, list[np.ndarray]] = {
        k: [] for k in ("row", "day", "kind", "plan", "price", "reason", "sec")
    }

    def emit(idx: np.ndarray, day: np.ndarray, kind: str, reason: np.ndarray | None = None):
        cols["row"].append(idx)
        cols["day"].append(day)
        cols["kind"].append(np.full(idx.size, KINDS.index(kind), dtype=np.int8))
        cols["plan"].append(cur_plan[idx].copy())
        cols["price"].append(cur_price[idx].copy())
        cols["reason"].append(
            np.full(idx.size, -1, dtype=np.int8) if reason is None else reason.astype(np.int8)
        )
        # starts happen in the morning, everything else later, so a same-day cancel sorts after
        lo, hi = (
            (6 * 3600, 8 * 3600)
            if kind in ("subscribed", "resubscribed")
            else (8 * 3600, 23 * 3600)
        )
        cols["sec"].append(rng.integers(lo, hi, idx.size))

    emit(np.arange(n), start, first_kind)
    end = np.full(n, -1, dtype=np.int64)
    ended = np.zeros(n, dtype=bool)
    active = np.ones(n, dtype=bool)
    k = 0
    while active.any():
        k += 1
        idx = np.flatnonzero(active)
        p_start = _add_months(start[idx], (k - 1) * pm[idx])
        p_end = _add_months(start[idx], k * pm[idx])
        # periods starting after as-of are not observed: those customers stay active (censored)
        still = p_start <= as_of
        active[idx[~still]] = False
        idx, p_start, p_end = idx[still], p_start[still], p_end[still]
        if idx.size == 0:
            break
        # price rise: announced on the date to eligible customers active then
        on_rise = rise_eligible[idx] & ~risen[idx] & (p_start <= rise_day) & (rise_day < p_end)
        # voluntary churn in period k
        m = mult[idx] * np.where(risen[idx], hr, 1.0)
        h = 1 - np.exp(-m * ((lam[idx] * k) ** gam[idx] - (lam[idx] * (k - 1)) ** gam[idx]))
        leaves = (~cured[idx]) & (rng.random(idx.size) < h)
        cancel_day = p_start + (rng.random(idx.size) * (p_end - p_start)).astype(np.int64)
        # plan switches between the two monthly plans, on a random day of the period
        switch = np.isin(cur_plan[idx], monthly_ids) & (rng.random(idx.size) < switch_rate)
        switch_day = p_start + (rng.random(idx.size) * (p_end - p_start)).astype(np.int64)
        switch &= ~leaves | (switch_day < cancel_day)
        switch &= switch_day <= as_of
        rise_now = on_rise & (~leaves | (cancel_day > rise_day))
        first_rise = idx[rise_now]
        cur_price[first_rise] = TRUTH["price_rise"]["new_price"]
        emit(first_rise, np.full(first_rise.size, rise_day), "price_changed")
        # the rise lifts the hazard from the next period on (periods starting on/after the date)
        risen[first_rise] = True
        sw = idx[switch]
        if sw.size:
            cur_plan[sw] = np.where(cur_plan[sw] == monthly_ids[0], monthly_ids[1], monthly_ids[0])
            base = plan_price[cur_plan[sw]]
            cur_price[sw] = np.where(
                risen[sw] & (cur_plan[sw] == monthly_ids[0]), TRUTH["price_rise"]["new_price"], base
            )
            emit(sw, switch_day[switch], "plan_switched")
        # cancellations
        gone = leaves & (cancel_day <= as_of)
        why = rng.choice(reasons.size, size=int(gone.sum()), p=reason_p)
        emit(idx[gone], cancel_day[gone], "cancelled", why)
        end[idx[gone]] = cancel_day[gone]
        ended[idx[gone]] = True
        active[idx[leaves]] = False  # cancelled (or will cancel after as-of: censored)
        # renewal at the end of the period
        stay = ~leaves & (p_end <= as_of)
        active[idx[~leaves & (p_end > as_of)]] = False
        r_idx, r_day = idx[stay], p_end[stay]
        fails = rng.random(r_idx.size) < p_fail[r_idx]
        recovers = rng.random(r_idx.size) < TRUTH["p_recover"]
        emit(r_idx[~fails], r_day[~fails], "renewed")
        emit(r_idx[fails], r_day[fails], "charge_failed")
        rec = fails & recovers
        rec_day = r_day[rec] + rng.integers(1, 14, int(rec.sum()))
        emit(r_idx[rec], rec_day, "charge_recovered")
        lost = fails & ~recovers
        end[r_idx[lost]] = r_day[lost]
        ended[r_idx[lost]] = True
        active[r_idx[lost]] = False
    return cols, end, ended


def _signup_days(rng: np.random.Generator, n: int) -> np.ndarray:
    """Signup dates with acquisition growing over the years (density rising linearly 1 → 3)."""
    span = _to_days(AS_OF) - _to_days(BUSINESS_OPENS) + 1
    u = rng.random(n)
    x = (-1 + np.sqrt(1 + 8 * u)) / 2  # inverse CDF of density (1 + 2x)/2 on [0, 1]
    return _to_days(BUSINESS_OPENS) + np.minimum((x * span).astype(np.int64), span - 1)


def build_demo(path: str | Path, n_customers: int = 60_000, seed: int = 20261202) -> dict:
    """Simulate the business and write it to a new DuckDB file at ``path`` (replaced if present).
    Returns a small summary (customers, events, spells, ...)."""
    t0 = time.perf_counter()
    rng = np.random.default_rng(seed)
    plans = list(TRUTH["plans"])
    channels = list(TRUTH["channels"])
    n = int(n_customers)
    signup = np.sort(_signup_days(rng, n))
    plan = rng.choice(len(plans), n, p=[TRUTH["plans"][p]["share"] for p in plans])
    channel = rng.choice(len(channels), n, p=[TRUTH["channels"][c]["share"] for c in channels])
    rise_cutoff = _to_days(dt.date(2023, 1, 1))

    ev1, end1, ended1 = _simulate(rng, signup, plan, channel, "subscribed", rise_cutoff)
    # reactivation: a share of churned customers return after a gap, as a fresh spell
    r = TRUTH["reactivation"]
    returns = ended1 & (rng.random(n) < r["share_of_churned"])
    short = rng.random(n) < r["short_gap_share"]
    gap = np.where(
        short,
        rng.integers(r["short_gap_days"][0], r["short_gap_days"][1] + 1, n),
        30 + rng.exponential(120, n).astype(np.int64),
    )
    back = returns & (end1 + gap <= _to_days(AS_OF))
    ret_idx = np.flatnonzero(back)
    ev2, end2, ended2 = _simulate(
        rng,
        end1[ret_idx] + gap[ret_idx],
        plan[ret_idx],
        channel[ret_idx],
        "resubscribed",
        rise_cutoff,
    )
    ev2["row"] = [ret_idx[a] for a in ev2["row"]]

    def stack(cols: dict[str, list[np.ndarray]]) -> dict[str, np.ndarray]:
        return {k: np.concatenate(v) if v else np.array([]) for k, v in cols.items()}

    e1, e2 = stack(ev1), stack(ev2)
    ev = {k: np.concatenate([e1[k], e2[k]]) for k in e1}
    log0, log1 = _to_days(LOG_START), _to_days(AS_OF)
    keep = (ev["day"] >= log0) & (ev["day"] <= log1)
    ev = {k: v[keep] for k, v in ev.items()}
    # a few exact duplicate rows, as real exports have
    n_dup = int(round(TRUTH["duplicate_row_share"] * ev["row"].size))
    dup = rng.choice(ev["row"].size, n_dup, replace=False)
    ev = {k: np.concatenate([v, v[dup]]) for k, v in ev.items()}
    order = np.lexsort((ev["sec"], ev["day"], ev["row"]))
    ev = {k: v[order] for k, v in ev.items()}

    # accounts: the start of the spell in progress when the log begins (else the first signup)
    second_start = np.full(n, np.iinfo(np.int64).max)
    second_start[ret_idx] = end1[ret_idx] + gap[ret_idx]
    first_open_at_log = (signup < log0) & (~ended1 | (end1 >= log0))
    second_end = np.full(n, -1, dtype=np.int64)
    second_end[ret_idx] = np.where(ended2, end2, np.iinfo(np.int64).max)
    second_open_at_log = (second_start < log0) & (second_end >= log0) & ~first_open_at_log
    first_paid = np.where(second_open_at_log, second_start, signup)

    ts = ev["day"].astype("datetime64[D]").astype("datetime64[s]") + ev["sec"].astype(
        "timedelta64[s]"
    )
    reasons = np.array(list(TRUTH["cancel_reasons"]) + [None], dtype=object)
    events = pa.table(
        {
            "account_id": pa.array(ev["row"].astype(np.int64) + 100_001),
            "occurred_at": pa.array(ts, type=pa.timestamp("s")),
            "kind": pa.array(np.array(KINDS, dtype=object)[ev["kind"]]),
            "plan_code": pa.array(np.array(plans, dtype=object)[ev["plan"]]),
            "amount": pa.array(ev["price"].astype(np.float64)),
            "reason": pa.array(reasons[ev["reason"]]),
        }
    )
    accounts = pa.table(
        {
            "account_id": pa.array(np.arange(n, dtype=np.int64) + 100_001),
            "first_paid_on": pa.array(first_paid.astype("datetime64[D]"), type=pa.date32()),
            "acquisition_channel": pa.array(np.array(channels, dtype=object)[channel]),
        }
    )
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(path.name + ".building")
    tmp.unlink(missing_ok=True)
    con = duckdb.connect(str(tmp))
    con.register("events_arrow", events)
    con.register("accounts_arrow", accounts)
    con.execute("CREATE TABLE subscription_events AS SELECT * FROM events_arrow")
    con.execute("CREATE TABLE accounts AS SELECT * FROM accounts_arrow")
    con.close()
    tmp.replace(path)

    summary = {
        "customers": n,
        "events": events.num_rows,
        "duplicate_rows": n_dup,
        "spells_simulated": n + int(ret_idx.size),
        "reactivations": int(ret_idx.size),
        "short_gap_reactivations": int((back & short).sum()),
        "began_before_log_and_active_at_log_start": int(
            (first_open_at_log | second_open_at_log).sum()
        ),
        "seed": seed,
        "seconds": round(time.perf_counter() - t0, 2),
    }
    (path.parent / "truth.json").write_text(json.dumps({**TRUTH, "last_build": summary}, indent=2))
    return summary


def main(argv: list[str] | None = None) -> int:
    args = sys.argv[1:] if argv is None else argv
    out = Path(args[0]) if args else Path("tidewell.duckdb")
    print(json.dumps(build_demo(out), indent=2))
    return 0


if __name__ == "__main__":
    sys.exit(main())
