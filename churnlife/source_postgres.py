"""PostgreSQL as the engine: churnlife's queries run inside the server, only counts come back.

One connection, one transaction for the whole run: REPEATABLE READ (every query sees the same
snapshot of the log, so the counts, the summary and the value stage agree) and READ ONLY (the
server itself refuses any write). Each query runs under a savepoint, so a refused query leaves the
transaction usable, and under ``statement_timeout`` ([source] statement_timeout_s).

A read-only transaction cannot create even a temporary table, so staged queries (the spells)
are composed into the queries that read them as CTEs (churnlife.dialects.Composer): PostgreSQL
runs each staged query again inside each query that reads it.

Results arrive through ADBC's PostgreSQL driver straight into Arrow (no per-row Python).
The connection URL comes from the environment variable named by [source] url_env, or from
[source] url (never with a password); it is never printed with its password.
"""

from __future__ import annotations

import contextlib
import re
import weakref
from typing import Any

import polars as pl
import pyarrow as pa

from churnlife.config import Config, redact_url
from churnlife.dialects import Composer, Statement
from churnlife.errors import UserError, did_you_mean
from churnlife.source import quote_duckdb


def _driver():  # the optional dependency, with the fix named when it is missing
    try:
        import adbc_driver_postgresql.dbapi as dbapi
    except ImportError:
        raise UserError(
            '[source] kind = "postgres" needs the PostgreSQL driver: pip install '
            "'churnlife[postgres]' (adbc-driver-postgresql)."
        ) from None
    return dbapi


class PostgresSource:
    """Tables of a PostgreSQL database, read in one read-only transaction."""

    dialect = "postgres"

    def __init__(self, config: Config) -> None:
        src = config.source
        self._url = src.resolve_url()
        dbapi = _driver()
        try:
            self._con = dbapi.connect(self._url, autocommit=True)
        except Exception as err:  # the driver's own error classes vary by version
            raise UserError(
                f"cannot connect to PostgreSQL at {redact_url(self._url)}: {_message(err)}. "
                f"Check the URL in {src.url_env} or [source] url, that the server is running "
                "and that this user may connect (a password belongs in the environment variable "
                "or ~/.pgpass, never in the config)."
            ) from None
        self._cur = self._con.cursor()
        # a source left open (a notebook, an error) still ends its transaction and connection
        self._finalizer = weakref.finalize(self, _close, self._cur, self._con)
        timeout_ms = int(src.statement_timeout_s) * 1000
        for sql in (
            "BEGIN ISOLATION LEVEL REPEATABLE READ READ ONLY",
            "SET LOCAL TIME ZONE 'UTC'",  # zone-aware times are read in UTC (README.md)
            f"SET LOCAL statement_timeout = {timeout_ms}",
            # Staged queries arrive as CTEs, whose row counts the planner cannot estimate (it
            # guesses 1 row); a nested loop over such a guess is quadratic in the spells:
            # on the 3 000-customer demo the covariate queries took 226 s with nested loops,
            # 0.6 s without them.
            "SET LOCAL enable_nestloop = off",
            # ... which prices every plan far above the JIT thresholds: compiling each query
            # then took 6.4 s of a 6.6 s data-quality query on the same demo. These are
            # aggregations the server finishes in milliseconds to seconds; no JIT.
            "SET LOCAL jit = off",
        ):
            self._cur.execute(sql)
        self._composer = Composer("postgres")
        self._names = {"events": self.quote(src.events)}
        if src.customers:
            self._names["customers"] = self.quote(src.customers)
        self._staged = 0
        self.bytes_fetched = 0  # what crossed the wire as results (benchmarks/bench_bytes_moved)
        self._timeout_s = src.statement_timeout_s

    def relation(self, role: str) -> str:
        return self._names[role]

    def quote(self, identifier: str) -> str:
        return quote_duckdb(identifier)  # the same rules: "part"."part", inner quotes doubled

    def columns(self, role: str) -> list[str]:
        name = self._names[role]
        try:
            table = self._run(f"SELECT * FROM {name} LIMIT 0", ())
        except UserError:
            tables = self._run(
                "SELECT table_schema || '.' || table_name AS t FROM information_schema.tables "
                "WHERE table_schema NOT IN ('pg_catalog', 'information_schema') ORDER BY 1",
                (),
            ).column("t").to_pylist()
            bare = name.replace('"', "")
            short = [t.split(".", 1)[1] if t.startswith("public.") else t for t in tables]
            raise UserError(
                f"table {bare} not found in the PostgreSQL database.{did_you_mean(bare, short)} "
                f"Tables there: {', '.join(short) or '(none)'}. Fix [source] {role}."
            ) from None
        return table.schema.names

    def statement(self, sql: str, params: dict[str, Any]) -> Statement:
        return self._composer.statement(sql, params)

    def query(self, sql: str, params: dict[str, Any]) -> pl.DataFrame:
        st = self.statement(sql, params)
        assert isinstance(st.values, tuple)
        return _to_polars(self._run(st.text, st.values))

    def stage(self, name: str, sql: str, params: dict[str, Any]) -> str:
        self._staged += 1
        return self._composer.stage(f"churnlife_{name}_{self._staged}", sql, params)

    def plan_stage(
        self, name: str, sql: str, params: dict[str, Any]
    ) -> tuple[str, Statement | None]:
        return self.stage(name, sql, params), None  # staging only records the text here

    def close(self) -> None:
        self._finalizer()

    def _run(self, text: str, values: tuple[Any, ...]) -> pa.Table:
        cur = self._cur
        cur.execute("SAVEPOINT churnlife_query")
        try:
            cur.execute(text, parameters=values or None)
            table = cur.fetch_arrow_table()
        except KeyboardInterrupt:
            with contextlib.suppress(Exception):  # ask the server to stop the query too
                cur.adbc_cancel()
            raise
        except Exception as err:
            cur.execute("ROLLBACK TO SAVEPOINT churnlife_query")
            raise _user_error(err, self._timeout_s) from None
        cur.execute("RELEASE SAVEPOINT churnlife_query")
        self.bytes_fetched += table.nbytes
        return table


