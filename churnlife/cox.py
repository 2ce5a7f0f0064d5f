"""Cox proportional hazards fitted on aggregated counts (risk sets per covariate pattern × tenure).

With categorical covariates (cohort attributes) every customer in a pattern shares one linear
predictor, so the partial likelihood needs only, per stratum, tenure and pattern, the number at
risk and the number churned: the counts table of ``Extract.counts_by(covariates)``. Late entry is
already inside the at-risk counts (entry < t <= exit). Cost grows with patterns × tenures.

Efron's tie correction Σ_{j<D} log(R − (j/D)E) is evaluated in closed form with log-gamma,
digamma and trigamma functions (exactly, by expanding the D terms, where D is small or the closed
form would lose precision), so it too costs one term per tenure.

References
----------
Cox, D. R. (1972). Regression models and life-tables. JRSS B 34, 187–220.
Breslow, N. (1974). Covariance analysis of censored survival data. Biometrics 30, 89–99.
Efron, B. (1977). The efficiency of Cox's likelihood function for censored data. JASA 72, 557–565.
Grambsch, P. M. & Therneau, T. M. (1994). Proportional hazards tests and diagnostics based on
    weighted residuals. Biometrika 81, 515–526.  (here: the covariate × log-tenure form)
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import polars as pl
from scipy import special, stats

TIES = ("breslow", "efron")
_EXPAND_TIES_UP_TO = 64  # expand Efron's D terms exactly when D is at most this
_CLOSED_FORM_MAX_A = 1e6  # closed form only while a = R·D/E is moderate (digamma precision)


@dataclass(frozen=True)
class _Block:
    """One stratum: at-risk N and churned D (tenures × patterns), design X (tenures × patterns ×
    coefficients), and the tenures."""

    stratum: str
    tenure: np.ndarray
    n: np.ndarray
    d: np.ndarray
    x: np.ndarray


@dataclass(frozen=True)
class TestResult:
    statistic: float
    df: int
    pvalue: float


@dataclass(frozen=True)
class CoxResult:
    """A fitted Cox model. Coefficients are log hazard ratios against each covariate's reference
    level (``reference``); intervals are Wald intervals at ``confidence``."""

    names: tuple[str, ...]
    coef: np.ndarray
    se: np.ndarray
    cov: np.ndarray
    confidence: float
    loglik: float
    loglik_null: float
    lr_test: TestResult
    wald_test: TestResult
    score_test: TestResult
    ties: str
    strata: str | None
    reference: dict[str, str]
    n_iter: int
    converged: bool
    n_churned: int
    blocks: tuple[_Block, ...] = ()

    @property
    def hazard_ratio(self) -> np.ndarray:
        return np.exp(self.coef)

    @property
    def z(self) -> np.ndarray:
        return self.coef / self.se

    @property
    def pvalues(self) -> np.ndarray:
        return 2 * stats.norm.sf(np.abs(self.z))

    def conf_int(self) -> np.ndarray:
        """Wald interval for the log hazard ratios (k × 2)."""
        q = stats.norm.ppf(0.5 + self.confidence / 2)
        return np.column_stack([self.coef - q * self.se, self.coef + q * self.se])

    def to_polars(self) -> pl.DataFrame:
        ci = np.exp(self.conf_int())
        return pl.DataFrame(
            {
                "term": list(self.names),
                "log_hr": self.coef,
                "se": self.se,
                "hazard_ratio": self.hazard_ratio,
                "hr_lower": ci[:, 0],
                "hr_upper": ci[:, 1],
                "z": self.z,
                "p": self.pvalues,
            }
        )

    def baseline_cumulative_hazard(self) -> pl.DataFrame:
        """Cumulative baseline hazard per stratum at each tenure (right-continuous: includes the
        jump at t), Breslow's estimator, or its Efron analogue when ties = "efron"."""
        frames = []
        for b in self.blocks:
            eta = b.x @ self.coef
            w = np.exp(eta)
            r = (b.n * w).sum(axis=1)
            e = (b.d * w).sum(axis=1)
            dd = b.d.sum(axis=1)
            if self.ties == "breslow":
                jump = np.where(dd > 0, dd / np.where(r > 0, r, 1), 0.0)
            else:
                jump = _efron_parts(r, e, dd, order=1)[1]
            frames.append(
                pl.DataFrame(
                    {
                        "stratum": [b.stratum] * b.tenure.size,
                        "tenure": b.tenure,
                        "cumulative_hazard": np.cumsum(jump),
                    }
                )
            )
        return pl.concat(frames)


