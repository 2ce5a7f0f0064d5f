"""The value stage's arithmetic against outside references.

* Fader & Hardie (2010) discounted expected residual lifetime (DERL) of the shifted-beta-geometric
  model: the closed form (churnlife.value.worth.sbg_derl) against ../shared/reference values.json
  (fader_hardie_2010_derl, recomputed with scipy.special.hyp2f1) to 1e-9, and churnlife's
  brute-force discounted sums (the ones every other model uses) against the closed form to 1e-9.
* DERL at the sBG fitted to the Fader & Hardie (2007) survivor table (values.json, tol 1e-3).
* Mean residual life of a Weibull: closed form b/k · Γ(1/k) · Q(1/k, (τ/b)^k) / S(τ) with Q the
  regularised upper incomplete gamma function (scipy.special.gammaincc) — a textbook identity
  (e.g. Klein & Moeschberger 2003, §2.4, from memory) — at parameters churnlife fitted.
* Exponential: mean residual life 1/λ at every tenure (memorylessness; common textbook fact).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import special

from churnlife.counts import counts_from_durations
from churnlife.models.base import fit_spec, grouped_from_counts
from churnlife.models.discrete import ShiftedBetaGeometric
from churnlife.models.parametric import FAMILIES
from churnlife.value.worth import (
    mean_remaining_lifetime,
    model_mean_residual_life,
    new_customer_value,
    per_unit_rate,
    residual_value,
    sbg_del,
    sbg_derl,
    truncation_bound,
)
from tests.test_models_reference import _fh_counts, _heart

SEGMENTS = {"regular": "regular_printed_params", "high_end": "high_end_printed_params"}


def _sbg_survival(alpha: float, beta: float, terms: int = 4000) -> np.ndarray:
    t = np.arange(terms + 1, dtype=float)
    return np.exp(special.betaln(alpha, beta + t) - special.betaln(alpha, beta))


@pytest.mark.parametrize("key", list(SEGMENTS.values()))
def test_sbg_closed_form_equals_reference_derl(ref_values, key):
    ref = ref_values["fader_hardie_2010_derl"]
    p = ref[key]
    ours = sbg_derl(p["alpha"], p["beta"], ref["discount_rate"], np.array(ref["n"]))
    np.testing.assert_allclose(ours, p["derl"], atol=p["tol_abs"], rtol=0)
    assert sbg_del(p["alpha"], p["beta"], ref["discount_rate"]) == pytest.approx(
        p["del_new_customer"], abs=p["tol_abs"]
    )


@pytest.mark.parametrize("key", list(SEGMENTS.values()))
def test_discounted_sums_equal_the_closed_form(ref_values, key):
    """V(τ) with cash ≡ 1 is DERL(d | τ renewals), so τ = n - 1; a new customer's value is DEL."""
    ref = ref_values["fader_hardie_2010_derl"]
    p, d = ref[key], ref["discount_rate"]
    s = _sbg_survival(p["alpha"], p["beta"])
    ones = np.ones_like(s)
    v = residual_value(s, ones, d)[0]
    n = np.array(ref["n"])
    np.testing.assert_allclose(v[n - 1], p["derl"], atol=1e-9, rtol=0)
    assert new_customer_value(s, ones, d)[0] == pytest.approx(p["del_new_customer"], abs=1e-9)
    # paid at the end of each period instead: everything one period later
    assert new_customer_value(s, ones, d, "end")[0] == pytest.approx(
        p["del_new_customer"] / (1 + d), abs=1e-9
    )


def test_truncation_bound_covers_what_the_horizon_leaves_out(ref_values):
    p = ref_values["fader_hardie_2010_derl"]["regular_printed_params"]
    d = 0.10
    full = _sbg_survival(p["alpha"], p["beta"])
    for horizon in (10, 30, 60):
        cut = full[: horizon + 1]
        ones = np.ones_like(cut)
        left_out = residual_value(full, np.ones_like(full), d)[0, :5] - residual_value(
            cut, ones, d
        )[0, :5]
        bound = truncation_bound(cut, ones, d, np.arange(5))
        assert np.all(left_out >= 0)
        assert np.all(left_out <= bound + 1e-15)


@pytest.mark.parametrize("segment", ["regular", "high_end"])
def test_derl_at_the_fitted_sbg(reference, ref_values, segment):
    ref = ref_values["fader_hardie_2010_derl"][f"{segment}_mle"]
    fit = fit_spec(ShiftedBetaGeometric(), grouped_from_counts(_fh_counts(reference, segment)))
    d = ref_values["fader_hardie_2010_derl"]["discount_rate"]
    n = np.array(ref_values["fader_hardie_2010_derl"]["n"])
    np.testing.assert_allclose(
        sbg_derl(fit.alpha, fit.beta, d, n), ref["derl"], atol=ref["tol_abs"], rtol=0
    )
    # the fitted model's own survival through churnlife's sums gives the same numbers
    s = fit.survival(np.arange(4001, dtype=float))
    v = residual_value(s, np.ones_like(s), d)[0]
    np.testing.assert_allclose(v[n - 1], ref["derl"], atol=ref["tol_abs"], rtol=0)


def test_weibull_mean_residual_life_is_the_incomplete_gamma_closed_form(reference):
    time, died = _heart(reference)
    fit = fit_spec(FAMILIES["weibull"], grouped_from_counts(counts_from_durations(time, died)))
    b, k = fit.value("scale"), fit.value("shape")
    taus = np.array([0, 1, 30, 100, 365, 1000])
    upper = b * 60.0 ** (1 / k)  # S(upper) = e^-60: the rest is below double precision
    ours = model_mean_residual_life(fit.survival, taus, upper)
    z = (taus / b) ** k
    closed = b / k * special.gamma(1 / k) * special.gammaincc(1 / k, z) / np.exp(-z)
    # 1e-6: the integrand's slope is unbounded at 0 when the shape is below 1
    np.testing.assert_allclose(ours, closed, rtol=1e-6)
    np.testing.assert_allclose(ours[1:], closed[1:], rtol=1e-9)


def test_exponential_mean_residual_life_is_one_over_the_rate(reference):
    time, died = _heart(reference)
    fit = fit_spec(FAMILIES["exponential"], grouped_from_counts(counts_from_durations(time, died)))
    rate = fit.value("rate")
    taus = np.array([0, 5, 50, 500, 2000])
    ours = model_mean_residual_life(fit.survival, taus, 2000 + 60 / rate)
    np.testing.assert_allclose(ours, 1 / rate, rtol=1e-9)
    # the life-table version on the whole-tenure grid: 1/λ less the half-unit of the
    # trapezoid's chord error, (1/λ)·(1 - λ²/12 + ...) for small λ — close, not equal
    grid = fit.survival(np.arange(0, 40001, dtype=float))
    e = mean_remaining_lifetime(grid)[0, taus]
    np.testing.assert_allclose(e, 1 / rate, rtol=1e-4)


def test_annual_rate_becomes_the_equivalent_rate_per_unit():
    """(1 + d)^(1/12) - 1 per month compounds back to d a year (compound interest)."""
    monthly = per_unit_rate(0.10, 1 / 12)
    assert (1 + monthly) ** 12 - 1 == pytest.approx(0.10, abs=1e-14)
