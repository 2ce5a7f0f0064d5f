"""Continuous-time survival families for churn, fitted on the grouped (interval-censored) counts
with left truncation (churnlife.models.base). Each family gives log S(t) and its analytic
gradient on an unconstrained parameter scale, and the instantaneous hazard.

Families and parameters (unconstrained scale in brackets)
---------------------------------------------------------
* exponential: S = exp(-λ t)                                  [log rate]
* weibull:     S = exp(-(t/σ)^k)                               [log scale, log shape]
* gompertz:    h = b e^{c t}, S = exp(-b (e^{c t} - 1)/c)      [log b, c]; c < 0 makes a share
               that never churns (S(∞) = exp(b/c)), c > 0 a hazard that grows with tenure
* lognormal:   log T ~ N(μ, s²)                                 [μ, log s]
* loglogistic: S = 1 / (1 + (t/α)^β)                           [log α, log β]
* gengamma:    generalised gamma in Prentice's (1974) form     [μ, log s, Q]: w = (log t - μ)/s,
               a = Q^-2, x = a e^{Q w}; S = Γ̄(a, x) for Q > 0, P(a, x) for Q < 0 (regularised
               incomplete gamma); Q = 1 is the Weibull, Q → 0 the log-normal.

References
----------
Lawless, J. F. (2003). Statistical Models and Methods for Lifetime Data, 2nd ed., ch. 1 and 5.
Prentice, R. L. (1974). A log gamma model and its maximum likelihood estimation. Biometrika 61,
    539–544.
Cox, C., Chu, H., Schneider, M. F. & Muñoz, A. (2007). Parametric survival analysis and taxonomy of
    hazard functions for the generalized gamma distribution. Statistics in Medicine 26, 4352–4374.
Moore, R. J. (1982). Algorithm AS 187: Derivatives of the incomplete gamma integral. Applied
    Statistics 31, 330–335 (the shape derivative by series, used for gengamma's Q gradient).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import special, stats

from churnlife.models.base import (
    GroupedData,
    ParamSpec,
    exponential_rate_start,
    km_median_start,
)


def _pos(t: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Mask of t > 0 and t with zeros replaced by 1 (log S(0) = 0 is set by the caller)."""
    t = np.asarray(t, dtype=float)
    pos = t > 0
    return pos, np.where(pos, t, 1.0)


@dataclass(frozen=True)
class Exponential:
    name: str = "exponential"
    kind: str = "continuous"

    @property
    def specs(self) -> tuple[ParamSpec, ...]:
        return (ParamSpec("rate", "log"),)

    def log_survival(self, t, theta):
        return -np.exp(theta[0]) * np.asarray(t, float)

    def log_survival_grad(self, t, theta):
        ls = self.log_survival(t, theta)
        return ls, ls[:, None]

    def instant_hazard(self, t, theta):
        return np.full(np.shape(t), np.exp(theta[0]))

    def starts(self, data: GroupedData):
        return [np.array([np.log(exponential_rate_start(data))])]


@dataclass(frozen=True)
class Weibull:
    name: str = "weibull"
    kind: str = "continuous"

    @property
    def specs(self):
        return (ParamSpec("scale", "log"), ParamSpec("shape", "log"))

    def log_survival(self, t, theta):
        pos, tt = _pos(t)
        k = np.exp(theta[1])
        return np.where(pos, -np.exp(k * (np.log(tt) - theta[0])), 0.0)

    def log_survival_grad(self, t, theta):
        pos, tt = _pos(t)
        k = np.exp(theta[1])
        u = np.log(tt) - theta[0]
        z = np.where(pos, np.exp(k * u), 0.0)
        g = np.column_stack([k * z, -z * k * np.where(pos, u, 0.0)])
        return -z, g

    def instant_hazard(self, t, theta):
        pos, tt = _pos(t)
        k = np.exp(theta[1])
        return np.where(pos, k / np.exp(theta[0]) * np.exp((k - 1) * (np.log(tt) - theta[0])), 0)

    def starts(self, data):
        rate = exponential_rate_start(data)
        return [np.array([-np.log(rate), 0.0]), np.array([-np.log(rate) + 1.0, np.log(0.6)])]


