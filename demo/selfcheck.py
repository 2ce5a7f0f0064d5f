"""Quick self-check of the demo generator (not part of the test suite).

Builds the default demo twice in a temporary folder, then with DuckDB checks: the two builds are
identical; the written truth.json equals the committed demo/truth.json; table and event counts match
truth.json; every event lies inside the log window; codes, plans, prices and reasons are valid; the
late entrants are the customers whose first event in the log is not a start; and a Kaplan–Meier
curve of the first spells of new signups, rebuilt from the events with plain SQL, follows
``true_period_survival``.

    python -m churnlife.demo.selfcheck [--customers N] [--seed S]
"""

from __future__ import annotations

import argparse
import json
import sys
import tempfile
import time
from pathlib import Path

import duckdb
import numpy as np
import polars as pl
from churnlife.demo import generate as g

# First spell of each customer who signed up in the log (from 2023-01-01: no price change), in
# billing periods: a cancel in period k follows k-1 paid charges; a failed charge not recovered
# within the grace period, on the anniversary that starts period k, follows k-2. `completed` is the
# number of billing periods complete by the end of the as-of date. The check only uses complete
# periods: a churn inside the last, incomplete period is treated as censored at `completed`
# (counting it while the same period's survivors are censored a period earlier would overstate
# that period's hazard, noticeably for 12-month periods).
FIRST_SPELLS_SQL = """
WITH ev AS (SELECT DISTINCT * FROM subscription_events),
starts AS (
    SELECT account_id, CAST(occurred_at AS DATE) AS start_date, plan_code AS plan
    FROM ev WHERE kind = 'subscribed' AND occurred_at >= TIMESTAMP '2023-01-01'
),
lost AS (
    SELECT f.account_id, f.occurred_at AS t
    FROM ev AS f
    WHERE f.kind = 'charge_failed'
      AND CAST(f.occurred_at AS DATE) + $grace <= $as_of
      AND NOT EXISTS (
          SELECT 1 FROM ev AS r
          WHERE r.account_id = f.account_id AND r.kind = 'charge_recovered'
            AND r.occurred_at > f.occurred_at
            AND CAST(r.occurred_at AS DATE) <= CAST(f.occurred_at AS DATE) + $grace)
),
ends AS (
    SELECT account_id, MIN(t) AS end_t, arg_min(cause, t) AS cause
    FROM (
        SELECT account_id, occurred_at AS t, 'voluntary' AS cause FROM ev WHERE kind = 'cancelled'
        UNION ALL
        SELECT account_id, t, 'involuntary' FROM lost
    ) GROUP BY account_id
),
paid AS (
    SELECT s.account_id, COUNT(e.account_id) AS n_paid
    FROM starts AS s
    LEFT JOIN ends AS x ON x.account_id = s.account_id
    LEFT JOIN ev AS e ON e.account_id = s.account_id
        AND e.kind IN ('renewed', 'charge_recovered')
        AND (x.end_t IS NULL OR e.occurred_at < x.end_t)
    GROUP BY s.account_id
),
months AS (
    SELECT s.*, a.acquisition_channel AS channel, x.cause, p.n_paid,
           CAST(12 * (year(DATE '2026-01-01') - year(s.start_date))
                + month(DATE '2026-01-01') - month(s.start_date) AS INTEGER) AS k0
    FROM starts AS s
    JOIN accounts AS a USING (account_id)
    JOIN paid AS p USING (account_id)
    LEFT JOIN ends AS x USING (account_id)
)
SELECT account_id, plan, channel,
       cause IS NOT NULL AS churned,
       CASE cause WHEN 'voluntary' THEN n_paid + 1
                  WHEN 'involuntary' THEN n_paid + 2 END AS churn_period,
       (k0 - CASE WHEN CAST(start_date + to_months(k0) AS DATE) > DATE '2026-01-01'
                  THEN 1 ELSE 0 END)
           // CASE WHEN plan = 'beans_annual' THEN 12 ELSE 1 END AS completed
FROM months
"""


