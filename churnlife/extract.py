"""Stage 2 of the flow: event log → spells → survival counts, counted inside the engine.

The SQL is in queries/ (spells.sql, counts.sql, summary.sql, ...). This module fills the template
slots with identifiers the config validated (quoted by the source's rules) and binds every value as
a parameter. Only counts-sized results leave the engine; per-customer spells stay there unless a
caller asks for them (``Extract.spells()``, used by tests and per-customer valuation).
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from functools import cache
from importlib import resources
from itertools import pairwise
from typing import Any

import polars as pl

from churnlife.config import COHORT_KEYS, Config
from churnlife.errors import UserError, did_you_mean
from churnlife.source import Source

_SLOT = re.compile(r"\{([a-z_]+)\}")
_COMMENT = re.compile(r"--[^\n]*")


@cache
def read_query(name: str, dialect: str | None = None) -> str:
    """Text of queries/<name>.sql (installed as the package churnlife.queries), without its
    ``--`` comments (they document the file, and may mention template slots). Where the
    translation for an engine cannot express a query, queries/<name>.<dialect>.sql is read in
    its place (same slots, parameters and result columns)."""
    folder = resources.files("churnlife.queries")
    own = folder.joinpath(f"{name}.{dialect}.sql") if dialect else None
    path = own if own is not None and own.is_file() else folder.joinpath(f"{name}.sql")
    return _COMMENT.sub("", path.read_text("utf-8")).strip()


def fill(sql: str, slots: dict[str, str]) -> str:
    """Fill ``{slot}`` template slots; every slot in the text must be given."""

    def sub(match: re.Match[str]) -> str:
        key = match.group(1)
        if key not in slots:
            raise RuntimeError(f"query template slot {{{key}}} has no value")
        return slots[key]

    return _SLOT.sub(sub, sql)


@dataclass(frozen=True)
class Extract:
    """The extract's outputs: counts (small), summary (one row), and a handle on the spells."""

    counts: pl.DataFrame
    summary: dict[str, Any]
    cohort_columns: tuple[str, ...]
    spells_relation: str
    source: Source

    def spells(self) -> pl.DataFrame:
        """Per-customer spells (customers-sized: for tests and per-customer work only)."""
        return self.source.query(f"SELECT * FROM {self.spells_relation} ORDER BY 1, 2", {})

    def counts_by(self, cohorts: tuple[str, ...] | list[str]) -> pl.DataFrame:
        """Counts for another grouping of the same spells (e.g. plan × channel for a Cox model)."""
        return count_spells(self.source, self.spells_relation, tuple(cohorts))


def parameters(config: Config) -> dict[str, Any]:
    """Every value the queries bind, by name."""
    codes = config.event_codes
    known = [c for role in codes.values() for c in role]
    return {
        "log_start": config.log_start,
        "as_of": config.as_of,
        "grace_days": config.grace_days,
        "gap_days": config.reactivation_gap_days,
        "known_codes": known,
        "role_codes": [c for role in codes if role != "ignore" for c in codes[role]] or [""],
        **{f"{role}_codes": list(codes[role]) or [""] for role in codes if role != "ignore"},
    }


def _check_columns(config: Config, source: Source) -> None:
    available = source.columns("events")
    lowered = {c.lower(): c for c in available}
    roles = ["customer_id", "event_time", "event_kind", "plan", "price", "cancel_reason"]
    if config.customer_columns_in == "events":
        roles += ["signup_date", "channel"]
    for role in roles:
        name = config.columns[role]
        if name is not None and name not in available:
            hint = f' Did you mean "{lowered[name.lower()]}"?' if name.lower() in lowered else ""
            raise UserError(
                f'[columns] {role} = "{name}" is not a column of the events table.'
                f"{hint or did_you_mean(name, available)} Columns there: {', '.join(available)}. "
                f"Fix [columns] {role} in the config."
            )
    if config.customer_columns_in == "customers":
        cust_cols = source.columns("customers")
        for role in ("customer_id", "signup_date", "channel"):
            name = config.columns[role]
            if name is not None and name not in cust_cols:
                raise UserError(
                    f'[columns] {role} = "{name}" is not a column of the customers table.'
                    f"{did_you_mean(name, cust_cols)} Columns there: {', '.join(cust_cols)}. "
                    "The customers table must use the same customer id column name as the events."
                )


