"""Builders for the bad-input corpus (tests/test_bad_input.py): each case is a small log or config
written into a folder, with what churnlife must do about it.

A case either must **stop** (exit 2, one message naming the problem and the fix) or must **run**
with the anomaly handled and counted (``counts``: keys of summary.json's "data" that must hold
these values). The healthy log below is the starting point; each case changes one thing.
"""

from __future__ import annotations

import contextlib
import copy
import datetime as dt
import errno
import os
import subprocess
import sys
import time
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import duckdb

EV_SCHEMA = "cid INTEGER, ts TIMESTAMP, kind VARCHAR, plan VARCHAR, price DOUBLE, why VARCHAR"
CU_SCHEMA = "cid INTEGER, signup DATE, chan VARCHAR"

# Six customers inside the window 2022-01-01 .. 2022-06-30, monthly plan "m" and annual plan "a".
HEALTHY_EVENTS: list[tuple] = [
    (1, "2022-01-10 09:00", "start", "m", 10.0, None),
    (1, "2022-02-10 09:00", "renew", "m", 10.0, None),
    (1, "2022-03-15 09:00", "cancel", "m", 10.0, "price"),
    (2, "2022-01-20 09:00", "start", "m", 10.0, None),
    (2, "2022-02-20 09:00", "renew", "m", 10.0, None),
    (2, "2022-03-20 09:00", "renew", "m", 10.0, None),
    (3, "2022-02-05 09:00", "start", "m", 10.0, None),
    (3, "2022-03-05 09:00", "fail", "m", 10.0, None),
    (4, "2022-02-11 09:00", "start", "a", 100.0, None),
    (4, "2022-04-01 09:00", "cancel", "a", 100.0, "other"),
    (5, "2022-01-01 09:00", "renew", "m", 10.0, None),  # began 2021-10-01: late entry
    (5, "2022-05-03 09:00", "cancel", "m", 10.0, "price"),
    (6, "2022-03-01 09:00", "start", "a", 100.0, None),
]
HEALTHY_CUSTOMERS: list[tuple] = [
    (1, "2022-01-10", "web"),
    (2, "2022-01-20", "ads"),
    (3, "2022-02-05", "web"),
    (4, "2022-02-11", "ads"),
    (5, "2021-10-01", "web"),
    (6, "2022-03-01", "web"),
]

BASE: dict[str, Any] = {
    "source": {
        "kind": "duckdb",
        "database": "log.duckdb",
        "events": "sub_events",
        "customers": "sub_customers",
    },
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
    "window": {"log_start": dt.date(2022, 1, 1), "as_of": dt.date(2022, 6, 30)},
    "tenure": {"unit": "months"},
    "rules": {"grace_days": 14, "reactivation_gap_days": 30},
    "report": {"retention_at": [1, 3]},
}


# -- writing configs and logs ------------------------------------------------------------------


def _toml_value(v: Any) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int | float):
        return repr(v)
    if isinstance(v, dt.date):
        return v.isoformat()
    if isinstance(v, str):
        return '"' + v.replace("\\", "\\\\").replace('"', '\\"') + '"'
    if isinstance(v, list):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{ " + ", ".join(f"{k} = {_toml_value(x)}" for k, x in v.items()) + " }"
    raise TypeError(type(v))


def toml_text(cfg: dict[str, Any]) -> str:
    """A config dict as TOML (tables of scalars, lists and inline tables)."""
    top = [f"{k} = {_toml_value(v)}" for k, v in cfg.items() if not isinstance(v, dict)]
    out = top + ([""] if top else [])
    for table, values in cfg.items():
        if isinstance(values, dict):
            out.append(f"[{table}]")
            out += [f"{k} = {_toml_value(v)}" for k, v in values.items()]
            out.append("")
    return "\n".join(out)


def config(**changes: dict[str, Any] | None) -> dict[str, Any]:
    """BASE with tables' keys replaced; a key set to None is removed; a table set to None too."""
    cfg = copy.deepcopy(BASE)
    for table, values in changes.items():
        if values is None:
            cfg.pop(table, None)
            continue
        target = cfg.setdefault(table, {})
        for k, v in values.items():
            if v is None:
                target.pop(k, None)
            else:
                target[k] = v
    return cfg


