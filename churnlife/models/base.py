"""The common ground of every churn hazard model: the protocol a fitted model exposes, the grouped
data a fit reads from the counts table, the interval-censored likelihood on that data, and the
maximum-likelihood engine (quasi-Newton with analytic gradients, Newton polish, observed
information).

The grouped (interval-censored) likelihood
------------------------------------------
Integer tenure ``t`` names the interval (t-1, t] (DEVELOPERS.md, "Time and tenure"). Per cohort and
tenure the counts give churned d_t, censored c_t and entered e_t. With S the survival function,

    log L = Σ_t d_t log(S(t-1) - S(t)) + Σ_t c_t log S(t) - Σ_t e_t log S(t)

a churn at t is known only to have happened inside (t-1, t]; a censoring at t means the interval t
was completed; an entry at tenure e conditions on survival to e (left truncation: a customer who
began before the log is seen only because they survived that long). For e = 0, S(0) = 1 and the
term vanishes. Every model here only has to supply log S(t) and its gradient on the unconstrained
parameter scale; the likelihood, its gradient and the fit are shared.

References
----------
Kalbfleisch, J. D. & Prentice, R. L. (2002). The Statistical Analysis of Failure Time Data, 2nd ed.,
    §3.2 (grouped and interval-censored likelihoods) and §3.3 (left truncation).
Klein, J. P. & Moeschberger, M. L. (2003). Survival Analysis, 2nd ed., §3.5–3.6 (truncation,
    likelihood construction), §12 (inference for parametric models).
Nocedal, J. & Wright, S. (2006). Numerical Optimization, 2nd ed. (BFGS, Newton steps).
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from typing import Protocol, runtime_checkable

import numpy as np
import polars as pl
from scipy import optimize, special, stats

from churnlife.errors import UserError

# ---------------------------------------------------------------------------------------------
# The protocol every fitted model exposes (the value stage builds on it).
# ---------------------------------------------------------------------------------------------


@runtime_checkable
class FittedSurvival(Protocol):
    """A fitted survival model for one cohort.

    ``survival(t)`` is S(t), the probability of still being subscribed at the end of tenure t
    (t may be fractional for continuous models; S(0) = 1). ``hazard(t)`` is the churn probability
    of the interval (t-1, t] among those active at t-1: 1 - S(t)/S(t-1), the same quantity for
    every model, comparable with the empirical churned/at_risk. ``params`` and ``cov`` are the
    estimates and their covariance (inverse observed information) on the unconstrained scale the
    fit used; ``draw_survival`` draws S(t) at parameter values from that normal approximation.
    """

    name: str
    cohort: str
    params: np.ndarray
    cov: np.ndarray
    max_observed_tenure: int

    def survival(self, t: np.ndarray) -> np.ndarray: ...

    def hazard(self, t: np.ndarray) -> np.ndarray: ...

    def draw_survival(
        self, t: np.ndarray, n_draws: int, rng: np.random.Generator
    ) -> np.ndarray: ...


# ---------------------------------------------------------------------------------------------
# Grouped data from the counts table
# ---------------------------------------------------------------------------------------------

COUNT_NEEDS = ("cohort", "tenure", "at_risk", "entered", "churned", "censored")


@dataclass(frozen=True)
class GroupedData:
    """One cohort's counts on the full integer grid 0..T (zeros where the counts have no row).

    ``weight`` is c_t - e_t, the coefficient of log S(t) in the likelihood."""

    cohort: str
    tenure: np.ndarray  # 0..T as float
    at_risk: np.ndarray
    entered: np.ndarray
    churned: np.ndarray
    censored: np.ndarray
    exposure: np.ndarray | None

    @property
    def weight(self) -> np.ndarray:
        return self.censored - self.entered

    @property
    def n_subjects(self) -> int:
        return int(self.entered.sum())

    @property
    def n_churned(self) -> int:
        return int(self.churned.sum())

    @property
    def max_tenure(self) -> int:
        """The longest tenure at which anyone in the cohort was observed (at risk or leaving)."""
        seen = (self.at_risk > 0) | (self.churned > 0) | (self.censored > 0)
        return int(self.tenure[seen].max()) if seen.any() else 0

    @property
    def late_entry(self) -> bool:
        return bool(self.entered[1:].sum() > 0)

    def km(self) -> np.ndarray:
        """Kaplan–Meier S on the grid (Kaplan & Meier 1958), for starting values and checks."""
        with np.errstate(divide="ignore", invalid="ignore"):
            q = np.where(self.at_risk > 0, self.churned / self.at_risk, 0.0)
        return np.cumprod(1 - q)

    def truncated(self, cut: int) -> GroupedData:
        """The data as if observation had stopped at tenure ``cut``: everyone still active after
        interval ``cut`` is censored there, and later entries are dropped (holdout backtests)."""
        keep = self.tenure <= cut
        cens = self.censored[keep].copy()
        ent = self.entered[keep]
        ch = self.churned[keep]
        remaining = ent.sum() - ch.sum() - cens.sum()
        cens[-1] += remaining
        at_risk = np.concatenate([[0.0], np.cumsum(ent - ch - cens)[:-1]])
        exp = self.exposure[keep] if self.exposure is not None else None
        return GroupedData(self.cohort, self.tenure[keep], at_risk, ent, ch, cens, exp)


def grouped_from_counts(counts: pl.DataFrame, cohort: str | None = None) -> GroupedData:
    """``GroupedData`` for one cohort of a counts table (queries/counts.sql or
    churnlife.counts.counts_from_durations). With ``cohort=None`` the table must hold one cohort."""
    missing = [c for c in COUNT_NEEDS if c not in counts.columns]
    if missing:
        raise UserError(
            f"the counts table lacks columns {missing}; pass the counts from the extract "
            "(queries/counts.sql) or churnlife.counts.counts_from_durations."
        )
    if cohort is None:
        cohorts = counts["cohort"].unique().to_list()
        if len(cohorts) != 1:
            raise UserError(f"the counts hold {len(cohorts)} cohorts; name one with cohort=...")
        cohort = str(cohorts[0])
    part = counts.filter(pl.col("cohort") == cohort).sort("tenure")
    if part.height == 0:
        raise UserError(f"no cohort {cohort!r} in the counts.")
    t = part["tenure"].to_numpy().astype(np.int64)
    if t.min() < 0:
        raise UserError("the counts have negative tenures; tenure must be 0 or more.")
    size = int(t.max()) + 1

    def grid(col: str) -> np.ndarray:
        out = np.zeros(size)
        out[t] = part[col].to_numpy().astype(float)
        return out

    exposure = grid("exposure") if "exposure" in part.columns else None
    entered, churned, censored = grid("entered"), grid("churned"), grid("censored")
    if np.any(entered < 0) or np.any(churned < 0) or np.any(censored < 0):
        raise UserError(f"cohort {cohort!r}: negative counts; the counts table is inconsistent.")
    # At risk by the recursion of DEVELOPERS.md (also fills tenures absent from the table).
    at_risk = np.concatenate([[0.0], np.cumsum(entered - churned - censored)[:-1]])
    if np.any(at_risk < -1e-9):
        raise UserError(
            f"cohort {cohort!r}: more customers leave than entered; the counts are inconsistent."
        )
    return GroupedData(
        str(cohort), np.arange(size, dtype=float), at_risk, entered, churned, censored, exposure
    )


def cohorts_of(counts: pl.DataFrame) -> list[str]:
    return [str(c) for c in counts["cohort"].unique(maintain_order=True).to_list()]


# ---------------------------------------------------------------------------------------------
# The interval-censored log-likelihood on log S and its gradient
# ---------------------------------------------------------------------------------------------


def _log1mexp(x: np.ndarray) -> np.ndarray:
    """log(1 - e^x) for x < 0, accurate near 0 and for large |x| (Mächler 2012)."""
    x = np.asarray(x, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(x > -0.693, np.log(-np.expm1(x)), np.log1p(-np.exp(x)))


def interval_loglik(
    log_s: np.ndarray, churned: np.ndarray, weight: np.ndarray, grad: np.ndarray | None = None
) -> tuple[float, np.ndarray | None]:
    """log L and (if ``grad`` = d log S / dθ on the grid, shape T+1 × p, is given) its gradient.

    ``log_s`` is log S on the grid 0..T (log S(0) must be 0)."""
    step = log_s[1:] - log_s[:-1]  # log S(t) - log S(t-1), t = 1..T
    d = churned[1:]
    with np.errstate(divide="ignore", invalid="ignore"):
        drop = _log1mexp(step)
    has = d > 0
    if np.any(has & ~(step < 0)):
        return -np.inf, None
    ll = float(np.sum(d[has] * (log_s[:-1][has] + drop[has])) + np.sum(weight * log_s))
    if grad is None:
        return ll, None
    # d/dΔ log(1 - e^Δ) = -e^Δ / (1 - e^Δ) = -1 / expm1(-Δ)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        fprime = np.where(has, -1.0 / np.expm1(-step), 0.0)
    g_prev, g_now = grad[:-1], grad[1:]
    g = (d[:, None] * (g_prev + fprime[:, None] * (g_now - g_prev)))[has].sum(axis=0)
    g = g + weight @ grad
    return ll, g


# ---------------------------------------------------------------------------------------------
# Maximum likelihood
# ---------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Convergence:
    """How the optimiser ended. ``converged`` needs a small gradient and a positive definite
    observed information (so the standard errors exist)."""

    converged: bool
    iterations: int
    gradient_max: float
    information_positive_definite: bool
    starts_tried: int
    message: str


@dataclass(frozen=True)
class MaximumLikelihood:
    params: np.ndarray
    loglik: float
    cov: np.ndarray
    convergence: Convergence


def observed_information(
    grad_fn: Callable[[np.ndarray], np.ndarray], theta: np.ndarray
) -> np.ndarray:
    """Minus the Hessian of log L by central differences of the analytic gradient (symmetrised)."""
    p = theta.size
    hess = np.empty((p, p))
    for i in range(p):
        h = 1e-5 * max(1.0, abs(theta[i]))
        up, down = theta.copy(), theta.copy()
        up[i] += h
        down[i] -= h
        hess[i] = (grad_fn(up) - grad_fn(down)) / (2 * h)
    return -(hess + hess.T) / 2


def maximise(
    loglik_grad: Callable[[np.ndarray], tuple[float, np.ndarray | None]],
    starts: Sequence[np.ndarray],
    scale: float = 1.0,
    grad_tol: float = 1e-7,
) -> MaximumLikelihood:
    """Maximise log L from several starting points: BFGS on -log L / scale with the analytic
    gradient, then Newton steps on the observed information until the gradient is negligible.
    Returns the best optimum with its inverse observed information."""
    scale = max(scale, 1.0)

    def neg(theta: np.ndarray) -> tuple[float, np.ndarray]:
        ll, g = loglik_grad(theta)
        if not np.isfinite(ll) or g is None or not np.all(np.isfinite(g)):
            return 1e100, np.zeros_like(theta)
        return -ll / scale, -g / scale

    def grad_only(theta: np.ndarray) -> np.ndarray:
        _ll, g = loglik_grad(theta)
        return g if g is not None else np.full(theta.size, np.nan)

    best: tuple[float, np.ndarray, int] | None = None
    for x0 in starts:
        x0 = np.asarray(x0, dtype=float)
        if neg(x0)[0] >= 1e99:
            continue
        with np.errstate(all="ignore"):
            res = optimize.minimize(
                neg, x0, jac=True, method="BFGS", options={"gtol": 1e-8, "maxiter": 400}
            )
        val = float(res.fun)
        if best is None or val < best[0]:
            best = (val, np.asarray(res.x, dtype=float), int(res.nit))
    if best is None:
        raise UserError(
            "no starting value gave a finite likelihood; the data may have no churn or the "
            "model cannot describe them. Check the cohort's counts."
        )
    _, theta, iters = best
    ll, g = loglik_grad(theta)
    info = observed_information(grad_only, theta)
    for _ in range(50):  # Newton polish with step halving
        if g is None or np.max(np.abs(g)) < grad_tol * scale:
            break
        try:
            step = np.linalg.solve(info, g)
        except np.linalg.LinAlgError:
            break
        improved = False
        for shrink in (1.0, 0.5, 0.25, 0.125, 0.0625):
            cand = theta + shrink * step
            ll_c, g_c = loglik_grad(cand)
            if np.isfinite(ll_c) and ll_c >= ll - 1e-12 * abs(ll) and g_c is not None:
                theta, ll, g = cand, ll_c, g_c
                improved = True
                break
        iters += 1
        if not improved:
            break
        info = observed_information(grad_only, theta)
    info = observed_information(grad_only, theta)
    eig = np.linalg.eigvalsh(info) if np.all(np.isfinite(info)) else np.array([-1.0])
    pd = bool(eig.min() > 0)
    cov = np.linalg.inv(info) if pd else np.full(info.shape, np.nan)
    gmax = float(np.max(np.abs(g))) if g is not None else float("nan")
    ok = pd and gmax < 1e-4 * scale
    if ok:
        msg = "converged"
    elif not pd:
        msg = "observed information not positive definite: a parameter is not identified"
    else:
        msg = f"gradient still {gmax:.2g} at the end"
    return MaximumLikelihood(
        theta, float(ll), cov, Convergence(ok, iters, gmax, pd, len(starts), msg)
    )


# ---------------------------------------------------------------------------------------------
# Parameter transforms and the estimates table
# ---------------------------------------------------------------------------------------------

TRANSFORMS: dict[str, Callable[[np.ndarray], np.ndarray]] = {
    "log": np.exp,
    "logit": special.expit,
    "identity": lambda x: x,
}


@dataclass(frozen=True)
class ParamSpec:
    """One parameter: its name on the natural scale, and the transform from the unconstrained
    scale ("log": natural = exp(θ), "logit": expit(θ), "identity")."""

    name: str
    transform: str

    @property
    def raw_name(self) -> str:
        return self.name if self.transform == "identity" else f"{self.transform}({self.name})"


def estimates_table(
    specs: Sequence[ParamSpec], theta: np.ndarray, cov: np.ndarray, confidence: float
) -> pl.DataFrame:
    """Natural-scale estimates with delta-method SEs and intervals transformed from Wald
    intervals on the unconstrained scale (so they respect the parameter's range)."""
    z = float(stats.norm.ppf(0.5 + confidence / 2))
    se_raw = np.sqrt(np.clip(np.diag(cov), 0, None)) if cov.size else np.array([])
    rows = []
    for i, s in enumerate(specs):
        f = TRANSFORMS[s.transform]
        est = float(f(theta[i]))
        deriv = {"log": est, "logit": est * (1 - est), "identity": 1.0}[s.transform]
        lo, hi = float(f(theta[i] - z * se_raw[i])), float(f(theta[i] + z * se_raw[i]))
        rows.append((s.name, est, abs(deriv) * se_raw[i], lo, hi))
    return pl.DataFrame(
        rows, schema=["parameter", "estimate", "se", "lower", "upper"], orient="row"
    )


# ---------------------------------------------------------------------------------------------
# A fitted model on the interval likelihood (continuous families, discrete renewal, cure, spline)
# ---------------------------------------------------------------------------------------------


class SurvivalSpec(Protocol):
    """What a model supplies to be fitted by the shared engine."""

    name: str
    kind: str  # "continuous", "discrete", "cure", "spline", ...

    @property
    def specs(self) -> tuple[ParamSpec, ...]: ...

    def log_survival(self, t: np.ndarray, theta: np.ndarray) -> np.ndarray: ...

    def log_survival_grad(
        self, t: np.ndarray, theta: np.ndarray
    ) -> tuple[np.ndarray, np.ndarray]: ...

    def starts(self, data: GroupedData) -> list[np.ndarray]: ...


def period_hazard_from_log_s(log_s_now: np.ndarray, log_s_prev: np.ndarray) -> np.ndarray:
    return -np.expm1(log_s_now - log_s_prev)


@dataclass(frozen=True)
class ModelFit:
    """One model fitted to one cohort by maximum likelihood on the grouped counts.

    Implements ``FittedSurvival``. ``loglik`` is the interval-censored log-likelihood (comparable
    across all models fitted to the same counts); ``aic`` and ``bic`` use it, with the number of
    spells as the sample size in BIC.
    """

    name: str
    cohort: str
    spec: SurvivalSpec
    params: np.ndarray
    cov: np.ndarray
    loglik: float
    n_subjects: int
    n_churned: int
    max_observed_tenure: int
    convergence: Convergence
    confidence: float = 0.95
    extra: dict = field(default_factory=dict)

    @property
    def kind(self) -> str:
        return self.spec.kind

    @property
    def n_params(self) -> int:
        return int(self.params.size)

    @property
    def aic(self) -> float:
        return 2 * self.n_params - 2 * self.loglik

    @property
    def bic(self) -> float:
        return self.n_params * np.log(max(self.n_subjects, 1)) - 2 * self.loglik

    @property
    def param_names(self) -> tuple[str, ...]:
        return tuple(s.raw_name for s in self.spec.specs)

    def estimates(self) -> pl.DataFrame:
        """Natural-scale parameters with SE and interval (cohort and model columns first)."""
        table = estimates_table(self.spec.specs, self.params, self.cov, self.confidence)
        return table.select(
            pl.lit(self.cohort).alias("cohort"), pl.lit(self.name).alias("model"), pl.all()
        )

    def value(self, name: str) -> float:
        """A natural-scale parameter by name (e.g. ``fit.value("shape")``)."""
        for i, s in enumerate(self.spec.specs):
            if s.name == name:
                return float(TRANSFORMS[s.transform](self.params[i]))
        raise KeyError(f"{self.name} has no parameter {name!r}; it has {self.param_names}")

    @property
    def alpha(self) -> float:
        """The beta-mixing α of the discrete renewal models (sBG, BdW)."""
        return self._mixing("alpha")

    @property
    def beta(self) -> float:
        """The beta-mixing β of the discrete renewal models (sBG, BdW)."""
        return self._mixing("beta")

    def _mixing(self, name: str) -> float:
        try:
            return self.value(name)
        except KeyError:
            raise AttributeError(f"{self.name} has no {name}: only sbg and bdw do") from None

    def survival(self, t: np.ndarray | float) -> np.ndarray:
        t = np.asarray(t, dtype=float)
        return np.exp(self.spec.log_survival(np.maximum(t, 0.0), self.params))

    def hazard(self, t: np.ndarray | float) -> np.ndarray:
        t = np.asarray(t, dtype=float)
        now = self.spec.log_survival(np.maximum(t, 0.0), self.params)
        prev = self.spec.log_survival(np.maximum(t - 1, 0.0), self.params)
        return np.where(t > 0, period_hazard_from_log_s(now, prev), 0.0)

    def log_survival_grad(self, t: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        return self.spec.log_survival_grad(np.maximum(np.asarray(t, float), 0.0), self.params)

    def draw_params(self, n_draws: int, rng: np.random.Generator) -> np.ndarray:
        """Parameter draws from the asymptotic normal N(θ̂, cov) on the unconstrained scale."""
        if not np.all(np.isfinite(self.cov)):
            raise UserError(
                f"{self.name} for {self.cohort}: no covariance (the fit did not converge), so no "
                "uncertainty bands can be drawn. Use another model for this cohort."
            )
        return rng.multivariate_normal(self.params, self.cov, size=n_draws, method="cholesky")

    def draw_survival(self, t: np.ndarray, n_draws: int, rng: np.random.Generator) -> np.ndarray:
        t = np.maximum(np.asarray(t, dtype=float), 0.0)
        draws = self.draw_params(n_draws, rng)
        out = np.empty((n_draws, t.size))
        for i, theta in enumerate(draws):  # loop over parameter draws, not customers
            out[i] = np.exp(self.spec.log_survival(t, theta))
        return out


def fit_spec(
    spec: SurvivalSpec,
    data: GroupedData,
    confidence: float = 0.95,
    starts: list[np.ndarray] | None = None,
) -> ModelFit:
    """Fit ``spec`` to one cohort's grouped data by maximum likelihood."""
    if data.n_churned == 0:
        raise UserError(
            f"cohort {data.cohort!r} has no churn, so no hazard model can be fitted to it. "
            "Group it with others ([cohorts] by) or wait for more data."
        )
    grid = data.tenure
    d, w = data.churned, data.weight

    def loglik_grad(theta: np.ndarray) -> tuple[float, np.ndarray | None]:
        with np.errstate(all="ignore"):
            ls, g = spec.log_survival_grad(grid, theta)
        if not (np.all(np.isfinite(ls[d > 0])) and np.all(np.isfinite(g))):
            return -np.inf, None
        return interval_loglik(ls, d, w, g)

    ml = maximise(loglik_grad, starts or spec.starts(data), scale=float(data.n_subjects))
    return ModelFit(
        spec.name,
        data.cohort,
        spec,
        ml.params,
        ml.cov,
        ml.loglik,
        data.n_subjects,
        data.n_churned,
        data.max_tenure,
        ml.convergence,
        confidence,
    )


def exponential_rate_start(data: GroupedData) -> float:
    """Churns per customer-period: a first guess of the hazard rate."""
    person_time = float(data.exposure.sum()) if data.exposure is not None else 0.0
    if person_time <= 0:
        person_time = float(data.at_risk.sum())
    return max(data.n_churned, 1) / max(person_time, 1.0)


def km_median_start(data: GroupedData) -> float:
    """Median tenure from KM, or where the exponential guess puts it when KM has not reached it."""
    s = data.km()
    below = np.flatnonzero(s <= 0.5)
    if below.size:
        return max(float(data.tenure[below[0]]) - 0.5, 0.5)
    return np.log(2) / exponential_rate_start(data)
