"""Cox proportional hazards fitted on aggregated counts, with a proportional-hazards check.

Everyone in one covariate pattern (e.g. plan × channel) shares one linear predictor, so the
partial likelihood needs, per pattern and tenure, only the number at risk and the number churned:
the rows of ``Extract.counts_by([...])``. A risk set is one tenure (within one stratum); late entry
is already in the at-risk counts (at risk at t when entry_t < t <= exit_t), which is the rule
Cox's likelihood needs for left-truncated data. Cost grows with patterns × tenures with churn,
never with customers: Efron's tie correction, a sum over the D churns of a tenure, is evaluated
in closed form with log-gamma and polygamma functions.

References
----------
Cox, D. R. (1972). Regression models and life-tables. JRSS B 34, 187–220.
Breslow, N. (1974). Covariance analysis of censored survival data. Biometrics 30, 89–99.
    (ties; baseline cumulative hazard Σ d / Σ n·exp(xβ))
Efron, B. (1977). The efficiency of Cox's likelihood function for censored data. JASA 72,
    557–565.  (ties: Π_l [R − (l/D)·E], l = 0..D−1)
Grambsch, P. M. & Therneau, T. M. (1994). Proportional hazards tests and diagnostics based on
    weighted residuals. Biometrika 81, 515–526.  (score test of β(t) = β + θ·g(t), g = log t)
Therneau, T. M. & Grambsch, P. M. (2000). Modeling Survival Data: Extending the Cox Model.
    Springer, ch. 3 and 6.  (Newton–Raphson with step halving; tests)
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import polars as pl
from scipy import special, stats

from churnlife.errors import UserError

TIES = ("breslow", "efron")
_NEED = ("cohort", "tenure", "at_risk", "churned")


# --------------------------------------------------------------------------- design


@dataclass(frozen=True)
class _Design:
    """Rows are (cohort, tenure) pairs at tenures with churn in the cohort's stratum."""

    x: np.ndarray  # rows × p covariates
    n: np.ndarray  # at risk
    d: np.ndarray  # churned
    group: np.ndarray  # risk-set index per row
    group_tenure: np.ndarray  # tenure of each risk set
    group_stratum: np.ndarray  # stratum label of each risk set
    names: tuple[str, ...]
    terms: tuple[tuple[str, tuple[int, ...]], ...]  # term → its columns of x
    levels: tuple[tuple[str, str, str], ...]  # per column: term, level, reference ('' numeric)


def _is_categorical(series: pl.Series) -> bool:
    return series.dtype in (pl.String, pl.Categorical, pl.Enum, pl.Boolean, pl.Null) or (
        series.dtype == pl.Date
    )


def _validate(counts: pl.DataFrame, covariates: list[str], strata: str | None, ties: str) -> None:
    missing = [c for c in (*_NEED, *covariates, *([strata] if strata else [])) if c not in counts]
    if missing:
        raise UserError(
            f"the counts table has no column(s) {missing}: count by those attributes first "
            f"(Extract.counts_by([...]) or --by). Columns there: {', '.join(counts.columns)}."
        )
    if not covariates:
        raise UserError("a Cox model needs at least one covariate (e.g. --by plan).")
    if strata is not None and strata in covariates:
        raise UserError(f"{strata!r} cannot be both a covariate and the strata; choose one.")
    if ties not in TIES:
        raise UserError(f'ties must be one of {TIES}, not "{ties}".')
    if counts.height == 0 or int(counts["churned"].sum()) == 0:
        raise UserError("the counts table has no churn, so there is nothing to fit a model to.")
    if counts.filter(pl.col("churned") > pl.col("at_risk")).height:
        raise UserError("churned exceeds at_risk in some rows: the counts table is inconsistent.")
    per_cohort = counts.group_by("cohort").agg(
        [pl.col(c).n_unique().alias(c) for c in (*covariates, *([strata] if strata else []))]
    )
    varying = [c for c in per_cohort.columns if c != "cohort" and int(per_cohort[c].max()) > 1]
    if varying:
        raise UserError(
            f"covariate(s) {varying} vary within a cohort of the counts table; count by them "
            "(their columns must be constant within each cohort label)."
        )