def write_duckdb(path: Path, tables: dict[str, tuple[str, list[tuple]]]) -> Path:
    """tables: name → (column DDL, rows)."""
    con = duckdb.connect(str(path))
    for name, (ddl, rows) in tables.items():
        con.execute(f'CREATE TABLE "{name}" ({ddl})')
        if rows:
            marks = ", ".join("?" * len(rows[0]))
            con.executemany(f'INSERT INTO "{name}" VALUES ({marks})', rows)
    con.close()
    return path


Build = Callable[[Path], Path]


def log(
    events: list[tuple] | None = None,
    customers: list[tuple] | None = None,
    ev_schema: str = EV_SCHEMA,
    cu_schema: str = CU_SCHEMA,
    cfg: dict[str, Any] | None = None,
) -> Build:
    """A DuckDB file with tables sub_events and sub_customers, and its config."""

    def build(folder: Path) -> Path:
        folder.mkdir(parents=True, exist_ok=True)
        write_duckdb(
            folder / "log.duckdb",
            {
                "sub_events": (ev_schema, HEALTHY_EVENTS if events is None else events),
                "sub_customers": (cu_schema, HEALTHY_CUSTOMERS if customers is None else customers),
            },
        )
        path = folder / "churnlife.toml"
        path.write_text(toml_text(cfg if cfg is not None else config()))
        return path

    return build


def csv_log(events_csv: str, cfg: dict[str, Any] | None = None) -> Build:
    """Files source: one CSV of events (signup dates not used)."""

    def build(folder: Path) -> Path:
        folder.mkdir(parents=True, exist_ok=True)
        (folder / "events.csv").write_text(events_csv)
        base = cfg or config(
            source={"kind": "files", "database": None, "events": "events.csv", "customers": None},
            columns={"signup_date": None, "channel": None},
        )
        path = folder / "churnlife.toml"
        path.write_text(toml_text(base))
        return path

    return build


def raw_config(text: str, with_log: bool = True) -> Build:
    """A config written as text (for syntax and type mistakes), beside the healthy log."""

    def build(folder: Path) -> Path:
        if with_log:
            log()(folder)
        folder.mkdir(parents=True, exist_ok=True)
        path = folder / "churnlife.toml"
        path.write_text(text)
        return path

    return build


def healthy_toml() -> str:
    return toml_text(config())


def edited(old: str, new: str) -> Build:
    """The healthy config with one piece of text replaced."""
    text = healthy_toml()
    assert old in text, old
    return raw_config(text.replace(old, new))


def with_events(*extra: tuple, cfg: dict[str, Any] | None = None) -> Build:
    return log(HEALTHY_EVENTS + list(extra), cfg=cfg)


def text_times(values: list[str]) -> Build:
    """Events whose time column is text (one event per value, healthy otherwise)."""
    events = [(i + 1, v, "start", "m", 10.0, None) for i, v in enumerate(values)]
    customers = [(i + 1, "2022-01-01", "web") for i in range(len(values))]
    return log(events, customers, ev_schema=EV_SCHEMA.replace("ts TIMESTAMP", "ts VARCHAR"))


# -- conditions around a run ---------------------------------------------------------------------


@contextlib.contextmanager
def database_locked(folder: Path) -> Iterator[None]:
    """Another process holds the database open for writing (DuckDB then locks the file)."""
    holder = subprocess.Popen(
        [
            sys.executable,
            "-c",
            "import duckdb, sys, time; con = duckdb.connect(sys.argv[1]); "
            "print('held', flush=True); time.sleep(120)",
            str(folder / "log.duckdb"),
        ],
        stdout=subprocess.PIPE,
        text=True,
    )
    try:
        assert holder.stdout is not None and holder.stdout.readline().strip() == "held"
        yield
    finally:
        holder.kill()
        holder.wait()


def disk_full_on(name: str) -> Callable[[Any, Path], None]:
    """Make the write of output file ``name`` fail with ENOSPC from the kernel: the file is a
    symlink to /dev/full inside the temporary output folder, so the real writer (polars or
    Path.write_text) hits a full device."""

    def patch(monkeypatch: Any, tmp: Path) -> None:
        from churnlife import outputs

        real_init = outputs.OutputFolder.__init__

        def init(self: Any, path: Path) -> None:
            real_init(self, path)
            os.symlink("/dev/full", path / name)

        monkeypatch.setattr(outputs.OutputFolder, "__init__", init)

    return patch