# --- the partial likelihood ----------------------------------------------------------------------


def _efron_parts(r: np.ndarray, e: np.ndarray, dd: np.ndarray, order: int):
    """Per tenure, f = Σ_{j<D} log(R − (j/D)E) and its partial derivatives in R and E:
    returns (f, f_R, f_E[, f_RR, f_RE, f_EE]) as arrays over tenures (0 where D = 0)."""
    t = r.size
    out = [np.zeros(t) for _ in range(6 if order >= 2 else 3)]
    has = dd > 0
    small = has & (
        (dd <= _EXPAND_TIES_UP_TO) | (r * dd / np.where(e > 0, e, 1) > _CLOSED_FORM_MAX_A)
    )
    big = has & ~small
    if small.any():
        idx = np.flatnonzero(small)
        reps = dd[idx].astype(np.int64)
        rows = np.repeat(np.arange(idx.size), reps)
        j = np.arange(reps.sum()) - np.repeat(np.cumsum(reps) - reps, reps)
        c = j / np.repeat(dd[idx], reps)
        g = 1.0 / (np.repeat(r[idx], reps) - c * np.repeat(e[idx], reps))
        sums = [np.log(1.0 / g), g, -c * g]
        if order >= 2:
            sums += [-(g**2), c * g**2, -(c**2) * g**2]
        for k, s in enumerate(sums):
            out[k][idx] = np.bincount(rows, weights=s, minlength=idx.size)
    if big.any():
        R, E, D = r[big], e[big], dd[big]
        a = R * D / E
        s1 = special.digamma(a + 1) - special.digamma(a - D + 1)
        out[0][big] = D * np.log(E / D) + special.gammaln(a + 1) - special.gammaln(a - D + 1)
        out[1][big] = D / E * s1
        out[2][big] = -(a * s1 - D) / E
        if order >= 2:
            s2 = special.polygamma(1, a - D + 1) - special.polygamma(1, a + 1)
            out[3][big] = -((D / E) ** 2) * s2
            out[4][big] = D / E**2 * (a * s2 - s1)
            out[5][big] = -(a**2 * s2 - 2 * a * s1 + D) / E**2
    return out


def _loglik(beta: np.ndarray, blocks: list[_Block], ties: str, derivs: bool = True):
    k = beta.size
    ll, grad, hess = 0.0, np.zeros(k), np.zeros((k, k))
    for b in blocks:
        eta = b.x @ beta  # tenures × patterns
        w = np.exp(eta)
        nw, dw = b.n * w, b.d * w
        r, e = nw.sum(axis=1), dw.sum(axis=1)
        dd = b.d.sum(axis=1)
        ll += float((b.d * eta).sum())
        if not derivs:
            if ties == "breslow":
                ll -= float((dd[dd > 0] * np.log(r[dd > 0])).sum())
            else:
                ll -= float(_efron_parts(r, e, dd, order=0)[0].sum())
            continue
        grad += np.einsum("tp,tpk->k", b.d, b.x)
        r1 = np.einsum("tp,tpk->tk", nw, b.x)
        r2 = np.einsum("tp,tpk,tpl->tkl", nw, b.x, b.x)
        if ties == "breslow":
            on = dd > 0
            f_r = np.where(on, dd / np.where(r > 0, r, 1), 0.0)
            ll -= float((dd[on] * np.log(r[on])).sum())
            f_rr = -np.where(on, dd / np.where(r > 0, r, 1) ** 2, 0.0)
            grad -= f_r @ r1
            hess -= np.einsum("t,tkl->kl", f_r, r2) + np.einsum("t,tk,tl->kl", f_rr, r1, r1)
        else:
            f, f_r, f_e, f_rr, f_re, f_ee = _efron_parts(r, e, dd, order=2)
            e1 = np.einsum("tp,tpk->tk", dw, b.x)
            e2 = np.einsum("tp,tpk,tpl->tkl", dw, b.x, b.x)
            ll -= float(f.sum())
            grad -= f_r @ r1 + f_e @ e1
            hess -= (
                np.einsum("t,tkl->kl", f_r, r2)
                + np.einsum("t,tkl->kl", f_e, e2)
                + np.einsum("t,tk,tl->kl", f_rr, r1, r1)
                + np.einsum("t,tk,tl->kl", f_re, r1, e1)
                + np.einsum("t,tk,tl->kl", f_re, e1, r1)
                + np.einsum("t,tk,tl->kl", f_ee, e1, e1)
            )
    return ll, grad, hess


