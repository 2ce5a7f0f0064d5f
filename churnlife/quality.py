"""Data quality: checks that stop a run, and counts of anomalies handled by rule.

Two kinds of problems are found in a user's log (README.md, "Data quality"):

* **Stops** (``check_log``, before any spell is formed): an empty table, rows without a customer id,
  time or kind (unless ``[rules] incomplete_rows = "drop"``), a column whose type or text cannot be
  read as a time / date / number, text times that mix values with and without a UTC offset,
  customer ids of different types in the two tables; and (``explain_empty_window``, when no
  spell was found) a window that holds none of the events.
  Each raises ``UserError`` naming the column, an example value and the fix.
* **Handled** (``count_anomalies``, after the spells): duplicates, events outside the window,
  events before the signup date, a cancellation with no open spell, a second start inside an open
  spell, non-positive prices, customers with events but no spell, repeated customer rows. Each is
  handled by the rule stated in ``HANDLED`` and counted; the report's data-quality section shows the
  counts beside the rules.

Every query runs inside the engine and returns one row; nothing here loops over customers.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import polars as pl

from churnlife.config import Config
from churnlife.errors import UserError
from churnlife.source import Source

# A time of day followed by a UTC offset or Z at the end of a text value.
OFFSET_PATTERN = r"\d{1,2}:\d{2}(:\d{2}(\.\d+)?)?\s*([zZ]|[+-]\d{2}(:?\d{2})?)$"


@dataclass(frozen=True)
class Anomaly:
    """One kind of handled anomaly: its summary key, what it is, and the rule applied."""

    key: str
    what: str
    rule: str
    anomaly: bool = True  # False: an ordinary case a rule settles (not a fault in the log)


# The rules are the ones spells.sql and events_normalised.sql apply; README.md states them too.
HANDLED: tuple[Anomaly, ...] = (
    Anomaly("n_duplicate_rows", "exact duplicate event rows", "dropped; each event counted once"),
    Anomaly("n_dropped_incomplete", "rows without a customer id, event time or kind",
            'dropped when [rules] incomplete_rows = "drop"; otherwise they stop the run'),
    Anomaly("n_before_log", "events before the log start", "ignored (outside the window)"),
    Anomaly("n_after_as_of", "events after the as-of date", "ignored (outside the window)"),
    Anomaly("n_before_signup", "events dated before the customer's signup date",
            "kept: the log's own dates win; the signup date only dates customers who began "
            "before the log"),
    Anomaly("n_cancel_without_spell", "cancellations with no open spell",
            "ignored (no start before them, or the spell had already ended)"),
    Anomaly("n_failure_without_spell", "unrecovered failed payments with no open spell",
            "ignored (the spell had already ended, or none had begun)"),
    Anomaly("n_start_in_open_spell", "starts inside a spell that is still open",
            "ignored: the spell continues from its first start"),
    Anomaly("n_joined_returns", "returns within the reactivation gap",
            "joined to the earlier spell (not a churn and a new spell)", anomaly=False),
    Anomaly("n_customers_without_spell", "customers with events but no spell",
            "left out: no start in the window and no signup date before the log start"),
    Anomaly("n_nonpositive_price", "spells starting at a price of zero or less",
            'kept, with no price band ("(none)")'),
    Anomaly("n_customers_listed_twice", "customers listed more than once in the customers table",
            "the earliest signup date is used"),
    Anomaly("n_customer_rows_no_id", "customers-table rows without a customer id", "ignored"),
)

_TYPE_WORDS = {
    "time": "a timestamp or date",
    "date": "a date",
    "number": "a number",
}


def _words(dtype: pl.DataType) -> str:
    """A polars type in words a user can match to their database's type names."""
    if dtype.is_integer():
        return f"whole numbers ({dtype})"
    if dtype.is_float() or dtype.is_decimal():
        return f"numbers ({dtype})"
    if dtype == pl.Boolean:
        return "true/false values"
    if dtype == pl.String:
        return "text"
    if dtype.is_temporal():
        return f"times ({dtype})"
    return str(dtype)


def _kind_ok(dtype: pl.DataType, need: str) -> bool:
    if need == "time":
        return isinstance(dtype, pl.Datetime) or dtype == pl.Date
    if need == "date":
        return isinstance(dtype, pl.Datetime) or dtype == pl.Date
    return dtype.is_numeric() and dtype != pl.Boolean


