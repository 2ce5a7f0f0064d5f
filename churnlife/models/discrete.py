"""Discrete renewal-period models for contracts that renew each period: the shifted-beta-geometric
(sBG) and the beta-discrete-Weibull (BdW).

Each customer has a per-period churn probability θ drawn from a beta(α, β) across customers
(heterogeneity: the cohort's churn rate falls with tenure because the likeliest churners leave
first). In the BdW the individual's churn hazard also changes with tenure through c:
P(survive t periods | θ) = (1 - θ)^{t^c}. Integrating θ out:

    sBG:  S(t) = B(α, β + t) / B(α, β)
    BdW:  S(t) = B(α, β + t^c) / B(α, β)        (c = 1 is the sBG)

With tenure in periods ("periods" unit, or months for monthly plans), the counts at integer tenure
t are exactly per-period data: a churn at t is a loss during period t, P(T = t) = S(t-1) - S(t); a
censoring at t means period t was completed; a late entry at e conditions on S(e). So the
interval likelihood of churnlife.models.base is the sBG likelihood of Fader & Hardie (2007),
extended with late entry and censoring.

References
----------
Fader, P. S. & Hardie, B. G. S. (2007). How to project customer retention. Journal of Interactive
    Marketing 21(1), 76–90.
Fader, P. S., Hardie, B. G. S., Liu, Y., Davin, J. & Steenburgh, T. (2018). "How to project
    customer retention" revisited: the role of duration dependence. Journal of Interactive
    Marketing 43, 1–16.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import special

from churnlife.models.base import GroupedData, ParamSpec


@dataclass(frozen=True)
class ShiftedBetaGeometric:
    name: str = "sbg"
    kind: str = "discrete"

    @property
    def specs(self):
        return (ParamSpec("alpha", "log"), ParamSpec("beta", "log"))

    def log_survival(self, t, theta):
        a, b = np.exp(theta)
        t = np.asarray(t, float)
        return special.betaln(a, b + t) - special.betaln(a, b)

    def log_survival_grad(self, t, theta):
        a, b = np.exp(theta)
        t = np.asarray(t, float)
        ls = special.betaln(a, b + t) - special.betaln(a, b)
        psi_ab = special.digamma(a + b)
        psi_abt = special.digamma(a + b + t)
        g_a = a * (psi_ab - psi_abt)
        g_b = b * (special.digamma(b + t) - psi_abt - special.digamma(b) + psi_ab)
        return ls, np.column_stack([g_a, g_b])

    def starts(self, data: GroupedData):
        return [np.array([0.0, 0.0]), np.array([np.log(0.5), np.log(3.0)])]


@dataclass(frozen=True)
class BetaDiscreteWeibull:
    name: str = "bdw"
    kind: str = "discrete"

    @property
    def specs(self):
        return (ParamSpec("alpha", "log"), ParamSpec("beta", "log"), ParamSpec("c", "log"))

    def log_survival(self, t, theta):
        a, b, c = np.exp(theta)
        tc = np.asarray(t, float) ** c
        return special.betaln(a, b + tc) - special.betaln(a, b)

    def log_survival_grad(self, t, theta):
        a, b, c = np.exp(theta)
        t = np.asarray(t, float)
        tc = t**c
        ls = special.betaln(a, b + tc) - special.betaln(a, b)
        psi_ab = special.digamma(a + b)
        psi_abt = special.digamma(a + b + tc)
        g_a = a * (psi_ab - psi_abt)
        g_b = b * (special.digamma(b + tc) - psi_abt - special.digamma(b) + psi_ab)
        with np.errstate(divide="ignore", invalid="ignore"):
            dtc = np.where(t > 0, tc * np.log(np.where(t > 0, t, 1.0)) * c, 0.0)
        g_c = (special.digamma(b + tc) - psi_abt) * dtc
        return ls, np.column_stack([g_a, g_b, g_c])

    def starts(self, data: GroupedData):
        return [
            np.array([0.0, 0.0, 0.0]),
            np.array([np.log(0.5), np.log(3.0), np.log(0.8)]),
            np.array([np.log(2.0), np.log(5.0), np.log(1.2)]),
        ]
