"""Analytic gradients against central finite differences, for every model churnlife fits.

A check of the derivation only (no outside reference is needed: the finite difference of the
model's own log S and log-likelihood is the comparison, common practice for likelihood code)."""

from __future__ import annotations

import numpy as np
import pytest

from churnlife.counts import counts_from_durations
from churnlife.models.base import grouped_from_counts, interval_loglik
from churnlife.models.cure import CureMixture
from churnlife.models.discrete import BetaDiscreteWeibull, ShiftedBetaGeometric
from churnlife.models.parametric import (
    Exponential,
    GeneralisedGamma,
    Gompertz,
    LogLogistic,
    LogNormal,
    Weibull,
)
from churnlife.models.piecewise import PiecewiseHazard
from churnlife.models.spline import RoystonParmar

CASES = [
    (Exponential(), [np.log(0.08)]),
    (Weibull(), [np.log(12.0), np.log(0.7)]),
    (Weibull(), [np.log(5.0), np.log(1.6)]),
    (Gompertz(), [np.log(0.05), 0.03]),
    (Gompertz(), [np.log(0.09), -0.04]),
    (Gompertz(), [np.log(0.09), 1e-6]),  # the series branch near c = 0
    (LogNormal(), [2.1, np.log(1.4)]),
    (LogLogistic(), [np.log(9.0), np.log(1.3)]),
    (GeneralisedGamma(), [2.3, np.log(1.1), 0.7]),
    (GeneralisedGamma(), [2.3, np.log(0.9), -0.6]),
    (GeneralisedGamma(), [2.0, np.log(0.5), 1.8]),
    (GeneralisedGamma(), [2.0, np.log(1.0), 0.01]),  # near the log-normal limit
    (GeneralisedGamma(), [6.0, np.log(0.5), -0.5]),  # large x, S near 1
    (GeneralisedGamma(), [2.5, np.log(0.6), 0.4]),  # far upper tail: the quadrature branch
    (GeneralisedGamma(), [2.0, np.log(0.8), 0.05]),  # a = 400: long series
    (ShiftedBetaGeometric(), [np.log(0.8), np.log(3.0)]),
    (BetaDiscreteWeibull(), [np.log(0.8), np.log(3.0), np.log(0.7)]),
    (CureMixture(Exponential()), [-1.0, np.log(0.1)]),
    (CureMixture(Weibull()), [-1.5, np.log(10.0), np.log(0.8)]),
    (PiecewiseHazard((3, 8, 20)), [np.log(0.1), np.log(0.05), np.log(0.03), np.log(0.02)]),
    (RoystonParmar((0.0, 1.2, 2.4, np.log(40))), [-2.5, 0.8, 0.02, -0.03]),
]
IDS = [f"{spec.name}-{i}" for i, (spec, _) in enumerate(CASES)]
# [6.0, log 0.5, -0.5] puts the median tenure near 400, far past the simulated data (whose
# likelihood is then -inf in floating point): it checks the log S gradient only.
FAR = {12}
LL_CASES = [c for i, c in enumerate(CASES) if i not in FAR]
LL_IDS = [x for i, x in enumerate(IDS) if i not in FAR]


def _fd(f, theta, h=1e-6):
    out = []
    for i in range(theta.size):
        up, down = theta.copy(), theta.copy()
        up[i] += h
        down[i] -= h
        out.append((f(up) - f(down)) / (2 * h))
    return np.stack(out, axis=-1)


@pytest.mark.parametrize(("spec", "theta"), CASES, ids=IDS)
def test_log_survival_gradient(spec, theta):
    theta = np.array(theta, dtype=float)
    t = np.array([0.0, 0.5, 1.0, 2.0, 3.0, 7.0, 15.0, 30.0, 45.0])
    ls, g = spec.log_survival_grad(t, theta)
    np.testing.assert_allclose(ls, spec.log_survival(t, theta), rtol=1e-12, atol=1e-14)
    fd = _fd(lambda th: spec.log_survival(t, th), theta)
    np.testing.assert_allclose(g, fd, rtol=2e-5, atol=1e-7)


def _grouped():
    rng = np.random.default_rng(11)
    n = 3000
    t = 15 * rng.weibull(0.8, n)
    entry = np.where(rng.random(n) < 0.3, rng.integers(1, 6, n), 0).astype(float)
    keep = t > entry
    t, entry = t[keep], entry[keep]
    cens = entry + rng.uniform(0, 40, t.size)
    x = np.minimum(t, cens)
    d = t <= cens
    counts = counts_from_durations(np.where(d, np.ceil(x), np.floor(x)), d, entry=entry)
    return grouped_from_counts(counts)


@pytest.mark.parametrize(("spec", "theta"), LL_CASES, ids=LL_IDS)
def test_loglik_gradient(spec, theta):
    data = _grouped()
    theta = np.array(theta, dtype=float)

    def ll(th):
        ls, _ = spec.log_survival_grad(data.tenure, th)
        return interval_loglik(ls, data.churned, data.weight)[0]

    ls, g = spec.log_survival_grad(data.tenure, theta)
    value, grad = interval_loglik(ls, data.churned, data.weight, g)
    assert np.isfinite(value)
    fd = _fd(ll, theta, h=1e-6)
    np.testing.assert_allclose(grad, fd, rtol=2e-5, atol=1e-4)


REGRESSION_BASE = {
    "exponential": [np.log(0.08)],
    "weibull": [np.log(12.0), np.log(0.7)],
    "gompertz": [np.log(0.05), -0.02],
    "lognormal": [2.1, np.log(1.4)],
    "loglogistic": [np.log(9.0), np.log(1.3)],
    "gengamma": [2.3, np.log(1.1), 0.7],
}


@pytest.mark.parametrize("form", ["ph", "aft"])
@pytest.mark.parametrize("family", list(REGRESSION_BASE))
def test_regression_loglik_gradient(family, form):
    from churnlife.models.covariates import regression_loglik
    from churnlife.models.parametric import FAMILIES

    data = _grouped()
    cells = [(data, np.array([0.0, 1.0])), (data, np.array([1.0, 0.5])), (data, np.zeros(2))]
    f = regression_loglik(cells, [x for _, x in cells], FAMILIES[family], form)
    theta = np.array([*REGRESSION_BASE[family], 0.3, -0.2])
    value, grad = f(theta)
    assert np.isfinite(value)
    np.testing.assert_allclose(grad, _fd(lambda th: f(th)[0], theta), rtol=2e-5, atol=1e-4)
