"""Covariate forms (PH, AFT) and the time-varying price covariate.

Sources
* PH and AFT Weibull with a binary covariate and late entry: a direct per-customer likelihood
  written with scipy.stats.weibull_min (each customer's log(S(a|x) - S(b|x)) - log S(entry|x)),
  maximised by scipy.optimize; same MLE to 1e-6.
* Piecewise hazard with the price covariate: statsmodels GLM Poisson with a log-exposure offset on
  the same band × price-state table (Holford 1980).
* queries/episodes.sql on the demo: splitting spells at price increases must not change the
  cohort's totals (churns, exposure); only beans_monthly spells get the increase (demo/truth.json
  price_change.plan); and the estimated hazard ratio's interval covers the ratio implied by the
  generator's truth for the all-cause hazard (voluntary hazard × 1.35, involuntary unchanged),
  about 1.14 at tenures 20–40 (computed from truth.json in the test).
"""

from __future__ import annotations

import json

import numpy as np
import polars as pl
import pytest
from scipy import optimize, stats

from churnlife.counts import counts_from_durations
from churnlife.models.base import grouped_from_counts
from churnlife.models.covariates import (
    episodes_counts,
    fit_piecewise_price,
    fit_price_ph,
    fit_regression,
)


def _sample(form: str, seed: int = 4, n: int = 6000):
    rng = np.random.default_rng(seed)
    x = (rng.random(3 * n) < 0.5).astype(float)
    scale, shape, beta = 15.0, 0.8, 0.4
    u = rng.weibull(shape, 3 * n) * scale
    # PH: H(t|x) = (t/scale)^k e^{βx} → T = scale e^{-βx/k} W; AFT: T = e^{βx} T0
    t = u * np.exp(-beta * x / shape) if form == "ph" else u * np.exp(beta * x)
    entry = np.where(rng.random(3 * n) < 0.3, rng.integers(1, 8, 3 * n), 0).astype(float)
    keep = t > entry
    t, entry, x = t[keep][:n], entry[keep][:n], x[keep][:n]
    cens = entry + rng.uniform(0, 40, n)
    exit_exact = np.minimum(t, cens)
    died = t <= cens
    exit_t = np.where(died, np.ceil(exit_exact), np.floor(exit_exact))
    return entry, exit_t, died, x


@pytest.mark.parametrize("form", ["ph", "aft"])
def test_regression_matches_per_customer_likelihood(form):
    entry, exit_t, died, x = _sample(form)
    cells = []
    for value in (0.0, 1.0):
        sel = x == value
        counts = counts_from_durations(exit_t[sel], died[sel], entry=entry[sel])
        cells.append((grouped_from_counts(counts), value))
    fit = fit_regression(cells, ("x",), "weibull", form)
    assert fit.convergence.converged

    def logsf(t, p):
        scale, shape, b = np.exp(p[0]), np.exp(p[1]), p[2]
        if form == "ph":
            return stats.weibull_min.logsf(t, shape, scale=scale) * np.exp(b * x)
        return stats.weibull_min.logsf(t * np.exp(-b * x), shape, scale=scale)

    def negll(p):
        with np.errstate(all="ignore"):
            a, b = logsf(exit_t - 1, p), logsf(exit_t, p)
            churn = a + np.log(-np.expm1(b - a))
            val = -np.sum(np.where(died, churn, b) - logsf(entry, p))
        return val if np.isfinite(val) else 1e100

    res = optimize.minimize(
        negll,
        [np.log(12.0), 0.0, 0.0],
        method="Nelder-Mead",
        options={"xatol": 1e-11, "fatol": 1e-12, "maxiter": 20_000},
    )
    res = optimize.minimize(negll, res.x, method="BFGS", options={"gtol": 1e-9})
    assert fit.loglik == pytest.approx(-res.fun, rel=1e-9)
    np.testing.assert_allclose(fit.params, res.x, rtol=1e-6, atol=1e-7)
    # recovery of the true effect 0.4 (log scale; the grouping's small bias, measured in
    # benchmarks/coverage_models.py, is inside this tolerance)
    assert fit.effects()["log_ratio"][0] == pytest.approx(0.4, abs=0.1)