def _pattern_rows(
    counts: pl.DataFrame, covariates: list[str], strata: str | None
) -> tuple[pl.DataFrame, pl.DataFrame]:
    """Each cohort's at-risk and churned counts at every tenure with churn in its stratum.

    Between a cohort's rows nothing enters or leaves, so its risk set at a tenure without a row
    is that of the next row; past its last row nobody is at risk (as in logrank._grid)."""
    stratum = pl.col(strata).cast(pl.String).fill_null("(none)") if strata else pl.lit("all")
    base = counts.select(
        pl.col("cohort").cast(pl.String),
        stratum.alias("_stratum"),
        pl.col("tenure").cast(pl.Float64),
        pl.col("at_risk").cast(pl.Float64),
        pl.col("churned").cast(pl.Float64),
        *covariates,
    )
    events = (
        base.group_by("_stratum", "tenure")
        .agg(pl.col("churned").sum().alias("_D"))
        .filter(pl.col("_D") > 0)
        .sort("_stratum", "tenure")
        .with_row_index("_group")
    )
    cohorts = base.unique("cohort", keep="first", maintain_order=True).select(
        "cohort", "_stratum", *covariates
    )
    grid = cohorts.join(events.select("_stratum", "tenure", "_group"), on="_stratum").sort(
        "cohort", "tenure"
    )
    rows = base.select("cohort", "tenure", "at_risk", "churned").sort("cohort", "tenure")
    risk = grid.join_asof(
        rows.select("cohort", pl.col("tenure").alias("_next"), pl.col("at_risk")),
        left_on="tenure",
        right_on="_next",
        by="cohort",
        strategy="forward",
        check_sortedness=False,  # both sides are sorted by cohort, tenure just above
    ).join(rows.select("cohort", "tenure", "churned"), on=["cohort", "tenure"], how="left")
    risk = risk.with_columns(pl.col("at_risk", "churned").fill_null(0.0)).filter(
        pl.col("at_risk") > 0
    )
    return risk.sort("_group", "cohort"), events


def _reference_level(counts: pl.DataFrame, column: str, levels: list[str]) -> str:
    """The level with the most customers (entered, else the largest risk set), so the other
    levels are compared to the best-measured one."""
    size = "entered" if "entered" in counts.columns else "at_risk"
    agg = pl.col(size).sum() if size == "entered" else pl.col(size).max()
    sizes = (
        counts.with_columns(pl.col(column).cast(pl.String).fill_null("(none)").alias("_lvl"))
        .group_by("cohort", "_lvl")
        .agg(agg.alias("_n"))
        .group_by("_lvl")
        .agg(pl.col("_n").sum())
        .sort(["_n", "_lvl"], descending=[True, False])
    )
    top = sizes["_lvl"].to_list()
    return top[0] if top else levels[0]


def _design(
    counts: pl.DataFrame,
    covariates: list[str],
    strata: str | None,
    reference: dict[str, str],
) -> _Design:
    risk, events = _pattern_rows(counts, covariates, strata)
    columns: list[np.ndarray] = []
    names: list[str] = []
    terms: list[tuple[str, tuple[int, ...]]] = []
    levels: list[tuple[str, str, str]] = []
    for cov in covariates:
        series = risk[cov]
        if _is_categorical(series):
            values = series.cast(pl.String).fill_null("(none)")
            all_levels = sorted(counts[cov].cast(pl.String).fill_null("(none)").unique().to_list())
            ref = reference.get(cov) or _reference_level(counts, cov, all_levels)
            if ref not in all_levels:
                raise UserError(
                    f"reference level {ref!r} is not a value of {cov!r}; its values are "
                    f"{all_levels}."
                )
            start = len(columns)
            arr = values.to_numpy()
            for lvl in all_levels:
                if lvl == ref:
                    continue
                columns.append((arr == lvl).astype(float))
                names.append(f"{cov}: {lvl}")
                levels.append((cov, lvl, ref))
            terms.append((cov, tuple(range(start, len(columns)))))
        else:
            vals = series.cast(pl.Float64).to_numpy()
            if not np.all(np.isfinite(vals)):
                raise UserError(f"covariate {cov!r} has missing or infinite values.")
            terms.append((cov, (len(columns),)))
            columns.append(vals)
            names.append(cov)
            levels.append((cov, "", ""))
    if not columns:
        raise UserError(f"covariates {covariates} have a single level each: nothing to compare.")
    x = np.column_stack(columns)
    return _Design(
        x=x,
        n=risk["at_risk"].to_numpy(),
        d=risk["churned"].to_numpy(),
        group=risk["_group"].to_numpy().astype(np.int64),
        group_tenure=events["tenure"].to_numpy(),
        group_stratum=events["_stratum"].to_numpy(),
        names=tuple(names),
        terms=tuple(terms),
        levels=tuple(levels),
    )