def column_types(source: Source, role: str, columns: list[str]) -> dict[str, pl.DataType]:
    """Types of some columns of the ``events`` or ``customers`` relation (from an empty result,
    so any engine that returns Arrow can answer)."""
    cols = ", ".join(source.quote(c) for c in columns)
    frame = source.query(f"SELECT {cols} FROM {source.relation(role)} LIMIT 0", {})
    return dict(zip(columns, frame.schema.values(), strict=True))


def _text_column(
    config: Config, source: Source, relation_role: str, role: str, need: str
) -> None:
    """A text column that must read as a time, a date or a number: refuse unreadable values and
    (times) a mix of values with and without a UTC offset."""
    from churnlife.extract import fill, read_query

    column = config.columns[role]
    assert column is not None
    cast = {"time": "TIMESTAMPTZ", "date": "DATE", "number": "DOUBLE"}[need]
    sql = fill(
        read_query("text_values", source.dialect),
        {"relation": source.relation(relation_role), "column": source.quote(column),
         "cast_type": cast},
    )
    row = source.query(sql, {"offset_pattern": OFFSET_PATTERN}).to_dicts()[0]
    bad = int(row["n_unreadable"] or 0)
    where = f'[columns] {role} = "{column}"'
    if bad:
        form = {
            "time": "YYYY-MM-DD HH:MM:SS (ISO 8601; a UTC offset such as +02:00 may follow)",
            "date": "YYYY-MM-DD",
            "number": "a plain number such as 19.5 (no currency sign or thousands separator)",
        }[need]
        raise UserError(
            f"{where} holds text that is not {_TYPE_WORDS[need]}: {bad:,} of "
            f"{int(row['n_values']):,} values cannot be read, e.g. {row['example_unreadable']!r}. "
            f"Write them as {form}, or point the config at a column of the right type."
        )
    with_offset, without = int(row["n_with_offset"] or 0), int(row["n_without_offset"] or 0)
    if need == "time" and with_offset and without:
        raise UserError(
            f"{where} mixes times with a UTC offset ({with_offset:,} of them, e.g. "
            f"{row['example_with_offset']!r}) and times without one ({without:,}, e.g. "
            f"{row['example_without_offset']!r}), so the second kind's time zone is unknown. "
            "Give every value an offset (or none), or store the column as a timestamp type."
        )


def _check_types(config: Config, source: Source) -> None:
    needs = {"event_time": "time", "price": "number"}
    roles_events = [r for r in needs if config.columns[r] is not None]
    in_events = config.customer_columns_in == "events"
    if in_events and config.columns["signup_date"] is not None:
        roles_events.append("signup_date")
        needs["signup_date"] = "date"
    types = column_types(source, "events", [config.columns[r] for r in roles_events])  # type: ignore[misc]
    checks: list[tuple[str, str, pl.DataType]] = [
        ("events", r, types[config.columns[r]]) for r in roles_events  # type: ignore[index]
    ]
    if not in_events and config.columns["signup_date"] is not None:
        cust = column_types(source, "customers", [config.columns["signup_date"]])  # type: ignore[list-item]
        checks.append(("customers", "signup_date", next(iter(cust.values()))))
        needs["signup_date"] = "date"
    for relation_role, role, dtype in checks:
        need = needs[role]
        if dtype == pl.String:
            _text_column(config, source, relation_role, role, need)
        elif not _kind_ok(dtype, need):
            raise UserError(
                f'[columns] {role} = "{config.columns[role]}" holds {_words(dtype)}, but churnlife '
                f"needs {_TYPE_WORDS[need]} there. Name the column that holds it, or expose this "
                "one converted (for example through a view) as "
                f"{'a TIMESTAMP or DATE' if need != 'number' else 'a number'}."
            )
    if not in_events:
        cid = config.columns["customer_id"]
        assert cid is not None
        a = column_types(source, "events", [cid])[cid]
        b = column_types(source, "customers", [cid])[cid]
        if _family(a) != _family(b):
            raise UserError(
                f'[columns] customer_id = "{cid}" holds {_words(a)} in the events table but '
                f"{_words(b)} in the customers table, so the two cannot be matched. Use the same "
                "type in both (for example through a view that casts one of them)."
            )


def _family(dtype: pl.DataType) -> str:
    if dtype.is_integer():
        return "integer"
    if dtype == pl.String:
        return "text"
    return str(dtype)