def test_regression_refuses_a_constant_covariate():
    from churnlife.errors import UserError

    entry, exit_t, died, _ = _sample("ph")
    data = grouped_from_counts(counts_from_durations(exit_t, died, entry=entry))
    with pytest.raises(UserError, match="do not vary"):
        fit_regression([(data, 1.0), (data, 1.0)], ("x",))


@pytest.fixture(scope="module")
def demo_episodes(demo_extract, demo_config):
    return episodes_counts(demo_extract, demo_config)


def test_episodes_keep_the_cohort_totals(demo_extract, demo_episodes):
    plain = demo_extract.counts.group_by("cohort").agg(
        pl.col("churned").sum(), pl.col("exposure").sum()
    )
    split = demo_episodes.group_by("cohort").agg(pl.col("churned").sum(), pl.col("exposure").sum())
    both = plain.join(split, on="cohort", suffix="_split")
    assert both.height == plain.height
    np.testing.assert_array_equal(both["churned"], both["churned_split"])
    np.testing.assert_allclose(both["exposure"], both["exposure_split"], rtol=1e-10)
    after = demo_episodes.filter(pl.col("price_state") == "after increase")
    assert after["cohort"].unique().to_list() == ["beans_monthly"]
    assert after["entered"].sum() > 100
    # a piece after the increase enters at the tenure the change happened, never at 0
    assert after.filter(pl.col("entered") > 0)["tenure"].min() >= 1


def test_price_effect_recovers_the_truth(demo_episodes):
    from tests.conftest import ROOT

    truth = json.loads((ROOT / "demo" / "truth.json").read_text())
    p = truth["plans"]["beans_monthly"]
    mix = truth["acquisition"]["channel_mix"]
    mult = truth["voluntary_hazard"]["channel_multipliers"]
    hr_vol = truth["price_change"]["hazard_ratio"]
    implied = []
    for k in (20.0, 30.0, 40.0):  # tenures of the spells that got the increase
        alive = vol = 0.0
        for ch, share in mix.items():
            su = np.exp(-mult[ch] * (p["lambda"] * k) ** p["gamma"])
            step = (p["lambda"] * (k + 1)) ** p["gamma"] - (p["lambda"] * k) ** p["gamma"]
            alive += share * (p["cure_share"] + (1 - p["cure_share"]) * su)
            vol += share * (1 - p["cure_share"]) * su * (1 - np.exp(-mult[ch] * step))
        hv, hi = vol / alive, p["p_fail"] * (1 - p["p_recover"])
        implied.append((hr_vol * hv + hi) / (hv + hi))
    ph = fit_price_ph(demo_episodes, "beans_monthly").effects()
    assert ph["lower"][0] < min(implied) and max(implied) < ph["upper"][0]
    pw = fit_piecewise_price(demo_episodes, "beans_monthly").effect()
    assert pw["lower"] < min(implied) and max(implied) < pw["upper"]


def test_piecewise_price_matches_poisson_glm(demo_episodes):
    import statsmodels.api as sm

    fit = fit_piecewise_price(demo_episodes, "beans_monthly", cuts=[3, 12, 24])
    part = demo_episodes.filter(pl.col("cohort") == "beans_monthly").with_columns(
        band=pl.when(pl.col("tenure") <= 3)
        .then(pl.lit("a"))
        .when(pl.col("tenure") <= 12)
        .then(pl.lit("b"))
        .when(pl.col("tenure") <= 24)
        .then(pl.lit("c"))
        .otherwise(pl.lit("d")),
        after=(pl.col("price_state") == "after increase").cast(pl.Float64),
    )
    table = (
        part.filter(pl.col("tenure") >= 1)
        .group_by("band", "after")
        .agg(pl.col("churned").sum(), pl.col("exposure").sum())
        .filter(pl.col("exposure") > 0)
        .sort("band", "after")
    )
    design = np.column_stack(
        [table["band"].cast(pl.String) == b for b in "abcd"] + [table["after"].to_numpy()]
    ).astype(float)
    glm = sm.GLM(
        table["churned"].to_numpy(),
        design,
        family=sm.families.Poisson(),
        offset=np.log(table["exposure"].to_numpy()),
    ).fit(tol=1e-12)
    np.testing.assert_allclose(fit.params, glm.params, rtol=1e-8)
    np.testing.assert_allclose(np.sqrt(np.diag(fit.cov)), glm.bse, rtol=1e-6)