# --------------------------------------------------------------------------- likelihood


def _sum_by(group: np.ndarray, values: np.ndarray, size: int) -> np.ndarray:
    """Σ of values (rows, or rows × k, or rows × k × k) per risk set."""
    if values.ndim == 1:
        return np.bincount(group, weights=values, minlength=size)
    flat = values.reshape(values.shape[0], -1)
    out = np.zeros((size, flat.shape[1]))
    np.add.at(out, group, flat)
    return out.reshape((size, *values.shape[1:]))


def partial_likelihood(
    x: np.ndarray,
    n: np.ndarray,
    d: np.ndarray,
    group: np.ndarray,
    beta: np.ndarray,
    ties: str = "efron",
) -> tuple[float, np.ndarray, np.ndarray]:
    """Log partial likelihood, its gradient and Hessian at ``beta``, from grouped rows.

    Each row r is a covariate pattern in a risk set (``group``): n_r at risk, d_r churned, all
    with covariates x_r. With w = n·exp(xβ), R = Σ w, S1 = Σ w·x, S2 = Σ w·x·x' over a risk set,
    and E, T1, T2 the same sums over the churned (d in place of n):

    Breslow: ℓ = Σ d·xβ − Σ_sets D·log R.
    Efron:   ℓ = Σ d·xβ − Σ_sets Σ_{l<D} log(R − (l/D)·E). With A = R·D/E the inner sum is
    D·log(E/D) + lnΓ(A + 1) − lnΓ(A − D + 1); its derivatives need only Σ_l 1/u_l
    = (D/E)·[ψ(A + 1) − ψ(A − D + 1)] and Σ_l 1/u_l² = (D/E)²·[ψ′(A − D + 1) − ψ′(A + 1)], because
    S1 − (l/D)·T1 = M + T1·u_l/E with M = S1 − (R/E)·T1 and u_l = R − (l/D)·E.
    """
    size = int(group.max()) + 1
    eta = x @ beta
    shift = float(eta.max())
    e = np.exp(eta - shift)  # scaled for overflow; ℓ adds the shift back
    w, v = n * e, d * e
    R = np.bincount(group, weights=w, minlength=size)
    D = np.bincount(group, weights=d, minlength=size)
    S1 = _sum_by(group, w[:, None] * x, size)
    xx = x[:, :, None] * x[:, None, :]
    S2 = _sum_by(group, w[:, None, None] * xx, size)
    loglik = float(d @ eta)
    grad = d @ x
    if ties == "breslow":
        loglik -= float(D @ (np.log(R) + shift))
        m = S1 / R[:, None]
        grad = grad - D @ m
        info = np.einsum("g,gij->ij", D / R, S2) - np.einsum("g,gi,gj->ij", D, m, m)
        return loglik, grad, -info
    E = np.bincount(group, weights=v, minlength=size)
    T1 = _sum_by(group, v[:, None] * x, size)
    T2 = _sum_by(group, v[:, None, None] * xx, size)
    A = R * D / E
    loglik -= float(
        np.sum(D * np.log(E / D) + special.gammaln(A + 1) - special.gammaln(A - D + 1) + D * shift)
    )
    a0 = (D / E) * (special.digamma(A + 1) - special.digamma(A - D + 1))  # Σ 1/u_l
    b0 = (D / E) ** 2 * (special.polygamma(1, A - D + 1) - special.polygamma(1, A + 1))
    M = S1 - (R / E)[:, None] * T1
    grad = grad - (a0[:, None] * M + (D / E)[:, None] * T1).sum(axis=0)
    first = np.einsum("g,gij->ij", a0, S2 - (R / E)[:, None, None] * T2) + np.einsum(
        "g,gij->ij", D / E, T2
    )
    cross = np.einsum("g,gi,gj->ij", a0 / E, M, T1)
    second = (
        np.einsum("g,gi,gj->ij", b0, M, M)
        + cross
        + cross.T
        + np.einsum("g,gi,gj->ij", D / E**2, T1, T1)
    )
    return loglik, grad, -(first - second)


