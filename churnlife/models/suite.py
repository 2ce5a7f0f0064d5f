"""Fit a set of hazard models to every cohort of a counts table and collect the results: the
fits, their ranking, parameters, fitted-versus-observed tables, extrapolations and backtests.

    from churnlife.models.suite import fit_models
    models = fit_models(run.counts)                 # all default models, every cohort
    models.ranking()                                # AIC/BIC and deviation from KM
    fit = models.best("beans_monthly")              # a FittedSurvival
    models.extrapolation(horizon=60)                # bands past the data, flagged
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass, field

import numpy as np
import polars as pl

from churnlife.errors import UserError, did_you_mean
from churnlife.models.base import GroupedData, ModelFit, cohorts_of, fit_spec, grouped_from_counts
from churnlife.models.checking import Backtest, backtest, backtest_table, ranking_table
from churnlife.models.cure import CURE_MODELS
from churnlife.models.discrete import BetaDiscreteWeibull, ShiftedBetaGeometric
from churnlife.models.extrapolate import extrapolation_table
from churnlife.models.parametric import FAMILIES
from churnlife.models.piecewise import fit_piecewise
from churnlife.models.spline import fit_spline

DEFAULT_MODELS = (
    "exponential",
    "weibull",
    "gompertz",
    "lognormal",
    "loglogistic",
    "gengamma",
    "piecewise",
    "spline2",
    "sbg",
    "bdw",
    "cure_exponential",
    "cure_weibull",
)


def model_fitter(
    name: str, confidence: float = 0.95, cuts: Sequence[int] | None = None
) -> Callable[[GroupedData], ModelFit]:
    """A function fitting model ``name`` to one cohort's ``GroupedData``."""
    if name in FAMILIES:
        return lambda d: fit_spec(FAMILIES[name], d, confidence)
    if name == "sbg":
        return lambda d: fit_spec(ShiftedBetaGeometric(), d, confidence)
    if name == "bdw":
        return lambda d: fit_spec(BetaDiscreteWeibull(), d, confidence)
    if name in CURE_MODELS:
        return lambda d: fit_spec(CURE_MODELS[name], d, confidence)
    if name == "piecewise":
        return lambda d: fit_piecewise(d, cuts, confidence)
    if name.startswith("spline") and name[6:] in ("1", "2", "3", "4"):
        return lambda d: fit_spline(d, int(name[6:]), confidence)
    raise UserError(
        f'unknown model "{name}".{did_you_mean(name, MODEL_NAMES)} '
        f"Models: {', '.join(MODEL_NAMES)}."
    )


MODEL_NAMES = (
    *FAMILIES,
    "piecewise",
    "spline1",
    "spline2",
    "spline3",
    "spline4",
    "sbg",
    "bdw",
    *CURE_MODELS,
)

_FIT_FAILURES = (UserError, np.linalg.LinAlgError, FloatingPointError, ValueError)


