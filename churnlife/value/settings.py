"""The [value] table of the config: how money is counted when customers are valued.

Every key is documented in README.md ("Config reference", [value]). Defaults are stated in the
report next to every value, because a customer value means nothing without them.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

from churnlife.errors import UserError, did_you_mean

TIMINGS = ("start", "end")
CURVES = ("km+tail", "model")
VALUE_KEYS = (
    "discount_rate",
    "margin_rate",
    "cost_to_serve",
    "timing",
    "acquisition_cost",
    "model",
    "curve",
    "horizon_years",
    "draws",
    "forecast_periods",
    "price_change",
    "revenue_trend",
)


@dataclass(frozen=True)
class ValueSettings:
    """Validated [value] settings.

    ``discount_rate`` is annual (converted to the tenure unit as (1 + d)^(unit in years) - 1);
    ``margin_rate`` is the share of revenue kept; ``cost_to_serve`` is a cost per tenure unit
    while active (one number, or per cohort); ``timing`` says whether a period's payment falls at
    its start (the first payment is not discounted) or its end; ``acquisition_cost`` (one number
    or per cohort/channel) enables payback; ``model`` is a hazard model name or "best" (lowest
    AIC per cohort); ``curve`` joins Kaplan–Meier over the observed tenures to the model's tail
    ("km+tail") or uses the model throughout ("model"); ``horizon_years`` truncates the sums (the
    truncation error is bounded and reported); ``draws`` is the number of simulation draws for
    intervals; ``forecast_periods`` is how many tenure units the base forecast runs;
    ``price_change`` is the default scenario (+0.10 = a 10 % rise); ``revenue_trend`` is the
    yearly growth of revenue per customer assumed past the observed tenures (0 = held flat).
    """

    discount_rate: float = 0.10
    margin_rate: float = 1.0
    cost_to_serve: float | dict[str, float] = 0.0
    timing: str = "start"
    acquisition_cost: float | dict[str, float] | None = None
    model: str = "best"
    curve: str = "km+tail"
    horizon_years: float = 25.0
    draws: int = 400
    forecast_periods: int = 12
    price_change: float = 0.10
    revenue_trend: float = 0.0
    given: tuple[str, ...] = field(default=(), compare=False)  # keys the user set

    def cost_for(self, cohort: str) -> float:
        return _per_cohort(self.cost_to_serve, cohort, 0.0)

    def acquisition_for(self, *names: str) -> float | None:
        """The acquisition cost for a cohort or channel (the first name found), if given."""
        if self.acquisition_cost is None:
            return None
        if isinstance(self.acquisition_cost, float):
            return self.acquisition_cost
        for n in names:
            if n in self.acquisition_cost:
                return self.acquisition_cost[n]
        return None

    def describe(self) -> dict[str, Any]:
        """The settings in words, for the report and summary.json."""
        return {
            "discount rate (annual)": self.discount_rate,
            "margin rate": self.margin_rate,
            "cost to serve per tenure unit": _money_words(self.cost_to_serve),
            "payment timing": f"at the {self.timing} of each period",
            "acquisition cost": _money_words(self.acquisition_cost),
            "model": self.model,
            "curve": "Kaplan–Meier over observed tenures, then the model"
            if self.curve == "km+tail" else "the model throughout",
            "horizon (years)": self.horizon_years,
            "simulation draws": self.draws,
            "revenue trend past observed tenure (per year)": self.revenue_trend,
        }


def _money_words(value: float | dict[str, float] | None) -> str:
    if value is None:
        return "(not given)"
    if isinstance(value, dict):
        return ", ".join(f"{k} {v:g}" for k, v in value.items())
    return f"{value:g}"


def _per_cohort(value: float | dict[str, float], cohort: str, default: float) -> float:
    if isinstance(value, dict):
        return value.get(cohort, value.get("default", default))
    return value


def _number(raw: dict, key: str, default: float, low: float, high: float, what: str) -> float:
    value = raw.get(key, default)
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise UserError(f"config: [value] {key} must be a number ({what}), e.g. {default}.")
    if not low <= float(value) <= high:
        raise UserError(f"config: [value] {key} = {value} is out of range: it must be {what}.")
    return float(value)


def _money_table(raw: dict, key: str) -> float | dict[str, float] | None:
    value = raw.get(key)
    if value is None:
        return None
    if isinstance(value, dict):
        out = {}
        for name, v in value.items():
            if isinstance(v, bool) or not isinstance(v, int | float) or v < 0:
                raise UserError(
                    f"config: [value] {key}.{name} must be a number ≥ 0 (money per customer)."
                )
            out[str(name)] = float(v)
        return out
    if isinstance(value, bool) or not isinstance(value, int | float) or value < 0:
        raise UserError(
            f"config: [value] {key} must be a number ≥ 0 or a table by cohort or channel, "
            f"e.g. {key} = 40 or {key} = {{ paid_social = 55, referral = 20 }}."
        )
    return float(value)


def parse_value_settings(raw: dict[str, Any]) -> ValueSettings:
    """Validate the [value] table (``raw`` is its dict; {} gives the defaults)."""
    for key in raw:
        if key not in VALUE_KEYS:
            raise UserError(
                f'unknown config key "{key}" in [value].{did_you_mean(key, VALUE_KEYS)} '
                f"Known keys: {', '.join(VALUE_KEYS)}."
            )
    timing = raw.get("timing", "start")
    if timing not in TIMINGS:
        raise UserError(
            f'config: [value] timing = "{timing}" is not known. Use "start" (payment at the '
            'start of each period, the usual case for subscriptions) or "end".'
        )
    curve = raw.get("curve", "km+tail")
    if curve not in CURVES:
        raise UserError(
            f'config: [value] curve = "{curve}" is not known.{did_you_mean(str(curve), CURVES)} '
            'Use "km+tail" or "model".'
        )
    model = raw.get("model", "best")
    if not isinstance(model, str):
        raise UserError('config: [value] model must be a model name in quotes, or "best".')
    from churnlife.models.suite import MODEL_NAMES  # here: the models need no config

    if model != "best" and model not in MODEL_NAMES:
        raise UserError(
            f'config: [value] model = "{model}" is not a hazard model.'
            f"{did_you_mean(model, MODEL_NAMES)} Use one of: best, {', '.join(MODEL_NAMES)}."
        )
    draws = raw.get("draws", 400)
    if isinstance(draws, bool) or not isinstance(draws, int) or not 50 <= draws <= 20000:
        raise UserError("config: [value] draws must be a whole number from 50 to 20000.")
    periods = raw.get("forecast_periods", 12)
    if isinstance(periods, bool) or not isinstance(periods, int) or not 1 <= periods <= 240:
        raise UserError("config: [value] forecast_periods must be a whole number from 1 to 240.")
    cost = _money_table(raw, "cost_to_serve")
    return ValueSettings(
        discount_rate=_number(raw, "discount_rate", 0.10, 0.0, 1.0, "an annual rate from 0 to 1"),
        margin_rate=_number(raw, "margin_rate", 1.0, 0.0, 1.0, "a share of revenue from 0 to 1"),
        cost_to_serve=cost if cost is not None else 0.0,
        timing=timing,
        acquisition_cost=_money_table(raw, "acquisition_cost"),
        model=model,
        curve=curve,
        horizon_years=_number(raw, "horizon_years", 25.0, 1.0, 200.0, "1 to 200 years"),
        draws=draws,
        forecast_periods=periods,
        price_change=_number(raw, "price_change", 0.10, -0.9, 5.0, "a share from -0.9 to 5"),
        revenue_trend=_number(raw, "revenue_trend", 0.0, -0.5, 1.0, "a yearly share, -0.5 to 1"),
        given=tuple(raw),
    )
