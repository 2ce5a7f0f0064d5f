"""Revenue per customer by tenure, from the payments in the log, and gross and net revenue
retention per cohort.

queries/revenue_by_tenure.sql sums, per cohort × tenure k, the money paid at tenure k and the
spells the log saw at k. Revenue per present spell r(k) is the revenue path a customer value is
built on: upgrades, downgrades and price changes in the log move it; past the observed tenures it
is held at the last observed billing cycle (or grown by [value] revenue_trend).

Revenue retention at tenure k (per cohort) is S(k) · r(k) / r(0), with S the Kaplan–Meier
survival, so customers who entered late (left truncation) count from when the log saw them. Net
retention uses all revenue; gross retention caps each payment at the spell's starting price, so
it cannot exceed the share of customers kept (common practice in subscription finance: gross
excludes expansion, net includes it).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import polars as pl

from churnlife.config import Config
from churnlife.extract import Extract
from churnlife.value.sql import run_value_query

MIN_PRESENT = 30  # fewer spells than this at a tenure: r(k) too noisy to use, tail takes over


def revenue_counts(
    extract: Extract, config: Config, cohorts: tuple[str, ...] | None = None
) -> pl.DataFrame:
    """Per cohort × tenure: spells present, payments, revenue and gross (capped) revenue,
    dense over 0..max tenure. Counted by the engine (queries/revenue_by_tenure.sql)."""
    codes = config.event_codes
    payment_codes = [*codes["start"], *codes["renewal"], *codes["payment_recovered"]]
    params = {
        "log_start": config.log_start,
        "as_of": config.as_of,
        "payment_codes": payment_codes or [""],
    }
    return _dense(run_value_query("revenue_by_tenure", extract, config, params, cohorts))


def _dense(raw: pl.DataFrame) -> pl.DataFrame:
    """Fill every tenure 0..max per cohort and turn presence steps into spells present."""
    frames = []
    for (cohort,), part in raw.group_by("cohort", maintain_order=True):  # a few cohorts
        part = part.sort("tenure")
        hi = int(part["tenure"].max())
        grid = pl.DataFrame({"tenure": np.arange(0, hi + 1, dtype=np.int32)})
        part = part.with_columns(pl.col("presence_step").cast(pl.Int64))
        dense = grid.join(part.drop("cohort"), on="tenure", how="left").fill_null(0)
        frames.append(
            dense.with_columns(
                pl.lit(cohort).alias("cohort"),
                pl.col("presence_step").cum_sum().cast(pl.Int64).alias("present"),
            ).drop("presence_step")
        )
    if not frames:
        return pl.DataFrame(
            schema={"tenure": pl.Int32, "payments": pl.Int64, "revenue": pl.Float64,
                    "revenue_gross": pl.Float64, "cohort": pl.Utf8, "present": pl.Int64}
        )
    out = pl.concat(frames).select(
        "cohort", "tenure", "present", "payments", "revenue", "revenue_gross"
    )
    return out.with_columns(
        pl.when(pl.col("present") > 0)
        .then(pl.col("revenue") / pl.col("present"))
        .otherwise(None)
        .alias("revenue_per_customer")
    )


@dataclass(frozen=True)
class RevenuePath:
    """Expected revenue at tenure k per customer still active at k, for k = 0..horizon.

    ``observed_to``: last tenure read from the log (spells present ≥ MIN_PRESENT); ``cycle``:
    the repeat length used to extend it (the billing cycle seen in the payments)."""

    cohort: str
    per_customer: np.ndarray
    observed_to: int
    cycle: int

    def at(self, k: np.ndarray) -> np.ndarray:
        return self.per_customer[np.clip(np.asarray(k, dtype=int), 0, self.per_customer.size - 1)]


def revenue_path(
    table: pl.DataFrame, cohort: str, horizon: int, trend_per_unit: float = 0.0
) -> RevenuePath:
    """The revenue path of ``cohort`` from ``revenue_counts``: observed r(k) where enough spells
    were present, then the last full billing cycle repeated (grown by the trend per unit)."""
    part = table.filter(pl.col("cohort") == cohort).sort("tenure")
    present = part["present"].to_numpy().astype(float)
    rev = part["revenue"].to_numpy().astype(float)
    ok = np.flatnonzero(present >= MIN_PRESENT)
    if ok.size == 0:
        ok = np.flatnonzero(present > 0)
    if ok.size == 0:
        return RevenuePath(cohort, np.zeros(horizon + 1), -1, 1)
    last = int(ok[-1])
    r = np.zeros(last + 1)
    good = present[: last + 1] > 0
    r[good] = rev[: last + 1][good] / present[: last + 1][good]
    cycle = _cycle(part["payments"].to_numpy()[: last + 1])
    out = np.empty(horizon + 1)
    n = min(last + 1, horizon + 1)
    out[:n] = r[:n]
    if horizon > last:
        k = np.arange(last + 1, horizon + 1)
        # the same phase of the last observed full cycle
        source = last - cycle + 1 + ((k - (last + 1)) % cycle)
        source = np.clip(source, 0, last)
        growth = (1 + trend_per_unit) ** (k - last)
        out[last + 1 :] = r[source] * growth
    return RevenuePath(cohort, out, last, cycle)


def _cycle(payments: np.ndarray) -> int:
    """The billing cycle in tenure units: the most common gap between tenures with payments
    from many spells (1 for monthly plans in months, 12 for annual plans in months)."""
    if payments.size < 3:
        return 1
    busy = np.flatnonzero(payments >= max(payments.max() * 0.2, 1))
    if busy.size < 2:
        return 1
    gaps = np.diff(busy)
    values, counts = np.unique(gaps, return_counts=True)
    return int(values[np.argmax(counts)])


def revenue_retention(table: pl.DataFrame, km: pl.DataFrame) -> pl.DataFrame:
    """Gross and net revenue retention per cohort × tenure: S_KM(k) · r(k) / r(0), where r is
    revenue (gross: capped at the starting price) per present spell. Only tenures with payments
    (billing dates) and enough spells present are shown."""
    frames = []
    for (cohort,), part in table.group_by("cohort", maintain_order=True):
        part = part.sort("tenure")
        k = part["tenure"].to_numpy()
        present = part["present"].to_numpy().astype(float)
        with np.errstate(divide="ignore", invalid="ignore"):
            net = part["revenue"].to_numpy() / present
            gross = part["revenue_gross"].to_numpy() / present
        base = net[0] if present[0] > 0 and net[0] > 0 else np.nan
        s = _km_at(km, cohort, k)
        keep = (present >= MIN_PRESENT) & (part["payments"].to_numpy() > 0)
        frames.append(
            pl.DataFrame(
                {
                    "cohort": cohort,
                    "tenure": k[keep].astype(np.int64),
                    "customers_present": present[keep].astype(np.int64),
                    "revenue_per_customer": net[keep],
                    "survival": s[keep],
                    "net_revenue_retention": s[keep] * net[keep] / base,
                    "gross_revenue_retention": s[keep] * gross[keep] / base,
                }
            )
        )
    return pl.concat(frames) if frames else pl.DataFrame()


def _km_at(km: pl.DataFrame, cohort: str, k: np.ndarray) -> np.ndarray:
    """Kaplan–Meier S(k) of a cohort at integer tenures (step function, S(0) = 1)."""
    part = km.filter(pl.col("cohort") == cohort).sort("tenure")
    t = part["tenure"].to_numpy()
    s = part["survival"].to_numpy()
    idx = np.searchsorted(t, k, side="right") - 1
    return np.where(idx >= 0, s[np.clip(idx, 0, None)], 1.0)