def _close(cur: Any, con: Any) -> None:
    with contextlib.suppress(Exception):  # the connection may be gone already
        cur.execute("ROLLBACK")  # nothing was written; end the snapshot
    with contextlib.suppress(Exception):
        cur.close()
    with contextlib.suppress(Exception):
        con.close()


def _to_polars(table: pa.Table) -> pl.DataFrame:
    """Arrow from the driver → polars, with PostgreSQL's NUMERIC (sums, EXTRACT) as numbers:
    whole numbers where every value is whole, as DuckDB's integer sums are."""
    frame: pl.DataFrame = pl.from_arrow(table)  # type: ignore[assignment]
    casts = []
    for field in table.schema:
        meta = {k.decode(): v.decode() for k, v in (field.metadata or {}).items()}
        if meta.get("ADBC:postgresql:typname") == "numeric" or pa.types.is_decimal(field.type):
            col = pl.col(field.name).cast(pl.Float64, strict=False)
            casts.append(col)
    if casts:
        frame = frame.with_columns(casts)
        whole = [
            c for c in (e.meta.output_name() for e in casts)
            if frame[c].drop_nulls().pipe(lambda s: bool((s == s.round(0)).all()))
        ]
        frame = frame.with_columns(pl.col(whole).cast(pl.Int64))
    return frame


# SQLSTATE classes and codes that mean the user's config or data, with the fix to name
_STATES = {
    "42P01": "a table named in [source] does not exist. Check [source] events and customers "
             "(schema.table)",
    "42703": "a column named in [columns] does not exist. Check the column names in [columns]",
    "42501": "the user may not read a table. Ask the DBA for SELECT on the tables in [source]",
    "57014": "a query ran longer than [source] statement_timeout_s ({timeout} s) and was "
             "stopped. Raise statement_timeout_s, or run when the server is less busy",
    "22P02": "a value in the log does not read as the type churnlife expects. Check that "
             "[columns] event_time names a timestamp or date column, price a number and "
             "signup_date a date",
    "22007": "a value in the log does not read as a date or time. Check [columns] event_time "
             "and signup_date",
    "22008": "a date or time in the log is out of range. Check [columns] event_time and "
             "signup_date",
    "42883": "a column in the log does not hold the type churnlife expects (no such operator "
             "or function for it). Check that [columns] event_time names a timestamp or date "
             "column, price a number and signup_date a date",
    "42804": "a column in the log does not hold the type churnlife expects. Check the types "
             "of the columns named in [columns]",
    "0A000": "the server does not support a construct churnlife uses (an older PostgreSQL?). "
             "churnlife is tested on PostgreSQL 15",
    "25006": "the server refused to write (churnlife never writes; please report this)",
}


def _user_error(err: Exception, timeout: int) -> UserError:
    state = getattr(err, "sqlstate", None) or _state_in(str(err))
    message = _message(err)
    fix = _STATES.get(state or "")
    if fix is None and state and state.startswith("08"):
        fix = "the connection to the server was lost. Check the server and run again"
    if fix is None:
        fix = "check the table and column names in [source] and [columns]"
    return UserError(f"PostgreSQL refused a query: {message}. {fix.format(timeout=timeout)}.")


def _state_in(text: str) -> str | None:
    match = re.search(r"SQLSTATE:? ?([0-9A-Z]{5})", text)
    return match.group(1) if match else None


def _message(err: Exception) -> str:
    """The server's first line, without the driver's prefix, and never a password."""
    text = str(err).strip()
    text = re.sub(r"^\[libpq\]\s*", "", text)
    text = re.sub(r"^[A-Z_]+:\s*", "", text)  # the driver's status word, e.g. INVALID_ARGUMENT
    text = re.sub(r"^\[libpq\]\s*", "", text)
    text = re.sub(r"(://[^:/@]*:)[^@]*@", r"\1***@", text)
    first = text.splitlines()[0] if text else type(err).__name__
    return first.rstrip(".")
