"""Hazard-model fitting cost against the number of customers, and against a per-customer fit.

1. Weibull (and sBG) fitted on the counts table for 10^3 .. 10^6 simulated customers at a fixed
   60 tenures: the fit reads cohorts × tenures, so its time stays flat as customers grow.
2. The same grouped Weibull fitted by scipy.stats.weibull_min.fit on the per-customer rows
   (CensoredData with each churn interval-censored in (t-1, t], each censoring right-censored at
   t): printed as the ratio of scipy's time to churnlife's, and the two estimates side by side.

    python benchmarks/bench_models.py
"""

from __future__ import annotations

import time

import numpy as np
from scipy import stats

from churnlife.counts import counts_from_durations
from churnlife.models.base import fit_spec, grouped_from_counts
from churnlife.models.discrete import ShiftedBetaGeometric
from churnlife.models.parametric import Weibull

MAX_TENURE = 60


def simulate(n: int, seed: int = 0):
    rng = np.random.default_rng(seed)
    t = 18.0 * rng.weibull(0.7, n)
    cens = rng.uniform(0, MAX_TENURE, n)
    x = np.minimum(t, cens)
    died = t <= cens
    return np.where(died, np.ceil(x), np.floor(x)), died


def best_of(f, repeats: int = 3) -> float:
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        f()
        times.append(time.perf_counter() - t0)
    return min(times)


def main() -> None:
    print("1. fit time on the counts table, fixed tenures (0..60)")
    print(f"{'customers':>10} {'count rows':>10} {'weibull s':>10} {'sbg s':>8} {'count s':>8}")
    for n in (1_000, 10_000, 100_000, 1_000_000):
        exit_t, died = simulate(n)
        t0 = time.perf_counter()
        counts = counts_from_durations(exit_t, died)
        t_count = time.perf_counter() - t0
        data = grouped_from_counts(counts)
        t_wb = best_of(lambda data=data: fit_spec(Weibull(), data))
        t_sbg = best_of(lambda data=data: fit_spec(ShiftedBetaGeometric(), data))
        print(f"{n:>10,} {counts.height:>10} {t_wb:>10.4f} {t_sbg:>8.4f} {t_count:>8.3f}")
    print("   (count s: counting in polars here; in a run the database counts, counts.sql)")

    print("\n2. grouped Weibull: churnlife on counts vs scipy weibull_min.fit on customer rows")
    print(f"{'customers':>10} {'churnlife s':>11} {'scipy s':>9} {'ratio':>7}  shape (ours, scipy)")
    for n in (2_000, 20_000):
        exit_t, died = simulate(n, seed=1)
        data = grouped_from_counts(counts_from_durations(exit_t, died))
        t_ours = best_of(lambda data=data: fit_spec(Weibull(), data))
        ours = fit_spec(Weibull(), data)
        rows = stats.CensoredData(
            interval=np.column_stack([exit_t[died] - 1, exit_t[died]]), right=exit_t[~died]
        )
        t0 = time.perf_counter()
        c, _, _scale = stats.weibull_min.fit(rows, floc=0)
        t_scipy = time.perf_counter() - t0
        print(
            f"{n:>10,} {t_ours:>11.4f} {t_scipy:>9.3f} {t_scipy / t_ours:>7.0f}x"
            f"  ({ours.value('shape'):.5f}, {c:.5f})"
        )


if __name__ == "__main__":
    main()
