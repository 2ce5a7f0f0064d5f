"""Covariates in the hazard models: proportional-hazards (PH) and accelerated-failure-time (AFT)
forms over covariate patterns (cells of counts, e.g. plan × channel from
``Extract.counts_by``), and a time-varying price covariate ("after a price increase") from the
counts of spells split at price-change times (queries/episodes.sql).

* PH:  S(t | x) = S0(t)^{exp(x'β)}; log S = e^{x'β} log S0(t).
* AFT: S(t | x) = S0(t e^{-x'β}); e^{β} is a time ratio (> 1: customers stay longer).
* Time-varying price in PH form: the pieces of a spell after its first price increase form cells
  with x = 1, entering at the change (left truncation) and the pieces before are censored there,
  so the interval likelihood with late entry is the likelihood of the split spells.
* Piecewise-constant hazard with the price covariate: log h = log h_band + β·after, a Poisson
  log-linear model on churns and exposure per band × price state (Holford 1980), by Newton steps.

Every cell uses the shared interval-censored likelihood of churnlife.models.base; gradients are
analytic (the AFT form needs the baseline's instantaneous hazard).

References
----------
Cox, D. R. (1972). Regression models and life-tables. JRSS B 34, 187–220.
Kalbfleisch & Prentice (2002), ch. 2–3 (AFT and PH forms), §6.4 (time-dependent covariates).
Holford, T. R. (1980). Biometrics 36, 299–305.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import polars as pl
from scipy import stats

from churnlife.config import COHORT_KEYS, Config
from churnlife.errors import UserError
from churnlife.extract import (
    Extract,
    _period_months_expr,
    events_normalised_sql,
    fill,
    parameters,
    read_query,
)
from churnlife.models.base import (
    Convergence,
    GroupedData,
    ModelFit,
    grouped_from_counts,
    interval_loglik,
    maximise,
)
from churnlife.models.parametric import FAMILIES
from churnlife.models.piecewise import auto_cuts

PRICE_STATES = ("before increase", "after increase")

# --- the extract: counts by cohort × price state × tenure --------------------------------------


def first_rises_sql(extract: Extract, config: Config) -> str:
    """queries/first_rises.sql on the staged spells: each spell's first price increase (read by
    episodes.sql and price_rises.sql)."""
    return fill(
        read_query("first_rises"),
        {
            "spells": extract.spells_relation,
            "events_normalised": events_normalised_sql(config, extract.source),
        },
    )


def episodes_counts(extract: Extract, config: Config) -> pl.DataFrame:
    """Counts per cohort × price_state × tenure from the staged spells split at each spell's
    first price increase (queries/episodes.sql, counted by queries/counts.sql in the engine).
    The ``cohort`` label is the config's cohort label; ``price_state`` is a column."""
    if not config.event_codes.get("price_change"):
        raise UserError(
            "no price_change codes in [event_codes]: list the event kinds that change a "
            "customer's price to model churn after a price increase."
        )
    source = extract.source
    episodes = fill(
        read_query("episodes"),
        {
            "spells": extract.spells_relation,
            "first_rises": first_rises_sql(extract, config),
            "period_months": _period_months_expr(config),
            "unit": config.tenure_unit,
        },
    )
    rel = source.stage("episodes", episodes, parameters(config))
    cohorts = tuple(extract.cohort_columns)
    for key in cohorts:
        if key not in COHORT_KEYS:
            raise ValueError(f"unknown cohort attribute {key!r}")
    names = [*cohorts, "price_state"]
    base_label = (
        " || ' · ' || ".join(f"COALESCE(CAST({n} AS VARCHAR), '(none)')" for n in cohorts)
        if cohorts
        else "'all customers'"
    )
    sql = fill(
        read_query("counts"),
        {
            "spells": rel,
            "cohort_cols": ", ".join(names),
            "cohort_names": ", ".join(names),
            "grid_names": ", ".join(f"g.{n}" for n in names),
            "join_on": " AND ".join(f"p.{n} IS NOT DISTINCT FROM g.{n}" for n in names),
            "cohort_label": base_label,
        },
    )
    return source.query(sql, {})


