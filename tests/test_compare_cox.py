"""Cox on counts (churnlife.cox) and the comparison bundle (churnlife.compare): checks beyond
tests/test_cox.py, against statsmodels PHReg.

Sources:
* statsmodels PHReg's score and Hessian at β = 0 on the demo's per-customer spells (score test),
  and its baseline_cumulative_hazard with late entry.
* statsmodels PHReg fitted on the 6-MP data (Freireich et al. 1963, ../shared/reference) split
  into (start, stop] episodes with a time-varying covariate x·log(stop): the likelihood-ratio
  statistic of the covariate × log-tenure model, which churnlife.cox.proportionality_check
  computes from the counts.
* statsmodels 0.15 PHReg keeps a subject in the risk set at its entry time (entry <= t: its
  risk_exit uses searchsorted(..., side="left")), while churnlife's rule is entry < t <= exit.
  Tenures are whole numbers, so the checks pass PHReg entry + 0.5, which gives exactly our rule.
"""

from __future__ import annotations

import numpy as np
import polars as pl
import pytest
from statsmodels.duration.hazard_regression import PHReg

from churnlife.compare import compare_cohorts, hazard_ratio_table
from churnlife.counts import counts_from_durations
from churnlife.cox import cox_fit, proportionality_check
from churnlife.errors import UserError


@pytest.fixture(scope="module")
def demo_rows(demo_extract):
    """Per-customer spells that are at risk somewhere (entry_t < exit_t)."""
    return demo_extract.spells().filter(pl.col("entry_t") < pl.col("exit_t"))


def _dummies(s: pl.DataFrame, column: str, reference: str) -> np.ndarray:
    levels = sorted(lv for lv in s[column].unique().to_list() if lv != reference)
    return np.column_stack([(s[column] == lv).to_numpy().astype(float) for lv in levels])


def _phreg(s: pl.DataFrame, exog: np.ndarray, ties: str) -> PHReg:
    return PHReg(
        s["exit_t"].to_numpy().astype(float),
        exog,
        status=s["churn_counted"].to_numpy().astype(float),
        entry=s["entry_t"].to_numpy().astype(float) + 0.5,  # entry < t on whole tenures
        ties=ties,
    )


@pytest.mark.parametrize("ties", ["breslow", "efron"])
def test_score_test_matches_phreg_on_rows(demo_extract, demo_rows, ties):
    """plan + channel with late entry: the score test at β = 0 from PHReg's own score and
    Hessian, and the fit itself, to 1e-8 relative."""
    s = demo_rows
    counts = demo_extract.counts_by(["plan", "channel"])
    ref = {"plan": "beans_monthly", "channel": "organic_search"}
    ours = cox_fit(counts, ["plan", "channel"], ties=ties, reference=ref)
    model = _phreg(
        s,
        np.column_stack([_dummies(s, "plan", ref["plan"]), _dummies(s, "channel", ref["channel"])]),
        ties,
    )
    fit = model.fit()
    np.testing.assert_allclose(ours.coef, fit.params, rtol=1e-8, atol=1e-10)
    np.testing.assert_allclose(ours.se, fit.bse, rtol=1e-8)
    g0, h0 = model.score(np.zeros(5)), model.hessian(np.zeros(5))
    expected = float(g0 @ np.linalg.solve(-h0, g0))
    assert ours.score_test.statistic == pytest.approx(expected, rel=1e-8)
    assert ours.lr_test.statistic == pytest.approx(
        2 * (fit.llf - model.loglike(np.zeros(5))), rel=1e-8
    )


def test_baseline_with_late_entry_matches_phreg(demo_extract, demo_rows):
    """statsmodels' baseline_cumulative_hazard is one step behind (its cumsum(h0) − h0, see the
    reference README), so ours must equal theirs plus the current jump."""
    s = demo_rows
    ours = cox_fit(
        demo_extract.counts, ["plan"], ties="breslow", reference={"plan": "beans_monthly"}
    )
    model = _phreg(s, _dummies(s, "plan", "beans_monthly"), "breslow")
    times, behind, _ = model.baseline_cumulative_hazard(ours.coef)[0]
    base = ours.baseline_cumulative_hazard().filter(
        pl.col("tenure").cast(pl.Float64).is_in(times.tolist())
    )
    h = base["cumulative_hazard"].to_numpy()
    jumps = np.diff(np.concatenate([[0.0], h]))
    np.testing.assert_allclose(base["tenure"], times)
    np.testing.assert_allclose(h - jumps, behind, rtol=1e-9, atol=1e-12)


def _split_episodes(time, event, x, cuts):
    """(start, stop] episodes cut at every churn time, for time-varying covariates (42 rows of
    reference data: a test helper, not churnlife code)."""
    starts, stops, status, xs = [], [], [], []
    for ti, ei, xi in zip(time, event, x, strict=True):
        lo = 0.0
        for c in [c for c in cuts if c < ti] + [ti]:
            starts.append(lo)
            stops.append(c)
            status.append(ei if c == ti else 0.0)
            xs.append(xi)
            lo = c
    return (np.array(a, dtype=float) for a in (starts, stops, status, xs))


