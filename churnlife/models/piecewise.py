"""Piecewise-constant hazard: a constant hazard rate inside each band of tenures, estimated as a
Poisson rate on the counts' exact customer-time (``exposure``).

With cut points c_1 < ... < c_m (integer tenures), band j holds the tenure intervals t with
c_{j-1} < t <= c_j (c_0 = 0; the last band is open-ended, so an extrapolation continues its
hazard). The maximum-likelihood rate is h_j = D_j / E_j (churns over customer-time in the band) and
the observed information of log h_j is D_j, so cov(log h) = diag(1 / D_j). Exact exposure already
reflects late entry and censoring inside an interval, so no interval correction is needed.

References
----------
Holford, T. R. (1980). The analysis of rates and of survivorship using log-linear models.
    Biometrics 36, 299–305.
Laird, N. & Olivier, D. (1981). Covariance analysis of censored survival data using log-linear
    analysis techniques. JASA 76, 231–240.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass

import numpy as np

from churnlife.errors import UserError
from churnlife.models.base import (
    Convergence,
    GroupedData,
    ModelFit,
    ParamSpec,
    interval_loglik,
)


@dataclass(frozen=True)
class PiecewiseHazard:
    """S(t) = exp(-Σ_j h_j |(c_{j-1}, c_j] ∩ (0, t]|), parameters log h_j."""

    cuts: tuple[int, ...]  # interior cut points (band ends except the open last band)
    name: str = "piecewise"
    kind: str = "piecewise"

    @property
    def edges(self) -> np.ndarray:
        return np.array([0.0, *self.cuts, np.inf])

    @property
    def specs(self):
        lo = self.edges[:-1]
        hi = self.edges[1:]
        return tuple(
            ParamSpec(f"rate ({int(a)}, {'∞' if np.isinf(b) else int(b)}]", "log")
            for a, b in zip(lo, hi, strict=True)
        )

    def time_in_band(self, t: np.ndarray) -> np.ndarray:
        """|(c_{j-1}, c_j] ∩ (0, t]| for each t (rows) and band j (columns)."""
        t = np.asarray(t, float)[:, None]
        lo, hi = self.edges[:-1][None, :], self.edges[1:][None, :]
        return np.clip(np.minimum(t, hi) - lo, 0.0, None)

    def log_survival(self, t, theta):
        return -(self.time_in_band(np.atleast_1d(t)) @ np.exp(theta)).reshape(np.shape(t))

    def log_survival_grad(self, t, theta):
        tib = self.time_in_band(t)
        g = -tib * np.exp(theta)[None, :]
        return g.sum(axis=1), g

    def starts(self, data: GroupedData):
        return [np.zeros(len(self.cuts) + 1)]


def _exposure(data: GroupedData) -> np.ndarray:
    if data.exposure is not None:
        return data.exposure
    # Durations without exact times: churns half-way through their interval, censorings and
    # survivors the whole interval (the usual actuarial approximation).
    return np.clip(data.at_risk - 0.5 * data.churned, 0.0, None)


def auto_cuts(data: GroupedData, bands: int = 6, min_churns: int = 10) -> tuple[int, ...]:
    """Cut points splitting the cohort's churns into about equal shares (at most ``bands``
    bands, each with at least ``min_churns`` churns and ending where a churn was seen)."""
    d = data.churned
    total = d.sum()
    k = int(max(1, min(bands, total // max(min_churns, 1))))
    cum = np.cumsum(d)
    cuts: list[int] = []
    for j in range(1, k):
        t = int(np.searchsorted(cum, total * j / k))
        if (not cuts or t > cuts[-1]) and t < data.max_tenure:
            cuts.append(t)
    # merge bands with too few churns (from the back, so the open last band stays supported)
    edges = [0, *cuts, int(data.tenure[-1]) + 1]
    sums = [d[(data.tenure > a) & (data.tenure <= b)].sum() for a, b in itertools.pairwise(edges)]
    while len(cuts) and min(sums) < min_churns:
        j = int(np.argmin(sums))
        drop = j - 1 if j == len(sums) - 1 else j  # remove the cut on the band's right, or left
        cuts.pop(drop)
        edges = [0, *cuts, int(data.tenure[-1]) + 1]
        sums = [
            d[(data.tenure > a) & (data.tenure <= b)].sum() for a, b in itertools.pairwise(edges)
        ]
    return tuple(int(c) for c in cuts)


def fit_piecewise(
    data: GroupedData, cuts: tuple[int, ...] | list[int] | None = None, confidence: float = 0.95
) -> ModelFit:
    """Piecewise-constant hazard for one cohort; ``cuts`` as given, or automatic (``auto_cuts``)."""
    if data.n_churned == 0:
        raise UserError(f"cohort {data.cohort!r} has no churn; no hazard can be estimated.")
    if cuts is None:
        cuts = auto_cuts(data)
    cuts = tuple(sorted({int(c) for c in cuts}))
    if any(c <= 0 for c in cuts):
        raise UserError("piecewise cut points must be positive whole tenures, e.g. [1, 3, 12].")
    spec = PiecewiseHazard(cuts)
    edges = spec.edges
    exposure = _exposure(data)
    churns, times = [], []
    for a, b in itertools.pairwise(edges):  # loop over bands
        inside = (data.tenure > a) & (data.tenure <= b)
        churns.append(data.churned[inside].sum())
        times.append(exposure[inside].sum())
    churns_a, times_a = np.array(churns), np.array(times)
    empty = np.flatnonzero(churns_a == 0)
    if empty.size:
        a, b = edges[empty[0]], edges[empty[0] + 1]
        raise UserError(
            f"cohort {data.cohort!r}: no churn in tenures ({a:g}, {b:g}], so its hazard is not "
            "estimable. Move or remove the cut points around it (or let churnlife choose them)."
        )
    theta = np.log(churns_a / times_a)
    cov = np.diag(1.0 / churns_a)
    ls, _ = spec.log_survival_grad(data.tenure, theta)
    ll, _ = interval_loglik(ls, data.churned, data.weight)
    poisson_ll = float(np.sum(churns_a * theta - np.exp(theta) * times_a))
    conv = Convergence(True, 0, 0.0, True, 1, "closed form (churns / customer-time per band)")
    return ModelFit(
        "piecewise",
        data.cohort,
        spec,
        theta,
        cov,
        ll,
        data.n_subjects,
        data.n_churned,
        data.max_tenure,
        conv,
        confidence,
        extra={"poisson_loglik": poisson_ll, "churns": churns_a, "exposure": times_a},
    )
