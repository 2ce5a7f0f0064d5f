"""Cox proportional hazards on grouped counts (churnlife.cox), checked against outside sources.

Sources:
* 6-MP data (Freireich et al. 1963), ../shared/reference/values.json `cox_breslow`/`cox_efron`:
  statsmodels PHReg on the 42 rows; published Breslow figures (Kleinbaum & Klein 2012 ch. 3) and
  Efron figures (Venables & Ripley, MASS, coxph on `gehan`), both recalled from memory.
* Stanford heart data as shipped by statsmodels, Cox on age (continuous: one pattern per distinct
  age), values.json `heart_statsmodels` (statsmodels PHReg).
* left_truncation_example, values.json (statsmodels PHReg with entry=).
* statsmodels PHReg on the demo's per-customer spells (extract.spells()), with entry, strata and
  both tie rules: the aggregated fit must equal the per-customer fit.
* statsmodels 0.15 PHReg keeps a subject in the risk set at its entry time (entry <= t: its
  risk_exit uses searchsorted(..., side="left")), while churnlife's rule is entry < t <= exit.
  Tenures are whole numbers, so the checks pass PHReg entry + 0.5, which gives exactly our rule.
* The proportional-hazards score test against statsmodels PHReg's score and Hessian on the
  6-MP data split into (start, stop] episodes with a time-varying covariate x·log(t).
"""

from __future__ import annotations

import numpy as np
import polars as pl
import pytest
from scipy import stats
from statsmodels.duration.hazard_regression import PHReg

from churnlife.counts import counts_from_durations
from churnlife.cox import cox_fit, partial_likelihood
from churnlife.errors import UserError

TOL = 1e-6  # README: iterative fits, abs 1e-6


@pytest.fixture(scope="module")
def six_mp_rows(reference):
    return pl.read_csv(reference / "freireich_6mp.csv")


@pytest.fixture(scope="module")
def six_mp(six_mp_rows):
    d = six_mp_rows
    return counts_from_durations(d["time_weeks"], d["event"], cohort=d["group"]).with_columns(
        pl.col("cohort").alias("group")
    )


@pytest.mark.parametrize("ties", ["breslow", "efron"])
def test_6mp_against_reference(six_mp, ref_values, ties):
    ref = ref_values["freireich_6mp"][f"cox_{ties}"]
    # reference coding: placebo = 1, 6-MP = 0 (README conventions)
    r = cox_fit(six_mp, ["group"], ties=ties, reference={"group": "6-MP"})
    assert r.names == ("group: placebo",)
    assert r.params[0] == pytest.approx(ref["coef"], abs=TOL)
    assert r.bse[0] == pytest.approx(ref["se"], abs=TOL)
    assert r.hazard_ratio[0] == pytest.approx(ref["hr"], abs=TOL)
    assert [r.lower[0], r.upper[0]] == pytest.approx(ref["hr_ci95"], abs=TOL)
    assert r.z[0] == pytest.approx(ref["z"], abs=TOL)
    assert r.pvalues[0] == pytest.approx(ref["p_value"], rel=1e-5)
    assert r.loglik == pytest.approx(ref["loglik"], abs=TOL)
    assert r.loglik_null == pytest.approx(ref["loglik_null"], abs=TOL)
    assert r.lr_test == pytest.approx(ref["lr_test"], abs=TOL)
    assert r.wald_test == pytest.approx(ref["wald_test"], abs=TOL)
    assert r.score_test == pytest.approx(ref["score_test"], abs=TOL)
    assert r.converged and r.df == 1
    # published figures (from memory) at their printed precision
    for key, pub in ref["published"].items():
        ours = {"coef": r.params[0], "se": r.bse[0], "hr": r.hazard_ratio[0], "loglik": r.loglik,
                "lr_test": r.lr_test, "wald_test": r.wald_test, "score_test": r.score_test,
                "hr_ci95": [r.lower[0], r.upper[0]]}[key]  # fmt: skip
        digits = pub["printed_decimals"]
        assert np.round(ours, digits) == pytest.approx(np.round(pub["value"], digits), abs=1e-9)


def test_6mp_reference_level_flips_sign(six_mp, ref_values):
    """With 6-MP compared to placebo the coefficient negates and the HR inverts (README)."""
    ref = ref_values["freireich_6mp"]["cox_efron"]
    r = cox_fit(six_mp, ["group"], reference={"group": "placebo"})
    assert r.params[0] == pytest.approx(-ref["coef"], abs=TOL)
    assert r.hazard_ratio[0] == pytest.approx(1 / ref["hr"], rel=TOL)


@pytest.mark.parametrize("ties", ["breslow", "efron"])
def test_heart_age_numeric_covariate(reference, ref_values, ties):
    """Age is continuous: each distinct age is its own covariate pattern."""
    h = pl.read_csv(reference / "heart_statsmodels.csv")
    counts = counts_from_durations(
        h["survival"], h["censors"], cohort=h["age"].cast(pl.String)
    ).with_columns(pl.col("cohort").cast(pl.Float64).alias("age"))
    ref = ref_values["heart_statsmodels"][f"cox_age_{ties}"]
    r = cox_fit(counts, ["age"], ties=ties)
    assert r.params[0] == pytest.approx(ref["coef"], abs=TOL)
    assert r.bse[0] == pytest.approx(ref["se"], abs=TOL)
    assert r.loglik == pytest.approx(ref["loglik"], abs=TOL)