@pytest.mark.parametrize("ties", ["breslow", "efron"])
def test_ph_check_matches_phreg_time_varying(reference, ties):
    d = pl.read_csv(reference / "freireich_6mp.csv")
    counts = counts_from_durations(d["time_weeks"], d["event"], cohort=d["group"]).with_columns(
        pl.col("cohort").alias("group")
    )
    fit = cox_fit(counts, ["group"], ties=ties, reference={"group": "6-MP"})
    check = proportionality_check(fit, counts, ["group"])
    x = (d["group"] == "placebo").to_numpy().astype(float)
    t = d["time_weeks"].to_numpy().astype(float)
    e = d["event"].to_numpy().astype(float)
    start, stop, status, xs = _split_episodes(t, e, x, sorted(set(t[e == 1])))
    base = PHReg(stop, xs[:, None], status=status, entry=start + 0.5, ties=ties).fit()
    wide = PHReg(
        stop, np.column_stack([xs, xs * np.log(stop)]), status=status, entry=start + 0.5, ties=ties
    ).fit()
    assert base.params[0] == pytest.approx(fit.coef[0], abs=1e-8)  # the split data are the same
    assert check.interaction[0] == pytest.approx(wide.params[1], abs=1e-6)
    assert check.se[0] == pytest.approx(wide.bse[1], abs=1e-6)
    assert check.lr.statistic == pytest.approx(2 * (wide.llf - base.llf), abs=1e-6)


def test_ph_check_flags_crossing_hazards():
    """Constructed: arm b's hazard is 4× arm a's in tenures 1–3 and ¼ of it afterwards, so the
    ratio is far from constant and the check must say so (by construction)."""
    rng = np.random.default_rng(5)
    n = 4000
    g = rng.integers(0, 2, n)
    early = rng.exponential(1 / np.where(g == 1, 0.4, 0.1))
    late = 3 + rng.exponential(1 / np.where(g == 1, 0.025, 0.1))
    t = np.where(early < 3, early, late)
    counts = counts_from_durations(
        np.minimum(np.ceil(t), 24), t <= 24, cohort=np.where(g == 1, "b", "a")
    ).with_columns(pl.col("cohort").alias("arm"))
    fit = cox_fit(counts, ["arm"])
    check = proportionality_check(fit, counts, ["arm"])
    assert check.lr.pvalue < 1e-6 and "change with tenure" in check.verdict


def test_comparison_bundle_on_demo(demo_extract):
    """compare_cohorts with strata: its Cox part equals a direct stratified fit, the reference
    level is the largest plan, and the hazard-ratio table spells levels out."""
    cmp = compare_cohorts(demo_extract, by=["plan"], strata="channel", horizon=12)
    direct = cox_fit(
        demo_extract.counts_by(["plan", "channel"]),
        ["plan"],
        strata="channel",
        reference={"plan": "beans_monthly"},
    )
    np.testing.assert_allclose(cmp.cox.coef, direct.coef, rtol=1e-12)
    table = hazard_ratio_table(direct)
    assert table["reference"].to_list() == ["beans_monthly", "beans_monthly"]
    assert set(table["level"]) == {"beans_annual", "beans_plus_monthly"}
    assert cmp.stratified is not None and len(cmp.stratified.strata) == 4
    assert cmp.rmst.horizon == 12
    assert cmp.rmst_contrasts["reference"].unique().to_list() == ["beans_monthly"]
    assert {"hazard_ratios", "cox_ph_check", "churn_by_cause", "retention_heatmap"} <= set(
        cmp.tables()
    )


def test_trend_on_signup_quarters(demo_extract):
    """Time-ordered cohorts get the trend test; the quarters' log-rank df is the generalised
    inverse's rank when some quarters share no churn tenure."""
    cmp = compare_cohorts(demo_extract, by=["signup_quarter"])
    assert cmp.trend is not None
    assert "trend across signup order" in cmp.tests["test"].to_list()
    assert cmp.heatmap_by == "signup_quarter" and cmp.heatmap["tenure"].n_unique() <= 48
    # pairs never at risk together are untested (NaN); Holm/Bonferroni count the tested pairs
    # only, as statsmodels multipletests does on the finite p-values
    from statsmodels.stats.multitest import multipletests

    p = cmp.pairwise["p"].to_numpy()
    ok = np.isfinite(p)
    assert 0 < ok.sum() < p.size
    holm = cmp.pairwise["p_holm"].to_numpy()
    np.testing.assert_allclose(holm[ok], multipletests(p[ok], method="holm")[1], rtol=1e-12)
    assert np.isnan(holm[~ok]).all()


def test_bad_options_are_user_errors(demo_extract):
    with pytest.raises(UserError, match="Did you mean"):
        compare_cohorts(demo_extract, by=["chanel"])
    with pytest.raises(UserError, match="also in --by"):
        compare_cohorts(demo_extract, by=["plan"], strata="plan")
    with pytest.raises(UserError, match="horizon"):
        compare_cohorts(demo_extract, by=["plan"], horizon=10_000)