def _expm1_over(c: float, t: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """g = (e^{ct} - 1)/c and dg/dc, with the Taylor series where |c t| is small."""
    ct = c * t
    small = np.abs(ct) < 1e-4
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        g = np.where(small, t * (1 + ct / 2 + ct**2 / 6 + ct**3 / 24), np.expm1(ct) / c)
        dg = np.where(
            small,
            t**2 * (0.5 + ct / 3 + ct**2 / 8 + ct**3 / 30),
            (ct * np.exp(ct) - np.expm1(ct)) / c**2,
        )
    return g, dg


@dataclass(frozen=True)
class Gompertz:
    name: str = "gompertz"
    kind: str = "continuous"

    @property
    def specs(self):
        return (ParamSpec("b", "log"), ParamSpec("c", "identity"))

    def log_survival(self, t, theta):
        g, _ = _expm1_over(theta[1], np.asarray(t, float))
        return -np.exp(theta[0]) * g

    def log_survival_grad(self, t, theta):
        g, dg = _expm1_over(theta[1], np.asarray(t, float))
        b = np.exp(theta[0])
        return -b * g, np.column_stack([-b * g, -b * dg])

    def instant_hazard(self, t, theta):
        return np.exp(theta[0] + theta[1] * np.asarray(t, float))

    def starts(self, data):
        rate = exponential_rate_start(data)
        return [np.array([np.log(rate), 0.0]), np.array([np.log(rate * 2), -0.05])]


@dataclass(frozen=True)
class LogNormal:
    name: str = "lognormal"
    kind: str = "continuous"

    @property
    def specs(self):
        return (ParamSpec("mu", "identity"), ParamSpec("sigma", "log"))

    def log_survival(self, t, theta):
        pos, tt = _pos(t)
        z = (np.log(tt) - theta[0]) / np.exp(theta[1])
        return np.where(pos, stats.norm.logsf(z), 0.0)

    def log_survival_grad(self, t, theta):
        pos, tt = _pos(t)
        sigma = np.exp(theta[1])
        z = (np.log(tt) - theta[0]) / sigma
        ls = stats.norm.logsf(z)
        m = np.exp(stats.norm.logpdf(z) - ls)  # φ/Φ̄: d(-log S)/dz
        g = np.column_stack([m / sigma, m * z]) * pos[:, None]
        return np.where(pos, ls, 0.0), g

    def instant_hazard(self, t, theta):
        pos, tt = _pos(t)
        sigma = np.exp(theta[1])
        z = (np.log(tt) - theta[0]) / sigma
        return np.where(pos, np.exp(stats.norm.logpdf(z) - stats.norm.logsf(z)) / (sigma * tt), 0)

    def starts(self, data):
        m = km_median_start(data)
        return [np.array([np.log(m), np.log(1.5)]), np.array([np.log(m), np.log(3.0)])]


@dataclass(frozen=True)
class LogLogistic:
    name: str = "loglogistic"
    kind: str = "continuous"

    @property
    def specs(self):
        return (ParamSpec("scale", "log"), ParamSpec("shape", "log"))

    def log_survival(self, t, theta):
        pos, tt = _pos(t)
        u = np.exp(theta[1]) * (np.log(tt) - theta[0])
        return np.where(pos, -np.logaddexp(0.0, u), 0.0)

    def log_survival_grad(self, t, theta):
        pos, tt = _pos(t)
        beta = np.exp(theta[1])
        u = beta * (np.log(tt) - theta[0])
        s = special.expit(u)
        g = np.column_stack([s * beta, -s * u]) * pos[:, None]
        return np.where(pos, -np.logaddexp(0.0, u), 0.0), g

    def instant_hazard(self, t, theta):
        pos, tt = _pos(t)
        beta = np.exp(theta[1])
        return np.where(pos, beta / tt * special.expit(beta * (np.log(tt) - theta[0])), 0.0)

    def starts(self, data):
        m = km_median_start(data)
        return [np.array([np.log(m), np.log(1.5)]), np.array([np.log(m), np.log(0.7)])]


# --- generalised gamma ------------------------------------------------------------------------

_LAGUERRE = np.polynomial.laguerre.laggauss(80)
_Q_NEAR_ZERO = 0.03


def gamma_shape_derivative(a: float, x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(∂P/∂a, ∂log Q/∂a) for the regularised incomplete gamma functions P(a, x) and
    Q(a, x) = 1 - P(a, x), each accurate where it matters:

    * near the body and lower tail, x <= max(a - 1 + 1.5 sqrt(a - 1), 1): the series
      P = Σ_n x^{a+n} e^{-x} / Γ(a+n+1) differentiated term by term (Moore 1982);
      ∂log Q/∂a = -∂P/∂a / Q (Q is not small there);
    * in the upper tail: ∂log Q/∂a = E[log U | U > x] - ψ(a), the conditional mean of log U
      under the gamma density, by Gauss–Laguerre quadrature of ∫_0^∞ (1 + v/x)^{a-1} e^{-v}
      after rescaling v = s / r, r = 1 - (a - 1)/x (the tail's decay rate), so the relative
      accuracy holds where Q is tiny; ∂P/∂a = -Q ∂log Q/∂a.
    """
    x = np.asarray(x, dtype=float)
    dp = np.zeros_like(x)
    dlq = np.zeros_like(x)
    q_all = special.gammaincc(a, x)
    # the tail starts 1.5 sd above the mean, where the rescaled integrand is smooth
    tail = x > max(a - 1 + 1.5 * np.sqrt(max(a - 1, 0.0)), 1.0)
    body = (x > 0) & ~tail
    if body.any():
        xs = x[body]
        n_terms = int(np.ceil(xs.max() + 12 * np.sqrt(xs.max()) + 60))
        n = np.arange(n_terms)
        lx = np.log(xs)[:, None]
        weights = np.exp((a + n) * lx - xs[:, None] - special.gammaln(a + n + 1))
        dp[body] = np.sum(weights * (lx - special.digamma(a + n + 1)), axis=1)
        with np.errstate(divide="ignore", invalid="ignore"):
            dlq[body] = np.where(q_all[body] > 0, -dp[body] / q_all[body], 0.0)
    if tail.any():
        xt = x[tail][:, None]
        r = 1 - (a - 1) / xt
        u, w = _LAGUERRE
        v = u[None, :] / r
        log_f = (a - 1) * np.log1p(v / xt) - v + u[None, :]
        f = w * np.exp(log_f - log_f.max(axis=1, keepdims=True))
        mean_log = np.sum(f * np.log(xt + v), axis=1) / np.sum(f, axis=1)
        dlq[tail] = mean_log - special.digamma(a)
        dp[tail] = -q_all[tail] * dlq[tail]
    return dp, dlq


@dataclass(frozen=True)
class GeneralisedGamma:
    name: str = "gengamma"
    kind: str = "continuous"

    @property
    def specs(self):
        return (ParamSpec("mu", "identity"), ParamSpec("sigma", "log"), ParamSpec("Q", "identity"))

    @staticmethod
    def _parts(t, theta):
        pos, tt = _pos(t)
        mu, sigma, q = theta[0], np.exp(theta[1]), theta[2]
        w = (np.log(tt) - mu) / sigma
        return pos, tt, sigma, q, w

    def log_survival(self, t, theta):
        pos, _, _, q, w = self._parts(t, theta)
        if abs(q) < 1e-8:
            return np.where(pos, stats.norm.logsf(w), 0.0)
        a = q**-2
        with np.errstate(over="ignore"):
            x = a * np.exp(np.clip(q * w, -700, 700))
        s = special.gammaincc(a, x) if q > 0 else special.gammainc(a, x)
        return np.where(pos, np.log(np.maximum(s, 1e-300)), 0.0)

    def log_survival_grad(self, t, theta):
        pos, _tt, sigma, q, w = self._parts(t, theta)
        if abs(q) < _Q_NEAR_ZERO:
            return self._grad_near_lognormal(t, theta)
        a = q**-2
        with np.errstate(over="ignore"):
            x = a * np.exp(np.clip(q * w, -700, 700))
        dp_da, dlogq_da = gamma_shape_derivative(a, x)
        log_dens = (a - 1) * np.log(np.maximum(x, 1e-300)) - x - special.gammaln(a)
        if q > 0:  # S = Q(a, x): work with d log S directly, accurate in the far tail
            s = np.maximum(special.gammaincc(a, x), 1e-300)
            dls_dx = -np.exp(log_dens - np.log(s))
            dls_da = dlogq_da
        else:  # S = P(a, x)
            s = np.maximum(special.gammainc(a, x), 1e-300)
            dls_dx = np.exp(log_dens - np.log(s))
            dls_da = dp_da / s
        dx_dw = q * x
        g_mu = dls_dx * dx_dw * (-1 / sigma)
        g_logsigma = dls_dx * dx_dw * (-w)
        da_dq = -2 * q**-3
        dx_dq = x * (da_dq / a + w)
        g_q = dls_da * da_dq + dls_dx * dx_dq
        g = np.column_stack([g_mu, g_logsigma, g_q])
        return np.where(pos, np.log(s), 0.0), g * pos[:, None]

    def _grad_near_lognormal(self, t, theta):
        """Within |Q| < 0.03 the incomplete-gamma shape derivative needs ~1/Q² series terms, so
        the Q derivative there is a central difference of the exact log S (μ and σ analytic
        through the Q-shifted evaluation)."""
        h = 1e-5
        base = self.log_survival(t, theta)
        grads = []
        for i, step in ((0, h), (1, h), (2, h)):
            up, down = theta.copy(), theta.copy()
            up[i] += step
            down[i] -= step
            grads.append((self.log_survival(t, up) - self.log_survival(t, down)) / (2 * step))
        return base, np.column_stack(grads)

    def instant_hazard(self, t, theta):
        pos, tt, sigma, q, w = self._parts(t, theta)
        if abs(q) < 1e-8:
            return LogNormal().instant_hazard(t, theta[:2])
        a = q**-2
        x = a * np.exp(np.clip(q * w, -700, 700))
        dens = np.exp((a - 1) * np.log(np.maximum(x, 1e-300)) - x - special.gammaln(a))
        f = dens * abs(q) * x / (sigma * tt)
        s = np.exp(self.log_survival(t, theta))
        return np.where(pos, f / np.maximum(s, 1e-300), 0.0)

    def starts(self, data):
        from churnlife.models.base import fit_spec

        starts = []
        try:
            wb = fit_spec(Weibull(), data)
            starts.append(np.array([wb.params[0], -wb.params[1], 1.0]))
            starts.append(np.array([wb.params[0], -wb.params[1], 0.5]))
        except Exception:  # a failed helper fit only removes one starting point
            pass
        m = km_median_start(data)
        starts.append(np.array([np.log(m), np.log(1.5), 0.3]))
        starts.append(np.array([np.log(m), np.log(1.5), -0.5]))
        return starts


FAMILIES = {
    f.name: f
    for f in (Exponential(), Weibull(), Gompertz(), LogNormal(), LogLogistic(), GeneralisedGamma())
}