@pytest.mark.parametrize("ties", ["breslow", "efron"])
def test_left_truncation_example(reference, ref_values, ties):
    lt = pl.read_csv(reference / "left_truncation_example.csv")
    ref = ref_values["left_truncation_example"][f"cox_with_entry_{ties}"]

    def counts(entry):
        return counts_from_durations(
            lt["time"], lt["event"], entry=entry, cohort=lt["x"].cast(pl.String)
        ).with_columns(pl.col("cohort").cast(pl.Float64).alias("x"))

    r = cox_fit(counts(lt["entry"]), ["x"], ties=ties)
    assert r.params[0] == pytest.approx(ref["coef"], abs=TOL)
    assert r.bse[0] == pytest.approx(ref["se"], abs=TOL)
    assert r.loglik == pytest.approx(ref["loglik"], abs=TOL)
    assert r.loglik_null == pytest.approx(ref["loglik_null"], abs=TOL)
    # ignoring entry gives the (wrong) coefficient the reference keeps for contrast
    wrong = cox_fit(counts(None), ["x"], ties=ties)
    assert wrong.params[0] == pytest.approx(ref["coef_if_entry_ignored"], abs=TOL)


# ----------------------------------------------------------------- demo: counts vs per-customer


@pytest.fixture(scope="module")
def demo_rows(demo_extract):
    """Per-customer spells that are at risk somewhere (entry_t < exit_t)."""
    return demo_extract.spells().filter(pl.col("entry_t") < pl.col("exit_t"))


def _dummies(s: pl.DataFrame, column: str, reference: str) -> tuple[np.ndarray, list[str]]:
    levels = sorted(lv for lv in s[column].unique().to_list() if lv != reference)
    x = np.column_stack([(s[column] == lv).to_numpy().astype(float) for lv in levels])
    return x, levels


@pytest.mark.parametrize("ties", ["breslow", "efron"])
def test_counts_fit_equals_phreg_on_rows(demo_extract, demo_rows, ties):
    """plan + channel, with late entry: statsmodels PHReg(exit_t, X, status, entry=entry_t)."""
    s = demo_rows
    counts = demo_extract.counts_by(["plan", "channel"])
    ours = cox_fit(counts, ["plan", "channel"], ties=ties, check_ph=False)
    refs = {t: lv for t, _, lv in ours.levels}
    xp, _ = _dummies(s, "plan", refs["plan"])
    xc, _ = _dummies(s, "channel", refs["channel"])
    model = PHReg(
        s["exit_t"].to_numpy().astype(float),
        np.column_stack([xp, xc]),
        status=s["churned"].to_numpy().astype(float),
        entry=s["entry_t"].to_numpy().astype(float) + 0.5,  # entry < t on whole tenures
        ties=ties,
    )
    fit = model.fit()
    np.testing.assert_allclose(ours.params, fit.params, rtol=1e-8, atol=1e-8)
    np.testing.assert_allclose(ours.bse, fit.bse, rtol=1e-8)
    assert ours.loglik == pytest.approx(fit.llf, rel=1e-10)
    assert ours.loglik_null == pytest.approx(model.loglike(np.zeros(5)), rel=1e-10)
    # score test at 0 from statsmodels' own score and Hessian
    g0, h0 = model.score(np.zeros(5)), model.hessian(np.zeros(5))
    assert ours.score_test == pytest.approx(float(g0 @ np.linalg.solve(-h0, g0)), rel=1e-8)


def test_stratified_counts_fit_equals_phreg(demo_extract, demo_rows):
    """Plan as covariate, a baseline hazard per channel (strata), late entry, Efron ties."""
    s = demo_rows
    counts = demo_extract.counts_by(["plan", "channel"])
    ours = cox_fit(counts, ["plan"], strata="channel", check_ph=False)
    xp, _ = _dummies(s, "plan", ours.levels[0][2])
    fit = PHReg(
        s["exit_t"].to_numpy().astype(float),
        xp,
        status=s["churned"].to_numpy().astype(float),
        entry=s["entry_t"].to_numpy().astype(float) + 0.5,  # entry < t on whole tenures
        strata=s["channel"].to_numpy(),
        ties="efron",
    ).fit()
    np.testing.assert_allclose(ours.params, fit.params, rtol=1e-8, atol=1e-8)
    np.testing.assert_allclose(ours.bse, fit.bse, rtol=1e-8)
    assert ours.loglik == pytest.approx(fit.llf, rel=1e-10)