def _newton(design: _Design, x: np.ndarray, ties: str, max_iter: int = 50):
    """Newton–Raphson from β = 0 with step halving whenever ℓ would fall."""
    beta = np.zeros(x.shape[1])
    ll, grad, hess = partial_likelihood(x, design.n, design.d, design.group, beta, ties)
    for it in range(1, max_iter + 1):
        try:
            step = np.linalg.solve(-hess, grad)
        except np.linalg.LinAlgError:
            raise _singular(design) from None
        for _ in range(40):
            trial = beta + step
            ll_t, grad_t, hess_t = partial_likelihood(
                x, design.n, design.d, design.group, trial, ties
            )
            if np.isfinite(ll_t) and ll_t >= ll - 1e-10 * (1 + abs(ll)):
                break
            step = step / 2
        else:
            break
        beta, ll, grad, hess = trial, ll_t, grad_t, hess_t
        if np.max(np.abs(step)) < 1e-10 * (1 + np.max(np.abs(beta))):
            return beta, ll, grad, hess, it, True
    return beta, ll, grad, hess, max_iter, False


def _singular(design: _Design) -> UserError:
    return UserError(
        "the Cox model cannot be estimated: some covariate levels are not separable from others "
        f"(covariates {', '.join(t for t, _ in design.terms)}). Use fewer or coarser covariates, "
        "or merge small levels."
    )


# --------------------------------------------------------------------------- results


@dataclass(frozen=True)
class ProportionalHazardsCheck:
    """Score test of θ = 0 in β(t) = β + θ·log(tenure), per term and for all terms together:
    the Grambsch–Therneau test, computed exactly from the counts' risk sets.

    Attributes
    ----------
    table : term, df, chi_square, p (one row per term, then "all terms").
    verdict : the result in plain words.
    """

    table: pl.DataFrame
    verdict: str

    def to_polars(self) -> pl.DataFrame:
        return self.table


@dataclass(frozen=True)
class CoxResult:
    """A Cox proportional hazards fit on grouped counts.

    Attributes
    ----------
    names : one per coefficient, "term: level" for a level of a categorical term (compared to its
        reference level) or the term for a numeric one.
    params, bse, cov : log hazard ratios, their SEs and covariance (inverse information).
    hazard_ratio, lower, upper : exp(params) with Wald intervals at ``confidence``.
    z, pvalues : Wald z and two-sided p per coefficient.
    loglik, loglik_null : log partial likelihood at the fit and at β = 0.
    lr_test, wald_test, score_test (with their p-values lr_p, wald_p, score_p) : global tests of
        β = 0 on ``df`` degrees of freedom.
    terms : per term, df and joint Wald test (pl.DataFrame: term, df, wald, p).
    baseline : stratum, tenure, hazard, cumhaz: the Breslow estimate of the baseline cumulative
        hazard at the reference levels (numeric covariates at 0), right-continuous.
    ph_check : proportional-hazards check (None if not requested).
    ties, strata, n_events, n_rows (pattern × tenure rows used), iterations, converged.
    """

    names: tuple[str, ...]
    levels: tuple[tuple[str, str, str], ...]
    params: np.ndarray
    bse: np.ndarray
    cov: np.ndarray
    hazard_ratio: np.ndarray
    lower: np.ndarray
    upper: np.ndarray
    z: np.ndarray
    pvalues: np.ndarray
    confidence: float
    loglik: float
    loglik_null: float
    df: int
    lr_test: float
    lr_p: float
    wald_test: float
    wald_p: float
    score_test: float
    score_p: float
    terms: pl.DataFrame
    baseline: pl.DataFrame
    ph_check: ProportionalHazardsCheck | None
    ties: str
    strata: str | None
    n_events: int
    n_rows: int
    iterations: int
    converged: bool

    def to_polars(self) -> pl.DataFrame:
        """One row per coefficient: term, level, reference, coef, se, hazard_ratio, lower, upper,
        z, p."""
        return pl.DataFrame(
            {
                "term": [t for t, _, _ in self.levels],
                "level": [lvl for _, lvl, _ in self.levels],
                "reference": [r for _, _, r in self.levels],
                "coef": self.params,
                "se": self.bse,
                "hazard_ratio": self.hazard_ratio,
                "lower": self.lower,
                "upper": self.upper,
                "z": self.z,
                "p": self.pvalues,
            }
        )

    def tests_table(self) -> pl.DataFrame:
        return pl.DataFrame(
            {
                "test": ["likelihood ratio", "Wald", "score"],
                "chi_square": [self.lr_test, self.wald_test, self.score_test],
                "df": [self.df] * 3,
                "p": [self.lr_p, self.wald_p, self.score_p],
            }
        )


