"""Nelson–Aalen cumulative hazard and restricted mean tenure, from the counts table.

References
----------
Nelson, W. (1972). Theory and applications of hazard plotting for censored failure data.
    Technometrics 14, 945–966;  Aalen, O. (1978). Nonparametric inference for a family of
    counting processes. Annals of Statistics 6, 701–726.  (H = Σ d/n, variance Σ d/n²)
Klein, J. P. & Moeschberger, M. L. (2003). Survival Analysis, 2nd ed., §4.5 (restricted mean
    ∫₀^τ S(t) dt and its variance Σ A_i² d_i / (n_i (n_i − d_i)), A_i = ∫_{t_i}^τ S(t) dt).
Royston, P. & Parmar, M. K. B. (2013). Restricted mean survival time: an alternative to the hazard
    ratio. BMC Med. Res. Methodol. 13, 152.  (differences between groups)
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import polars as pl
from scipy import stats

from churnlife.km import KaplanMeierResult, kaplan_meier


def nelson_aalen(counts: pl.DataFrame) -> pl.DataFrame:
    """Cumulative hazard per cohort at each tenure: cohort, tenure, cumulative_hazard, variance."""
    need = {"cohort", "tenure", "at_risk", "churned"}
    if not need <= set(counts.columns):
        raise ValueError(f"counts needs columns {sorted(need)}")
    step = pl.when(pl.col("at_risk") > 0).then(pl.col("churned") / pl.col("at_risk")).otherwise(0.0)
    var = (
        pl.when(pl.col("at_risk") > 0)
        .then(pl.col("churned") / pl.col("at_risk") ** 2)
        .otherwise(0.0)
    )
    return (
        counts.sort("cohort", "tenure")
        .with_columns(
            step.cum_sum().over("cohort").alias("cumulative_hazard"),
            var.cum_sum().over("cohort").alias("variance"),
        )
        .select("cohort", "tenure", "at_risk", "churned", "cumulative_hazard", "variance")
    )


@dataclass(frozen=True)
class RestrictedMean:
    """Restricted mean tenure to ``horizon`` per cohort (expected tenure within the first
    ``horizon`` units) with standard error and interval."""

    horizon: float
    cohorts: tuple[str, ...]
    estimate: np.ndarray
    se: np.ndarray
    confidence: float
    reached: np.ndarray  # False where a cohort was not observed up to the horizon

    def to_polars(self) -> pl.DataFrame:
        q = stats.norm.ppf(0.5 + self.confidence / 2)
        return pl.DataFrame(
            {
                "cohort": list(self.cohorts),
                "horizon": [self.horizon] * len(self.cohorts),
                "restricted_mean": self.estimate,
                "se": self.se,
                "lower": self.estimate - q * self.se,
                "upper": self.estimate + q * self.se,
                "observed_to_horizon": self.reached,
            }
        )

    def difference(self, a: str, b: str) -> tuple[float, float, float, float]:
        """a − b with its SE and interval (cohorts are independent samples)."""
        i, j = self.cohorts.index(a), self.cohorts.index(b)
        diff = float(self.estimate[i] - self.estimate[j])
        se = float(np.hypot(self.se[i], self.se[j]))
        q = stats.norm.ppf(0.5 + self.confidence / 2)
        return diff, se, diff - q * se, diff + q * se

    def ratio(self, a: str, b: str) -> tuple[float, float, float]:
        """a / b with an interval from the delta method on the log scale."""
        i, j = self.cohorts.index(a), self.cohorts.index(b)
        r = float(self.estimate[i] / self.estimate[j])
        se_log = float(np.hypot(self.se[i] / self.estimate[i], self.se[j] / self.estimate[j]))
        q = stats.norm.ppf(0.5 + self.confidence / 2)
        return r, r * np.exp(-q * se_log), r * np.exp(q * se_log)


def restricted_mean(
    km: KaplanMeierResult | pl.DataFrame, horizon: float, confidence: float | None = None
) -> RestrictedMean:
    """∫₀^τ S(t) dt of each cohort's Kaplan–Meier step curve, with Klein & Moeschberger's
    variance. A cohort observed for less than ``horizon`` is integrated to its last tenure and
    flagged (``reached`` False): its value is then not comparable."""
    if horizon <= 0:
        raise ValueError("horizon must be positive")
    if isinstance(km, pl.DataFrame):
        km = kaplan_meier(km, confidence or 0.95)
    conf = confidence or km.confidence
    est, ses, reached = [], [], []
    for c in km.curves:
        t = np.concatenate([[0.0], c.tenure[c.tenure > 0]])
        s = np.concatenate([[1.0], c.survival[c.tenure > 0]])
        d = np.concatenate([[0.0], c.churned[c.tenure > 0]])
        n = np.concatenate([[0.0], c.at_risk[c.tenure > 0]])
        end = min(horizon, float(t[-1]))
        # S is right-continuous and constant on [t_i, t_{i+1})
        right = np.minimum(np.concatenate([t[1:], [np.inf]]), end)
        width = np.clip(right - t, 0, None)
        area = s * width
        total = float(area.sum())
        tail = np.cumsum(area[::-1])[::-1]  # ∫ from t_i to the end
        a_i = tail  # the area after each churn tenure
        with np.errstate(divide="ignore", invalid="ignore"):
            w = np.where((d > 0) & (n > d) & (t <= end), d / (n * (n - d)), 0.0)
        # A_i is the area after the drop at t_i: ∫_{t_i}^τ S
        var = float((a_i**2 * w).sum())
        est.append(total)
        ses.append(np.sqrt(var))
        reached.append(float(t[-1]) >= horizon)
    return RestrictedMean(
        float(horizon),
        tuple(c.cohort for c in km.curves),
        np.array(est),
        np.array(ses),
        conf,
        np.array(reached),
    )
