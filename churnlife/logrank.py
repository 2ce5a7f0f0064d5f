"""Log-rank family of tests comparing cohorts' retention, from the counts table.

Every test here needs, per cohort and tenure, only the number at risk and the number churned, so it
runs on queries/counts.sql's output and its cost grows with cohorts × distinct tenures.

References
----------
Mantel, N. (1966). Evaluation of survival data and two new rank order statistics arising in its
    consideration. Cancer Chemotherapy Reports 50, 163–170.  (log-rank)
Gehan, E. A. (1965). A generalized Wilcoxon test for comparing arbitrarily singly-censored samples.
    Biometrika 52, 203–223;  Breslow, N. (1970). Biometrika 57, 579–594.  (weight n)
Tarone, R. E. & Ware, J. (1977). On distribution-free tests for equality of survival distributions.
    Biometrika 64, 156–160.  (weight √n)
Peto, R. & Peto, J. (1972). Asymptotically efficient rank invariant test procedures. JRSS A 135,
    185–207;  Prentice, R. L. (1978). Biometrika 65, 167–179.  (weight Π(1 − d/(n + 1)))
Harrington, D. P. & Fleming, T. R. (1982). A class of rank test procedures for censored survival
    data. Biometrika 69, 553–566.  (weight S(t−)^ρ (1 − S(t−))^γ)
Holm, S. (1979). A simple sequentially rejective multiple test procedure. Scand. J. Stat. 6, 65–70.
"""

from __future__ import annotations

from dataclasses import dataclass
from itertools import combinations

import numpy as np
import polars as pl
from scipy import stats

WEIGHTS = ("logrank", "gehan-breslow", "tarone-ware", "peto-peto", "fleming-harrington")


@dataclass(frozen=True)
class LogRankResult:
    """A k-sample test of equal retention.

    Attributes
    ----------
    weight : the weight family used; rho, gamma its Fleming–Harrington exponents.
    cohorts : cohorts compared, in order.
    observed, expected : churns per cohort, and those expected if retention were equal.
    statistic : chi-square; df its degrees of freedom (k − 1); pvalue.
    strata : the strata the test was summed over (empty: unstratified).
    """

    weight: str
    rho: float
    gamma: float
    cohorts: tuple[str, ...]
    observed: np.ndarray
    expected: np.ndarray
    statistic: float
    df: int
    pvalue: float
    strata: tuple[str, ...] = ()

    def to_polars(self) -> pl.DataFrame:
        return pl.DataFrame(
            {"cohort": list(self.cohorts), "observed": self.observed, "expected": self.expected}
        )


@dataclass(frozen=True)
class TrendResult:
    """Test for a trend across ordered cohorts (scores ``scores``): chi-square on 1 df."""

    cohorts: tuple[str, ...]
    scores: np.ndarray
    z: float
    statistic: float
    pvalue: float


def _grid(counts: pl.DataFrame, cohorts: list[str]) -> tuple[np.ndarray, np.ndarray]:
    """At-risk and churned as (tenures × cohorts) arrays on the union of the cohorts' tenures."""
    part = counts.filter(pl.col("cohort").is_in(cohorts)).select(
        "cohort", "tenure", "at_risk", "churned"
    )
    wide_n = part.pivot(on="cohort", index="tenure", values="at_risk").sort("tenure")
    wide_d = part.pivot(on="cohort", index="tenure", values="churned").sort("tenure")
    # Between a cohort's rows nothing enters or leaves, so its risk set equals the next row's;
    # past its last row nobody is at risk.
    n = (
        wide_n.select(pl.col(cohorts).fill_null(strategy="backward").fill_null(0))
        .to_numpy()
        .astype(float)
    )
    d = wide_d.select(cohorts).fill_null(0).to_numpy().astype(float)
    keep = d.sum(axis=1) > 0  # only tenures with a churn carry information
    return n[keep], d[keep]


