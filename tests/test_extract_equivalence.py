"""The extract's faster SQL gives the same spells, counts and data-quality figures as the
straightforward formulation it replaced.

tests/reference_sql/ keeps that formulation (frozen): every event deduplicated (SELECT DISTINCT)
and read through TIMESTAMPTZ, the look-ahead for a recovered payment and the first event in the
log found with window functions over every event. queries/ finds unrecovered failures with a join
on the customer, the first event by its time, drops duplicates only where a count depends on
them, and casts plain timestamps straight (benchmarks/RESULTS.md has the profile behind each).
Checked on the demo database and on random small logs (hypothesis) whose events have distinct
times within a customer (on tied times the windowed formulation's order is not defined).

If the rules of queries/spells.sql or quality.sql change, change the reference files with them.
"""

from __future__ import annotations

import datetime as dt
import tempfile
from pathlib import Path

import polars as pl
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from churnlife.config import parse_config
from churnlife.extract import (
    _col_or_null,
    _period_months_expr,
    _price_band_expr,
    count_spells,
    customer_info_sql,
    fill,
    parameters,
    run_extract,
)
from churnlife.source import open_source
from tests.bad_inputs import config

REFERENCE_SQL = Path(__file__).parent / "reference_sql"
COUNT_COLS = ["cohort", "tenure", "at_risk", "entered", "churned", "churned_voluntary",
              "churned_involuntary", "censored"]
QUALITY_KEYS = ["n_start_in_open_spell", "n_cancel_without_spell", "n_failure_without_spell",
                "n_joined_returns", "n_starts_kept", "n_before_signup",
                "n_customers_without_spell", "n_nonpositive_price"]
SUMMARY_KEYS = ["n_rows", "n_distinct", "n_before_log", "n_after_as_of", "n_customers_in_window",
                "first_event", "last_event", "n_spells", "n_customers_with_spells",
                "n_late_entry", "n_censored", "n_voluntary", "n_involuntary", "n_repeat_spells",
                "max_tenure"]


def _reference(name: str) -> str:
    import re

    return re.sub(r"--[^\n]*", "", (REFERENCE_SQL / f"{name}_windowed.sql").read_text()).strip()


def _windowed(cfg, source):
    """Spells (staged), counts, data-quality and summary rows by the reference formulation."""
    cols = {role: _col_or_null(cfg, source, role) for role in cfg.columns}
    in_events = cfg.customer_columns_in == "events"
    events_norm = fill(_reference("events_normalised"), {
        **cols,
        "signup_date": cols["signup_date"] if in_events else "NULL",
        "channel": cols["channel"] if in_events else "NULL",
        "events": source.relation("events"),
    })
    params = parameters(cfg)
    spells_sql = fill(_reference("spells"), {
        "events_normalised": events_norm,
        "customer_info": customer_info_sql(cfg, source),
        "period_months": _period_months_expr(cfg),
        "price_band": _price_band_expr(cfg),
        "unit": cfg.tenure_unit,
    })
    rel = source.stage("reference_spells", spells_sql, params)
    counts = count_spells(source, rel, cfg.cohorts)
    quality = source.query(fill(_reference("quality"), {
        "events_normalised": events_norm,
        "customer_info": customer_info_sql(cfg, source),
        "spells": rel,
    }), params).to_dicts()[0]
    summary = source.query(fill(_reference("summary"), {
        "events": source.relation("events"),
        "events_normalised": events_norm,
        "spells": rel,
        "customer_id": cols["customer_id"],
        "event_time": cols["event_time"],
    }), params).to_dicts()[0]
    spells = source.query(f"SELECT * FROM {rel} ORDER BY 1, 2", {})
    return spells, counts, {**summary, **quality}


def _assert_same(cfg) -> None:
    source = open_source(cfg)
    try:
        ex = run_extract(cfg, source)
        spells, counts, summary = _windowed(cfg, source)
        new_spells = ex.spells()
        assert new_spells.columns == spells.columns
        assert new_spells.drop("entry_exact", "exit_exact", "counted_exit_exact").equals(
            spells.drop("entry_exact", "exit_exact", "counted_exit_exact")
        )
        for col in ("entry_exact", "exit_exact", "counted_exit_exact"):
            assert ((new_spells[col] - spells[col]).abs().fill_null(0) <= 1e-12).all(), col
        assert ex.counts.select(COUNT_COLS).sort("cohort", "tenure").equals(
            counts.select(COUNT_COLS).sort("cohort", "tenure")
        )
        for key in QUALITY_KEYS + SUMMARY_KEYS:
            assert ex.summary.get(key) == summary.get(key), key
    finally:
        source.close()


def test_demo_extract_equals_windowed_formulation(demo_config):
    _assert_same(demo_config)


KINDS = ("start", "start", "renew", "renew", "cancel", "cancel", "fail", "recover", "price")
LOG_START = dt.date(2022, 1, 1)


@st.composite
def event_logs(draw: st.DrawFn) -> tuple[list[tuple], list[tuple]]:
    """A few customers with events around the window 2022-01-01 .. 2022-06-30 (some outside
    it), signups before and inside the log, exact duplicate rows; times distinct per customer."""
    n = draw(st.integers(1, 6))
    events: list[tuple] = [(1, "2022-01-05 10:00", "start", "m", 10.0, None)]
    customers = []
    for cid in range(1, n + 1):
        signup = LOG_START + dt.timedelta(days=draw(st.integers(-200, 150)))
        customers.append((cid, signup.isoformat(), draw(st.sampled_from(["web", "ads"]))))
        plan = draw(st.sampled_from(["m", "a"]))
        hours = draw(st.lists(st.integers(-20 * 24, 200 * 24), max_size=7, unique=True))
        for h in hours:
            if cid == 1 and h == 4 * 24 + 10:
                continue  # customer 1's first start is already there
            when = dt.datetime(2022, 1, 1) + dt.timedelta(hours=h)
            kind = draw(st.sampled_from(KINDS))
            row = (cid, when.strftime("%Y-%m-%d %H:%M"), kind, plan,
                   10.0 if plan == "m" else 100.0, "price" if kind == "cancel" else None)
            events.append(row)
            if draw(st.integers(0, 9)) == 0:
                events.append(row)  # an exact duplicate
    return events, customers


@settings(max_examples=30, deadline=None, database=None,
          suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])
@given(log=event_logs(), grace=st.sampled_from([0, 14]), unit=st.sampled_from(["days", "months"]))
def test_random_logs_extract_equals_windowed_formulation(log, grace, unit):
    events, customers = log
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        pl.DataFrame(events, schema={"cid": pl.Int32, "ts": pl.String, "kind": pl.String,
                                     "plan": pl.String, "price": pl.Float64, "why": pl.String},
                     orient="row").with_columns(
            pl.col("ts").str.to_datetime("%Y-%m-%d %H:%M")
        ).write_parquet(folder / "ev.parquet")
        pl.DataFrame(customers, schema={"cid": pl.Int32, "signup": pl.String, "chan": pl.String},
                     orient="row").with_columns(
            pl.col("signup").str.to_date()
        ).write_parquet(folder / "cu.parquet")
        cfg = parse_config(config(
            source={"kind": "files", "database": None, "events": "ev.parquet",
                    "customers": "cu.parquet"},
            event_codes={"ignore": ["price"]},
            rules={"grace_days": grace},
            tenure={"unit": unit},
        ), base=folder)
        _assert_same(cfg)