@dataclass
class HazardModels:
    """Every fitted model for every cohort, with what could not be fitted and why."""

    fits: list[ModelFit]
    data: dict[str, GroupedData]
    failures: list[tuple[str, str, str]]  # cohort, model, reason
    confidence: float
    _ranking: pl.DataFrame | None = field(default=None, repr=False)

    def _repr_html_(self) -> str:  # shown in notebooks
        from churnlife.notebook import models_html

        return models_html(self)

    @property
    def cohorts(self) -> list[str]:
        return list(self.data)

    def get(self, cohort: str, model: str) -> ModelFit:
        for f in self.fits:
            if f.cohort == cohort and f.name == model:
                return f
        raise KeyError(f"no fit of {model!r} for cohort {cohort!r}")

    def for_cohort(self, cohort: str) -> list[ModelFit]:
        return [f for f in self.fits if f.cohort == cohort]

    def ranking(self) -> pl.DataFrame:
        if self._ranking is None:
            self._ranking = ranking_table(self.fits, self.data)
        return self._ranking

    def best(self, cohort: str, by: str = "aic") -> ModelFit:
        """The converged model with the lowest AIC (or BIC) for ``cohort``."""
        if by not in ("aic", "bic"):
            raise UserError('models are ranked "by" aic or bic.')
        ok = [f for f in self.for_cohort(cohort) if f.convergence.converged]
        if not ok:
            raise UserError(f"no model converged for cohort {cohort!r}.")
        return min(ok, key=lambda f: getattr(f, by))

    def has_converged(self, cohort: str) -> bool:
        """Whether any model converged for ``cohort`` (tiny or churn-free cohorts may have none)."""
        return any(f.convergence.converged for f in self.for_cohort(cohort))

    def parameters(self) -> pl.DataFrame:
        return pl.concat([f.estimates() for f in self.fits]) if self.fits else pl.DataFrame()

    def observed_vs_fitted(self) -> pl.DataFrame:
        """Per cohort × tenure: at risk, churned, KM S and empirical period hazard, with each
        model's fitted S and period hazard (long format, one row per model)."""
        frames = []
        for cohort, d in self.data.items():
            t = d.tenure[1 : d.max_tenure + 1]
            km = d.km()[1 : d.max_tenure + 1]
            n = d.at_risk[1 : d.max_tenure + 1]
            with np.errstate(divide="ignore", invalid="ignore"):
                q = np.where(n > 0, d.churned[1 : d.max_tenure + 1] / n, np.nan)
            for f in self.for_cohort(cohort):
                frames.append(
                    pl.DataFrame(
                        {
                            "cohort": cohort,
                            "model": f.name,
                            "tenure": t.astype(np.int64),
                            "at_risk": n.astype(np.int64),
                            "km_survival": km,
                            "empirical_hazard": q,
                            "fitted_survival": f.survival(t),
                            "fitted_hazard": f.hazard(t),
                        }
                    )
                )
        return pl.concat(frames).with_columns(pl.col(pl.Float64).fill_nan(None))

    def extrapolation(
        self,
        horizon: int | None = None,
        models: Sequence[str] | None = None,
        method: str = "delta",
        n_draws: int = 1000,
        seed: int = 0,
    ) -> pl.DataFrame:
        """Bands for the best model of each cohort (or the named ``models``) up to ``horizon``
        (default: twice the longest observed tenure)."""
        rng = np.random.default_rng(seed)
        frames = []
        for cohort, d in self.data.items():
            if models is None and not self.has_converged(cohort):
                continue  # nothing to extend; the ranking shows the failed fits
            h = horizon or 2 * max(d.max_tenure, 1)
            chosen = (
                [self.best(cohort)]
                if models is None
                else [f for f in self.for_cohort(cohort) if f.name in models]
            )
            for f in chosen:
                if np.all(np.isfinite(f.cov)):
                    frames.append(extrapolation_table(f, h, method, self.confidence, n_draws, rng))
        return pl.concat(frames) if frames else pl.DataFrame()

    def backtests(self, share: float = 0.5, models: Sequence[str] | None = None) -> list[Backtest]:
        """Refit each model on the first ``share`` of each cohort's observed tenures and check
        the prediction of the rest against KM."""
        out = []
        for cohort, d in self.data.items():
            cut = round(share * d.max_tenure)
            if cut < 2 or cut >= d.max_tenure:
                continue
            names = (
                models if models is not None else sorted({f.name for f in self.for_cohort(cohort)})
            )
            for name in names:
                try:
                    out.append(
                        backtest(model_fitter(name, self.confidence), d, cut, self.confidence)
                    )
                except _FIT_FAILURES:
                    continue
        return out

    def backtest_table(self, share: float = 0.5, models: Sequence[str] | None = None):
        return backtest_table(self.backtests(share, models))


def fit_models(
    counts: pl.DataFrame,
    models: Sequence[str] = DEFAULT_MODELS,
    confidence: float = 0.95,
    cohorts: Sequence[str] | None = None,
    cuts: Sequence[int] | None = None,
) -> HazardModels:
    """Fit ``models`` to each cohort of ``counts`` (cost: cohorts × tenures, not customers).

    A model that cannot be fitted to a cohort (no churn, a parameter not estimable) is left out and
    listed in ``failures`` with the reason; fits that ended without converging are kept and
    flagged in the ranking."""
    if not 0 < confidence < 1:
        raise UserError("confidence must be between 0 and 1, e.g. 0.95.")
    fitters = {m: model_fitter(m, confidence, cuts) for m in models}
    chosen = list(cohorts) if cohorts is not None else cohorts_of(counts)
    data = {c: grouped_from_counts(counts, c) for c in chosen}
    fits, failures = [], []
    for cohort, d in data.items():  # loops over cohorts and models, never customers
        for name, fitter in fitters.items():
            try:
                fits.append(fitter(d))
            except _FIT_FAILURES as err:
                failures.append((cohort, name, str(err)))
    return HazardModels(fits, data, failures, confidence)
