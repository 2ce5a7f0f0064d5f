"""Churn by cause: Aalen–Johansen cumulative incidence, cause-specific hazards and the share of
churn each cause accounts for, per cohort, from the counts table.

A customer leaves either by cancelling (voluntary) or by a failed payment not recovered within
the grace period (involuntary). The counts carry churned_voluntary and churned_involuntary per
cohort × tenure, so every estimate here costs cohorts × distinct tenures. Late entry is in the
risk sets already (at risk at t when entry_t < t <= exit_t).

References
----------
Aalen, O. O. & Johansen, S. (1978). An empirical transition matrix for non-homogeneous Markov
    chains based on censored observations. Scand. J. Stat. 5, 141–150.
    (F_k(t) = Σ_{s ≤ t} S(s−) d_k(s) / n(s), S the all-cause Kaplan–Meier)
Marubini, E. & Valsecchi, M. G. (1995). Analysing Survival Data from Clinical Trials and
    Observational Studies. Wiley, ch. 10.  (delta-method variance of F_k; reference recalled from
    memory. The formula coded here is the Greenwood-type delta-method one written out in
    ``_cif_variance``.)
Prentice, R. L. et al. (1978). The analysis of failure times in the presence of competing
    risks. Biometrics 34, 541–554.  (cause-specific hazards)
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import polars as pl
from scipy import stats

from churnlife.km import _validate_counts

CAUSES = {"voluntary": "churned_voluntary", "involuntary": "churned_involuntary"}
UNRECORDED = "cause not recorded"


def _cif_variance(
    n: np.ndarray, d: np.ndarray, dk: np.ndarray, s_minus: np.ndarray, f: np.ndarray
) -> np.ndarray:
    """Delta-method variance of the Aalen–Johansen F_k at each tenure (Greenwood-type):

    Var F_k(t) = Σ_{s≤t} [F_k(t) − F_k(s)]² d/(n(n−d)) + Σ_{s≤t} S(s−)² d_k (n − d_k)/n³
                 − 2 Σ_{s≤t} [F_k(t) − F_k(s)] S(s−) d_k / n²,
    expanded into cumulative sums so it is vectorised over tenures. Undefined (NaN) from the
    first tenure where everyone at risk churns."""
    with np.errstate(divide="ignore", invalid="ignore"):
        ra = np.where(n > 0, d / (n * (n - d)), 0.0)
        v = f**2 * np.cumsum(ra) - 2 * f * np.cumsum(f * ra) + np.cumsum(f**2 * ra)
        v = v + np.cumsum(np.where(n > 0, s_minus**2 * (n - dk) * dk / n**3, 0.0))
        rb = np.where(n > 0, s_minus * dk / n**2, 0.0)
        v = v - 2 * f * np.cumsum(rb) + 2 * np.cumsum(f * rb)
    return v


@dataclass(frozen=True)
class CauseResult:
    """Cumulative incidence of churn by cause per cohort, with cause-specific hazards.

    Attributes
    ----------
    incidence : cohort, tenure, at_risk, cause, churned (by that cause), cif (probability of
        having churned by that cause by the end of the tenure), se (delta method), lower, upper
        (log-log pointwise interval, inside 0–1).
    hazards : cohort, tenure, cause, hazard (d_k / n), cumhaz (cause-specific Nelson–Aalen),
        se (√Σ d_k / n²).
    confidence : interval coverage.  causes : cause labels in order.
    """

    incidence: pl.DataFrame
    hazards: pl.DataFrame
    confidence: float
    causes: tuple[str, ...]

    def to_polars(self) -> pl.DataFrame:
        return self.incidence

    def at(self, tenure: float) -> pl.DataFrame:
        """Cumulative incidence per cohort and cause at one tenure (a cohort's last value if the
        tenure is past it; null for a cohort not yet observed that long)."""
        last = self.incidence.group_by("cohort").agg(pl.col("tenure").max().alias("_last"))
        rows = (
            self.incidence.filter(pl.col("tenure") <= tenure)
            .sort("tenure")
            .group_by("cohort", "cause", maintain_order=True)
            .last()
            .join(last, on="cohort")
        )
        inside = pl.col("_last") >= tenure
        return rows.select(
            "cohort",
            "cause",
            pl.lit(float(tenure)).alias("tenure"),
            *[pl.when(inside).then(pl.col(c)).alias(c) for c in ("cif", "se", "lower", "upper")],
        ).sort("cohort", "cause")

    def shares(self, tenure: float | None = None) -> pl.DataFrame:
        """How much of churn each cause is, per cohort: churned counts and their share of all
        churn observed, and (at ``tenure``, if given) each cause's cumulative incidence and its
        share of the cumulative incidence of any churn."""
        counts = (
            self.incidence.group_by("cohort", "cause", maintain_order=True)
            .agg(pl.col("churned").sum())
            .with_columns(
                (pl.col("churned") / pl.col("churned").sum().over("cohort")).alias("share")
            )
        )
        if tenure is None:
            return counts
        at = self.at(tenure).select(
            "cohort",
            "cause",
            pl.col("cif").alias("cif_at_horizon"),
            pl.col("lower").alias("cif_lower"),
            pl.col("upper").alias("cif_upper"),
        )
        return counts.join(at, on=["cohort", "cause"], how="left").with_columns(
            (pl.col("cif_at_horizon") / pl.col("cif_at_horizon").sum().over("cohort")).alias(
                "share_of_incidence"
            )
        )


def cumulative_incidence(
    counts: pl.DataFrame,
    causes: dict[str, str] | None = None,
    confidence: float = 0.95,
) -> CauseResult:
    """Aalen–Johansen cumulative incidence and cause-specific hazards, per cohort and cause.

    Parameters
    ----------
    counts : cohort, tenure, at_risk, churned and one churn column per cause.
    causes : cause label → counts column (default: voluntary → churned_voluntary, involuntary →
        churned_involuntary). Churn the cause columns do not account for becomes a cause of its
        own, "cause not recorded", so the causes always add up to all churn.
    confidence : coverage of the pointwise intervals.
    """
    if not 0 < confidence < 1:
        raise ValueError("confidence must be in (0, 1)")
    _validate_counts(counts)
    causes = dict(CAUSES if causes is None else causes)
    missing = [c for c in causes.values() if c not in counts.columns]
    if missing:
        raise ValueError(f"counts table lacks cause columns {missing}")
    z = float(stats.norm.ppf(0.5 + confidence / 2))
    accounted = sum((pl.col(c) for c in causes.values()), pl.lit(0))
    leftover = counts.select((pl.col("churned") - accounted).alias("_rest"))["_rest"]
    if int(leftover.min()) < 0:
        raise ValueError("cause columns add up to more than churned")
    work = counts.with_columns(leftover.alias("_unrecorded"))
    if int(leftover.sum()) > 0:
        causes[UNRECORDED] = "_unrecorded"
    inc_frames, haz_frames = [], []
    ordered = work.sort("cohort", "tenure", maintain_order=True)
    for (cohort,), part in ordered.group_by("cohort", maintain_order=True):
        t = part["tenure"].to_numpy().astype(float)
        n = part["at_risk"].to_numpy().astype(float)
        d = part["churned"].to_numpy().astype(float)
        with np.errstate(divide="ignore", invalid="ignore"):
            s = np.cumprod(np.where(n > 0, 1.0 - d / n, 1.0))
        s_minus = np.concatenate([[1.0], s[:-1]])
        for label, column in causes.items():
            dk = part[column].to_numpy().astype(float)
            with np.errstate(divide="ignore", invalid="ignore"):
                jump = np.where(n > 0, dk / n, 0.0)
                f = np.cumsum(s_minus * jump)
                var = _cif_variance(n, d, dk, s_minus, f)
                se = np.sqrt(var)
                width = z * se / (f * np.log(f))
                lower = np.where(f > 0, f ** np.exp(-width), 0.0)
                upper = np.where(f > 0, f ** np.exp(width), 0.0)
                haz_var = np.cumsum(np.where(n > 0, dk / n**2, 0.0))
            size = t.size
            inc_frames.append(
                pl.DataFrame(
                    {
                        "cohort": [str(cohort)] * size,
                        "tenure": t,
                        "at_risk": n.astype(np.int64),
                        "cause": [label] * size,
                        "churned": dk.astype(np.int64),
                        "cif": f,
                        "se": se,
                        "lower": lower,
                        "upper": upper,
                    }
                )
            )
            haz_frames.append(
                pl.DataFrame(
                    {
                        "cohort": [str(cohort)] * size,
                        "tenure": t,
                        "cause": [label] * size,
                        "hazard": jump,
                        "cumhaz": np.cumsum(jump),
                        "se": np.sqrt(haz_var),
                    }
                )
            )
    return CauseResult(
        pl.concat(inc_frames), pl.concat(haz_frames), confidence, tuple(causes.keys())
    )
