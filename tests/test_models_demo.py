"""Hazard models on the demo business: recovery of the generator's true survival and hazard,
agreement of the counts fit with a per-customer likelihood on the extract's own spells, the
protocol the value stage relies on, and the API/CLI/report wiring.

Sources: the true model is the demo generator's (demo/truth.json; demo/generate.py
true_period_survival, the share of new customers whose first spell lasts at least k billing
periods). A cohort by plan mixes the channels, so its true survival is the channel-share
mixture Σ_c share_c S_c(k) (acquisition channel_mix). beans_plus_monthly is used because no
price rise touches it.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from churnlife.demo.generate import true_period_survival

from churnlife.cli import main
from churnlife.errors import UserError
from churnlife.models.base import FittedSurvival, fit_spec, grouped_from_counts
from churnlife.models.extrapolate import delta_band, extrapolation_table
from churnlife.models.parametric import FAMILIES
from churnlife.models.suite import fit_models

PLAN = "beans_plus_monthly"
CHECK_AT = np.array([1, 3, 6, 12, 24, 36], dtype=float)


def _truth(root):
    return json.loads((root / "demo" / "truth.json").read_text())


def _true_survival(truth, plan, k):
    mix = truth["acquisition"]["channel_mix"]  # drawn independently of the plan
    return sum(share * true_period_survival(truth, plan, ch, k) for ch, share in mix.items())


@pytest.fixture(scope="module")
def demo_models(demo_extract):
    return fit_models(
        demo_extract.counts,
        models=("weibull", "gengamma", "spline2", "bdw", "cure_weibull", "sbg", "piecewise"),
    )


def test_true_survival_and_hazard_inside_the_bands(demo_models):
    from tests.conftest import ROOT

    truth = _truth(ROOT)
    k = np.arange(0, 40, dtype=float)
    s_true = _true_survival(truth, PLAN, k)
    q_true = 1 - s_true[1:] / s_true[:-1]  # period hazard of tenures 1..39
    idx = CHECK_AT.astype(int)
    for name in ("weibull", "gengamma", "spline2", "bdw", "cure_weibull", "piecewise"):
        fit = demo_models.get(PLAN, name)
        s_fit, lo, hi, _q, qlo, qhi = delta_band(fit, CHECK_AT)
        if name == "bdw" and not fit.convergence.information_positive_definite:
            # The BdW nests the no-heterogeneity discrete Weibull as α, β → ∞; where the data
            # show no more heterogeneity than that, the optimum lies on that ridge (which side
            # of it the optimiser stops on depends on the machine's rounding). The fit must
            # then say so and draw no band, and its curve must still be the ridge's Weibull.
            weibull = demo_models.get(PLAN, "weibull")
            assert np.all(np.isnan(lo)) and np.all(np.isnan(hi)), name
            assert fit.loglik >= weibull.loglik - 1e-3, name
            _w, w_lo, w_hi, *_ = delta_band(weibull, CHECK_AT)
            assert np.all((w_lo <= s_fit) & (s_fit <= w_hi)), name
            continue
        assert np.all((lo <= s_true[idx]) & (s_true[idx] <= hi)), name
        inside_q = (qlo <= q_true[idx - 1]) & (q_true[idx - 1] <= qhi)
        # pointwise 95% bands of models that are close to, not equal to, the true form (a
        # channel mixture of cure-Weibulls times renewal failures): allow two misses in six
        assert inside_q.sum() >= len(CHECK_AT) - 2, name
    best = demo_models.best(PLAN)
    _s, lo, hi, *_ = delta_band(best, CHECK_AT)
    assert np.all((lo <= s_true[idx]) & (s_true[idx] <= hi)), best.name


def test_bands_do_not_cover_a_wrong_model(demo_extract):
    """The coverage check has teeth: the constant-hazard model's band misses the true curve,
    whose hazard falls with tenure."""
    from tests.conftest import ROOT

    truth = _truth(ROOT)
    s_true = _true_survival(truth, PLAN, CHECK_AT)
    counts = demo_extract.counts.filter(demo_extract.counts["cohort"] == PLAN)
    fit = fit_spec(FAMILIES["exponential"], grouped_from_counts(counts))
    _s, lo, hi, *_ = delta_band(fit, CHECK_AT)
    assert np.sum((lo <= s_true) & (s_true <= hi)) <= 2


def test_counts_fit_equals_per_customer_likelihood_on_spells(demo_extract):
    """The counts table and the per-customer spells give the same Weibull likelihood (late entry
    included): the spells' entry_t/exit_t in a direct per-customer log-likelihood written with
    scipy.stats.weibull_min, evaluated at the counts fit's estimate and at a perturbed point."""
    from scipy import stats

    counts = demo_extract.counts.filter(demo_extract.counts["cohort"] == PLAN)
    fit = fit_spec(FAMILIES["weibull"], grouped_from_counts(counts))
    sp = demo_extract.spells().filter(demo_extract.spells()["plan"] == PLAN)
    entry = sp["entry_t"].to_numpy().astype(float)
    exit_t = sp["exit_t"].to_numpy().astype(float)
    churned = sp["churn_counted"].to_numpy()
    assert entry.max() > 0  # late entrants are in this cohort

    def per_customer(shape, scale):
        def logsf(x):
            return stats.weibull_min.logsf(x, shape, scale=scale)

        a, b = logsf(exit_t - 1), logsf(exit_t)
        with np.errstate(divide="ignore"):
            churn = a + np.log(-np.expm1(b - a))
        return float(np.sum(np.where(churned, churn, b) - logsf(entry)))

    shape, scale = fit.value("shape"), fit.value("scale")
    assert fit.loglik == pytest.approx(per_customer(shape, scale), rel=1e-10)
    assert per_customer(shape * 1.01, scale) < fit.loglik
    assert per_customer(shape, scale * 1.01) < fit.loglik