def _newton(blocks: list[_Block], k: int, ties: str, max_iter: int = 50, tol: float = 1e-10):
    """Newton–Raphson from β = 0 with step halving (the log-likelihood never decreases)."""
    beta = np.zeros(k)
    ll, g, h = _loglik(beta, blocks, ties)
    for it in range(1, max_iter + 1):
        try:
            step = np.linalg.solve(-h, g)
        except np.linalg.LinAlgError:
            return beta, ll, g, h, it, False
        for _ in range(30):
            cand = beta + step
            ll_c = _loglik(cand, blocks, ties, derivs=False)[0]
            if np.isfinite(ll_c) and ll_c >= ll - 1e-12 * abs(ll):
                break
            step /= 2
        beta = cand
        ll, g, h = _loglik(beta, blocks, ties)
        if np.max(np.abs(step)) < tol or np.max(np.abs(g)) < tol:
            return beta, ll, g, h, it, True
    return beta, ll, g, h, max_iter, False


# --- design from the counts table ------------------------------------------------------------


def _design(
    counts: pl.DataFrame,
    covariates: list[str],
    numeric: list[str],
    strata: str | None,
    reference: dict[str, str],
    log_tenure_terms: list[str] | None = None,
) -> tuple[list[_Block], list[str], dict[str, str]]:
    """Blocks per stratum on a dense tenure × pattern grid, treatment-coded categorical columns."""
    cats = [c for c in covariates if c not in numeric]
    levels: dict[str, list[str]] = {}
    ref_used: dict[str, str] = {}
    for c in cats:
        lv = sorted(counts[c].cast(pl.String).fill_null("(none)").unique().to_list())
        ref = reference.get(c, lv[0])
        if ref not in lv:
            raise ValueError(f"reference level {ref!r} is not a level of {c}: {lv}")
        ref_used[c] = ref
        levels[c] = [v for v in lv if v != ref]
    names = [f"{c}={v}" for c in cats for v in levels[c]] + list(numeric)
    base_k = len(names)
    extra = log_tenure_terms or []
    names += [f"{n} × log(tenure)" for n in extra]

    data = counts.with_columns(
        [pl.col(c).cast(pl.String).fill_null("(none)") for c in cats]
        + (
            [pl.col(strata).cast(pl.String).alias("_stratum")]
            if strata
            else [pl.lit("all").alias("_stratum")]
        )
    )
    pattern_cols = cats + list(numeric)
    blocks = []
    for (stratum,), part in data.group_by("_stratum", maintain_order=True):
        pats = part.select(pattern_cols).unique(maintain_order=True).with_row_index("_p")
        part = part.join(pats, on=pattern_cols, how="left", nulls_equal=True)
        tenures = np.sort(part["tenure"].unique().to_numpy())
        t_idx = np.searchsorted(tenures, part["tenure"].to_numpy())
        p_idx = part["_p"].to_numpy()
        shape = (tenures.size, pats.height)
        n = np.zeros(shape)
        d = np.zeros(shape)
        np.add.at(n, (t_idx, p_idx), part["at_risk"].to_numpy())
        np.add.at(d, (t_idx, p_idx), part["churned"].to_numpy())
        # fill tenures where a pattern has no row: its risk set is the next row's (see logrank)
        present = np.zeros(shape, dtype=bool)
        present[t_idx, p_idx] = True
        n = _backfill(n, present)
        xp = np.zeros((pats.height, base_k))
        col = 0
        for c in cats:
            for v in levels[c]:
                xp[:, col] = (pats[c] == v).to_numpy()
                col += 1
        for c in numeric:
            xp[:, col] = pats[c].cast(pl.Float64).to_numpy()
            col += 1
        x = np.broadcast_to(xp, (tenures.size, *xp.shape)).copy()
        if extra:
            lt = np.log(np.maximum(tenures, 1e-12))[:, None, None]
            idx = [names.index(n) for n in extra]
            x = np.concatenate([x, x[:, :, idx] * lt], axis=2)
        blocks.append(_Block(str(stratum), tenures, n, d, x))
    return blocks, names, ref_used