def test_baseline_cumulative_hazard_matches_phreg(demo_extract, demo_rows):
    """statsmodels' baseline_cumulative_hazard is one step behind (its cumsum(h0) − h0, see the
    reference README), so ours must equal theirs plus the current jump."""
    s = demo_rows
    ours = cox_fit(demo_extract.counts, ["plan"], ties="breslow", check_ph=False)
    xp, _ = _dummies(s, "plan", ours.levels[0][2])
    model = PHReg(
        s["exit_t"].to_numpy().astype(float),
        xp,
        status=s["churned"].to_numpy().astype(float),
        entry=s["entry_t"].to_numpy().astype(float) + 0.5,  # entry < t on whole tenures
        ties="breslow",
    )
    times, behind, _ = model.baseline_cumulative_hazard(ours.params)[0]
    np.testing.assert_allclose(ours.baseline["tenure"], times)
    jump = ours.baseline["hazard"].to_numpy()
    np.testing.assert_allclose(ours.baseline["cumhaz"], behind + jump, rtol=1e-9)


def _split_episodes(time, event, x, cuts):
    """(start, stop] episodes cut at every churn time, for time-varying covariates."""
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
def test_ph_check_matches_phreg_time_varying(six_mp, six_mp_rows, ties):
    """The score test of θ = 0 in β(t) = β + θ·log t, from statsmodels PHReg's own score and
    Hessian on episodes with covariates (x, x·log stop) at (β̂, 0)."""
    r = cox_fit(six_mp, ["group"], ties=ties, reference={"group": "6-MP"})
    d = six_mp_rows
    x = (d["group"] == "placebo").to_numpy().astype(float)
    t = d["time_weeks"].to_numpy().astype(float)
    e = d["event"].to_numpy().astype(float)
    cuts = sorted(set(t[e == 1]))
    start, stop, status, xs = _split_episodes(t, e, x, cuts)
    model = PHReg(
        stop, np.column_stack([xs, xs * np.log(stop)]), status=status, entry=start + 0.5, ties=ties
    )
    # the split data give the same fit as the rows
    base = PHReg(stop, xs[:, None], status=status, entry=start + 0.5, ties=ties).fit()
    assert base.params[0] == pytest.approx(r.params[0], abs=1e-8)
    at = np.array([r.params[0], 0.0])
    g, h = model.score(at), model.hessian(at)
    expected = float(g @ np.linalg.solve(-h, g))
    table = r.ph_check.table
    assert table["chi_square"][0] == pytest.approx(expected, rel=1e-8)
    assert table["p"][0] == pytest.approx(stats.chi2.sf(expected, 1), rel=1e-8)


def test_ph_check_flags_crossing_hazards():
    """Constructed: group b's hazard is 4× group a's in tenures 1–3 and ¼ afterwards, so the
    ratio is far from constant and the check must say so (by construction)."""
    rng = np.random.default_rng(5)
    n = 4000
    g = rng.integers(0, 2, n)
    early = rng.exponential(1 / np.where(g == 1, 0.4, 0.1))
    late = 3 + rng.exponential(1 / np.where(g == 1, 0.025, 0.1))
    t = np.where(early < 3, early, late)
    exit_t = np.minimum(np.ceil(t), 24)
    churned = t <= 24
    counts = counts_from_durations(exit_t, churned, cohort=np.where(g == 1, "b", "a"))
    r = cox_fit(counts.with_columns(pl.col("cohort").alias("arm")), ["arm"])
    assert r.ph_check.table["p"][0] < 1e-6
    assert "change with tenure" in r.ph_check.verdict


def test_gradient_and_hessian_are_the_derivatives(demo_extract):
    """The analytic gradient and Hessian against central differences of the likelihood, for
    both tie rules (a numerical check, no outside source)."""
    from churnlife.cox import _design

    design = _design(demo_extract.counts_by(["plan", "channel"]), ["plan", "channel"], None, {})
    beta = np.array([0.3, -0.2, 0.1, 0.05, -0.1])
    for ties in ("breslow", "efron"):
        _, grad, hess = partial_likelihood(design.x, design.n, design.d, design.group, beta, ties)
        eps = 1e-5
        num_g, num_h = np.zeros(5), np.zeros((5, 5))
        for i in range(5):
            step = np.zeros(5)
            step[i] = eps
            up = partial_likelihood(design.x, design.n, design.d, design.group, beta + step, ties)
            dn = partial_likelihood(design.x, design.n, design.d, design.group, beta - step, ties)
            num_g[i] = (up[0] - dn[0]) / (2 * eps)
            num_h[i] = (up[1] - dn[1]) / (2 * eps)
        np.testing.assert_allclose(grad, num_g, rtol=1e-6, atol=1e-4)
        np.testing.assert_allclose(hess, num_h, rtol=1e-6, atol=1e-3)


def test_level_without_churn_is_a_user_error():
    """A level where nobody churns has an infinite hazard ratio: a clear message, not a
    meaningless estimate."""
    counts = counts_from_durations(
        [1, 2, 3, 4, 5, 6, 2, 4, 6], [1, 1, 0, 1, 1, 0, 0, 0, 0], cohort=list("aaaaaabbb")
    ).with_columns(pl.col("cohort").alias("arm"))
    with pytest.raises(UserError, match="infinite hazard ratio"):
        cox_fit(counts, ["arm"], reference={"arm": "a"})


def test_missing_covariate_column_is_a_user_error(six_mp):
    with pytest.raises(UserError, match="no column"):
        cox_fit(six_mp, ["channel"])
