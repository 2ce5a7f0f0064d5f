"""Nelson–Aalen cumulative hazard and restricted mean tenure (RMST), from the counts table.

Both need, per cohort and tenure, only the number at risk and the number churned, so they run on
queries/counts.sql's output (late entry is already in the risk sets: at risk at t when
entry_t < t <= exit_t) and cost grows with cohorts × distinct tenures.

References
----------
Nelson, W. (1972). Theory and applications of hazard plotting for censored failure data.
    Technometrics 14, 945–966;  Aalen, O. (1978). Nonparametric inference for a family of
    counting processes. Annals of Statistics 6, 701–726.  (H(t) = Σ d/n, variance Σ d/n²)
Irwin, J. O. (1949). The standard error of an estimate of expectation of life. J. Hygiene 47,
    188–189;  Klein, J. P. & Moeschberger, M. L. (2003). Survival Analysis, 2nd ed., §4.5.
    (restricted mean ∫₀^τ S(u) du and its variance Σ A_j² d_j / (n_j (n_j − d_j)),
    A_j = ∫_{t_j}^τ S(u) du)
Royston, P. & Parmar, M. K. B. (2013). Restricted mean survival time: an alternative to the hazard
    ratio for the design and analysis of randomized trials with a time-to-event outcome.
    BMC Medical Research Methodology 13, 152.  (differences and ratios between groups)
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import polars as pl
from scipy import stats

from churnlife.errors import UserError
from churnlife.km import _validate_counts


def _z(confidence: float) -> float:
    if not 0 < confidence < 1:
        raise ValueError("confidence must be in (0, 1)")
    return float(stats.norm.ppf(0.5 + confidence / 2))


def _cohort_arrays(counts: pl.DataFrame):
    """(cohort, tenure, at_risk, churned) per cohort, tenures ascending, in the counts' order."""
    _validate_counts(counts)
    ordered = counts.sort("cohort", "tenure", maintain_order=True)
    for (cohort,), part in ordered.group_by("cohort", maintain_order=True):
        yield (
            str(cohort),
            part["tenure"].to_numpy().astype(float),
            part["at_risk"].to_numpy().astype(float),
            part["churned"].to_numpy().astype(float),
        )


@dataclass(frozen=True)
class NelsonAalenResult:
    """Nelson–Aalen cumulative hazard per cohort, at every tenure of the counts.

    Attributes
    ----------
    table : cohort, tenure, at_risk, churned, cumhaz, variance (Σ d/n², Aalen), se, lower, upper
        (pointwise interval on the log scale: H·exp(±z·se/H), so it stays positive).
    confidence : the intervals' coverage.
    """

    table: pl.DataFrame
    confidence: float

    def to_polars(self) -> pl.DataFrame:
        return self.table

    def at(self, cohort: str, tenure: float | np.ndarray) -> np.ndarray:
        """H(t) for one cohort (right-continuous step function, 0 before its first tenure)."""
        part = self.table.filter(pl.col("cohort") == cohort)
        if part.height == 0:
            raise KeyError(f"no cohort {cohort!r}")
        t = part["tenure"].to_numpy().astype(float)
        idx = np.searchsorted(t, np.asarray(tenure, dtype=float), side="right") - 1
        return np.where(idx >= 0, part["cumhaz"].to_numpy()[np.clip(idx, 0, None)], 0.0)


def nelson_aalen(counts: pl.DataFrame, confidence: float = 0.95) -> NelsonAalenResult:
    """Nelson–Aalen cumulative hazard H(t) = Σ_{s ≤ t} d_s / n_s per cohort, with the Aalen
    variance Σ d_s / n_s² and a log-scale pointwise interval.

    Parameters
    ----------
    counts : columns cohort, tenure, at_risk, churned (queries/counts.sql's output, or
        ``churnlife.counts.counts_from_durations``).
    confidence : coverage of the pointwise intervals.
    """
    z = _z(confidence)
    frames = []
    for cohort, t, n, d in _cohort_arrays(counts):
        with np.errstate(divide="ignore", invalid="ignore"):
            h = np.cumsum(np.where(n > 0, d / n, 0.0))
            var = np.cumsum(np.where(n > 0, d / n**2, 0.0))
            se = np.sqrt(var)
            width = np.where(h > 0, z * se / h, 0.0)
        frames.append(
            pl.DataFrame(
                {
                    "cohort": [cohort] * t.size,
                    "tenure": t,
                    "at_risk": n.astype(np.int64),
                    "churned": d.astype(np.int64),
                    "cumhaz": h,
                    "variance": var,
                    "se": se,
                    "lower": h * np.exp(-width),
                    "upper": h * np.exp(width),
                }
            )
        )
    return NelsonAalenResult(pl.concat(frames), confidence)