def rename_fails(monkeypatch: Any, tmp: Path) -> None:
    """The final rename of the finished folder into place fails (EACCES)."""
    from churnlife import outputs

    real = os.replace

    def replace(src: Any, dst: Any) -> None:
        if ".writing-" in str(src):
            raise PermissionError(errno.EACCES, "Permission denied")
        real(src, dst)

    monkeypatch.setattr(outputs.os, "replace", replace)


def write_raises_enospc(monkeypatch: Any, tmp: Path) -> None:
    """A simulated full disk on the report write (the writer raises OSError(ENOSPC))."""
    from churnlife import outputs

    real = outputs.OutputFolder.text

    def text(self: Any, name: str, content: str) -> None:
        if name == "report.html":
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
        real(self, name, content)

    monkeypatch.setattr(outputs.OutputFolder, "text", text)


# -- the case table -------------------------------------------------------------------------------


@dataclass(frozen=True)
class Case:
    id: str
    build: Build
    stop: bool = True  # True: exit 2 with a message; False: the run succeeds
    message: tuple[str, ...] = ()  # pieces the message must contain (the problem, the fix)
    counts: dict[str, int] = field(default_factory=dict)  # summary.json "data" values (runs)
    notes: tuple[str, ...] = ()  # pieces of note texts summary.json must hold (runs)
    command: str = "run"
    output: Callable[[Path], Path] | None = None  # output folder (default: outputs/report)
    context: Callable[[Path], contextlib.AbstractContextManager] | None = None
    patch: Callable[[Any, Path], None] | None = None
    config_path: Callable[[Path], Path] | None = None  # override the config path given
    subprocess: bool = False  # also run through `python -m churnlife`


def _no_config(folder: Path) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    return folder / "missing.toml"