def km(periods: np.ndarray, churned: np.ndarray, k_max: int) -> tuple[np.ndarray, np.ndarray]:
    """Kaplan–Meier S(k) and Greenwood standard error for k = 1..k_max (no late entry)."""
    k = np.arange(1, k_max + 1)
    at_risk = (periods[None, :] >= k[:, None]).sum(axis=1)
    deaths = (churned[None, :] & (periods[None, :] == k[:, None])).sum(axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        q = np.where(at_risk > 0, deaths / at_risk, 0.0)
        s = np.cumprod(1.0 - q)
        green = np.cumsum(np.where(at_risk > deaths, deaths / (at_risk * (at_risk - deaths)), 0.0))
    return s, s * np.sqrt(green)


def _fail(problems: list[str], ok: bool, what: str) -> None:
    print(("  ok   " if ok else "  FAIL ") + what)
    if not ok:
        problems.append(what)


def run(n_customers: int, seed: int) -> int:
    problems: list[str] = []
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        t0 = time.perf_counter()
        info = g.build_demo(folder / "a" / "tidewell.duckdb", n_customers, seed)
        seconds = time.perf_counter() - t0
        g.build_demo(folder / "b" / "tidewell.duckdb", n_customers, seed)
        size_mb = (folder / "a" / "tidewell.duckdb").stat().st_size / 1e6
        print(f"build: {seconds:.2f} s, {size_mb:.1f} MB, {json.dumps(info)}")
        truth_text = (folder / "a" / "truth.json").read_text()
        truth = json.loads(truth_text)
        c = truth["counts"]

        con = duckdb.connect(str(folder / "a" / "tidewell.duckdb"), read_only=True)
        other = duckdb.connect(str(folder / "b" / "tidewell.duckdb"), read_only=True)
        print("reproducibility")
        for table in ("accounts", "subscription_events"):
            same = (
                con.sql(f"SELECT * FROM {table}")
                .pl()
                .equals(other.sql(f"SELECT * FROM {table}").pl())
            )
            _fail(problems, same, f"same seed, same {table} table")
        _fail(
            problems,
            truth_text == (folder / "b" / "truth.json").read_text(),
            "same seed, same truth.json",
        )
        committed = Path(g.__file__).with_name("truth.json")
        if n_customers == 60_000 and seed == 20261202:
            _fail(
                problems,
                committed.is_file() and committed.read_text() == truth_text,
                "committed demo/truth.json equals the default build's",
            )
        other.close()

        print("tables and counts")

        def q(sql: str, params: dict | None = None) -> list[tuple]:
            return con.execute(sql, params or {}).fetchall()

        n_acc, n_ids = q("SELECT COUNT(*), COUNT(DISTINCT account_id) FROM accounts")[0]
        _fail(problems, n_acc == n_ids == n_customers, f"accounts: {n_acc} rows, one per customer")
        n_ev, n_dist = q(
            "SELECT COUNT(*), (SELECT COUNT(*) FROM (SELECT DISTINCT * FROM subscription_events)) "
            "FROM subscription_events"
        )[0]
        _fail(problems, n_ev == c["events"], f"subscription_events: {n_ev} rows")
        _fail(
            problems,
            n_ev - n_dist == c["duplicate_rows"],
            f"exact duplicate rows: {n_ev - n_dist} ({100 * (n_ev - n_dist) / n_ev:.3f} %)",
        )
        by_kind = dict(q("SELECT kind, COUNT(*) FROM subscription_events GROUP BY kind"))
        _fail(problems, by_kind == c["events_by_kind"], f"events by kind: {by_kind}")
        first, last = q("SELECT MIN(occurred_at), MAX(occurred_at) FROM subscription_events")[0]
        _fail(
            problems,
            str(first) >= "2022-07-01 00:00:00" and str(last) <= "2025-12-31 23:59:59",
            f"events from {first} to {last}",
        )
        signup_range = q("SELECT MIN(first_paid_on), MAX(first_paid_on) FROM accounts")[0]
        _fail(
            problems,
            str(signup_range[0]) >= "2021-01-01" and str(signup_range[1]) <= "2025-12-31",
            f"first_paid_on from {signup_range[0]} to {signup_range[1]}",
        )
        bad = q(
            """
            SELECT COUNT(*) FILTER (WHERE kind NOT IN (SELECT unnest($kinds)))
                 + COUNT(*) FILTER (WHERE (kind = 'cancelled') <> (reason IS NOT NULL))
                 + COUNT(*) FILTER (WHERE reason NOT IN (SELECT unnest($reasons)))
                 + COUNT(*) FILTER (WHERE NOT (
                       (plan_code = 'beans_monthly' AND amount IN (18, 20))
                    OR (plan_code = 'beans_plus_monthly' AND amount = 29)
                    OR (plan_code = 'beans_annual' AND amount = 180)))
                 + COUNT(*) FILTER (WHERE kind = 'price_changed'
                       AND (CAST(occurred_at AS DATE) <> DATE '2024-03-01' OR amount <> 20))
            FROM subscription_events
            """,
            {"kinds": list(g.KINDS), "reasons": list(g.REASONS)},
        )[0][0]
        _fail(problems, bad == 0, "kinds, reasons, plan/price pairs, price-change rows valid")
        channels = sorted(r[0] for r in q("SELECT DISTINCT acquisition_channel FROM accounts"))
        _fail(problems, channels == sorted(g.CHANNELS), f"channels {channels}")

        late, wrong_start, no_events = q(
            """
            WITH f AS (
                SELECT account_id, arg_min(kind, occurred_at) AS kind,
                       CAST(MIN(occurred_at) AS DATE) AS day
                FROM subscription_events GROUP BY account_id
            )
            SELECT
                COUNT(*) FILTER (WHERE f.kind NOT IN ('subscribed', 'resubscribed')
                                   AND a.first_paid_on < DATE '2022-07-01'),
                COUNT(*) FILTER (WHERE f.kind = 'subscribed' AND f.day <> a.first_paid_on)
                  + COUNT(*) FILTER (WHERE f.kind NOT IN ('subscribed', 'resubscribed')
                                     AND a.first_paid_on >= DATE '2022-07-01'),
                COUNT(*) FILTER (WHERE f.account_id IS NULL)
            FROM accounts AS a LEFT JOIN f USING (account_id)
            """
        )[0]
        _fail(
            problems,
            late == c["late_entry_customers"] and wrong_start == 0,
            f"late entrants (first event not a start, first_paid_on before the log): {late}",
        )
        _fail(
            problems,
            no_events == c["customers_without_events"],
            f"accounts with no event in the log: {no_events}",
        )
        n_sub = q(
            "SELECT COUNT(*) FROM (SELECT account_id FROM subscription_events "
            "WHERE kind = 'subscribed' GROUP BY account_id HAVING COUNT(DISTINCT occurred_at) > 1)"
        )[0][0]
        _fail(problems, n_sub == 0, "at most one subscribed event per customer")

        print("first spells of new signups (2023-01-01 on) against true_period_survival")
        spells = con.sql(FIRST_SPELLS_SQL, params={"grace": g.GRACE_DAYS, "as_of": g.AS_OF}).pl()
        con.close()
        checkpoints = {
            "beans_monthly": [1, 3, 6, 12, 24, 30],
            "beans_plus_monthly": [1, 3, 6, 12, 24, 30],
            "beans_annual": [1, 2],
        }
        worst = 0.0
        for plan, ks in checkpoints.items():
            for channel in (*g.CHANNELS, None):
                sub = spells.filter(pl.col("plan") == plan)
                if channel is not None:
                    sub = sub.filter(pl.col("channel") == channel)
                done = sub["completed"].to_numpy().astype(np.int64)
                when = sub["churn_period"].fill_null(0).to_numpy().astype(np.int64)
                ch = sub["churned"].to_numpy().astype(bool) & (when <= done)
                per = np.where(ch, when, done)
                s, se = km(per, ch, max(ks))
                ks_a = np.array(ks)
                if channel is None:
                    mix = np.array([g.CHANNEL_MIX[x] for x in g.CHANNELS])
                    true = sum(
                        w * g.true_period_survival(truth, plan, x, ks_a)
                        for w, x in zip(mix, g.CHANNELS, strict=True)
                    )
                else:
                    true = g.true_period_survival(truth, plan, channel, ks_a)
                est, err = s[ks_a - 1], se[ks_a - 1]
                z = np.abs(est - true) / np.maximum(err, 1e-9)
                worst = max(worst, float(z.max()))
                cells = "  ".join(
                    f"k={k}: {e:.3f}/{t:.3f}" for k, e, t in zip(ks, est, true, strict=True)
                )
                print(
                    f"  {plan:<19}{channel or 'all channels':<15} n={per.size:>6}  KM/true {cells}"
                    f"  max|z|={z.max():.1f}"
                )
        _fail(
            problems, worst < 4.0, f"KM within 4 standard errors of the truth (worst {worst:.1f})"
        )
    print("all checks passed" if not problems else f"{len(problems)} check(s) failed")
    return 1 if problems else 0


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m churnlife.demo.selfcheck")
    parser.add_argument("--customers", type=int, default=60_000)
    parser.add_argument("--seed", type=int, default=20261202)
    args = parser.parse_args(argv)
    return run(args.customers, args.seed)


if __name__ == "__main__":
    sys.exit(main())
