"""Never-churn (cure) mixtures: a share π of the cohort never churns, the rest follow a parametric
family, S(t) = π + (1 - π) S_u(t). The cured share is estimated on the logit scale, so its
interval stays inside (0, 1).

Caution: π is identified mostly by where the curve levels off, i.e. by the longest tenures, where
the data are thinnest; a cured share is an extrapolation in disguise.

References
----------
Boag, J. W. (1949). Maximum likelihood estimates of the proportion of patients cured by cancer
    therapy. JRSS B 11, 15–53.
Farewell, V. T. (1982). The use of mixture models for the analysis of survival data with long-term
    survivors. Biometrics 38, 1041–1046.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import special

from churnlife.models.base import GroupedData, ParamSpec, fit_spec
from churnlife.models.parametric import Exponential, Weibull


@dataclass(frozen=True)
class CureMixture:
    base: Exponential | Weibull

    @property
    def name(self) -> str:
        return f"cure_{self.base.name}"

    @property
    def kind(self) -> str:
        return "cure"

    @property
    def specs(self):
        return (ParamSpec("never_churn", "logit"), *self.base.specs)

    def log_survival(self, t, theta):
        pi = special.expit(theta[0])
        su = np.exp(self.base.log_survival(t, theta[1:]))
        return np.log(pi + (1 - pi) * su)

    def log_survival_grad(self, t, theta):
        pi = special.expit(theta[0])
        ls_u, g_u = self.base.log_survival_grad(t, theta[1:])
        su = np.exp(ls_u)
        s = pi + (1 - pi) * su
        g_pi = pi * (1 - pi) * (1 - su) / s
        g_rest = ((1 - pi) * su / s)[:, None] * g_u
        return np.log(s), np.column_stack([g_pi, g_rest])

    def never_churn_share(self, theta) -> float:
        return float(special.expit(theta[0]))

    def starts(self, data: GroupedData):
        out = []
        km_end = float(data.km()[data.max_tenure])
        try:
            plain = fit_spec(self.base, data).params
        except Exception:  # a failed helper fit only removes one starting point
            plain = self.base.starts(data)[0]
        for share in (0.5 * km_end, 0.1):
            share = min(max(share, 0.02), 0.9)
            out.append(np.concatenate([[special.logit(share)], plain]))
        return out


CURE_MODELS = {m.name: m for m in (CureMixture(Exponential()), CureMixture(Weibull()))}


def fit_cure(base: str, data: GroupedData, confidence: float = 0.95):
    """Fit the cure mixture of ``base`` ("exponential" or "weibull") to one cohort."""
    return fit_spec(CURE_MODELS[f"cure_{base}"], data, confidence)
