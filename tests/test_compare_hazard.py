"""Restricted mean tenure (churnlife.nelson_aalen.restricted_mean) and its contrasts
(churnlife.compare) against statsmodels: checks beyond tests/test_nelson_aalen.py.

Sources:
* The area under statsmodels SurvfuncRight's Kaplan–Meier curve (with entry= for the demo's late
  entry), and the variance as the double integral of the Greenwood covariance
  Cov(S(u), S(v)) = S(u)·S(v)·σ²(min(u, v)), σ² = (se/S)² from statsmodels' Greenwood SEs
  (Klein & Moeschberger 2003, §4.5: the same quantity as Σ A_j² d_j / (n_j (n_j − d_j))).
* 6-MP placebo group, by hand from the Kaplan–Meier values in ../shared/reference/README.md:
  the area to week 23 is 26/3.
* statsmodels counts a subject at risk at its entry time (entry <= t); churnlife's rule is
  entry < t, so statsmodels gets entry + 0.5 on whole-number tenures.
"""

from __future__ import annotations

import numpy as np
import polars as pl
import pytest
from statsmodels.duration.survfunc import SurvfuncRight

from churnlife.compare import _contrasts, default_horizon
from churnlife.counts import counts_from_durations
from churnlife.nelson_aalen import restricted_mean


@pytest.fixture(scope="module")
def six_mp(reference):
    d = pl.read_csv(reference / "freireich_6mp.csv")
    return d, counts_from_durations(d["time_weeks"], d["event"], cohort=d["group"])


def _km_area_and_variance(sf: SurvfuncRight, horizon: float) -> tuple[float, float]:
    """RMST and its variance from statsmodels' KM and Greenwood SE, by the double integral."""
    t, s, se = sf.surv_times, sf.surv_prob, sf.surv_prob_se
    keep = t <= horizon
    t, s, se = t[keep], s[keep], se[keep]
    edges = np.concatenate([[0.0], t, [horizon]])
    level = np.concatenate([[1.0], s])
    with np.errstate(invalid="ignore", divide="ignore"):
        sig2 = np.concatenate([[0.0], (se / s) ** 2])  # σ²(u) on each piece
    sig2 = np.where(level > 0, sig2, 0.0)  # where S = 0 the piece adds nothing
    width = np.diff(edges)
    i, j = np.meshgrid(np.arange(level.size), np.arange(level.size), indexing="ij")
    cov = level[i] * level[j] * sig2[np.minimum(i, j)]
    return float(level @ width), float(width @ cov @ width)


def test_rmst_6mp_against_statsmodels_km(six_mp):
    d, counts = six_mp
    horizon = 23.0
    table = restricted_mean(counts, horizon).to_polars()
    for group in ("6-MP", "placebo"):
        g = d.filter(pl.col("group") == group)
        sf = SurvfuncRight(g["time_weeks"].to_numpy(), g["event"].to_numpy())
        area, var = _km_area_and_variance(sf, horizon)
        row = table.filter(pl.col("cohort") == group).row(0, named=True)
        assert row["restricted_mean"] == pytest.approx(area, abs=1e-10)
        assert row["se"] ** 2 == pytest.approx(var, rel=1e-10)
    placebo = table.filter(pl.col("cohort") == "placebo")["restricted_mean"][0]
    assert placebo == pytest.approx(26 / 3, abs=1e-12)


def test_rmst_with_late_entry_matches_statsmodels(demo_extract):
    s = demo_extract.spells().filter(
        (pl.col("entry_t") < pl.col("exit_t")) & (pl.col("plan") == "beans_monthly")
    )
    sf = SurvfuncRight(
        s["exit_t"].to_numpy().astype(float),
        s["churn_counted"].to_numpy().astype(float),
        entry=s["entry_t"].to_numpy().astype(float) + 0.5,
    )
    horizon = 24.0
    area, var = _km_area_and_variance(sf, horizon)
    counts = demo_extract.counts.filter(pl.col("cohort") == "beans_monthly")
    row = restricted_mean(counts, horizon).to_polars().row(0, named=True)
    assert row["restricted_mean"] == pytest.approx(area, rel=1e-10)
    assert row["se"] ** 2 == pytest.approx(var, rel=1e-8)


def test_contrasts_table(six_mp):
    """Difference and ratio against the reference, as RestrictedMean.difference/ratio give them;
    independent cohorts, so variances add."""
    _, counts = six_mp
    rm = restricted_mean(counts, 20.0)
    row = _contrasts(rm, "6-MP").row(0, named=True)
    est = dict(zip(rm.cohorts, zip(rm.estimate, rm.se, strict=True), strict=True))
    assert row["cohort"] == "placebo"
    assert row["difference"] == pytest.approx(est["placebo"][0] - est["6-MP"][0])
    assert row["se"] == pytest.approx(np.hypot(est["placebo"][1], est["6-MP"][1]))
    assert row["ratio"] == pytest.approx(est["placebo"][0] / est["6-MP"][0])
    assert row["ratio_lower"] < row["ratio"] < row["ratio_upper"]
    assert row["p"] < 0.001  # a difference of ~8 weeks with an SE of ~2


def test_default_horizon(six_mp):
    _, counts = six_mp
    assert default_horizon(counts, (1, 12, 24)) == 12.0
    assert default_horizon(counts, (40,)) == 23.0  # the placebo group's longest tenure
