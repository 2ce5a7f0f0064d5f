"""Survival and period hazard of a fitted model over tenure, past the longest observed tenure,
with pointwise intervals by the delta method or by a parametric bootstrap.

* Delta method: on the complementary log-log scale, g = log(-log S(t)), var g = ∇g' Σ ∇g with
  ∇g = ∇log S / log S (analytic gradients, Σ the inverse observed information), so the band stays
  inside (0, 1). The period hazard q(t) = 1 - S(t)/S(t-1) uses g = log(log S(t-1) - log S(t)).
* Parametric bootstrap: parameter vectors drawn from the estimates' asymptotic normal
  distribution N(θ̂, Σ) on the unconstrained scale; S and q recomputed per draw; percentile band.

Both describe parameter uncertainty within the model only. Past the data, the model's form is an
assumption no data have checked: the rows there carry ``beyond_data = True``.

References
----------
Kalbfleisch & Prentice (2002), §3.6 (delta method for survival quantities).
Efron, B. & Tibshirani, R. J. (1993). An Introduction to the Bootstrap, §6.5 (parametric bootstrap).
"""

from __future__ import annotations

import numpy as np
import polars as pl
from scipy import stats

from churnlife.errors import UserError
from churnlife.models.base import FittedSurvival

BAND_METHODS = ("delta", "bootstrap")


def _z(confidence: float) -> float:
    return float(stats.norm.ppf(0.5 + confidence / 2))


def delta_band(
    fit, t: np.ndarray, confidence: float = 0.95
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """(S, lower, upper, q, q_lower, q_upper) at tenures t by the delta method."""
    t = np.asarray(t, float)
    z = _z(confidence)
    ls, g = fit.log_survival_grad(t)
    ls_prev, g_prev = fit.log_survival_grad(np.maximum(t - 1, 0))
    cov = fit.cov
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        grad_c = g / ls[:, None]
        se_c = np.sqrt(np.einsum("ij,jk,ik->i", grad_c, cov, grad_c))
        c = np.log(-ls)
        lower = np.exp(-np.exp(c + z * se_c))
        upper = np.exp(-np.exp(c - z * se_c))
        step = ls_prev - ls
        grad_q = (g_prev - g) / step[:, None]
        se_q = np.sqrt(np.einsum("ij,jk,ik->i", grad_q, cov, grad_q))
        cq = np.log(step)
        q = -np.expm1(-step)
        q_lower = -np.expm1(-np.exp(cq - z * se_q))
        q_upper = -np.expm1(-np.exp(cq + z * se_q))
    s = np.exp(ls)
    first = t <= 0
    for arr, v in ((lower, 1.0), (upper, 1.0), (q, 0.0), (q_lower, 0.0), (q_upper, 0.0)):
        arr[first] = v
    return s, lower, upper, q, q_lower, q_upper


def bootstrap_band(
    fit: FittedSurvival,
    t: np.ndarray,
    confidence: float = 0.95,
    n_draws: int = 1000,
    rng: np.random.Generator | None = None,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """(S, lower, upper, q, q_lower, q_upper) by percentiles of S over parameter draws."""
    rng = rng if rng is not None else np.random.default_rng(0)
    t = np.asarray(t, float)
    both = np.concatenate([t, np.maximum(t - 1, 0)])
    draws = fit.draw_survival(both, n_draws, rng)
    s_now, s_prev = draws[:, : t.size], draws[:, t.size :]
    with np.errstate(divide="ignore", invalid="ignore"):
        q_draws = np.where(t > 0, 1 - s_now / s_prev, 0.0)
    a = (1 - confidence) / 2
    lower, upper = np.quantile(s_now, [a, 1 - a], axis=0)
    q_lower, q_upper = np.nanquantile(q_draws, [a, 1 - a], axis=0)
    return fit.survival(t), lower, upper, fit.hazard(t), q_lower, q_upper


def extrapolation_table(
    fit,
    horizon: int,
    method: str = "delta",
    confidence: float = 0.95,
    n_draws: int = 1000,
    rng: np.random.Generator | None = None,
) -> pl.DataFrame:
    """Survival and period hazard at tenures 0..horizon with pointwise bands; ``beyond_data``
    marks tenures past the cohort's longest observed tenure."""
    if method not in BAND_METHODS:
        raise UserError(f'band method must be one of {", ".join(BAND_METHODS)}, not "{method}".')
    if horizon < 1:
        raise UserError("the extrapolation horizon must be a positive whole tenure.")
    t = np.arange(0, horizon + 1, dtype=float)
    if method == "delta":
        s, lo, hi, q, qlo, qhi = delta_band(fit, t, confidence)
    else:
        s, lo, hi, q, qlo, qhi = bootstrap_band(fit, t, confidence, n_draws, rng)
    return pl.DataFrame(
        {
            "cohort": [fit.cohort] * t.size,
            "model": [fit.name] * t.size,
            "tenure": t.astype(np.int64),
            "survival": s,
            "lower": lo,
            "upper": hi,
            "period_hazard": q,
            "hazard_lower": qlo,
            "hazard_upper": qhi,
            "band": [method] * t.size,
            "beyond_data": t > fit.max_observed_tenure,
        }
    ).with_columns(pl.col(pl.Float64).fill_nan(None))
