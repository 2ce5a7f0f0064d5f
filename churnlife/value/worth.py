"""Discounted value and remaining lifetime from a valuation curve: the arithmetic, vectorised over
simulation draws and tenures.

Conventions (stated in the report next to every value)
------------------------------------------------------
* Tenure k counts whole tenure units completed. A customer still active at tenure k pays for the
  next period then (the revenue path r(k), churnlife.value.revenue), with probability S(k).
* Discounting: an annual rate d becomes d_u = (1 + d)^(unit in years) - 1 per tenure unit;
  δ = 1 / (1 + d_u).
* New customer (tenure 0): V = Σ_{k≥0} S(k) · cash(k) · δ^k, the first payment undiscounted.
* Active customer at tenure τ, valued just before their next renewal:
  V(τ) = Σ_{k>τ} S(k)/S(τ) · cash(k) · δ^{k-τ-1}. With cash ≡ 1 this is the discounted expected
  residual lifetime DERL(d | τ renewals) of Fader & Hardie (2010), whose closed form for the
  shifted-beta-geometric model is ``sbg_derl``.
* Payment at the end of each period instead: every value times δ.
* cash(k) = margin_rate · r(k) - cost_to_serve per unit.
* Sums stop at the horizon H; what is left out is at most max|cash| · S(H)/S(τ) · δ^{H-τ}/(1-δ),
  because S never rises (reported as ``truncation_bound``).
* Mean remaining lifetime is the life-table (actuarial) expectation restricted to the horizon:
  e(τ) = Σ_{k=τ}^{H-1} (S(k) + S(k+1)) / 2 / S(τ), churn spread evenly within each unit.

References
----------
Fader, P. S. & Hardie, B. G. S. (2010). Customer-base valuation in a contractual setting: the
    perils of ignoring heterogeneity. Marketing Science 29(1), 85–93.
Chiang, C. L. (1984). The Life Table and Its Applications (actuarial expectation of life).
"""

from __future__ import annotations

import numpy as np
from scipy import special

from churnlife.errors import UserError

UNIT_YEARS = {"days": 1 / 365.25, "weeks": 7 / 365.25, "months": 1 / 12}


def unit_years(unit: str, period_months: float = 1.0) -> float:
    """Length of one tenure unit in years ("periods" are billing periods of ``period_months``)."""
    if unit == "periods":
        return period_months / 12
    return UNIT_YEARS[unit]


def per_unit_rate(annual_rate: float, years_per_unit: float) -> float:
    """The discount rate per tenure unit equivalent to ``annual_rate`` per year."""
    if annual_rate < 0:
        raise UserError("the discount rate must be ≥ 0 (an annual rate such as 0.10).")
    return float((1 + annual_rate) ** years_per_unit - 1)


def sbg_derl(alpha: float, beta: float, d: float, n: int | np.ndarray) -> np.ndarray:
    """Discounted expected residual lifetime of the shifted-beta-geometric model for a customer
    who has made n - 1 renewals, valued just before the n-th (Fader & Hardie 2010):
    (β + n - 1)/(α + β + n - 1) · ₂F₁(1, β + n; α + β + n; 1/(1 + d)). ``d`` per period."""
    if alpha <= 0 or beta <= 0 or d <= 0:
        raise UserError("sBG DERL needs α > 0, β > 0 and a discount rate > 0.")
    n = np.asarray(n, dtype=float)
    return (beta + n - 1) / (alpha + beta + n - 1) * special.hyp2f1(
        1.0, beta + n, alpha + beta + n, 1.0 / (1.0 + d)
    )


def sbg_del(alpha: float, beta: float, d: float) -> float:
    """Discounted expected lifetime of a new sBG customer, first payment undiscounted:
    ₂F₁(1, β; α + β; 1/(1 + d)) (Fader & Hardie 2010)."""
    if alpha <= 0 or beta <= 0 or d <= 0:
        raise UserError("sBG DEL needs α > 0, β > 0 and a discount rate > 0.")
    return float(special.hyp2f1(1.0, beta, alpha + beta, 1.0 / (1.0 + d)))


def _as_rows(s: np.ndarray) -> np.ndarray:
    s = np.asarray(s, dtype=float)
    return s[None, :] if s.ndim == 1 else s


def new_customer_value(
    survival: np.ndarray, cash: np.ndarray, rate: float, timing: str = "start"
) -> np.ndarray:
    """V = Σ_k S(k) cash(k) δ^k for each row of ``survival`` (one row per draw)."""
    s = _as_rows(survival)
    k = np.arange(s.shape[1])
    delta = 1.0 / (1.0 + rate)
    v = (s * cash[None, : s.shape[1]] * delta**k).sum(axis=1)
    return v * (delta if timing == "end" else 1.0)


def residual_value(
    survival: np.ndarray, cash: np.ndarray, rate: float, timing: str = "start"
) -> np.ndarray:
    """V(τ) = Σ_{k>τ} S(k)/S(τ) cash(k) δ^{k-τ-1} for every τ = 0..H (rows: draws; columns: τ).
    Where S(τ) = 0 the value is 0 (nobody is left to pay)."""
    s = _as_rows(survival)
    k = np.arange(s.shape[1], dtype=float)
    delta = 1.0 / (1.0 + rate)
    weighted = s * cash[None, : s.shape[1]] * delta**k
    after = np.cumsum(weighted[:, ::-1], axis=1)[:, ::-1]  # Σ_{k≥τ}
    after = np.concatenate([after[:, 1:], np.zeros((s.shape[0], 1))], axis=1)  # Σ_{k>τ}
    denom = s * delta ** (k + 1)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        v = np.where(denom > 0, after / np.where(denom > 0, denom, 1.0), 0.0)
    return v * (delta if timing == "end" else 1.0)


