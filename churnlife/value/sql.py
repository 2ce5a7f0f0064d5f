"""Running the value stage's queries (queries/revenue_by_tenure.sql, active_base.sql,
price_rises.sql) on the staged spells: the same cohort slots as queries/counts.sql."""

from __future__ import annotations

from typing import Any

import polars as pl

from churnlife.config import COHORT_KEYS, Config
from churnlife.extract import Extract, _period_months_expr, events_normalised_sql, fill, read_query


def cohort_slots(cohorts: tuple[str, ...]) -> dict[str, str]:
    """{cohort_cols}, {cohort_names}, {cohort_label} for a grouping by churnlife's own cohort
    attributes (never user text: the names come from COHORT_KEYS)."""
    for key in cohorts:
        if key not in COHORT_KEYS:
            raise ValueError(f"unknown cohort attribute {key!r}")
    if not cohorts:
        return {
            "cohort_cols": "'all customers' AS cohort_all",
            "cohort_names": "cohort_all",
            "cohort_label": "cohort_all",
        }
    names = ", ".join(cohorts)
    label = " || ' · ' || ".join(f"COALESCE(CAST({n} AS VARCHAR), '(none)')" for n in cohorts)
    return {"cohort_cols": names, "cohort_names": names, "cohort_label": label}


def run_value_query(
    name: str,
    extract: Extract,
    config: Config,
    params: dict[str, Any],
    cohorts: tuple[str, ...] | None = None,
    extra_slots: dict[str, str] | None = None,
) -> pl.DataFrame:
    """Fill and run queries/<name>.sql on the staged spells, grouped by ``cohorts`` (default: the
    run's cohorts). Only cohort × tenure sized results come back."""
    source = extract.source
    slots = {
        "spells": extract.spells_relation,
        "events_normalised": events_normalised_sql(config, source),
        "period_months": _period_months_expr(config),
        "unit": config.tenure_unit,
        **cohort_slots(tuple(extract.cohort_columns if cohorts is None else cohorts)),
        **(extra_slots or {}),
    }
    return source.query(fill(read_query(name), slots), params)