def _backfill(n: np.ndarray, present: np.ndarray) -> np.ndarray:
    """Missing (tenure, pattern) cells take the next present cell's value, 0 after the last."""
    t = n.shape[0]
    idx = np.where(present, np.arange(t)[:, None], t)
    nxt = np.minimum.accumulate(idx[::-1], axis=0)[::-1]
    padded = np.vstack([n, np.zeros((1, n.shape[1]))])
    return np.take_along_axis(padded, nxt, axis=0)


def cox_fit(
    counts: pl.DataFrame,
    covariates: list[str],
    ties: str = "efron",
    strata: str | None = None,
    numeric: list[str] | None = None,
    reference: dict[str, str] | None = None,
    confidence: float = 0.95,
    _log_tenure_terms: list[str] | None = None,
) -> CoxResult:
    """Fit a Cox model on counts per covariate pattern × tenure.

    Parameters
    ----------
    counts : columns tenure, at_risk, churned, each covariate (and ``strata``) — e.g.
        ``Extract.counts_by(["plan", "channel"])``.
    covariates : cohort attributes; categorical unless listed in ``numeric``.
    ties : "efron" (default) or "breslow".
    strata : a column whose levels get their own baseline hazard.
    reference : reference level per categorical covariate (default: the first in sorted order).
    """
    if ties not in TIES:
        raise ValueError(f"ties must be one of {TIES}")
    numeric = list(numeric or [])
    need = {"tenure", "at_risk", "churned", *covariates} | ({strata} if strata else set())
    missing = need - set(counts.columns)
    if missing:
        raise ValueError(f"counts lacks columns {sorted(missing)}")
    if not covariates:
        raise ValueError("give at least one covariate")
    blocks, names, ref_used = _design(
        counts, covariates, numeric, strata, reference or {}, _log_tenure_terms
    )
    k = len(names)
    beta, ll, _, h, n_iter, ok = _newton(blocks, k, ties)
    info = -h
    try:
        cov = np.linalg.inv(info)
    except np.linalg.LinAlgError:
        cov = np.full((k, k), np.nan)
        ok = False
    se = np.sqrt(np.diag(cov))
    ll0, g0, h0 = _loglik(np.zeros(k), blocks, ties)
    lr = 2 * (ll - ll0)
    wald = float(beta @ info @ beta)
    score = float(g0 @ np.linalg.solve(-h0, g0))
    return CoxResult(
        tuple(names),
        beta,
        se,
        cov,
        confidence,
        ll,
        ll0,
        TestResult(lr, k, float(stats.chi2.sf(lr, k))),
        TestResult(wald, k, float(stats.chi2.sf(wald, k))),
        TestResult(score, k, float(stats.chi2.sf(score, k))),
        ties,
        strata,
        ref_used,
        n_iter,
        ok,
        int(sum(b.d.sum() for b in blocks)),
        tuple(blocks),
    )


@dataclass(frozen=True)
class ProportionalityCheck:
    """Covariate × log(tenure) interaction terms added to the model, tested together by a
    likelihood ratio; a small p says hazard ratios drift with tenure."""

    terms: tuple[str, ...]
    interaction: np.ndarray
    se: np.ndarray
    lr: TestResult
    verdict: str


def proportionality_check(
    fit: CoxResult, counts: pl.DataFrame, covariates: list[str], alpha: float = 0.05
) -> ProportionalityCheck:
    """Refit with every term × log(tenure) and compare by likelihood ratio (a form of the
    Grambsch–Therneau check that needs only the counts)."""
    wide = cox_fit(
        counts,
        covariates,
        fit.ties,
        fit.strata,
        reference=fit.reference,
        confidence=fit.confidence,
        _log_tenure_terms=list(fit.names),
    )
    k = len(fit.names)
    stat = 2 * (wide.loglik - fit.loglik)
    p = float(stats.chi2.sf(stat, k))
    if p < alpha:
        verdict = (
            f"The hazard ratios change with tenure (p = {p:.2g}): read them as averages over "
            "the observed tenures, and prefer curves or time-varying models for decisions."
        )
    else:
        verdict = (
            f"No evidence that the hazard ratios change with tenure (p = {p:.2g}); a "
            "proportional-hazards summary is reasonable, though the test has limited power."
        )
    return ProportionalityCheck(
        tuple(wide.names[k:]), wide.coef[k:], wide.se[k:], TestResult(stat, k, p), verdict
    )