def _weights(n_tot: np.ndarray, d_tot: np.ndarray, weight: str, rho: float, gamma: float):
    if weight == "logrank":
        return np.ones_like(n_tot)
    if weight == "gehan-breslow":
        return n_tot
    if weight == "tarone-ware":
        return np.sqrt(n_tot)
    if weight == "peto-peto":
        return np.cumprod(1.0 - d_tot / (n_tot + 1.0))
    # Fleming–Harrington: pooled Kaplan–Meier just before each tenure
    s = np.cumprod(1.0 - d_tot / n_tot)
    s_minus = np.concatenate([[1.0], s[:-1]])
    return s_minus**rho * (1.0 - s_minus) ** gamma


def _score(n: np.ndarray, d: np.ndarray, weight: str, rho: float, gamma: float):
    """Weighted O − E (k vector) and its hypergeometric covariance (k × k)."""
    n_tot, d_tot = n.sum(axis=1), d.sum(axis=1)
    w = _weights(n_tot, d_tot, weight, rho, gamma)
    frac = n / n_tot[:, None]
    e = frac * d_tot[:, None]
    u = (w[:, None] * (d - e)).sum(axis=0)
    # (n − d)/(n − 1) is the hypergeometric factor; 0 where only one customer is at risk
    with np.errstate(invalid="ignore", divide="ignore"):
        factor = np.where(n_tot > 1, d_tot * (n_tot - d_tot) / (n_tot - 1), 0.0)
    ww = (w**2 * factor)[:, None, None]
    eye = np.eye(n.shape[1])[None, :, :]
    v = (ww * frac[:, :, None] * (eye - frac[:, None, :])).sum(axis=0)
    return u, v, d.sum(axis=0), e.sum(axis=0)


def _chi2(u: np.ndarray, v: np.ndarray) -> tuple[float, int]:
    # drop the last cohort: the k scores sum to zero
    uu, vv = u[:-1], v[:-1, :-1]
    if not uu.size:
        return 0.0, 0
    try:
        return float(uu @ np.linalg.solve(vv, uu)), uu.size
    except np.linalg.LinAlgError:
        # Cohorts never at risk at the same churn tenures (e.g. signup quarters years apart)
        # carry no comparison: a generalised inverse, with df its rank (as survdiff does).
        rank = int(np.linalg.matrix_rank(vv))
        return (float(uu @ np.linalg.pinv(vv) @ uu) if rank else 0.0), rank


def _validate(counts: pl.DataFrame, weight: str, rho: float, gamma: float) -> None:
    need = {"cohort", "tenure", "at_risk", "churned"}
    if not need <= set(counts.columns):
        raise ValueError(f"counts needs columns {sorted(need)}")
    if weight not in WEIGHTS:
        raise ValueError(f"weight must be one of {WEIGHTS}")
    if rho < 0 or gamma < 0:
        raise ValueError("Fleming–Harrington exponents must be ≥ 0")


