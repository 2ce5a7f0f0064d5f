"""Cox proportional hazards on counts against statsmodels PHReg on the per-customer rows.

A synthetic subscription table of 1 000 000 customers (plan × channel, late entry for a fifth of
them, whole-month tenures up to 48): churnlife.cox fits the counts per covariate pattern ×
tenure, PHReg fits the same model on one row per customer. Prints each fit's time, the ratio
PHReg / churnlife, and the largest difference between the two sets of coefficients. The count
step (done by the database in a real run) is timed separately.

    python benchmarks/bench_cox.py                 # 1 000 000 customers
    python benchmarks/bench_cox.py --customers 200000
"""

from __future__ import annotations

import argparse
import time

import numpy as np
import polars as pl
from statsmodels.duration.hazard_regression import PHReg

from churnlife.counts import counts_from_durations
from churnlife.cox import cox_fit

PLANS = np.array(["monthly", "plus", "annual"])
CHANNELS = np.array(["organic", "social", "referral", "podcast"])
LOG_HR_PLAN = np.array([0.0, 0.05, -1.1])
LOG_HR_CHANNEL = np.array([0.0, 0.3, -0.25, 0.1])
MAX_TENURE = 48


def simulate(n: int, seed: int = 1):
    """Weibull churn (shape 0.8) scaled by plan and channel; uniform follow-up; late entry."""
    rng = np.random.default_rng(seed)
    plan = rng.choice(3, n, p=[0.6, 0.25, 0.15])
    channel = rng.choice(4, n, p=[0.4, 0.3, 0.2, 0.1])
    eta = LOG_HR_PLAN[plan] + LOG_HR_CHANNEL[channel]
    t = 20.0 * (rng.exponential(1.0, n) / np.exp(eta)) ** (1 / 0.8)
    follow = rng.uniform(1, MAX_TENURE, n)
    entry = np.where(rng.random(n) < 0.2, np.floor(rng.uniform(0, 12, n)), 0.0)
    x = np.minimum(t, follow)
    churned = t <= follow
    exit_t = np.where(churned, np.ceil(x), np.floor(x))
    keep = exit_t > entry  # a spell leaving before it entered was never seen
    return plan[keep], channel[keep], entry[keep], exit_t[keep], churned[keep]


def timed(f, repeats: int = 1):
    best, out = np.inf, None
    for _ in range(repeats):
        t0 = time.perf_counter()
        out = f()
        best = min(best, time.perf_counter() - t0)
    return best, out


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--customers", type=int, default=1_000_000)
    args = ap.parse_args()
    plan, channel, entry, exit_t, churned = simulate(args.customers)
    n = plan.size
    labels = pl.Series(PLANS[plan]) + " · " + pl.Series(CHANNELS[channel])
    t_count, counts = timed(
        lambda: counts_from_durations(exit_t, churned, entry=entry, cohort=labels)
    )
    counts = counts.with_columns(
        pl.col("cohort").str.split(" · ").list.get(0).alias("plan"),
        pl.col("cohort").str.split(" · ").list.get(1).alias("channel"),
    )
    ref = {"plan": "monthly", "channel": "organic"}
    exog = np.column_stack(
        [(plan == i).astype(float) for i in (2, 1)]  # annual, plus (sorted level order)
        + [(channel == i).astype(float) for i in (3, 2, 1)]  # podcast, referral, social
    )
    print(f"{args.customers:,} customers simulated, {n:,} seen after late entry, "
          f"{int(churned.sum()):,} churns; counts: {counts.height:,} rows "
          f"(counted in {t_count:.2f} s, the database's job in a real run)")  # fmt: skip
    for ties in ("breslow", "efron"):
        t_ours, ours = timed(
            lambda ties=ties: cox_fit(counts, ["plan", "channel"], ties=ties, reference=ref), 3
        )
        model = PHReg(exit_t, exog, status=churned.astype(float), entry=entry + 0.5, ties=ties)
        t_ref, fit = timed(model.fit)
        diff = float(np.max(np.abs(ours.coef - fit.params)))
        print(
            f"{ties:8s} churnlife on counts {t_ours:7.3f} s | statsmodels PHReg on rows "
            f"{t_ref:7.2f} s | ratio {t_ref / t_ours:8.1f}× | max |Δcoef| {diff:.1e}"
        )
    hrs = ", ".join(f"{k} {v:.3f}" for k, v in zip(ours.names, ours.hazard_ratio, strict=True))
    print(f"hazard ratios (efron): {hrs}")


if __name__ == "__main__":
    main()
