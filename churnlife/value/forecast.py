"""Forecast of the current base: expected active customers and revenue collected in each of the
next N tenure units, from today's active customers, each conditioned on cohort and tenure.

Expected active after j units: A_j = Σ_τ n_τ S(τ + j) / S(τ), with n_τ the customers active at
tenure τ on the as-of date; expected revenue in unit j: Σ_τ n_τ S(τ + j)/S(τ) · r(τ + j). The
interval combines the curve's draws (churnlife.value.curves) with the binomial spread of who
stays, Σ_τ n_τ p(1 - p) (a normal approximation), so it is a prediction interval for the count.
"""

from __future__ import annotations

import numpy as np
import polars as pl

from churnlife.value.curves import LifeCurve
from churnlife.value.worth import interval


def forecast_draws(
    curve: LifeCurve,
    active: np.ndarray,
    revenue: np.ndarray,
    periods: int,
    rng: np.random.Generator,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """(expected active, expected revenue) at j = 1..periods from the point curve, and their
    draws (n_draws × periods) including the binomial spread of the active count."""
    h = curve.horizon
    taus = np.flatnonzero(active[: h + 1] > 0)
    taus = taus[taus + periods <= h]
    n = active[taus].astype(float)
    s, d = curve.survival, curve.draws
    point_a, point_r = np.zeros(periods), np.zeros(periods)
    draw_a, draw_r = np.zeros((d.shape[0], periods)), np.zeros((d.shape[0], periods))
    with np.errstate(divide="ignore", invalid="ignore"):
        for j in range(1, periods + 1):  # forecast steps; each is vectorised over tenures
            p = np.where(s[taus] > 0, s[taus + j] / s[taus], 0.0)
            pd = np.where(d[:, taus] > 0, d[:, taus + j] / d[:, taus], 0.0)
            r = revenue[taus + j]
            point_a[j - 1] = n @ p
            point_r[j - 1] = (n * r) @ p
            spread = np.sqrt(np.sum(n * p * (1 - p)))
            draw_a[:, j - 1] = pd @ n + rng.normal(0.0, 1.0, d.shape[0]) * spread
            draw_r[:, j - 1] = pd @ (n * r)
    return point_a, point_r, draw_a, draw_r


def forecast_table(
    cohort: str,
    point_a: np.ndarray,
    point_r: np.ndarray,
    draw_a: np.ndarray,
    draw_r: np.ndarray,
    confidence: float,
) -> pl.DataFrame:
    lo_a, hi_a = interval(draw_a, confidence)
    lo_r, hi_r = interval(draw_r, confidence)
    return pl.DataFrame(
        {
            "cohort": cohort,
            "units_ahead": np.arange(1, point_a.size + 1, dtype=np.int64),
            "expected_active": point_a,
            "active_lower": np.maximum(lo_a, 0.0),
            "active_upper": hi_a,
            "expected_revenue": point_r,
            "revenue_lower": np.maximum(lo_r, 0.0),
            "revenue_upper": hi_r,
        }
    )