def _ph_check(design: _Design, beta: np.ndarray, ties: str) -> ProportionalHazardsCheck:
    """Score test at (β̂, θ = 0) of the model with x·log(t) interactions, from the full
    information matrix of the extended model (Grambsch & Therneau 1994)."""
    p = design.x.shape[1]
    log_t = np.log(design.group_tenure[design.group])
    if np.any(~np.isfinite(log_t)):
        raise UserError("the proportional-hazards check needs churn tenures above 0.")
    x_ext = np.column_stack([design.x, design.x * log_t[:, None]])
    _, grad, hess = partial_likelihood(
        x_ext, design.n, design.d, design.group, np.concatenate([beta, np.zeros(p)]), ties
    )
    info = -hess
    rows: list[tuple[str, int, float]] = []

    def score(cols: list[int]) -> float:
        keep = list(range(p)) + [p + c for c in cols]
        sub = info[np.ix_(keep, keep)]
        u = grad[keep]
        try:
            return float(u @ np.linalg.solve(sub, u))
        except np.linalg.LinAlgError:
            return float("nan")

    for term, cols in design.terms:
        rows.append((term, len(cols), score(list(cols))))
    if len(design.terms) > 1:
        rows.append(("all terms", p, score(list(range(p)))))
    table = pl.DataFrame(
        {
            "term": [r[0] for r in rows],
            "df": [r[1] for r in rows],
            "chi_square": [r[2] for r in rows],
            "p": [float(stats.chi2.sf(r[2], r[1])) for r in rows],
        }
    )
    return ProportionalHazardsCheck(table, _ph_verdict(table, int(design.d.sum())))


def _ph_verdict(table: pl.DataFrame, n_events: int) -> str:
    parts = table.filter(pl.col("term") != "all terms")
    flagged = parts.filter(pl.col("p") < 0.05)["term"].to_list()
    if not flagged:
        return (
            "No clear sign that the hazard ratios change with tenure (every term's p ≥ 0.05 in "
            "the Grambsch–Therneau test): reading each hazard ratio as one number for all "
            "tenures is reasonable. This does not prove the ratios are constant; a small sample "
            "has little power to see a change."
        )
    big = (
        f" With {n_events:,} churns the test sees even small changes, so judge the size "
        "from the retention curves too."
        if n_events > 5000
        else ""
    )
    return (
        f"The hazard ratios for {', '.join(flagged)} appear to change with tenure (p < 0.05 in "
        "the Grambsch–Therneau test): read them as averages over the tenures observed, not as "
        "a constant ratio, and look at the retention curves to see where the cohorts differ." + big
    )