CASES: list[Case] = [
    # ---- config: file and syntax
    Case("config-file-missing", _no_config, message=("config file not found", "--config"),
         subprocess=True),
    Case("config-not-toml", raw_config("[source\nkind = 'duckdb'\n"),
         message=("is not valid TOML", "Fix the syntax")),
    Case("config-not-utf8", lambda f: _write_bytes(f, b"[source]\nkind = \"\xff\xfe\"\n"),
         message=("is not UTF-8", "Save it as UTF-8")),
    # ---- config: unknown names, with suggestions
    Case("unknown-table", edited("[window]", "[windw]"),
         message=("unknown config table [windw]", 'Did you mean "window"')),
    Case("unknown-key", edited("grace_days", "grace_dayz"),
         message=('unknown config key "grace_dayz"', 'Did you mean "grace_days"'),
         subprocess=True),
    Case("unknown-column-role", edited("customer_id =", "custmer_id ="),
         message=('unknown config key "custmer_id"', 'Did you mean "customer_id"')),
    Case("unknown-unit", log(cfg=config(tenure={"unit": "month"})),
         message=('unit = "month" is not known', 'Did you mean "months"')),
    Case("unknown-cohort-attribute", log(cfg=config(cohorts={"by": ["plans"]})),
         message=('unknown attribute "plans"', 'Did you mean "plan"')),
    Case("unknown-source-kind", log(cfg=config(source={"kind": "duckdbb"})),
         message=('kind = "duckdbb" is not supported', 'Did you mean "duckdb"')),
    Case("unknown-incomplete-rows-rule", log(cfg=config(rules={"incomplete_rows": "dropp"})),
         message=('incomplete_rows = "dropp" is not known', 'Did you mean "drop"')),
    # ---- config: wrong value types and impossible values
    Case("grace-days-as-text", edited("grace_days = 14", 'grace_days = "14"'),
         message=("[rules] grace_days must be a whole number", 'it is text in quotes: "14"')),
    Case("grace-days-as-bool", edited("grace_days = 14", "grace_days = true"),
         message=("[rules] grace_days must be a whole number", "it is true or false: true")),
    Case("retention-at-not-a-list", edited("retention_at = [1, 3]", "retention_at = 12"),
         message=("[report] retention_at must be a list", "Write it in that form")),
    Case("columns-not-a-table", log(cfg={**config(), "columns": "cid"}),
         message=("[columns] must be a table", "Write it as a [columns] section")),
    Case("confidence-out-of-range", log(cfg=config(report={"confidence": 1.5})),
         message=("confidence must be between 0.5 and 1", "0.95")),
    Case("date-not-a-date", edited("log_start = 2022-01-01", 'log_start = "2022-13-01"'),
         message=("log_start = '2022-13-01' is not a date", "YYYY-MM-DD")),
    Case("as-of-before-log-start", log(cfg=config(window={"as_of": dt.date(2021, 6, 30)})),
         message=("as_of (2021-06-30) is before log_start", "Set as_of")),
    Case("event-code-twice", log(cfg=config(event_codes={"renewal": ["renew", "start"]})),
         message=('"start" is listed under both start and renewal', "one role")),
    Case("no-start-codes", log(cfg=config(event_codes={"start": []})),
         message=("[event_codes] start is empty", "List the event kind")),
    Case("required-column-missing", log(cfg=config(columns={"customer_id": None})),
         message=("[columns] customer_id is required", "name the column")),
    # ---- config: identifiers that are not plain names are refused, never pasted
    Case("table-name-with-quote-and-semicolon",
         log(cfg=config(source={"events": 'sub_events"; DROP TABLE sub_events; --'})),
         message=("is not a plain SQL identifier", "Rename it"), subprocess=True),
    Case("column-name-with-semicolon",
         log(cfg=config(columns={"customer_id": "cid; DELETE FROM sub_events"})),
         message=("[columns] customer_id", "is not a plain SQL identifier")),
    Case("column-name-with-quote", log(cfg=config(columns={"event_time": "ts' OR '1'='1"})),
         message=("[columns] event_time", "is not a plain SQL identifier")),
    # ---- source
    Case("database-missing", lambda f: _config_only(f, config()),
         message=("database file not found", "Check [source] database")),
    Case("database-not-duckdb", lambda f: _garbage_db(f),
         message=("cannot open", "as a DuckDB database", "Check that [source] database")),
    Case("database-locked", log(), context=database_locked,
         message=("cannot open", "close that program or copy the file"), subprocess=True),
    Case("table-missing", log(cfg=config(source={"events": "sub_event"})),
         message=("sub_event not found", 'Did you mean "sub_events"', "Fix [source] events")),
    Case("schema-missing", log(cfg=config(source={"events": "sales.sub_events"})),
         message=("sales.sub_events not found", "Fix [source] events")),
    Case("customers-table-missing", log(cfg=config(source={"customers": "sub_customer"})),
         message=("sub_customer not found", "Fix [source] customers")),
    Case("column-missing", log(cfg=config(columns={"event_time": "tstamp"})),
         message=('event_time = "tstamp" is not a column', "Columns there: cid, ts,",
                  "Fix [columns] event_time")),
    Case("column-wrong-case", log(cfg=config(columns={"price": "PRICE"})),
         message=('price = "PRICE" is not a column', 'Did you mean "price"')),
    Case("customers-column-missing", log(cfg=config(columns={"signup_date": "signup_on"})),
         message=('signup_date = "signup_on" is not a column of the customers table',
                  'Did you mean "signup"')),
    Case("files-missing", csv_log("x\n1\n", cfg=config(
        source={"kind": "files", "database": None, "events": "nope.parquet", "customers": None},
        columns={"signup_date": None, "channel": None})),
         message=("file not found", "nope.parquet", "Give a Parquet or CSV file")),
    Case("files-not-parquet", lambda f: _text_as_parquet(f),
         message=("cannot read [source] events", "Check the path")),
    # ---- data that cannot be analysed
    Case("empty-table", log(events=[]), message=("has no rows", "Point [source] events"),
         subprocess=True),
    Case("window-excludes-everything",
         log(cfg=config(window={"log_start": dt.date(2023, 1, 1), "as_of": dt.date(2023, 6, 30)})),
         message=("none of the log's events fall inside the window",
                  "they run from 2022-01-01", "Set [window]")),
    Case("no-start-events", log(events=[e for e in HEALTHY_EVENTS if e[2] != "start"],
                                customers=[c for c in HEALTHY_CUSTOMERS if c[0] != 5]),
         message=("no subscription spells found", "[event_codes] start")),
    Case("time-column-integer",
         log(events=[(e[0], i, *e[2:]) for i, e in enumerate(HEALTHY_EVENTS)],
             ev_schema=EV_SCHEMA.replace("ts TIMESTAMP", "ts BIGINT")),
         message=('[columns] event_time = "ts" holds whole numbers', "a timestamp or date",
                  "TIMESTAMP or DATE")),
    Case("time-column-boolean",
         log(events=[(e[0], True, *e[2:]) for e in HEALTHY_EVENTS],
             ev_schema=EV_SCHEMA.replace("ts TIMESTAMP", "ts BOOLEAN")),
         message=('event_time = "ts" holds true/false values',)),
    Case("time-text-unreadable", text_times(["2022-02-01 10:00", "yesterday", "2022-03-01"]),
         message=("is not a timestamp or date", "1 of 3 values", "'yesterday'",
                  "YYYY-MM-DD HH:MM:SS")),
    Case("time-text-day-first", text_times(["01/02/2022 10:00", "15/02/2022 11:00"]),
         message=("2 of 2 values cannot be read", "'01/02/2022 10:00'", "ISO 8601")),
    Case("time-text-mixed-time-zones",
         text_times(["2022-02-01 10:00:00+02:00", "2022-02-03 10:00:00", "2022-02-05T08:00Z"]),
         message=("mixes times with a UTC offset (2 of them", "without one (1",
                  "Give every value an offset"), subprocess=True),
    Case("price-text-not-numbers",
         log(events=[(*e[:4], "ten" if i == 3 else str(e[4]), e[5])
                     for i, e in enumerate(HEALTHY_EVENTS)],
             ev_schema=EV_SCHEMA.replace("price DOUBLE", "price VARCHAR")),
         message=('[columns] price = "price" holds text that is not a number', "'ten'",
                  "plain number")),
    Case("price-column-date",
         log(events=[(*e[:4], "2022-01-01", e[5]) for e in HEALTHY_EVENTS],
             ev_schema=EV_SCHEMA.replace("price DOUBLE", "price DATE")),
         message=('price = "price" holds times', "needs a number")),
    Case("signup-text-unreadable",
         log(customers=[(c[0], "soon" if c[0] == 2 else c[1], c[2]) for c in HEALTHY_CUSTOMERS],
             cu_schema=CU_SCHEMA.replace("signup DATE", "signup VARCHAR")),
         message=('signup_date = "signup" holds text that is not a date', "'soon'")),
    Case("customer-id-types-differ",
         log(customers=[(str(c[0]), *c[1:]) for c in HEALTHY_CUSTOMERS],
             cu_schema=CU_SCHEMA.replace("cid INTEGER", "cid VARCHAR")),
         message=("whole numbers", "in the events table but text in the customers table",
                  "same type")),
    Case("null-customer-id", with_events((None, "2022-03-01 10:00", "renew", "m", 10.0, None)),
         message=("1 of 14 event rows are incomplete", "1 without a customer id",
                  'incomplete_rows = "drop"')),
    Case("null-event-time", with_events((2, None, "renew", "m", 10.0, None)),
         message=("are incomplete", 'without an event time ("ts")', 'incomplete_rows = "drop"')),
    Case("null-event-kind", with_events((2, "2022-04-20 09:00", None, "m", 10.0, None)),
         message=("are incomplete", 'without an event kind ("kind")')),
    Case("unknown-event-code", with_events((2, "2022-04-20 09:00", "pause", "m", 10.0, None)),
         message=('unknown event codes in the log: "pause" (1 event)', "[event_codes]")),
    # ---- output folder
    Case("output-under-a-file", log(), output=lambda t: _file(t / "outputs" / "afile") / "report",
         message=("part of that path is a file", "Choose a folder you can write to")),
    Case("output-is-a-file", log(), output=lambda t: _file(t / "outputs" / "report.txt"),
         message=("exists and is not a folder", "Choose another path")),
    Case("disk-full-csv", log(), patch=disk_full_on("counts.csv"),
         message=("writing the output folder", "No space left on device", "Nothing was replaced",
                  "free disk space")),
    Case("disk-full-parquet", log(), patch=disk_full_on("km.parquet"),
         message=("No space left on device", "Nothing was replaced")),
    Case("disk-full-report", log(), patch=disk_full_on("report.html"),
         message=("No space left on device", "Nothing was replaced")),
    Case("disk-full-simulated", log(), patch=write_raises_enospc,
         message=("No space left on device", "free disk space or choose another folder")),
    Case("final-rename-refused", log(), patch=rename_fails,
         message=("Permission denied", "Nothing was replaced")),
    # ---- `check` stops on the same problems
    Case("check-unknown-code", with_events((2, "2022-04-20 09:00", "pause", "m", 10.0, None)),
         command="check", message=('unknown event codes in the log: "pause"',)),
    Case("check-mixed-time-zones",
         text_times(["2022-02-01 10:00:00+02:00", "2022-02-03 10:00:00"]), command="check",
         message=("mixes times with a UTC offset",)),
]