def price_cells(counts: pl.DataFrame, cohort: str) -> list[tuple[GroupedData, float]]:
    """(grouped data, after-increase indicator) for one cohort of ``episodes_counts``."""
    part = counts.filter(pl.col("cohort") == cohort)
    if part.height == 0:
        raise UserError(f"no cohort {cohort!r} in the price-state counts.")
    cells = []
    for state in PRICE_STATES:
        sub = part.filter(pl.col("price_state") == state)
        if sub.height:
            label = sub.with_columns(pl.lit(f"{cohort} · {state}").alias("cohort"))
            cells.append((grouped_from_counts(label), float(state == PRICE_STATES[1])))
    return cells


# --- PH and AFT regression over cells ----------------------------------------------------------


@dataclass(frozen=True)
class RegressionFit:
    """A baseline family with covariate effects, fitted over cells of counts.

    ``coefficients`` are log hazard ratios (PH) or log time ratios (AFT); ``params`` = baseline
    parameters (unconstrained) followed by the coefficients; ``cov`` their covariance."""

    name: str
    form: str
    covariates: tuple[str, ...]
    baseline: ModelFit  # the baseline (x = 0) as a FittedSurvival, with its marginal covariance
    params: np.ndarray
    cov: np.ndarray
    loglik: float
    n_subjects: int
    convergence: Convergence
    confidence: float = 0.95

    @property
    def coefficients(self) -> np.ndarray:
        return self.params[-len(self.covariates) :]

    @property
    def aic(self) -> float:
        return 2 * self.params.size - 2 * self.loglik

    def effects(self) -> pl.DataFrame:
        """Each covariate's ratio (hazard ratio for PH, time ratio for AFT) with SE of the log and
        Wald interval."""
        z = float(stats.norm.ppf(0.5 + self.confidence / 2))
        k = len(self.covariates)
        se = np.sqrt(np.clip(np.diag(self.cov)[-k:], 0, None))
        b = self.coefficients
        return pl.DataFrame(
            {
                "covariate": list(self.covariates),
                "ratio": np.exp(b),
                "log_ratio": b,
                "se": se,
                "lower": np.exp(b - z * se),
                "upper": np.exp(b + z * se),
                "kind": ["hazard ratio" if self.form == "ph" else "time ratio"] * k,
            }
        )

    def survival(self, t: np.ndarray, x: np.ndarray) -> np.ndarray:
        t = np.asarray(t, float)
        eta = float(np.dot(x, self.coefficients))
        spec = self.baseline.spec
        theta = self.params[: -len(self.covariates)]
        if self.form == "ph":
            return np.exp(np.exp(eta) * spec.log_survival(t, theta))
        return np.exp(spec.log_survival(t * np.exp(-eta), theta))


def _cell_log_s(spec, form, theta, beta, x, grid):
    eta = float(np.dot(x, beta))
    if form == "ph":
        ls0, g0 = spec.log_survival_grad(grid, theta)
        w = np.exp(eta)
        return w * ls0, np.column_stack([w * g0, np.outer(w * ls0, x)])
    u = grid * np.exp(-eta)
    ls0, g0 = spec.log_survival_grad(u, theta)
    h0 = spec.instant_hazard(u, theta)
    return ls0, np.column_stack([g0, np.outer(h0 * u, x)])


def regression_loglik(cells, xs, spec, form):
    """log L and its analytic gradient in (baseline θ, β), summed over the cells."""
    p0 = len(spec.specs)

    def loglik_grad(theta_all):
        theta, beta = theta_all[:p0], theta_all[p0:]
        total, grad = 0.0, np.zeros(theta_all.size)
        for data, x in zip((c for c, _ in cells), xs, strict=True):  # loop over cells
            with np.errstate(all="ignore"):
                ls, g = _cell_log_s(spec, form, theta, beta, x, data.tenure)
            if not (np.all(np.isfinite(ls)) and np.all(np.isfinite(g))):
                return -np.inf, None
            ll, gg = interval_loglik(ls, data.churned, data.weight, g)
            if not np.isfinite(ll):
                return -np.inf, None
            total += ll
            grad += gg
        return total, grad

    return loglik_grad


