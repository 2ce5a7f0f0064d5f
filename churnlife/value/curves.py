"""Survival curves for valuation: S(k) on the whole-tenure grid 0..H with simulation draws for
intervals, either Kaplan–Meier over the observed tenures joined to a fitted model's tail
("km+tail") or the fitted model throughout ("model").

Draws (the source of every value interval):
* Kaplan–Meier part: churns at each tenure redrawn as Binomial(n_t, q̂_t) with q̂_t = d_t / n_t
  (a parametric bootstrap of the period hazards, independent across tenures as in Greenwood's
  variance; Efron & Tibshirani 1993, §6.5);
* model part: parameters drawn from the estimates' asymptotic normal N(θ̂, Σ)
  (churnlife.models.base.ModelFit.draw_survival).
The tail is joined at tenure K, the last tenure with at least JOIN_MIN_AT_RISK customers at risk:
S(k) = S_KM(K) · S_model(k) / S_model(K) for k > K.

Both describe sampling and parameter uncertainty within the chosen model only; past the observed
tenures the model's form is an assumption the data have not checked.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from churnlife.errors import UserError
from churnlife.models.base import GroupedData, ModelFit

JOIN_MIN_AT_RISK = 50


@dataclass(frozen=True)
class LifeCurve:
    """S(k), k = 0..horizon, for one cohort, with ``draws`` (n_draws × horizon+1)."""

    cohort: str
    model: str
    kind: str  # "km+tail" or "model"
    survival: np.ndarray
    draws: np.ndarray
    joined_at: int  # last tenure taken from Kaplan–Meier (-1 for "model")
    observed_to: int  # the cohort's longest observed tenure

    @property
    def horizon(self) -> int:
        return self.survival.size - 1

    @property
    def label(self) -> str:
        if self.kind == "model":
            return f"{self.model} model"
        return f"Kaplan–Meier to tenure {self.joined_at}, then {self.model}"

    def scaled(self, hazard_ratio: float | np.ndarray) -> LifeCurve:
        """The curve with every period's churn hazard scaled proportionally: S' = S^HR (the
        discrete proportional-hazards form on the cumulative hazard -log S). An array gives one
        ratio per draw."""
        hr = np.asarray(hazard_ratio, dtype=float)
        with np.errstate(divide="ignore"):
            point = np.exp(float(np.median(hr)) * np.log(self.survival))
            draws = np.exp(np.reshape(hr, (-1, 1)) * np.log(self.draws))
        return LifeCurve(
            self.cohort, self.model, self.kind, point, draws, self.joined_at, self.observed_to
        )


def join_tenure(data: GroupedData) -> int:
    """K: the last tenure with at least JOIN_MIN_AT_RISK at risk (at least 1, at most the data)."""
    ok = np.flatnonzero(data.at_risk >= JOIN_MIN_AT_RISK)
    return int(max(min(ok[-1] if ok.size else 1, data.max_tenure), 1))


def life_curve(
    data: GroupedData,
    fit: ModelFit,
    horizon: int,
    n_draws: int,
    rng: np.random.Generator,
    kind: str = "km+tail",
) -> LifeCurve:
    """The valuation curve of one cohort (see the module docstring)."""
    if kind not in ("km+tail", "model"):
        raise UserError(f'the value curve is "km+tail" or "model", not "{kind}".')
    if not np.all(np.isfinite(fit.cov)):
        raise UserError(
            f"{fit.name} for {data.cohort}: the fit has no covariance, so no interval can be "
            'drawn. Choose another model in [value] model, or "best".'
        )
    grid = np.arange(horizon + 1, dtype=float)
    model_s = fit.survival(grid)
    model_draws = fit.draw_survival(grid, n_draws, rng)
    if kind == "model":
        return LifeCurve(
            data.cohort, fit.name, kind, model_s, model_draws, -1, data.max_tenure
        )
    k_join = min(join_tenure(data), horizon)
    n = data.at_risk[1 : k_join + 1]
    d = data.churned[1 : k_join + 1]
    with np.errstate(divide="ignore", invalid="ignore"):
        q = np.where(n > 0, d / n, 0.0)
    km = np.concatenate([[1.0], np.cumprod(1 - q)])
    redrawn = rng.binomial(n.astype(np.int64), np.clip(q, 0, 1), size=(n_draws, n.size))
    with np.errstate(divide="ignore", invalid="ignore"):
        q_draws = np.where(n > 0, redrawn / np.maximum(n, 1), 0.0)
    km_draws = np.concatenate([np.ones((n_draws, 1)), np.cumprod(1 - q_draws, axis=1)], axis=1)
    s = np.empty(horizon + 1)
    s[: k_join + 1] = km
    draws = np.empty((n_draws, horizon + 1))
    draws[:, : k_join + 1] = km_draws
    if horizon > k_join:
        with np.errstate(divide="ignore", invalid="ignore"):
            tail = model_s[k_join + 1 :] / model_s[k_join]
            tail_draws = model_draws[:, k_join + 1 :] / model_draws[:, [k_join]]
        s[k_join + 1 :] = km[-1] * np.nan_to_num(tail)
        draws[:, k_join + 1 :] = km_draws[:, [-1]] * np.nan_to_num(tail_draws)
    return LifeCurve(data.cohort, fit.name, kind, s, draws, k_join, data.max_tenure)