def test_every_fit_follows_the_protocol(demo_models):
    rng = np.random.default_rng(1)
    t = np.array([0.0, 1.0, 12.0, 80.0])
    for fit in demo_models.fits:
        assert isinstance(fit, FittedSurvival)
        s = fit.survival(t)
        assert s[0] == 1.0 and np.all(np.diff(s) <= 1e-12), fit.name
        h = fit.hazard(t)
        assert h[0] == 0.0 and np.all((h[1:] > 0) & (h[1:] < 1)), fit.name
        np.testing.assert_allclose(h[1], 1 - s[1], rtol=1e-12)
        if not fit.convergence.information_positive_definite:
            assert fit.name == "bdw", fit.name  # every other family here is identified
            # a BdW on its no-heterogeneity ridge: no covariance, so no draws, said plainly
            with pytest.raises(UserError, match="no covariance"):
                fit.draw_survival(t, 200, rng)
            continue
        draws = fit.draw_survival(t, 200, rng)
        assert draws.shape == (200, 4)
        assert fit.cov.shape == (fit.params.size, fit.params.size)
        # draws centre on the estimate
        assert abs(np.median(draws[:, 2]) - s[2]) < 0.02, fit.name
        assert fit.max_observed_tenure >= 36
    sbg = demo_models.get(PLAN, "sbg")
    assert sbg.alpha > 0 and sbg.beta > 0
    with pytest.raises(AttributeError):
        _ = demo_models.get(PLAN, "weibull").alpha


def test_extrapolation_marks_the_region_past_the_data(demo_models):
    fit = demo_models.get(PLAN, "weibull")
    table = extrapolation_table(fit, 2 * fit.max_observed_tenure)
    beyond = table.filter(table["beyond_data"])
    assert beyond["tenure"].min() == fit.max_observed_tenure + 1
    # relative to the curve, the band widens past the data
    width = ((table["upper"] - table["lower"]) / table["survival"]).to_numpy()
    assert width[-1] > 1.5 * width[fit.max_observed_tenure]
    boot = extrapolation_table(fit, 2 * fit.max_observed_tenure, method="bootstrap", n_draws=2000)
    # delta and bootstrap bands agree closely for a well-determined two-parameter fit
    np.testing.assert_allclose(boot["lower"].to_numpy(), table["lower"].to_numpy(), atol=0.01)
    np.testing.assert_allclose(boot["upper"].to_numpy(), table["upper"].to_numpy(), atol=0.01)


def test_ranking_and_backtest(demo_models):
    rank = demo_models.ranking().filter(demo_models.ranking()["cohort"] == PLAN)
    assert rank["rank"].to_list() == list(range(1, rank.height + 1))
    assert rank["delta_aic"][0] == 0.0
    # sBG has no duration dependence beyond heterogeneity; the Weibull-type truth ranks it lower
    order = rank["model"].to_list()
    assert order.index("weibull") < order.index("sbg")
    bt = demo_models.backtest_table(models=["weibull", "sbg"])
    wb = bt.filter((bt["cohort"] == PLAN) & (bt["model"] == "weibull"))
    sb = bt.filter((bt["cohort"] == PLAN) & (bt["model"] == "sbg"))
    assert wb["mean_abs_error"][0] < sb["mean_abs_error"][0]
    assert wb["mean_abs_error"][0] < 0.02


def test_cli_models_and_run(demo_folder, tmp_path, capsys):
    cfg = str(demo_folder / "churnlife.toml")
    assert main(["models", "--config", cfg, "--models", "weibull,sbg"]) == 0
    out = capsys.readouterr().out
    assert PLAN in out and "weibull" in out and "AIC" in out
    assert main(["models", "--config", cfg, "--models", "weibul"]) == 2
    assert 'Did you mean "weibull"' in capsys.readouterr().err
    target = tmp_path / "out"
    code = main(
        [
            "run",
            "--config",
            cfg,
            "--output",
            str(target),
            "--models",
            "weibull,piecewise,sbg",
            "--horizon",
            "72",
            "--band",
            "bootstrap",
        ]
    )
    assert code == 0
    for name in ("model_ranking", "model_parameters", "model_extrapolation", "model_backtest"):
        assert (target / f"{name}.csv").is_file()
    html = (target / "report.html").read_text()
    assert "Hazard models and how well they fit" in html and "extrapolated" in html
    assert "Past the data: extrapolation" in html
    assert (target / "model_extrapolation.svg").is_file()