def fit_regression(
    cells: list[tuple[GroupedData, np.ndarray | float]],
    covariates: tuple[str, ...] | list[str],
    family: str = "weibull",
    form: str = "ph",
    confidence: float = 0.95,
) -> RegressionFit:
    """Fit ``family`` in PH or AFT form with covariates x per cell (one row of x per cell)."""
    if form not in ("ph", "aft"):
        raise UserError('the covariate form must be "ph" or "aft".')
    if family not in FAMILIES:
        raise UserError(f"covariate models take a continuous family ({', '.join(FAMILIES)}).")
    spec = FAMILIES[family]
    xs = [np.atleast_1d(np.asarray(x, float)) for _, x in cells]
    k = len(covariates)
    if any(x.size != k for x in xs):
        raise UserError("each cell needs one value per covariate.")
    x_mat = np.vstack(xs)
    if np.linalg.matrix_rank(np.column_stack([np.ones(len(xs)), x_mat])) < k + 1:
        raise UserError(
            "the covariates do not vary across the cells (or repeat each other): their effects "
            "cannot be estimated. Choose covariates that differ between cohorts."
        )
    p0 = len(spec.specs)
    loglik_grad = regression_loglik(cells, xs, spec, form)
    pooled = _pooled(cells)
    starts = [np.concatenate([s, np.zeros(k)]) for s in spec.starts(pooled)]
    n = sum(c.n_subjects for c, _ in cells)
    ml = maximise(loglik_grad, starts, scale=float(n))
    base_cov = ml.cov[:p0, :p0]
    baseline = ModelFit(
        spec.name,
        "baseline (covariates 0)",
        spec,
        ml.params[:p0],
        base_cov,
        ml.loglik,
        n,
        sum(c.n_churned for c, _ in cells),
        max(c.max_tenure for c, _ in cells),
        ml.convergence,
        confidence,
    )
    return RegressionFit(
        f"{family} {form.upper()}",
        form,
        tuple(covariates),
        baseline,
        ml.params,
        ml.cov,
        ml.loglik,
        n,
        ml.convergence,
        confidence,
    )


def _pooled(cells) -> GroupedData:
    size = max(c.tenure.size for c, _ in cells)

    def add(attr):
        out = np.zeros(size)
        for c, _ in cells:
            out[: c.tenure.size] += getattr(c, attr)
        return out

    exposure = add("exposure") if all(c.exposure is not None for c, _ in cells) else None
    return GroupedData(
        "pooled",
        np.arange(size, dtype=float),
        add("at_risk"),
        add("entered"),
        add("churned"),
        add("censored"),
        exposure,
    )


def fit_price_ph(
    counts: pl.DataFrame, cohort: str, family: str = "weibull", confidence: float = 0.95
) -> RegressionFit:
    """PH model with the time-varying "after a price increase" covariate for one cohort of
    ``episodes_counts``."""
    cells = price_cells(counts, cohort)
    return fit_regression(cells, ("after price increase",), family, "ph", confidence)


# --- piecewise-constant hazard with the price covariate ----------------------------------------


@dataclass(frozen=True)
class PiecewisePriceFit:
    """log h(t, after) = log h_band(t) + β·after, by Poisson maximum likelihood."""

    cohort: str
    cuts: tuple[int, ...]
    params: np.ndarray  # log h per band, then β
    cov: np.ndarray
    loglik: float  # Poisson log-likelihood (without the constant)
    confidence: float = 0.95

    def effect(self) -> dict:
        z = float(stats.norm.ppf(0.5 + self.confidence / 2))
        b, se = self.params[-1], float(np.sqrt(self.cov[-1, -1]))
        return {
            "cohort": self.cohort,
            "hazard_ratio": float(np.exp(b)),
            "se_log": se,
            "lower": float(np.exp(b - z * se)),
            "upper": float(np.exp(b + z * se)),
        }