def cox_fit(
    counts: pl.DataFrame,
    covariates: list[str] | tuple[str, ...],
    strata: str | None = None,
    ties: str = "efron",
    reference: dict[str, str] | None = None,
    confidence: float = 0.95,
    check_ph: bool = True,
) -> CoxResult:
    """Fit a Cox proportional hazards model to counts per covariate pattern × tenure.

    Parameters
    ----------
    counts : cohort, tenure, at_risk, churned and the covariate (and strata) columns, constant
        within each cohort label: ``Extract.counts_by(["plan", "channel"])`` or
        ``churnlife.counts.counts_from_durations`` plus covariate columns.
    covariates : columns to model. Text columns are categorical, coded against a reference level
        (default: the level with the most customers); numeric columns enter as they are.
    strata : a column whose levels each get their own baseline hazard (not estimated as a ratio).
    ties : "efron" (default) or "breslow" handling of churns tied at one tenure. Whole-unit
        tenures tie many churns, where Efron's approximation is the closer one.
    reference : reference level per categorical covariate.
    check_ph : also run the proportional-hazards check.
    """
    covariates = list(covariates)
    if not 0 < confidence < 1:
        raise UserError("confidence must be between 0 and 1.")
    _validate(counts, covariates, strata, ties)
    design = _design(counts, covariates, strata, reference or {})
    beta, ll, _grad, hess, iters, converged = _newton(design, design.x, ties)
    info = -hess
    try:
        cov = np.linalg.inv(info)
    except np.linalg.LinAlgError:
        raise _singular(design) from None
    if not converged or np.max(np.abs(beta)) > 25 or np.any(np.diag(cov) <= 0):
        big = [design.names[i] for i in np.flatnonzero(np.abs(beta) > 10)] or list(design.names)
        raise UserError(
            f"the Cox fit did not settle: {', '.join(big)} drift towards an infinite hazard ratio "
            "(a level with no churn, or where everyone churns). Merge that level with another or "
            "leave it out."
        )
    bse = np.sqrt(np.diag(cov))
    zq = float(stats.norm.ppf(0.5 + confidence / 2))
    z = beta / bse
    zero = np.zeros_like(beta)
    ll0, grad0, hess0 = partial_likelihood(design.x, design.n, design.d, design.group, zero, ties)
    score = float(grad0 @ np.linalg.solve(-hess0, grad0))
    wald = float(beta @ info @ beta)
    lr = 2 * (ll - ll0)
    df = beta.size
    term_rows = []
    for term, cols in design.terms:
        idx = list(cols)
        b = beta[idx]
        w = float(b @ np.linalg.solve(cov[np.ix_(idx, idx)], b))
        term_rows.append((term, len(idx), w, float(stats.chi2.sf(w, len(idx)))))
    terms = pl.DataFrame(
        {
            "term": [r[0] for r in term_rows],
            "df": [r[1] for r in term_rows],
            "wald": [r[2] for r in term_rows],
            "p": [r[3] for r in term_rows],
        }
    )
    return CoxResult(
        names=design.names,
        levels=design.levels,
        params=beta,
        bse=bse,
        cov=cov,
        hazard_ratio=np.exp(beta),
        lower=np.exp(beta - zq * bse),
        upper=np.exp(beta + zq * bse),
        z=z,
        pvalues=2 * stats.norm.sf(np.abs(z)),
        confidence=confidence,
        loglik=ll,
        loglik_null=ll0,
        df=df,
        lr_test=lr,
        lr_p=float(stats.chi2.sf(lr, df)),
        wald_test=wald,
        wald_p=float(stats.chi2.sf(wald, df)),
        score_test=score,
        score_p=float(stats.chi2.sf(score, df)),
        terms=terms,
        baseline=_baseline(design, beta),
        ph_check=_ph_check(design, beta, ties) if check_ph else None,
        ties=ties,
        strata=strata,
        n_events=int(design.d.sum()),
        n_rows=int(design.n.size),
        iterations=iters,
        converged=converged,
    )


def _baseline(design: _Design, beta: np.ndarray) -> pl.DataFrame:
    """Breslow's estimate: h0(t) = D_t / Σ n·exp(xβ) per risk set, cumulated within stratum."""
    size = design.group_tenure.size
    R = np.bincount(design.group, weights=design.n * np.exp(design.x @ beta), minlength=size)
    D = np.bincount(design.group, weights=design.d, minlength=size)
    frame = pl.DataFrame(
        {
            "stratum": design.group_stratum.astype(str),
            "tenure": design.group_tenure,
            "hazard": D / R,
        }
    )
    return frame.with_columns(pl.col("hazard").cum_sum().over("stratum").alias("cumhaz"))
