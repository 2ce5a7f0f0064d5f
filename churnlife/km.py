"""Kaplan–Meier retention curves from the survival counts (cohort × tenure).

The estimator only needs, per cohort and tenure, the number at risk and the number churned, so it
runs on the counts table (queries/counts.sql) and its cost grows with cohorts × distinct tenures.
Late entry is already in the risk sets: a spell is at risk at t when entry_t < t <= exit_t.

References
----------
Kaplan, E. L. & Meier, P. (1958). Nonparametric estimation from incomplete observations.
    JASA 53, 457–481.
Greenwood, M. (1926). The natural duration of cancer. Reports on Public Health and Medical
    Subjects 33, HMSO.  (variance Σ d / (n (n - d)))
Kalbfleisch, J. D. & Prentice, R. L. (2002). The Statistical Analysis of Failure Time Data, 2nd ed.
    (log-log interval S^exp(±z σ / log S)).
Brookmeyer, R. & Crowley, J. (1982). A confidence interval for the median survival time.
    Biometrics 38, 29–41.  (median interval by inverting the pointwise test)
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import polars as pl
from scipy import stats

COUNT_COLUMNS = ("cohort", "tenure", "at_risk", "churned")


@dataclass(frozen=True)
class CohortCurve:
    """One cohort's Kaplan–Meier curve at its tenures (every tenure in the counts, so the curve
    can be read at any tenure; it only moves where churned > 0)."""

    cohort: str
    tenure: np.ndarray
    at_risk: np.ndarray
    churned: np.ndarray
    survival: np.ndarray
    se: np.ndarray
    lower: np.ndarray
    upper: np.ndarray
    greenwood: np.ndarray  # Σ d / (n (n - d)) up to t: the variance of log S

    def at(self, t: float | np.ndarray) -> np.ndarray:
        """S at tenure t (right-continuous step function; 1 before the first tenure)."""
        idx = np.searchsorted(self.tenure, np.asarray(t, dtype=float), side="right") - 1
        return np.where(idx >= 0, self.survival[np.clip(idx, 0, None)], 1.0)

    def _lookup(self, values: np.ndarray, t: np.ndarray, before: float) -> np.ndarray:
        idx = np.searchsorted(self.tenure, t, side="right") - 1
        return np.where(idx >= 0, values[np.clip(idx, 0, None)], before)


@dataclass(frozen=True)
class Median:
    cohort: str
    median: float
    lower: float
    upper: float


@dataclass(frozen=True)
class KaplanMeierResult:
    """Kaplan–Meier curves per cohort with Greenwood standard errors and pointwise intervals.

    Attributes
    ----------
    curves : one ``CohortCurve`` per cohort, in the counts' order.
    confidence : the intervals' coverage (e.g. 0.95).
    interval : "log-log" (default; stays inside [0, 1]) or "plain" (S ± z·SE, clipped).
    """

    curves: list[CohortCurve]
    confidence: float
    interval: str
    medians: list[Median] = field(default_factory=list)

    def curve(self, cohort: str) -> CohortCurve:
        for c in self.curves:
            if c.cohort == cohort:
                return c
        raise KeyError(f"no cohort {cohort!r}; cohorts are {[c.cohort for c in self.curves]}")

    def _repr_html_(self) -> str:  # shown in notebooks
        from churnlife.notebook import km_html

        return km_html(self)

    def to_polars(self) -> pl.DataFrame:
        """Long table: cohort, tenure, at_risk, churned, survival, se, lower, upper."""
        return pl.concat(
            [
                pl.DataFrame(
                    {
                        "cohort": [c.cohort] * len(c.tenure),
                        "tenure": c.tenure.astype(np.int64),
                        "at_risk": c.at_risk.astype(np.int64),
                        "churned": c.churned.astype(np.int64),
                        "survival": c.survival,
                        "se": c.se,
                        "lower": c.lower,
                        "upper": c.upper,
                    }
                )
                for c in self.curves
            ]
        )

    def medians_table(self) -> pl.DataFrame:
        return pl.DataFrame(
            {
                "cohort": [m.cohort for m in self.medians],
                "median_tenure": [m.median for m in self.medians],
                "lower": [m.lower for m in self.medians],
                "upper": [m.upper for m in self.medians],
            },
            schema={
                "cohort": pl.String,
                "median_tenure": pl.Float64,
                "lower": pl.Float64,
                "upper": pl.Float64,
            },
        )

    def retention_at(self, tenures: list[int] | tuple[int, ...]) -> pl.DataFrame:
        """Retention S(t) with its interval at chosen tenures, per cohort. A tenure past a cohort's
        last observed tenure is left empty (null) rather than extrapolated."""
        t = np.asarray(tenures, dtype=float)
        frames = []
        for c in self.curves:
            inside = t <= c.tenure.max()

            def read(values: np.ndarray, c: CohortCurve = c, inside: np.ndarray = inside):
                return np.where(inside, c._lookup(values, t, 1.0), np.nan)

            frames.append(
                pl.DataFrame(
                    {
                        "cohort": [c.cohort] * len(t),
                        "tenure": np.asarray(tenures, dtype=np.int64),
                        "retention": read(c.survival),
                        "lower": read(c.lower),
                        "upper": read(c.upper),
                    }
                ).with_columns(pl.col("retention", "lower", "upper").fill_nan(None))
            )
        return pl.concat(frames)


def _validate_counts(counts: pl.DataFrame) -> None:
    missing = [c for c in COUNT_COLUMNS if c not in counts.columns]
    if missing:
        raise ValueError(f"counts table lacks columns {missing}")
    if counts.height == 0:
        raise ValueError("counts table is empty")
    bad = counts.filter((pl.col("churned") > pl.col("at_risk")) | (pl.col("churned") < 0))
    if bad.height:
        raise ValueError(f"churned exceeds at_risk in {bad.height} rows: counts are inconsistent")


def kaplan_meier(
    counts: pl.DataFrame, confidence: float = 0.95, interval: str = "log-log"
) -> KaplanMeierResult:
    """Kaplan–Meier survival per cohort from a counts table.

    Parameters
    ----------
    counts : columns cohort, tenure, at_risk, churned (queries/counts.sql's output).
    confidence : coverage of the pointwise intervals and the median interval.
    interval : "log-log" or "plain".
    """
    if not 0 < confidence < 1:
        raise ValueError("confidence must be in (0, 1)")
    if interval not in ("log-log", "plain"):
        raise ValueError('interval must be "log-log" or "plain"')
    _validate_counts(counts)
    z = float(stats.norm.ppf(0.5 + confidence / 2))
    curves, medians = [], []
    ordered = counts.sort("cohort", "tenure", maintain_order=True)
    for (cohort,), part in ordered.group_by("cohort", maintain_order=True):
        t = part["tenure"].to_numpy().astype(float)
        n = part["at_risk"].to_numpy().astype(float)
        d = part["churned"].to_numpy().astype(float)
        with np.errstate(divide="ignore", invalid="ignore"):
            factor = np.where(n > 0, 1.0 - d / n, 1.0)
            surv = np.cumprod(factor)
            step = np.where((n > d) & (d > 0), d / (n * (n - d)), 0.0)
            step = np.where((n == d) & (d > 0), np.inf, step)
            gw = np.cumsum(step)
            se = np.where(surv > 0, surv * np.sqrt(gw), np.nan)
            lower, upper = _interval(surv, gw, z, interval)
        curve = CohortCurve(str(cohort), t, n, d, surv, se, lower, upper, gw)
        curves.append(curve)
        medians.append(_median(curve, z))
    return KaplanMeierResult(curves, confidence, interval, medians)


def _interval(
    surv: np.ndarray, gw: np.ndarray, z: float, kind: str
) -> tuple[np.ndarray, np.ndarray]:
    with np.errstate(divide="ignore", invalid="ignore"):
        if kind == "plain":
            half = z * surv * np.sqrt(gw)
            lo, hi = np.clip(surv - half, 0, 1), np.clip(surv + half, 0, 1)
        else:
            log_s = np.log(surv)
            width = z * np.sqrt(gw) / np.abs(log_s)
            lo, hi = surv ** np.exp(width), surv ** np.exp(-width)
        # Before any churn S = 1 with no variance: the interval is the point itself.
        first = gw == 0
        lo = np.where(first, surv, lo)
        hi = np.where(first, surv, hi)
        dead = surv == 0
        lo = np.where(dead, 0.0, lo)
        hi = np.where(dead, np.nan, hi)
    return lo, hi


def _median(curve: CohortCurve, z: float) -> Median:
    """Median tenure: the first tenure with S(t) <= 0.5. Its interval reads the pointwise band:
    from the first tenure whose lower limit is at or below 0.5 to the first whose upper limit is
    (Brookmeyer & Crowley 1982, applied to the chosen band); "not reached" is +inf."""
    events = curve.churned > 0
    t = curve.tenure[events]
    s, lo, hi = curve.survival[events], curve.lower[events], curve.upper[events]

    def first(mask: np.ndarray, missing: float) -> float:
        hit = np.flatnonzero(mask)
        return float(t[hit[0]]) if hit.size else missing

    nan = float("nan")
    return Median(
        curve.cohort,
        first(s <= 0.5, nan),
        first(lo <= 0.5, nan),
        first(np.nan_to_num(hi, nan=0.0) <= 0.5, float("inf")),
    )