# Anomalies handled by rule: the run succeeds and summary.json counts them.
HANDLED_CASES: list[Case] = [
    Case("healthy-log", log(), stop=False,
         counts={"n_spells": 6, "n_duplicate_rows": 0, "n_start_in_open_spell": 0,
                 "n_cancel_without_spell": 0, "n_late_entry": 1, "n_involuntary": 1},
         subprocess=True),
    Case("duplicate-rows", log(HEALTHY_EVENTS + HEALTHY_EVENTS[:2] + HEALTHY_EVENTS[4:5]),
         stop=False, counts={"n_duplicate_rows": 3, "n_spells": 6}),
    Case("events-after-as-of",
         with_events((2, "2022-07-20 09:00", "cancel", "m", 10.0, None),
                     (6, "2022-07-01 00:00", "cancel", "a", 100.0, None)),
         stop=False, counts={"n_after_as_of": 2, "n_censored": 2}),
    Case("events-before-log-start",
         with_events((1, "2021-12-20 09:00", "start", "m", 10.0, None)),
         stop=False, counts={"n_before_log": 1, "n_spells": 6}),
    Case("events-before-signup",
         log(customers=[(c[0], "2022-03-01" if c[0] == 1 else c[1], c[2])
                        for c in HEALTHY_CUSTOMERS]),
         stop=False, counts={"n_before_signup": 2, "n_spells": 6}),
    Case("cancel-without-start", with_events((7, "2022-03-01 09:00", "cancel", "m", 10.0, None)),
         stop=False, counts={"n_cancel_without_spell": 1, "n_customers_without_spell": 1,
                             "n_spells": 6}),
    Case("second-cancel", with_events((1, "2022-03-16 09:00", "cancel", "m", 10.0, None)),
         stop=False, counts={"n_cancel_without_spell": 1, "n_voluntary": 3}),
    Case("two-starts-without-end",
         with_events((2, "2022-04-02 09:00", "start", "m", 10.0, None)),
         stop=False, counts={"n_start_in_open_spell": 1, "n_spells": 6}),
    Case("return-within-gap", with_events((1, "2022-03-25 09:00", "start", "m", 10.0, None)),
         stop=False, counts={"n_joined_returns": 1, "n_spells": 6, "n_voluntary": 2}),
    Case("negative-price", log([(*e[:4], -10.0 if e[0] == 2 else e[4], e[5])
                                for e in HEALTHY_EVENTS],
                               cfg=config(cohorts={"by": ["price_band"], "price_bands": [50]})),
         stop=False, counts={"n_nonpositive_price": 1}),
    Case("zero-price", log([(*e[:4], 0.0 if e[0] == 6 else e[4], e[5]) for e in HEALTHY_EVENTS]),
         stop=False, counts={"n_nonpositive_price": 1}),
    Case("renewals-without-start-or-signup",
         with_events((8, "2022-02-01 09:00", "renew", "m", 10.0, None),
                     (8, "2022-03-01 09:00", "renew", "m", 10.0, None)),
         stop=False, counts={"n_customers_without_spell": 1, "n_spells": 6}),
    Case("customer-listed-twice",
         log(customers=[*HEALTHY_CUSTOMERS, (3, "2022-01-01", "ads")]),
         stop=False, counts={"n_customers_listed_twice": 1}),
    Case("incomplete-rows-dropped",
         with_events((None, "2022-03-01 10:00", "renew", "m", 10.0, None),
                     (2, None, "renew", "m", 10.0, None),
                     (2, "2022-04-20 09:00", None, "m", 10.0, None),
                     cfg=config(rules={"incomplete_rows": "drop"})),
         stop=False, counts={"n_dropped_incomplete": 3, "n_spells": 6}),
    Case("one-customer", log(HEALTHY_EVENTS[:3], HEALTHY_CUSTOMERS[:1]), stop=False,
         counts={"n_spells": 1, "n_customers_with_spells": 1},
         notes=("Every customer still at risk churned",)),
    Case("every-customer-censored",
         log([e for e in HEALTHY_EVENTS if e[2] in ("start", "renew") and e[0] != 5],
             [c for c in HEALTHY_CUSTOMERS if c[0] != 5]),
         stop=False, counts={"n_censored": 5, "n_voluntary": 0, "n_involuntary": 0},
         notes=("No churn was observed", "Median tenure not reached")),
    Case("cohort-without-churn",
         log([*HEALTHY_EVENTS[:8], HEALTHY_EVENTS[8], HEALTHY_EVENTS[12]],
             cfg=config(cohorts={"by": ["plan"]})),
         stop=False, counts={"n_spells": 5}, notes=("No churn was observed",)),
    Case("dates-not-timestamps",
         log([(e[0], e[1][:10], *e[2:]) for e in HEALTHY_EVENTS],
             ev_schema=EV_SCHEMA.replace("ts TIMESTAMP", "ts DATE")),
         stop=False, counts={"n_spells": 6}),
    Case("time-zone-aware-column",
         # 23:30 at -05:00 on 01-31 is 04:30 UTC on 02-01: the spell starts in February
         log([(1, "2022-01-31 23:30:00-05:00", "start", "m", 10.0, None)],
             [(1, "2022-02-01", "web")],
             ev_schema=EV_SCHEMA.replace("ts TIMESTAMP", "ts TIMESTAMPTZ"),
             cfg=config(cohorts={"by": ["signup_month"]})),
         stop=False, counts={"n_spells": 1, "n_before_signup": 0}),
    Case("time-text-all-with-offsets",
         text_times(["2022-02-01 10:00:00+02:00", "2022-02-03T08:00:00Z"]),
         stop=False, counts={"n_spells": 2}),
    Case("csv-source-with-duplicates",
         csv_log("cid,ts,kind,plan,price,why\n"
                 "1,2022-01-10 09:00:00,start,m,10,\n"
                 "1,2022-01-10 09:00:00,start,m,10,\n"
                 "1,2022-03-15 09:00:00,cancel,m,10,price\n"
                 "2,2022-02-01 09:00:00,start,m,10,\n"),
         stop=False, counts={"n_duplicate_rows": 1, "n_spells": 2}),
]


def _write_bytes(folder: Path, data: bytes) -> Path:
    log()(folder)
    path = folder / "churnlife.toml"
    path.write_bytes(data)
    return path


def _config_only(folder: Path, cfg: dict[str, Any]) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / "churnlife.toml"
    path.write_text(toml_text(cfg))
    return path


def _garbage_db(folder: Path) -> Path:
    path = _config_only(folder, config())
    (folder / "log.duckdb").write_bytes(b"this is a spreadsheet, not a database\n" * 200)
    return path


def _text_as_parquet(folder: Path) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "events.parquet").write_text("cid,ts\n1,2022-01-01\n")
    return _config_only(folder, config(
        source={"kind": "files", "database": None, "events": "events.parquet", "customers": None},
        columns={"signup_date": None, "channel": None},
    ))


def _file(path: Path) -> Path:
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text("not a folder\n")
    return path


def wait_for(predicate: Callable[[], bool], timeout: float = 30.0) -> bool:
    end = time.monotonic() + timeout
    while time.monotonic() < end:
        if predicate():
            return True
        time.sleep(0.05)
    return False
