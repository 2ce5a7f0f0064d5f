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
