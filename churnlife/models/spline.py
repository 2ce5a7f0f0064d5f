"""Royston–Parmar flexible model: a restricted (natural) cubic spline in log tenure for the log
cumulative hazard,

    log H(t) = γ0 + γ1 x + Σ_j γ_{j+1} v_j(x),   x = log t,
    v_j(x) = (x - k_j)_+^3 - λ_j (x - k_min)_+^3 - (1 - λ_j)(x - k_max)_+^3,
    λ_j = (k_max - k_j) / (k_max - k_min),

with 1–4 interior knots k_j at centiles of the log churn tenures, boundary knots at the first and
last observed tenure. With no interior knot it is the Weibull; past the last knot log H is linear
in log t, so an extrapolation continues as a Weibull tail. Fitted by the shared interval-censored
likelihood with late entry; log S = -exp(s(x)) is linear in γ inside the exponent, so the
gradient is exact.

Reference
---------
Royston, P. & Parmar, M. K. B. (2002). Flexible parametric proportional-hazards and
    proportional-odds models for censored survival data. Statistics in Medicine 21, 2175–2197.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from churnlife.errors import UserError
from churnlife.models.base import GroupedData, ModelFit, ParamSpec, fit_spec
from churnlife.models.parametric import Weibull

# Royston & Parmar's default knot centiles for 1–4 interior knots.
KNOT_CENTILES = {1: (50,), 2: (33, 67), 3: (25, 50, 75), 4: (20, 40, 60, 80)}


@dataclass(frozen=True)
class RoystonParmar:
    knots: tuple[float, ...]  # all knots on the log scale: k_min, interior..., k_max
    name: str = "spline"
    kind: str = "spline"

    @property
    def specs(self):
        return tuple(ParamSpec(f"gamma{j}", "identity") for j in range(len(self.knots)))

    def basis(self, x: np.ndarray) -> np.ndarray:
        k = np.asarray(self.knots)
        kmin, kmax = k[0], k[-1]
        cols = [np.ones_like(x), x]
        for kj in k[1:-1]:
            lam = (kmax - kj) / (kmax - kmin)
            cols.append(
                np.clip(x - kj, 0, None) ** 3
                - lam * np.clip(x - kmin, 0, None) ** 3
                - (1 - lam) * np.clip(x - kmax, 0, None) ** 3
            )
        return np.column_stack(cols)

    def _parts(self, t):
        t = np.asarray(t, float)
        pos = t > 0
        x = np.log(np.where(pos, t, 1.0))
        return pos, self.basis(x)

    def log_survival(self, t, theta):
        pos, b = self._parts(np.atleast_1d(t))
        with np.errstate(over="ignore"):
            out = np.where(pos, -np.exp(b @ theta), 0.0)
        return out.reshape(np.shape(t))

    def log_survival_grad(self, t, theta):
        pos, b = self._parts(t)
        with np.errstate(over="ignore"):
            cum = np.where(pos, np.exp(b @ theta), 0.0)
        return -cum, -cum[:, None] * b

    def starts(self, data: GroupedData):
        wb = fit_spec(Weibull(), data)
        k = np.exp(wb.params[1])
        start = np.zeros(len(self.knots))
        start[0], start[1] = -k * wb.params[0], k
        return [start]


def spline_knots(data: GroupedData, interior: int) -> tuple[float, ...]:
    """Boundary knots at log(first churn tenure) and log(last observed tenure); interior knots at
    Royston–Parmar centiles of the log churn tenures (mid-interval, t - 1/2), kept distinct."""
    if interior not in KNOT_CENTILES:
        raise UserError("a spline model takes 1 to 4 interior knots.")
    churn_t = data.tenure[data.churned > 0]
    lo, hi = np.log(max(churn_t.min(), 1.0)), np.log(max(data.max_tenure, 2))
    if hi - lo < 1e-9:
        raise UserError(
            f"cohort {data.cohort!r}: churn is seen at a single tenure, too little for a spline."
        )
    mids = np.log(np.maximum(churn_t - 0.5, 0.5))
    w = data.churned[data.churned > 0]
    order = np.argsort(mids)
    cum = np.cumsum(w[order]) / w.sum()
    inner = []
    for c in KNOT_CENTILES[interior]:
        v = float(mids[order][np.searchsorted(cum, c / 100)])
        v = min(max(v, lo + 0.05 * (hi - lo)), hi - 0.05 * (hi - lo))
        if not inner or v - inner[-1] > 1e-3 * (hi - lo):
            inner.append(v)
    return (lo, *inner, hi)


def fit_spline(data: GroupedData, interior: int = 2, confidence: float = 0.95) -> ModelFit:
    """Royston–Parmar spline with ``interior`` knots (1–4) for one cohort."""
    spec = RoystonParmar(spline_knots(data, interior), name=f"spline{interior}")
    return fit_spec(spec, data, confidence)
