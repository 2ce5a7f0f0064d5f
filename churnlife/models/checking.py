"""Does a fitted model describe the data? Fitted curves against Kaplan–Meier per cohort, a ranking
of models by information criteria and deviation, and a holdout backtest.

* Deviation from KM, over the observed tenures 1..T: the maximum |S_fit(t) - S_KM(t)| and the area
  between the curves Σ_t |S_fit(t) - S_KM(t)| (in tenure units: the expected tenure the model
  gains or loses against KM up to T).
* Ranking: AIC = 2k - 2 log L and BIC = k log n - 2 log L with the interval-censored log L every
  model shares (n = spells in the cohort), with the deviations beside them (Akaike 1974;
  Schwarz 1978; Burnham & Anderson 2002 for ΔAIC).
* Backtest: refit on the data as if observation stopped at tenure ``cut`` and compare the
  predicted S(t), t > cut, with the full-data KM; error and the share of tenures where KM lies
  inside the model's pointwise band. The band holds parameter uncertainty only (KM has sampling
  noise of its own), so coverage below the nominal level at long tenures is expected even for a
  good model; a large error is the signal.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
import polars as pl

from churnlife.errors import UserError
from churnlife.models.base import GroupedData
from churnlife.models.extrapolate import delta_band


def km_deviation(fit, data: GroupedData) -> tuple[float, float]:
    """(maximum, area) deviation of the fitted S from KM over tenures 1..max observed."""
    t = data.tenure[1 : data.max_tenure + 1]
    if t.size == 0:
        return float("nan"), float("nan")
    diff = np.abs(fit.survival(t) - data.km()[1 : data.max_tenure + 1])
    return float(diff.max()), float(diff.sum())


def ranking_table(fits: list, data_by_cohort: dict[str, GroupedData]) -> pl.DataFrame:
    """One row per cohort × model: parameters, log L, AIC, BIC, ΔAIC, KM deviations,
    convergence, and the rank by AIC within the cohort."""
    rows = []
    for f in fits:
        mx, area = km_deviation(f, data_by_cohort[f.cohort])
        rows.append(
            {
                "cohort": f.cohort,
                "model": f.name,
                "n_params": f.n_params,
                "loglik": f.loglik,
                "aic": f.aic,
                "bic": f.bic,
                "max_deviation": mx,
                "area_deviation": area,
                "converged": f.convergence.converged,
                "note": f.convergence.message,
            }
        )
    if not rows:
        return pl.DataFrame()
    table = pl.DataFrame(rows)
    return (
        table.with_columns(
            (pl.col("aic") - pl.col("aic").min().over("cohort")).alias("delta_aic"),
            pl.col("aic").rank("ordinal").over("cohort").cast(pl.Int64).alias("rank"),
        )
        .sort("cohort", "rank")
        .select(
            "cohort",
            "rank",
            "model",
            "n_params",
            "loglik",
            "aic",
            "delta_aic",
            "bic",
            "max_deviation",
            "area_deviation",
            "converged",
            "note",
        )
    )


@dataclass(frozen=True)
class Backtest:
    """Holdout result for one model and cohort: fitted on tenures <= cut, checked on later ones."""

    cohort: str
    model: str
    cut: int
    tenure: np.ndarray
    predicted: np.ndarray
    lower: np.ndarray
    upper: np.ndarray
    observed: np.ndarray  # full-data KM

    @property
    def mean_abs_error(self) -> float:
        return float(np.mean(np.abs(self.predicted - self.observed)))

    @property
    def max_abs_error(self) -> float:
        return float(np.max(np.abs(self.predicted - self.observed)))

    @property
    def coverage(self) -> float:
        inside = (self.observed >= self.lower) & (self.observed <= self.upper)
        return float(np.mean(inside))

    def summary(self) -> dict:
        return {
            "cohort": self.cohort,
            "model": self.model,
            "fit_up_to": self.cut,
            "checked_tenures": int(self.tenure.size),
            "mean_abs_error": self.mean_abs_error,
            "max_abs_error": self.max_abs_error,
            "coverage": self.coverage,
        }


def backtest(
    fitter: Callable[[GroupedData], object],
    data: GroupedData,
    cut: int,
    confidence: float = 0.95,
    name: str | None = None,
) -> Backtest:
    """Fit with ``fitter`` on ``data.truncated(cut)``; compare predictions for cut < t <= max
    observed tenure with the full-data KM."""
    if not 1 <= cut < data.max_tenure:
        raise UserError(
            f"backtest cut {cut} must lie between 1 and the longest observed tenure "
            f"({data.max_tenure}) minus one."
        )
    fit = fitter(data.truncated(cut))
    t = data.tenure[cut + 1 : data.max_tenure + 1]
    s, lo, hi, *_ = delta_band(fit, t, confidence)
    observed = data.km()[cut + 1 : data.max_tenure + 1]
    return Backtest(data.cohort, name or fit.name, cut, t, s, lo, hi, observed)


def backtest_table(results: list[Backtest]) -> pl.DataFrame:
    if not results:
        return pl.DataFrame()
    return pl.DataFrame([b.summary() for b in results])
