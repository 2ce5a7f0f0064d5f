"""Survival counts from durations already in memory (for data that is not an event log, such as a
published table, or per-customer spells pulled into a notebook).

The event-log path counts inside the engine (queries/counts.sql); this function produces the same
columns with polars, so every estimator can take either. Integer tenures follow the conventions in
DEVELOPERS.md: at risk at t when entry < t <= exit.
"""

from __future__ import annotations

import numpy as np
import polars as pl


def _labels(name: str, values: object, n: int, default: str | None) -> pl.Series:
    """A string column from a polars Series, numpy array or list (or a constant)."""
    if values is None:
        return pl.repeat(default, n, dtype=pl.String, eager=True).alias(name)
    if isinstance(values, np.ndarray) and values.dtype == object:
        values = values.tolist()  # polars cannot type an object array that starts with None
    series = values if isinstance(values, pl.Series) else pl.Series(name, values, strict=False)
    if series.len() != n:
        raise ValueError(f"{name} must have one value per subject")
    return series.cast(pl.String).alias(name)


def counts_from_durations(
    exit: np.ndarray | list,
    churned: np.ndarray | list,
    entry: np.ndarray | list | None = None,
    cohort: np.ndarray | list | None = None,
    cause: np.ndarray | list | None = None,
) -> pl.DataFrame:
    """Counts per cohort × tenure from per-subject exit tenures, churn flags and entry tenures.

    Parameters
    ----------
    exit : tenure at which each subject churned or was censored.
    churned : 1/True if the subject churned at ``exit``, 0/False if censored there.
    entry : tenure at which each subject came under observation (late entry); default 0.
    cohort : label per subject; default one cohort "all".
    cause : per subject, "voluntary" or "involuntary" (churned subjects only); optional.

    Returns
    -------
    DataFrame with cohort, tenure, at_risk, entered, churned, churned_voluntary,
    churned_involuntary, censored (no exposure: durations alone do not carry it).
    """
    x = np.asarray(exit, dtype=float)
    d = np.asarray(churned).astype(bool)
    e = np.zeros_like(x) if entry is None else np.asarray(entry, dtype=float)
    if not (x.shape == d.shape == e.shape) or x.ndim != 1:
        raise ValueError("exit, churned and entry must be 1-d arrays of one length")
    if np.any(~np.isfinite(x)) or np.any(~np.isfinite(e)):
        raise ValueError("exit and entry must be finite")
    if np.any(e > x):
        raise ValueError("entry must not be after exit")
    subjects = pl.DataFrame({"entry": e, "exit": x, "churned": d}).with_columns(
        _labels("cohort", cohort, x.size, "all"), _labels("cause", cause, x.size, None)
    )
    entries = subjects.group_by("cohort", pl.col("entry").alias("tenure")).agg(
        pl.len().alias("entered")
    )
    exits = subjects.group_by("cohort", pl.col("exit").alias("tenure")).agg(
        pl.col("churned").sum().alias("churned"),
        (pl.col("churned") & (pl.col("cause") == "voluntary")).sum().alias("churned_voluntary"),
        (pl.col("churned") & (pl.col("cause") == "involuntary")).sum().alias("churned_involuntary"),
        (~pl.col("churned")).sum().alias("censored"),
    )
    table = (
        entries.join(exits, on=["cohort", "tenure"], how="full", coalesce=True)
        .with_columns(pl.exclude("cohort", "tenure").fill_null(0).cast(pl.Int64))
        .sort("cohort", "tenure")
    )
    leaving = pl.col("churned") + pl.col("censored")
    return table.with_columns(
        (pl.col("entered") - leaving)
        .cum_sum()
        .shift(1, fill_value=0)
        .over("cohort")
        .alias("at_risk")
    ).select(
        "cohort",
        "tenure",
        "at_risk",
        "entered",
        "churned",
        "churned_voluntary",
        "churned_involuntary",
        "censored",
    )
