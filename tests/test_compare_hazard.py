"""Nelson–Aalen and restricted mean tenure (churnlife.hazard) against outside sources.

Sources:
* 6-MP data, ../shared/reference/values.json `nelson_aalen_6mp` (cumsum(d/n), cumsum(d/n²) on
  statsmodels SurvfuncRight's risk sets) and its published figures (Klein & Moeschberger 2003,
  §4.2, recalled from memory).
* RMST: the area under statsmodels SurvfuncRight's Kaplan–Meier curve (with entry= for the demo),
  and its variance as the double integral of the Greenwood covariance
  Cov(S(u), S(v)) = S(u)·S(v)·σ²(min(u, v)), σ² = (se/S)² from statsmodels' Greenwood SEs
  (Klein & Moeschberger 2003, §4.5: the two forms are the same quantity).
"""

from __future__ import annotations

import numpy as np
import polars as pl
import pytest
from statsmodels.duration.survfunc import SurvfuncRight

from churnlife.counts import counts_from_durations
from churnlife.errors import UserError
from churnlife.hazard import default_horizon, nelson_aalen, restricted_mean


@pytest.fixture(scope="module")
def six_mp(reference):
    d = pl.read_csv(reference / "freireich_6mp.csv")
    return d, counts_from_durations(d["time_weeks"], d["event"], cohort=d["group"])


def test_nelson_aalen_6mp(six_mp, ref_values):
    _, counts = six_mp
    ref = ref_values["freireich_6mp"]["nelson_aalen_6mp"]
    na = nelson_aalen(counts)
    part = na.table.filter((pl.col("cohort") == "6-MP") & pl.col("tenure").is_in(ref["times"]))
    np.testing.assert_allclose(part["cumhaz"], ref["cumhaz"], atol=ref["tol_abs"], rtol=0)
    np.testing.assert_allclose(part["variance"], ref["var_aalen"], atol=ref["tol_abs"], rtol=0)
    np.testing.assert_allclose(na.at("6-MP", ref["times"]), ref["cumhaz"], atol=ref["tol_abs"])
    pub = ref["published"]["cumhaz"]
    np.testing.assert_allclose(
        np.round(part["cumhaz"].to_numpy(), pub["printed_decimals"]), pub["value"], atol=1e-12
    )
    assert (part["lower"] < part["cumhaz"]).all() and (part["upper"] > part["cumhaz"]).all()


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
    area = float(level @ width)
    i, j = np.meshgrid(np.arange(level.size), np.arange(level.size), indexing="ij")
    cov = level[i] * level[j] * sig2[np.minimum(i, j)]
    return area, float(width @ cov @ width)


def test_rmst_6mp_against_statsmodels_km(six_mp):
    d, counts = six_mp
    horizon = 23.0
    r = restricted_mean(counts, horizon)
    for group in ("6-MP", "placebo"):
        g = d.filter(pl.col("group") == group)
        sf = SurvfuncRight(g["time_weeks"].to_numpy(), g["event"].to_numpy())
        area, var = _km_area_and_variance(sf, horizon)
        row = r.estimates.filter(pl.col("cohort") == group)
        assert row["rmst"][0] == pytest.approx(area, abs=1e-10)
        assert row["se"][0] ** 2 == pytest.approx(var, rel=1e-10)
    # placebo by hand: the KM steps at 1, 2, 3, ... 23 (values.json km_placebo); S hits 0 at 23,
    # area = Σ S(t_{j-1})·(t_j − t_{j-1}) = 8.6667 (26/3 exactly, from the listed survival)
    assert r.estimates.filter(pl.col("cohort") == "placebo")["rmst"][0] == pytest.approx(26 / 3)


def test_rmst_contrasts(six_mp):
    _, counts = six_mp
    r = restricted_mean(counts, 20.0, reference="6-MP")
    est = {c: (m, s) for c, m, s in r.estimates.select("cohort", "rmst", "se").iter_rows()}
    row = r.contrasts.row(0, named=True)
    assert row["cohort"] == "placebo"
    assert row["difference"] == pytest.approx(est["placebo"][0] - est["6-MP"][0])
    assert row["se"] == pytest.approx(np.hypot(est["placebo"][1], est["6-MP"][1]))
    assert row["ratio"] == pytest.approx(est["placebo"][0] / est["6-MP"][0])
    assert row["ratio_lower"] < row["ratio"] < row["ratio_upper"]
    assert row["p"] < 0.001  # the difference is ~9 weeks with an SE of ~2


def test_rmst_with_late_entry_matches_statsmodels(demo_extract):
    """Demo spells with late entry, one plan: statsmodels SurvfuncRight(entry=) gives the curve.
    statsmodels counts a subject at risk at its entry time (entry <= t); churnlife's rule is
    entry < t, so statsmodels gets entry + 0.5 on these whole-number tenures."""
    s = demo_extract.spells().filter(
        (pl.col("entry_t") < pl.col("exit_t")) & (pl.col("plan") == "beans_monthly")
    )
    sf = SurvfuncRight(
        s["exit_t"].to_numpy().astype(float),
        s["churned"].to_numpy().astype(float),
        entry=s["entry_t"].to_numpy().astype(float) + 0.5,
    )
    horizon = 24.0
    area, var = _km_area_and_variance(sf, horizon)
    counts = demo_extract.counts.filter(pl.col("cohort") == "beans_monthly")
    row = restricted_mean(counts, horizon).estimates.row(0, named=True)
    assert row["rmst"] == pytest.approx(area, rel=1e-10)
    assert row["se"] ** 2 == pytest.approx(var, rel=1e-8)


def test_horizon_past_the_data_is_a_user_error(six_mp):
    _, counts = six_mp
    with pytest.raises(UserError, match="past the longest tenure"):
        restricted_mean(counts, 30.0)
    assert default_horizon(counts, (1, 12, 24)) == 12.0
    assert default_horizon(counts, (40,)) == 23.0