@dataclass(frozen=True)
class RestrictedMeanResult:
    """Restricted mean tenure to ``horizon`` per cohort: the average tenure, in the counts' unit,
    that a customer of the cohort spends subscribed within the first ``horizon`` units
    (the area under its Kaplan–Meier curve up to the horizon).

    Attributes
    ----------
    horizon : τ.  confidence : interval coverage.  reference : the cohort others are compared to.
    estimates : cohort, rmst, se, lower, upper (Wald interval on the tenure scale).
    contrasts : cohort, reference, difference (cohort − reference), se, lower, upper, p (two-sided
        z test of equal restricted means), ratio (cohort / reference), ratio_lower, ratio_upper
        (Wald on the log scale). Cohorts are independent samples, so variances add.
    """

    horizon: float
    confidence: float
    reference: str
    estimates: pl.DataFrame
    contrasts: pl.DataFrame

    def to_polars(self) -> pl.DataFrame:
        return self.estimates


def _rmst_one(t: np.ndarray, n: np.ndarray, d: np.ndarray, horizon: float) -> tuple[float, float]:
    """∫₀^τ S(u) du and its variance for one cohort's KM (S steps down at tenures with churn)."""
    jumps = (d > 0) & (t <= horizon)
    tj, nj, dj = t[jumps], n[jumps], d[jumps]
    with np.errstate(divide="ignore", invalid="ignore"):
        s = np.cumprod(1.0 - dj / nj)
    # The curve is 1 on [0, t_1), s_1 on [t_1, t_2), ..., s_m on [t_m, τ].
    edges = np.concatenate([[0.0], tj, [horizon]])
    levels = np.concatenate([[1.0], s])
    pieces = levels * np.diff(edges)
    area = float(pieces.sum())
    # A_j = ∫_{t_j}^τ S: the pieces from the j-th jump on.
    tail = np.cumsum(pieces[::-1])[::-1][1:]
    with np.errstate(divide="ignore", invalid="ignore"):
        g = np.where(nj > dj, dj / (nj * (nj - dj)), 0.0)  # n = d leaves S = 0, so A_j = 0
    return area, float(np.sum(tail**2 * g))


def restricted_mean(
    counts: pl.DataFrame,
    horizon: float,
    confidence: float = 0.95,
    reference: str | None = None,
) -> RestrictedMeanResult:
    """Restricted mean tenure (RMST) to ``horizon`` per cohort, with its variance, and each
    cohort's difference from and ratio to a reference cohort, with intervals.

    Parameters
    ----------
    counts : columns cohort, tenure, at_risk, churned.
    horizon : τ, in the counts' tenure unit; at most every cohort's longest observed tenure
        (beyond it the curve is unknown and the area would be an extrapolation).
    reference : the cohort others are compared to (default: the one with the most customers at
        the start, i.e. the largest first risk set).
    """
    z = _z(confidence)
    if not np.isfinite(horizon) or horizon <= 0:
        raise UserError(
            f"the RMST horizon must be a positive number of tenure units, not {horizon}."
        )
    names, areas, variances, sizes, last = [], [], [], [], []
    for cohort, t, n, d in _cohort_arrays(counts):
        area, var = _rmst_one(t, n, d, horizon)
        names.append(cohort)
        areas.append(area)
        variances.append(var)
        sizes.append(float(n.max()) if n.size else 0.0)
        last.append(float(t.max()))
    shortest = min(last)
    if horizon > shortest:
        who = names[int(np.argmin(last))]
        raise UserError(
            f"the RMST horizon {horizon:g} is past the longest tenure observed for cohort "
            f"{who!r} ({shortest:g}). Choose a horizon of at most {shortest:g} (--horizon), or "
            "leave that cohort out."
        )
    mu, var = np.array(areas), np.array(variances)
    se = np.sqrt(var)
    estimates = pl.DataFrame(
        {"cohort": names, "rmst": mu, "se": se, "lower": mu - z * se, "upper": mu + z * se}
    )
    ref = reference if reference is not None else names[int(np.argmax(sizes))]
    if ref not in names:
        raise UserError(f"reference cohort {ref!r} is not among the cohorts {names}.")
    r = names.index(ref)
    others = [i for i in range(len(names)) if i != r]
    diff = mu[others] - mu[r]
    dse = np.sqrt(var[others] + var[r])
    with np.errstate(divide="ignore", invalid="ignore"):
        log_ratio = np.log(mu[others] / mu[r])
        lse = np.sqrt(var[others] / mu[others] ** 2 + var[r] / mu[r] ** 2)
        p = 2 * stats.norm.sf(np.abs(diff / dse))
    contrasts = pl.DataFrame(
        {
            "cohort": [names[i] for i in others],
            "reference": [ref] * len(others),
            "difference": diff,
            "se": dse,
            "lower": diff - z * dse,
            "upper": diff + z * dse,
            "p": p,
            "ratio": np.exp(log_ratio),
            "ratio_lower": np.exp(log_ratio - z * lse),
            "ratio_upper": np.exp(log_ratio + z * lse),
        },
        schema_overrides={"cohort": pl.String, "reference": pl.String},
    )
    return RestrictedMeanResult(float(horizon), confidence, ref, estimates, contrasts)


def default_horizon(counts: pl.DataFrame, preferred: tuple[int, ...] | list[int]) -> float:
    """The largest of ``preferred`` tenures (e.g. the report's retention_at) that every cohort
    has been observed to; else the shortest cohort's longest observed tenure."""
    shortest = float(counts.group_by("cohort").agg(pl.col("tenure").max())["tenure"].min())
    fits = [float(t) for t in preferred if 0 < t <= shortest]
    return max(fits) if fits else shortest
