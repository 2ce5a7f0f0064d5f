"""The SQL path on the demo business: counts conserve spells, follow the at-risk recursion, and the
Kaplan–Meier curve from the counts equals statsmodels' SurvfuncRight run on the per-customer spells
(with entry= for late entrants), to 1e-10.

Reference library: statsmodels.duration.survfunc.SurvfuncRight (risk set entry < t <= time, the same
rule as DEVELOPERS.md).
"""

from __future__ import annotations

import numpy as np
import polars as pl
import pytest
from statsmodels.duration.survfunc import SurvfuncRight

from churnlife.counts import counts_from_durations
from churnlife.km import kaplan_meier


def test_every_spell_enters_once_and_leaves_once(demo_extract):
    counts = demo_extract.counts
    spells = demo_extract.spells()
    per_cohort = counts.group_by("cohort").agg(
        pl.col("entered").sum(), (pl.col("churned") + pl.col("censored")).sum().alias("left")
    )
    assert (per_cohort["entered"] == per_cohort["left"]).all()
    assert int(counts["entered"].sum()) == spells.height
    assert int(counts["churned"].sum()) == int(spells["churn_counted"].sum())
    assert (
        counts["churned"] == counts["churned_voluntary"] + counts["churned_involuntary"]
    ).all()


def test_at_risk_follows_the_recursion(demo_extract):
    c = demo_extract.counts.sort("cohort", "tenure")
    expected = (
        (pl.col("entered") - pl.col("churned") - pl.col("censored"))
        .cum_sum()
        .shift(1, fill_value=0)
        .over("cohort")
    )
    check = c.with_columns(expected.alias("expected"))
    assert (check["at_risk"] == check["expected"]).all()
    # tenures are consecutive inside a cohort, so the recursion is step by step
    gaps = c.with_columns(pl.col("tenure").diff().over("cohort").alias("gap"))["gap"].drop_nulls()
    assert (gaps == 1).all()


def test_exposure_adds_up_to_observed_time(demo_extract):
    spells = demo_extract.spells()
    observed = (spells["counted_exit_exact"] - spells["entry_exact"]).clip(lower_bound=0)
    total = float(observed.sum())
    assert float(demo_extract.counts["exposure"].sum()) == pytest.approx(total, rel=1e-9)


def test_sql_counts_equal_counts_from_spells(demo_extract):
    s = demo_extract.spells()
    mem = counts_from_durations(
        s["exit_t"],
        s["churn_counted"],
        entry=s["entry_t"],
        cohort=s["plan"],
        cause=s["cause"],
    )
    mem = mem.with_columns(pl.col("tenure").cast(pl.Int32))
    sql = demo_extract.counts.filter(
        (pl.col("entered") + pl.col("churned") + pl.col("censored")) > 0
    ).select(mem.columns)
    # counts_from_durations has rows only where something enters or leaves
    joined = mem.join(sql, on=["cohort", "tenure"], how="full", suffix="_sql", coalesce=True)
    for col in ("at_risk", "entered", "churned", "churned_voluntary", "censored"):
        assert (joined[col] == joined[f"{col}_sql"]).all(), col


def test_km_equals_statsmodels_on_per_customer_spells(demo_extract):
    km = kaplan_meier(demo_extract.counts)
    spells = demo_extract.spells()
    assert spells["late_entry"].any(), "the demo must have late entrants"
    for curve in km.curves:
        # A spell censored in the interval it entered (entry_t == exit_t) is never at risk;
        # statsmodels refuses such rows, and dropping them changes no risk set.
        rows = spells.filter(
            (pl.col("plan") == curve.cohort) & (pl.col("entry_t") < pl.col("exit_t"))
        )
        ref = SurvfuncRight(
            rows["exit_t"].to_numpy().astype(float),
            rows["churn_counted"].to_numpy().astype(float),
            entry=rows["entry_t"].to_numpy().astype(float),
        )
        at = np.isin(curve.tenure, ref.surv_times)
        np.testing.assert_array_equal(curve.tenure[at], ref.surv_times)
        np.testing.assert_array_equal(curve.at_risk[at], ref.n_risk)
        np.testing.assert_allclose(curve.survival[at], ref.surv_prob, atol=1e-10, rtol=0)
        np.testing.assert_allclose(curve.se[at], ref.surv_prob_se, atol=1e-10, rtol=0)