def logrank_test(
    counts: pl.DataFrame,
    cohorts: list[str] | None = None,
    weight: str = "logrank",
    rho: float = 0.0,
    gamma: float = 0.0,
    strata: str | None = None,
) -> LogRankResult:
    """k-sample (weighted) log-rank test of equal retention across ``cohorts``.

    Parameters
    ----------
    counts : cohort, tenure, at_risk, churned (and the ``strata`` column if given).
    cohorts : which cohorts to compare (default: all, in order of appearance).
    weight : "logrank", "gehan-breslow", "tarone-ware", "peto-peto" or "fleming-harrington"
        (with exponents ``rho`` on S(t−) and ``gamma`` on 1 − S(t−)).
    strata : a column of ``counts``; scores and variances are summed over its levels, each with
        its own pooled risk sets (e.g. compare plans within channel).
    """
    _validate(counts, weight, rho, gamma)
    names = cohorts or counts["cohort"].unique(maintain_order=True).to_list()
    if len(names) < 2:
        raise ValueError("need at least two cohorts to compare")
    k = len(names)
    u, v = np.zeros(k), np.zeros((k, k))
    obs, exp = np.zeros(k), np.zeros(k)
    levels: list[str] = []
    groups = [(None, counts)] if strata is None else counts.group_by(strata, maintain_order=True)
    for key, part in groups:
        present = [c for c in names if c in set(part["cohort"].unique().to_list())]
        if len(present) < 2:
            continue  # a stratum with one cohort says nothing about differences
        idx = [names.index(c) for c in present]
        n, d = _grid(part, present)
        if n.size == 0:
            continue
        su, sv, so, se = _score(n, d, weight, rho, gamma)
        u[idx] += su
        v[np.ix_(idx, idx)] += sv
        obs[idx] += so
        exp[idx] += se
        if key is not None:
            levels.append(str(key[0] if isinstance(key, tuple) else key))
    stat, df = _chi2(u, v)
    return LogRankResult(
        weight,
        rho,
        gamma,
        tuple(names),
        obs,
        exp,
        stat,
        df,
        float(stats.chi2.sf(stat, df)) if df else float("nan"),
        tuple(levels),
    )


def trend_test(
    counts: pl.DataFrame,
    cohorts: list[str],
    scores: list[float] | None = None,
    weight: str = "logrank",
) -> TrendResult:
    """Test for a monotone trend in hazard across ordered cohorts (e.g. signup quarters), with
    scores 1, 2, ..., k unless given: z = c'U / sqrt(c'Vc)."""
    _validate(counts, weight, 0.0, 0.0)
    c = np.arange(1.0, len(cohorts) + 1) if scores is None else np.asarray(scores, float)
    if c.size != len(cohorts) or len(cohorts) < 2:
        raise ValueError("one score per cohort, at least two cohorts")
    n, d = _grid(counts, cohorts)
    u, v, _, _ = _score(n, d, weight, 0.0, 0.0)
    z = float(c @ u / np.sqrt(c @ v @ c))
    return TrendResult(tuple(cohorts), c, z, z * z, float(2 * stats.norm.sf(abs(z))))


def holm(pvalues: np.ndarray) -> np.ndarray:
    """Holm step-down adjusted p-values (Holm 1979)."""
    p = np.asarray(pvalues, float)
    m = p.size
    order = np.argsort(p)
    adj = np.maximum.accumulate((m - np.arange(m)) * p[order])
    out = np.empty(m)
    out[order] = np.minimum(adj, 1.0)
    return out


def pairwise_tests(
    counts: pl.DataFrame, weight: str = "logrank", rho: float = 0.0, gamma: float = 0.0
) -> pl.DataFrame:
    """Every pair of cohorts compared with a 2-sample test; p-values adjusted by Holm and by
    Bonferroni for the number of pairs."""
    names = counts["cohort"].unique(maintain_order=True).to_list()
    rows = [logrank_test(counts, [a, b], weight, rho, gamma) for a, b in combinations(names, 2)]
    p = np.array([r.pvalue for r in rows])
    # A pair never at risk at the same churn tenures has no test (NaN); the adjustments count
    # only the pairs that were tested.
    ok = np.isfinite(p)
    p_holm, p_bonf = np.full(p.size, np.nan), np.full(p.size, np.nan)
    if ok.any():
        p_holm[ok] = holm(p[ok])
        p_bonf[ok] = np.minimum(p[ok] * ok.sum(), 1.0)
    return pl.DataFrame(
        {
            "cohort_a": [r.cohorts[0] for r in rows],
            "cohort_b": [r.cohorts[1] for r in rows],
            "chi_square": [r.statistic for r in rows],
            "p": p,
            "p_holm": p_holm,
            "p_bonferroni": p_bonf,
        },
        schema_overrides={"cohort_a": pl.String, "cohort_b": pl.String},
    )