def truncation_bound(
    survival: np.ndarray, cash: np.ndarray, rate: float, tau: np.ndarray | int = 0
) -> np.ndarray:
    """Upper bound on what the sums leave out past the horizon H, per customer valued at τ:
    max|cash| · S(H)/S(τ) · δ^{H-τ}/(1-δ) (S never rises); infinite when the rate is 0 and
    S(H) > 0. For a new customer (τ = 0, first payment at 0) the bound is δ times this."""
    s = np.asarray(survival, dtype=float)
    h = s.size - 1
    tau = np.asarray(tau)
    delta = 1.0 / (1.0 + rate)
    top = float(np.max(np.abs(cash))) if cash.size else 0.0
    if rate <= 0:
        return np.where(s[-1] > 0, np.inf, 0.0) * np.ones_like(tau, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        share = np.where(s[tau] > 0, s[-1] / s[tau], 0.0)
    return top * share * delta ** (h - tau) / (1 - delta)


def mean_remaining_lifetime(survival: np.ndarray) -> np.ndarray:
    """Life-table expectation of remaining tenure within the horizon, for every τ = 0..H
    (rows: draws): Σ_{k=τ}^{H-1} (S(k)+S(k+1))/2 / S(τ)."""
    s = _as_rows(survival)
    trap = (s[:, :-1] + s[:, 1:]) / 2
    after = np.cumsum(trap[:, ::-1], axis=1)[:, ::-1]
    after = np.concatenate([after, np.zeros((s.shape[0], 1))], axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(s > 0, after / s, 0.0)


def median_remaining_lifetime(survival: np.ndarray, taus: np.ndarray) -> np.ndarray:
    """For each τ, the first j ≥ 1 with S(τ+j)/S(τ) ≤ 1/2 on the grid (rows: draws); NaN when
    more than half are still active at the horizon."""
    s = _as_rows(survival)
    h = s.shape[1] - 1
    out = np.full((s.shape[0], len(taus)), np.nan)
    for i, tau in enumerate(taus):  # a few dozen tenures; each step is vectorised over draws
        base = s[:, [tau]]
        with np.errstate(divide="ignore", invalid="ignore"):
            below = s[:, tau + 1 :] <= 0.5 * base
        hit = below.any(axis=1)
        first = np.argmax(below, axis=1) + 1
        out[:, i] = np.where(hit & (tau < h), first, np.nan)
    return out


def payback_tenure(
    survival: np.ndarray, cash: np.ndarray, rate: float, cost: float, timing: str = "start"
) -> np.ndarray:
    """The first tenure k at which the discounted expected cash of a new customer up to k covers
    the acquisition ``cost`` (rows: draws); NaN if not within the horizon."""
    s = _as_rows(survival)
    k = np.arange(s.shape[1])
    delta = 1.0 / (1.0 + rate)
    shift = delta if timing == "end" else 1.0
    running = np.cumsum(s * cash[None, : s.shape[1]] * delta**k, axis=1) * shift
    reached = running >= cost
    return np.where(reached.any(axis=1), np.argmax(reached, axis=1), np.nan)


def interval(draws: np.ndarray, confidence: float) -> tuple[np.ndarray, np.ndarray]:
    """Percentile interval over the draws (axis 0), ignoring NaN draws."""
    a = (1 - confidence) / 2
    with np.errstate(all="ignore"):
        if np.all(np.isnan(draws)):
            nan = np.full(draws.shape[1:], np.nan)
            return nan, nan
        lo, hi = np.nanquantile(draws, [a, 1 - a], axis=0)
    return lo, hi


_GL_NODES, _GL_WEIGHTS = np.polynomial.legendre.leggauss(16)


def model_mean_residual_life(survival_fn, taus: np.ndarray, upper: float) -> np.ndarray:
    """Mean remaining lifetime of a continuous-time model, ∫_τ^U S(u) du / S(τ), for whole
    tenures τ: Gauss–Legendre quadrature with 16 nodes on every unit interval up to ``upper``
    (the fully parametric counterpart of ``mean_remaining_lifetime``; take ``upper`` large to
    approach the unrestricted mean)."""
    top = int(np.ceil(upper))
    taus = np.asarray(taus, dtype=int)
    if np.any(taus < 0) or np.any(taus > top):
        raise UserError("tenures for the mean remaining lifetime must lie within 0..upper.")
    x = (np.arange(top)[:, None] + (_GL_NODES[None, :] + 1) / 2).ravel()
    s = np.asarray(survival_fn(x), dtype=float).reshape(top, _GL_NODES.size)
    per_unit = s @ (_GL_WEIGHTS / 2)
    after = np.concatenate([np.cumsum(per_unit[::-1])[::-1], [0.0]])  # ∫ from τ to top
    s_tau = np.asarray(survival_fn(taus.astype(float)), dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(s_tau > 0, after[taus] / s_tau, 0.0)