def _check_codes(config: Config, source: Source, params: dict[str, Any]) -> None:
    col = source.quote(config.columns["event_kind"] or "")
    sql = fill(
        read_query("unknown_codes"), {"event_kind": col, "events": source.relation("events")}
    )
    unknown = source.query(sql, params)
    if config.incomplete_rows == "drop":  # rows without a kind are dropped, not unknown codes
        unknown = unknown.filter(pl.col("event_kind").is_not_null())
    if unknown.height:
        listed = ", ".join(
            (f'"{k}"' if k is not None else "(no kind)") + f" ({n} event{'s' * (n != 1)})"
            for k, n in unknown.select("event_kind", "n_events").iter_rows()
        )
        raise UserError(
            f"unknown event codes in the log: {listed}. Map each to a role under [event_codes] "
            "in the config, or list it under [event_codes] ignore."
        )


def _col_or_null(config: Config, source: Source, role: str) -> str:
    name = config.columns[role]
    return source.quote(name) if name is not None else "NULL"


def _price_band_expr(config: Config) -> str:
    edges = config.price_bands
    if not edges:
        return "CAST(NULL AS VARCHAR)"

    def money(x: float) -> str:
        return f"{x:g}"

    # Edges come from validated numbers in the config, so they are safe to write as literals.
    # A price of zero or less is no price per period: no band (README.md, "Data quality").
    whens = ["WHEN s.price <= 0 THEN NULL"]
    whens.append(f"WHEN s.price < {edges[0]!r} THEN 'under {money(edges[0])}'")
    for lo, hi in pairwise(edges):
        whens.append(f"WHEN s.price < {hi!r} THEN '{money(lo)} to under {money(hi)}'")
    whens.append(f"WHEN s.price >= {edges[-1]!r} THEN '{money(edges[-1])} and over'")
    return "CASE " + " ".join(whens) + " END"


def _period_months_expr(config: Config) -> str:
    if not config.period_months:
        return repr(config.default_period_months)
    # Plan names become string literals with quotes doubled; lengths are validated numbers.
    whens = " ".join(
        "WHEN plan = '" + plan.replace("'", "''") + f"' THEN {months!r}"
        for plan, months in config.period_months.items()
    )
    return f"CASE {whens} ELSE {config.default_period_months!r} END"


def _event_time_via(config: Config, source: Source) -> str:
    """TIMESTAMP for a column of plain timestamps or dates (nothing to convert), TIMESTAMPTZ for
    zone-aware timestamps and text (read in UTC): that conversion costs a zone lookup per row."""
    from churnlife.quality import column_types

    name = config.columns["event_time"]
    dtype = column_types(source, "events", [name])[name] if name else None
    plain = dtype == pl.Date or (isinstance(dtype, pl.Datetime) and dtype.time_zone is None)
    return "TIMESTAMP" if plain else "TIMESTAMPTZ"


def events_normalised_sql(config: Config, source: Source) -> str:
    """The user's event table renamed to roles (queries/events_normalised.sql)."""
    cols = {role: _col_or_null(config, source, role) for role in config.columns}
    in_events = config.customer_columns_in == "events"
    return fill(
        read_query("events_normalised"),
        {
            **cols,
            "event_time_via": _event_time_via(config, source),
            "signup_date": cols["signup_date"] if in_events else "NULL",
            "channel": cols["channel"] if in_events else "NULL",
            "events": source.relation("events"),
        },
    )


def customer_info_sql(config: Config, source: Source) -> str:
    """Signup date and channel per customer (queries/customers_from_*.sql)."""
    if config.customer_columns_in == "events":
        return read_query("customers_from_events")
    cols = {role: _col_or_null(config, source, role) for role in config.columns}
    return fill(
        read_query("customers_from_table"),
        {
            "customer_id": cols["customer_id"],
            "signup_date": cols["signup_date"],
            "channel": cols["channel"],
            "customers": source.relation("customers"),
        },
    )


def customer_events_sql(config: Config, source: Source) -> str:
    """The per-customer pass over the log (queries/customer_events.sql): each customer's first
    event and first start inside the window, one row per customer with an event there."""
    return fill(
        read_query("customer_events"),
        {"events_normalised": events_normalised_sql(config, source)},
    )


def stage_customer_events(config: Config, source: Source, params: dict[str, Any]) -> str:
    """Stage the per-customer pass (queries/customer_events.sql); return the relation."""
    return source.stage("customer_events", customer_events_sql(config, source), params)


def marks_sql(config: Config, source: Source, customer_events_relation: str) -> str:
    """The boundary marks query for this config and engine (queries/marks.sql), reading the
    staged per-customer pass."""
    events_norm = events_normalised_sql(config, source)
    return fill(
        read_query("marks"),
        {
            "events_normalised": events_norm,
            "customer_info": customer_info_sql(config, source),
            "customer_events": customer_events_relation,
        },
    )


