"""Small hand-written event logs for tests: a DuckDB file plus a config dict."""

from __future__ import annotations

import copy
from pathlib import Path
from typing import Any

import duckdb

BASE_CONFIG: dict[str, Any] = {
    "source": {"kind": "duckdb", "database": "log.duckdb", "events": "ev", "customers": "cu"},
    "columns": {
        "customer_id": "cid",
        "event_time": "ts",
        "event_kind": "kind",
        "plan": "plan",
        "price": "price",
        "cancel_reason": "why",
        "signup_date": "signup",
        "channel": "chan",
    },
    "event_codes": {
        "start": ["start"],
        "renewal": ["renew"],
        "cancel": ["cancel"],
        "payment_failed": ["fail"],
        "payment_recovered": ["recover"],
    },
    "window": {"log_start": "2022-01-01", "as_of": "2022-06-30"},
    "tenure": {"unit": "months"},
    "rules": {"grace_days": 14, "reactivation_gap_days": 30},
}


# The edge-case log (tests/test_extract_edge_cases.py works out its answers by hand; the engine
# tests check that PostgreSQL and Spark count it as DuckDB does): plans "m" (monthly), "a".
M, A = "m", "a"
EDGE_EVENTS: list[tuple] = [
    # 1: began 2021-11-15, before the log (2022-01-01): late entry; cancels 2022-03-20.
    (1, "2022-01-15 10:00", "renew", M, 10, None),
    (1, "2022-02-15 10:00", "renew", M, 10, None),
    (1, "2022-03-20 09:00", "cancel", M, 10, "price"),
    # 2: failed charge on 03-01 recovered on 03-05 (inside 14 days): no churn; active at as-of.
    (2, "2022-02-01 08:00", "start", M, 10, None),
    (2, "2022-03-01 08:00", "fail", M, 10, None),
    (2, "2022-03-05 08:00", "recover", M, 10, None),
    # 3: failed charge on 04-10, never recovered: involuntary churn on 04-10.
    (3, "2022-03-10 08:00", "start", M, 10, None),
    (3, "2022-04-10 08:00", "fail", M, 10, None),
    # 4: cancels, returns 60 days later (new spell); a cancel after as-of is ignored.
    (4, "2022-01-05 08:00", "start", M, 10, None),
    (4, "2022-01-20 08:00", "cancel", M, 10, "other"),
    (4, "2022-03-21 08:00", "start", M, 10, None),
    (4, "2023-01-01 08:00", "cancel", M, 10, None),
    # 5: cancels and returns 9 days later: continuation of one spell; active at as-of.
    (5, "2022-01-10 08:00", "start", A, 100, None),
    (5, "2022-02-01 08:00", "cancel", A, 100, None),
    (5, "2022-02-10 08:00", "start", A, 100, None),
    # 6: failed charge 2022-06-25, grace runs past as-of (06-30): not yet churn, censored.
    (6, "2022-05-25 08:00", "start", M, 10, None),
    (6, "2022-06-25 08:00", "fail", M, 10, None),
    # 7: exact duplicate rows, and a second start inside the open spell.
    (7, "2022-02-14 08:00", "start", M, 10, None),
    (7, "2022-02-14 08:00", "start", M, 10, None),
    (7, "2022-03-01 08:00", "start", M, 10, None),
    (7, "2022-04-13 23:00", "cancel", M, 10, "other"),
    # 8: cancels on the day it starts: one day of tenure, churn in month 1.
    (8, "2022-06-01 12:00", "start", M, 10, None),
    (8, "2022-06-01 18:00", "cancel", M, 10, "other"),
]
EDGE_CUSTOMERS: list[tuple] = [
    (1, "2021-11-15", "web"),
    (2, "2022-02-01", "web"),
    (3, "2022-03-10", "ads"),
    (4, "2022-01-05", "ads"),
    (5, "2022-01-10", "web"),
    (6, "2022-05-25", "web"),
    (7, "2022-02-14", "ads"),
    (8, "2022-06-01", "ads"),
]

# One monthly spell, 2022-02-01 to 2022-03-19 (47 days inclusive), for the days and weeks units.
UNITS_LOG: tuple[list[tuple], list[tuple]] = (
    [
        (1, "2022-02-01 08:00", "start", M, 10, None),
        (1, "2022-03-19 08:00", "cancel", M, 10, None),
    ],
    [(1, "2022-02-01", "web")],
)
# One annual spell, 2022-01-10 to 2022-04-09, counted in periods of the plan's length.
PERIODS_LOG: tuple[list[tuple], list[tuple]] = (
    [
        (1, "2022-01-10 08:00", "start", A, 100, None),
        (1, "2022-04-09 08:00", "cancel", A, 100, None),
    ],
    [(1, "2022-01-10", "web")],
)
PERIODS_CONFIG: dict[str, dict[str, Any]] = {
    "tenure": {"unit": "periods", "period_months": {A: 12}},
    "window": {"log_start": "2022-01-01", "as_of": "2023-06-30"},
}
# Two spells from 2022-03-10: a cancel in month 4, which the as-of date 06-30 cuts short, and
# one in month 3.
CUT_SHORT_LOG: tuple[list[tuple], list[tuple]] = (
    [
        (1, "2022-03-10 08:00", "start", M, 10, None),
        (1, "2022-06-20 08:00", "cancel", M, 10, None),
        (2, "2022-03-10 08:00", "start", M, 10, None),
        (2, "2022-05-20 08:00", "cancel", M, 10, None),
    ],
    [(1, "2022-03-10", "web"), (2, "2022-03-10", "web")],
)


def write_log(
    folder: Path,
    events: list[tuple],
    customers: list[tuple],
    name: str = "log.duckdb",
) -> Path:
    """events: (cid, 'YYYY-MM-DD HH:MM', kind, plan, price, why); customers: (cid, signup, chan)."""
    path = folder / name
    con = duckdb.connect(str(path))
    con.execute(
        "CREATE TABLE ev(cid INTEGER, ts TIMESTAMP, kind VARCHAR, plan VARCHAR, price DOUBLE, "
        "why VARCHAR)"
    )
    con.execute("CREATE TABLE cu(cid INTEGER, signup DATE, chan VARCHAR)")
    if events:
        con.executemany("INSERT INTO ev VALUES (?, ?, ?, ?, ?, ?)", events)
    if customers:
        con.executemany("INSERT INTO cu VALUES (?, ?, ?)", customers)
    con.close()
    return path


def config_dict(**changes: dict[str, Any]) -> dict[str, Any]:
    """BASE_CONFIG with some tables' keys replaced, e.g. config_dict(tenure={"unit": "days"})."""
    cfg = copy.deepcopy(BASE_CONFIG)
    for table, values in changes.items():
        cfg.setdefault(table, {}).update(values)
    return cfg


def extract(folder: Path, cfg: dict[str, Any]):
    from churnlife.config import parse_config
    from churnlife.extract import run_extract
    from churnlife.source import open_source

    config = parse_config(cfg, base=folder)
    return run_extract(config, open_source(config))
