"""``--show-sql``: the extract's statements as the engine would receive them, for the analyst to
review with whoever runs the database, before anything heavy runs.

Only the column names and types are read (queries with LIMIT 0) to write the statements; the
statements themselves are printed, not run. Values are bound as parameters: each statement is
followed by the values its markers take. The data checks that run first (unknown codes, rows
without id, time or kind, text columns) and the value stage's queries read the same relations.
"""

from __future__ import annotations

from churnlife import __version__
from churnlife.config import Config
from churnlife.dialects import Statement
from churnlife.extract import (
    _check_columns,
    counts_sql,
    customer_events_sql,
    customer_info_sql,
    fill,
    marks_sql,
    parameters,
    read_query,
    spells_sql,
    summary_sql,
)
from churnlife.quality import anomalies_sql
from churnlife.source import Source


def extract_statements(config: Config, source: Source) -> list[tuple[str, Statement]]:
    """(title, statement) for each of the extract's main queries, in the order they run."""
    _check_columns(config, source)
    params = parameters(config)
    out: list[tuple[str, Statement]] = []
    col = source.quote(config.columns["event_kind"] or "")
    unknown = fill(
        read_query("unknown_codes"), {"event_kind": col, "events": source.relation("events")}
    )
    out.append(("event kinds the config does not map (the run stops on any)",
                source.statement(unknown, params)))
    per_customer_rel, kept = source.plan_stage(
        "customer_events", customer_events_sql(config, source), params
    )
    if kept is not None:
        out.append((f"each customer's first event and first start, kept as {per_customer_rel}",
                    kept))
    marks_rel, kept = source.plan_stage(
        "marks", marks_sql(config, source, per_customer_rel), params
    )
    if kept is not None:
        out.append((f"each customer's spell boundary marks, kept as {marks_rel}", kept))
    spells = spells_sql(config, source, marks_rel)
    spells_rel, kept = source.plan_stage("spells", spells, params)
    if kept is not None:
        out.append((f"the spells, one row per customer spell, kept as {spells_rel}", kept))
    out.append(("survival counts per cohort and tenure (the result that leaves the engine)",
                source.statement(counts_sql(spells_rel, config.cohorts), params)))
    summary = summary_sql(config, source, spells_rel, per_customer_rel)
    out.append(("the data summary (one row)", source.statement(summary, params)))
    quality = anomalies_sql(
        config, source, marks_rel, spells_rel, per_customer_rel, customer_info_sql(config, source)
    )
    out.append(("what the tenure rules handled (one row of counts)",
                source.statement(quality, params)))
    return out


def listing(config: Config, source: Source) -> str:
    """The statements as one SQL text, each under a comment saying what it counts."""
    engine = {"duckdb": "DuckDB", "postgres": "PostgreSQL", "spark": "Spark SQL"}[source.dialect]
    head = [
        f"-- churnlife {__version__}: the extract's statements for {engine}, as churnlife sends",
        "-- them. They only read; values are bound as parameters (listed after each statement).",
        "-- Printed, not run: only column names and types were read to write them.",
    ]
    if source.dialect == "postgres":
        head.append("-- They run in one READ ONLY transaction; the spells are a CTE of each query.")
    parts = ["\n".join(head)]
    for i, (title, st) in enumerate(extract_statements(config, source), start=1):
        parts.append(f"-- [{i}] {title}\n{st.listing()}")
    return "\n\n".join(parts) + "\n"