def spells_sql(config: Config, source: Source, marks_relation: str) -> str:
    """The spells query for this config and engine, reading the staged marks."""
    events_norm = events_normalised_sql(config, source)
    customer_info = customer_info_sql(config, source)
    return fill(
        read_query("spells"),
        {
            "marks": marks_relation,
            "events_normalised": events_norm,
            "customer_info": customer_info,
            "period_months": _period_months_expr(config),
            "price_band": _price_band_expr(config),
            "unit": config.tenure_unit,
        },
    )


def stage_marks(
    config: Config, source: Source, params: dict[str, Any],
    customer_events_relation: str | None = None,
) -> str:
    """Stage the per-customer pass (unless given), then the boundary marks (queries/marks.sql);
    return the marks relation."""
    per_customer = customer_events_relation or stage_customer_events(config, source, params)
    return source.stage("marks", marks_sql(config, source, per_customer), params)


def stage_spells(
    config: Config, source: Source, params: dict[str, Any], marks_relation: str | None = None
) -> str:
    """Stage the marks (unless given), then the spells made from them; return the spells
    relation."""
    marks = marks_relation or stage_marks(config, source, params)
    return source.stage("spells", spells_sql(config, source, marks), params)


def summary_sql(
    config: Config, source: Source, spells_relation: str, customer_events_relation: str
) -> str:
    """The one-row data summary (queries/summary.sql) over the log, the staged spells and the
    staged per-customer pass."""
    return fill(
        read_query("summary"),
        {
            "events": source.relation("events"),
            "events_normalised": events_normalised_sql(config, source),
            "spells": spells_relation,
            "customer_events": customer_events_relation,
            "customer_id": _col_or_null(config, source, "customer_id"),
            "event_time": _col_or_null(config, source, "event_time"),
        },
    )


def counts_sql(spells_relation: str, cohorts: tuple[str, ...]) -> str:
    """The counts query for a grouping of the spells by cohort attributes."""
    for key in cohorts:
        if key not in COHORT_KEYS:  # programming error: config.py validates user input
            raise ValueError(f"unknown cohort attribute {key!r}")
    if cohorts:
        names = list(cohorts)
        cols = ", ".join(names)
        label = " || ' · ' || ".join(f"COALESCE(CAST({n} AS VARCHAR), '(none)')" for n in names)
    else:
        names = ["cohort_all"]
        cols = "'all customers' AS cohort_all"
        label = "cohort_all"
    return fill(
        read_query("counts"),
        {
            "spells": spells_relation,
            "cohort_cols": cols,
            "cohort_names": ", ".join(names),
            "grid_names": ", ".join(f"g.{n}" for n in names),
            "join_on": " AND ".join(f"p.{n} IS NOT DISTINCT FROM g.{n}" for n in names),
            "cohort_label": label,
        },
    )


def count_spells(source: Source, spells_relation: str, cohorts: tuple[str, ...]) -> pl.DataFrame:
    counts = source.query(counts_sql(spells_relation, cohorts), {})
    return counts.drop("cohort_all") if "cohort_all" in counts.columns else counts


def run_extract(config: Config, source: Source) -> Extract:
    """Validate the log against the config, then count. Nothing is written to the source."""
    from churnlife import quality

    _check_columns(config, source)
    params = parameters(config)
    checked = quality.check_log(config, source, params)  # stops on what cannot be handled
    _check_codes(config, source, params)
    per_customer_rel = stage_customer_events(config, source, params)
    marks_rel = stage_marks(config, source, params, per_customer_rel)
    spells_rel = stage_spells(config, source, params, marks_rel)
    counts = count_spells(source, spells_rel, config.cohorts)
    summary = source.query(
        summary_sql(config, source, spells_rel, per_customer_rel), params
    ).to_dicts()[0]
    summary["n_duplicate_rows"] = int(summary["n_rows"] or 0) - int(summary["n_distinct"] or 0)
    summary.update(checked)
    if summary["n_spells"]:
        summary.update(
            quality.count_anomalies(
                config, source, params, marks_rel, spells_rel, per_customer_rel,
                customer_info_sql(config, source),
            )
        )
    if not summary["n_spells"]:
        quality.explain_empty_window(config, summary)
        raise UserError(
            f"no subscription spells found between {config.log_start} and {config.as_of}. Check "
            "[window] (log_start, as_of) and that [event_codes] start lists your signup codes."
        )
    return Extract(counts, summary, config.cohorts, spells_rel, source)