def fit_piecewise_price(
    counts: pl.DataFrame,
    cohort: str,
    cuts: tuple[int, ...] | list[int] | None = None,
    confidence: float = 0.95,
) -> PiecewisePriceFit:
    """Piecewise-constant hazard with a price-increase effect, from ``episodes_counts``."""
    cells = price_cells(counts, cohort)
    if len(cells) < 2:
        raise UserError(f"cohort {cohort!r} has no spell after a price increase.")
    if cuts is None:
        # fine bands (about three tenure units each): with coarse bands, pieces after an
        # increase sit at later tenures than pieces before it inside one band, and the falling
        # baseline hazard would be read as a smaller price effect
        pooled = _pooled(cells)
        cuts = auto_cuts(pooled, bands=max(6, pooled.max_tenure // 3), min_churns=10)
    edges = np.array([0.0, *sorted(cuts), np.inf])
    nb = edges.size - 1
    d_rows, e_rows, x_rows = [], [], []
    for data, after in cells:  # two cells: before and after the increase
        exposure = data.exposure if data.exposure is not None else data.at_risk
        for j in range(nb):  # bands
            inside = (data.tenure > edges[j]) & (data.tenure <= edges[j + 1])
            d_rows.append(data.churned[inside].sum())
            e_rows.append(exposure[inside].sum())
            row = np.zeros(nb + 1)
            row[j] = 1.0
            row[-1] = after
            x_rows.append(row)
    d, e, x = np.array(d_rows), np.array(e_rows), np.vstack(x_rows)
    keep = e > 0
    d, e, x = d[keep], e[keep], x[keep]
    theta = np.concatenate(
        [np.log(np.maximum(d[:nb].sum(), 1) / max(e.sum(), 1.0)) * np.ones(nb), [0.0]]
    )
    for _ in range(100):  # Newton on the Poisson log-likelihood (concave)
        mu = e * np.exp(x @ theta)
        grad = x.T @ (d - mu)
        info = x.T @ (x * mu[:, None])
        step = np.linalg.solve(info, grad)
        theta = theta + step
        if np.max(np.abs(step)) < 1e-12:
            break
    mu = e * np.exp(x @ theta)
    info = x.T @ (x * mu[:, None])
    ll = float(np.sum(d * (x @ theta + np.log(e)) - mu))
    return PiecewisePriceFit(
        cohort, tuple(int(c) for c in cuts), theta, np.linalg.inv(info), ll, confidence
    )


def price_effects(counts: pl.DataFrame, confidence: float = 0.95) -> pl.DataFrame:
    """Hazard ratio after a price increase per cohort that has one: Weibull PH and piecewise
    forms side by side (cohorts without spells after an increase are left out)."""
    rows = []
    after = counts.filter(pl.col("price_state") == PRICE_STATES[1])
    for cohort in after["cohort"].unique(maintain_order=True).to_list():  # loop over cohorts
        try:
            ph = fit_price_ph(counts, cohort, confidence=confidence).effects()
            pw = fit_piecewise_price(counts, cohort, confidence=confidence).effect()
        except (UserError, np.linalg.LinAlgError, ValueError):
            continue  # too few churns after the increase to estimate its effect
        spells_after = int(after.filter(pl.col("cohort") == cohort)["entered"].sum())
        rows.append(
            (cohort, "weibull PH", ph["ratio"][0], ph["lower"][0], ph["upper"][0], spells_after)
        )
        rows.append(
            (cohort, "piecewise", pw["hazard_ratio"], pw["lower"], pw["upper"], spells_after)
        )
    return pl.DataFrame(
        rows,
        schema=["cohort", "model", "hazard_ratio", "lower", "upper", "spells_after_increase"],
        orient="row",
    )
