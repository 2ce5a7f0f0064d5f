"""Churn by cause (churnlife.causes) against outside sources.

Sources:
* competing_risks_example, ../shared/reference/values.json `aalen_johansen` (statsmodels
  CumIncidenceRight: CIFs and its delta-method SEs, the formula churnlife implements), and the
  exact rationals the reference README gives (cause 1 at t = 9 is 13/24, cause 2 at t = 7 is
  139/480).
* statsmodels CumIncidenceRight on the demo's per-customer spells. It has no entry=, so the check
  uses spells that began at tenure 0 (counted with churnlife.counts.counts_from_durations).
* Cause-specific cumulative hazards: cumsum(d_k / n) on statsmodels SurvfuncRight's risk sets
  with the other cause treated as censoring (Prentice et al. 1978).
"""

from __future__ import annotations

import numpy as np
import polars as pl
import pytest
from statsmodels.duration.survfunc import CumIncidenceRight, SurvfuncRight

from churnlife.causes import UNRECORDED, cumulative_incidence
from churnlife.counts import counts_from_durations

CAUSE_OF_STATUS = {0: None, 1: "voluntary", 2: "involuntary"}


@pytest.fixture(scope="module")
def example(reference):
    d = pl.read_csv(reference / "competing_risks_example.csv")
    cause = d["status"].replace_strict(CAUSE_OF_STATUS, return_dtype=pl.String)
    return counts_from_durations(d["time"], d["status"] > 0, cause=cause)


def test_competing_risks_example(example, ref_values):
    ref = ref_values["competing_risks_example"]["aalen_johansen"]
    r = cumulative_incidence(example)
    for k, cause in ((1, "voluntary"), (2, "involuntary")):
        part = r.incidence.filter((pl.col("cause") == cause) & pl.col("tenure").is_in(ref["times"]))
        np.testing.assert_allclose(part["cif"], ref[f"cif_cause{k}"], atol=ref["tol_abs"], rtol=0)
        np.testing.assert_allclose(part["se"], ref[f"se_cause{k}"], atol=ref["tol_abs"], rtol=0)
    at = r.at(9).sort("cause")
    assert at.filter(pl.col("cause") == "voluntary")["cif"][0] == pytest.approx(13 / 24, abs=1e-12)
    assert r.at(7).filter(pl.col("cause") == "involuntary")["cif"][0] == pytest.approx(
        139 / 480, abs=1e-12
    )


def test_causes_and_retention_add_to_one(example):
    """Aalen–Johansen: F_vol(t) + F_invol(t) + S(t) = 1 (S the all-cause Kaplan–Meier)."""
    from churnlife.km import kaplan_meier

    r = cumulative_incidence(example)
    total = r.incidence.group_by("tenure").agg(pl.col("cif").sum()).sort("tenure")
    km = kaplan_meier(example).curves[0]
    np.testing.assert_allclose(total["cif"] + km.at(total["tenure"].to_numpy()), 1.0, atol=1e-12)


@pytest.fixture(scope="module")
def demo_new(demo_extract):
    s = demo_extract.spells().filter(~pl.col("late_entry"))
    counts = counts_from_durations(
        s["exit_t"], s["churn_counted"], cohort=s["plan"], cause=s["cause"]
    )
    return s, counts


def test_matches_statsmodels_on_demo(demo_new):
    s, counts = demo_new
    r = cumulative_incidence(counts)
    for plan in s["plan"].unique().to_list():
        g = s.filter(pl.col("plan") == plan)
        status = (
            g.select(
                pl.when(~pl.col("churn_counted"))
                .then(0)
                .when(pl.col("cause") == "voluntary")
                .then(1)
                .otherwise(2)
            )
            .to_series()
            .to_numpy()
        )
        ref = CumIncidenceRight(g["exit_t"].to_numpy().astype(float), status)
        for k, cause in ((0, "voluntary"), (1, "involuntary")):
            ours = r.incidence.filter(
                (pl.col("cohort") == plan)
                & (pl.col("cause") == cause)
                & pl.col("tenure").is_in(ref.times.tolist())
            ).sort("tenure")
            np.testing.assert_allclose(ours["tenure"], ref.times)
            np.testing.assert_allclose(ours["cif"], ref.cinc[k], rtol=1e-10, atol=1e-12)
            ok = np.isfinite(ref.cinc_se[k])
            np.testing.assert_allclose(
                ours["se"].to_numpy()[ok], ref.cinc_se[k][ok], rtol=1e-8, atol=1e-12
            )


def test_cause_specific_hazard_matches_statsmodels(demo_new):
    s, counts = demo_new
    r = cumulative_incidence(counts)
    g = s.filter(pl.col("plan") == "beans_monthly")
    invol = (g["churn_counted"] & (g["cause"] == "involuntary")).to_numpy().astype(float)
    sf = SurvfuncRight(g["exit_t"].to_numpy().astype(float), invol)
    expected = np.cumsum(sf.n_events / sf.n_risk)
    ours = r.hazards.filter(
        (pl.col("cohort") == "beans_monthly")
        & (pl.col("cause") == "involuntary")
        & pl.col("tenure").is_in(sf.surv_times.tolist())
    ).sort("tenure")
    np.testing.assert_allclose(ours["cumhaz"], expected, rtol=1e-10)


def test_shares_and_unrecorded_cause(example):
    """Churn without a recorded cause becomes its own cause, so shares still add to 1."""
    partial = example.with_columns(pl.lit(0).alias("churned_involuntary"))
    r = cumulative_incidence(partial)
    assert UNRECORDED in r.causes
    shares = r.shares(9)
    assert shares["share"].sum() == pytest.approx(1.0)
    assert shares.filter(pl.col("cause") == UNRECORDED)["churned"][0] == 3  # the 3 status-2 rows
    assert shares["share_of_incidence"].sum() == pytest.approx(1.0)