def check_log(config: Config, source: Source, params: dict[str, Any]) -> dict[str, Any]:
    """Stop on what cannot be handled; return counts the summary keeps (``n_dropped_incomplete``).

    Runs after the column names are checked and before the event codes are."""
    from churnlife.extract import fill, read_query

    cols = {r: source.quote(config.columns[r] or "") for r in
            ("customer_id", "event_time", "event_kind")}
    events = source.relation("events")
    row = source.query(
        fill(read_query("incomplete_rows"), {"events": events, **cols}), {}
    ).to_dicts()[0]
    n_rows = int(row["n_rows"] or 0)
    if n_rows == 0:
        raise UserError(
            f"the events table {config.source.events} has no rows. Point [source] events at the "
            "table (or files) that hold the event log."
        )
    incomplete = int(row["n_incomplete"] or 0)
    if incomplete and config.incomplete_rows != "drop":
        parts = [
            f"{int(row[k]):,} without {what}"
            for k, what in (
                ("n_null_customer", f'a customer id ("{config.columns["customer_id"]}")'),
                ("n_null_time", f'an event time ("{config.columns["event_time"]}")'),
                ("n_null_kind", f'an event kind ("{config.columns["event_kind"]}")'),
            )
            if int(row[k] or 0)
        ]
        raise UserError(
            f"{incomplete:,} of {n_rows:,} event rows are incomplete ({', '.join(parts)}), so "
            "they cannot be placed in any spell. Fill them in at the source, or set [rules] "
            'incomplete_rows = "drop" to leave them out (the report then counts them).'
        )
    _check_types(config, source)
    return {"n_dropped_incomplete": incomplete}


def explain_empty_window(config: Config, summary: dict[str, Any]) -> None:
    """When no spell was found: stop with a precise message if no event lies in the window
    (summary.sql's counts), else return and let the caller say no start was found."""
    if not int(summary.get("n_customers_in_window") or 0):
        raise UserError(
            f"none of the log's events fall inside the window {config.log_start} to "
            f"{config.as_of}: they run from {summary['first_event']} to "
            f"{summary['last_event']}. Set [window] log_start and as_of to dates the log covers."
        )


def anomalies_sql(
    config: Config, source: Source, marks_relation: str, spells_relation: str,
    customer_events_relation: str, customer_info_sql: str,
) -> str:
    """queries/quality.sql for this config and engine, reading the staged marks, spells and
    per-customer pass (queries/customer_events.sql)."""
    from churnlife.extract import events_normalised_sql, fill, read_query

    return fill(
        read_query("quality"),
        {
            "events_normalised": events_normalised_sql(config, source),
            "customer_info": customer_info_sql,
            "marks": marks_relation,
            "spells": spells_relation,
            "customer_events": customer_events_relation,
        },
    )


def count_anomalies(
    config: Config, source: Source, params: dict[str, Any], marks_relation: str,
    spells_relation: str, customer_events_relation: str, customer_info_sql: str,
) -> dict[str, Any]:
    """The handled anomalies' counts (queries/quality.sql, queries/quality_customers.sql), from
    the staged boundary marks (queries/marks.sql), the spells made from them and the staged
    per-customer pass (queries/customer_events.sql)."""
    from churnlife.extract import fill, read_query

    sql = anomalies_sql(
        config, source, marks_relation, spells_relation, customer_events_relation,
        customer_info_sql,
    )
    row = source.query(sql, params).row(0, named=True)  # one row of counts
    counts = {k: int(v or 0) for k, v in row.items()}
    if config.customer_columns_in == "customers":
        cust = fill(
            read_query("quality_customers"),
            {
                "customers": source.relation("customers"),
                "customer_id": source.quote(config.columns["customer_id"] or ""),
            },
        )
        row = source.query(cust, {}).row(0, named=True)
        counts.update({k: int(v or 0) for k, v in row.items()})
    return counts


def anomaly_table(summary: dict[str, Any]) -> pl.DataFrame:
    """What was found, how many, and the rule applied: one row per kind of handled anomaly."""
    rows = [a for a in HANDLED if a.key in summary]
    return pl.DataFrame(
        {
            "found in the log": [a.what for a in rows],
            "count": [int(summary[a.key] or 0) for a in rows],
            "how it was handled": [a.rule for a in rows],
            "anomaly": [a.anomaly for a in rows],
        },
        schema={"found in the log": pl.String, "count": pl.Int64,
                "how it was handled": pl.String, "anomaly": pl.Boolean},
    )
