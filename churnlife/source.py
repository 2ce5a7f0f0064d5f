"""Connections to the engine that holds the event log, opened read-only.

A ``Source`` runs SQL text with named parameters inside the engine and returns polars frames
through Arrow. It also *stages* intermediate results (the spells) where the engine allows it without
touching the user's data: DuckDB keeps them in its in-memory catalogue, never in the user's file;
Spark as checkpointed temporary views of its session. PostgreSQL, in a read-only transaction,
cannot keep a result, so a staged query is composed into each query that reads it as a CTE.

Every query is written once, in DuckDB's SQL (queries/); PostgreSQL and Spark get it translated
(churnlife/dialects.py). ``statement`` shows the text an engine would run, for --show-sql.
"""

from __future__ import annotations

import os
import re
import shutil
import tempfile
import weakref
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any, Protocol

import duckdb
import polars as pl

from churnlife.config import Config
from churnlife.dialects import Statement
from churnlife.errors import UserError, did_you_mean

_PARAM = re.compile(r"\$([A-Za-z_][A-Za-z0-9_]*)")
_COMMENT = re.compile(r"--[^\n]*")


class Source(Protocol):
    """What the extract needs from an engine."""

    dialect: str

    def relation(self, role: str) -> str:
        """Quoted SQL name of the ``events`` or ``customers`` relation."""

    def quote(self, identifier: str) -> str:
        """Quote one identifier by the engine's rules."""

    def columns(self, role: str) -> list[str]:
        """Column names of the ``events`` or ``customers`` relation."""

    def query(self, sql: str, params: dict[str, Any]) -> pl.DataFrame:
        """Run ``sql`` with bound ``params``; return the result as polars."""

    def stage(self, name: str, sql: str, params: dict[str, Any]) -> str:
        """Keep the result of ``sql`` under ``name``; return SQL that refers to it."""

    def statement(self, sql: str, params: dict[str, Any]) -> Statement:
        """The text this engine would run for ``sql`` and the values it would bind."""

    def plan_stage(
        self, name: str, sql: str, params: dict[str, Any]
    ) -> tuple[str, Statement | None]:
        """What ``stage`` would do, without running anything: the name later SQL would use, and
        the statement that would keep the result (None where the stage is instead composed
        into each later query that reads it)."""

    def close(self) -> None: ...


def quote_duckdb(identifier: str) -> str:
    """Double-quote each dotted part; inner quotes doubled (DuckDB and PostgreSQL rules)."""
    return ".".join('"' + part.replace('"', '""') + '"' for part in identifier.split("."))


def used_params(sql: str, params: dict[str, Any]) -> dict[str, Any]:
    """Only the parameters the SQL names (DuckDB refuses unused named parameters)."""
    names = set(_PARAM.findall(_COMMENT.sub("", sql)))
    missing = names - params.keys()
    if missing:
        raise RuntimeError(f"SQL needs parameters that were not given: {sorted(missing)}")
    return {k: v for k, v in params.items() if k in names}


class DuckDBSource:
    """A DuckDB file attached read-only, or Parquet/CSV files as views of an in-memory DuckDB."""

    dialect = "duckdb"

    def __init__(self, config: Config) -> None:
        src = config.source
        self._con = duckdb.connect(":memory:")
        # Time-zone-aware times are read in UTC, whatever the machine's zone (README.md).
        self._con.execute("SET TimeZone = 'UTC'").fetchall()
        # DuckDB draws a progress bar on stderr for long queries; churnlife's own output only
        self._con.execute("SET enable_progress_bar = false").fetchall()
        # the spill folder goes when the source is closed, collected, or at exit
        self._spill = weakref.finalize(self, shutil.rmtree, _memory_settings(self._con), True)
        self._names: dict[str, str] = {}
        if src.kind == "duckdb":
            path = src.database
            assert path is not None
            if not path.is_file():
                raise UserError(
                    f"database file not found: {path}. Check [source] database in the config "
                    "(relative paths are read from the config file's folder)."
                )
            literal = "'" + str(path).replace("'", "''") + "'"
            try:
                self._con.execute(f"ATTACH {literal} AS src (READ_ONLY)").fetchall()
            except duckdb.Error as err:
                raise UserError(
                    f"cannot open {path} as a DuckDB database ({_first_line(err)}). Check that "
                    "[source] database names a DuckDB file; if another program holds it open for "
                    "writing, close that program or copy the file."
                ) from None
            self._con.execute("USE src").fetchall()
            self._names["events"] = quote_duckdb(src.events)
            if src.customers:
                self._names["customers"] = quote_duckdb(src.customers)
        else:
            self._attach_file("events", src.events, src.read_options)
            if src.customers:
                self._attach_file("customers", src.customers, src.read_options)
        self._staged = 0

    def _attach_file(self, role: str, pattern: str, options: dict[str, Any]) -> None:
        path = Path(pattern)
        if not any(ch in pattern for ch in "*?[") and not path.exists():
            raise UserError(
                f"[source] {role} file not found: {pattern}. Give a Parquet or CSV file, folder "
                "or glob (relative to the config file)."
            )
        if path.is_dir():
            pattern = str(path / "**" / "*.parquet")
        literal = "'" + pattern.replace("'", "''") + "'"
        lower = pattern.lower()
        reader = "read_csv" if lower.endswith((".csv", ".csv.gz", ".tsv")) else "read_parquet"
        opts = "".join(f", {k} = {_literal(v)}" for k, v in options.items() if reader == "read_csv")
        name = f"churnlife_{role}"
        try:
            self._con.execute(
                f"CREATE TEMP VIEW {name} AS SELECT * FROM {reader}({literal}{opts})"
            ).fetchall()
            self._con.execute(f"SELECT * FROM {name} LIMIT 0").fetchall()
        except duckdb.Error as err:
            raise UserError(
                f"cannot read [source] {role} = {pattern}: {_first_line(err)}. Check the path and "
                "that the files are Parquet (or CSV with a header row)."
            ) from None
        self._names[role] = name

    def relation(self, role: str) -> str:
        return self._names[role]

    def quote(self, identifier: str) -> str:
        return quote_duckdb(identifier)

    def columns(self, role: str) -> list[str]:
        try:
            cur = self._con.execute(f"SELECT * FROM {self._names[role]} LIMIT 0")
        except duckdb.CatalogException:
            tables = [r[0] for r in self._con.execute("SHOW TABLES").fetchall()]
            name = self._names[role].replace('"', "")
            raise UserError(
                f"table {name} not found in the database.{did_you_mean(name, tables)} "
                f"Tables there: {', '.join(tables) or '(none)'}. Fix [source] {role}."
            ) from None
        names = [d[0] for d in cur.description]
        cur.fetchall()
        return names

    def query(self, sql: str, params: dict[str, Any]) -> pl.DataFrame:
        with _engine_errors():
            table = self._con.sql(sql, params=used_params(sql, params)).to_arrow_table()
        return pl.from_arrow(table)  # type: ignore[return-value]

    def stage(self, name: str, sql: str, params: dict[str, Any]) -> str:
        self._staged += 1
        table = f"churnlife_{name}_{self._staged}"
        # TEMP tables live in DuckDB's in-memory temp catalogue; the attached file is read-only.
        with _engine_errors():
            self._con.execute(
                f"CREATE TEMP TABLE {table} AS {sql}", used_params(sql, params)
            ).fetchall()
        return f"temp.main.{table}"

    def statement(self, sql: str, params: dict[str, Any]) -> Statement:
        return Statement(sql, used_params(sql, params), "duckdb")

    def plan_stage(
        self, name: str, sql: str, params: dict[str, Any]
    ) -> tuple[str, Statement | None]:
        self._staged += 1
        table = f"churnlife_{name}_{self._staged}"
        return f"temp.main.{table}", self.statement(f"CREATE TEMP TABLE {table} AS {sql}", params)

    def close(self) -> None:
        self._con.close()
        self._spill()


MEMORY_LIMIT = "1GB"  # DuckDB's working memory; beyond it, operators spill to a temporary folder


def _memory_settings(con: duckdb.DuckDBPyConnection) -> str:
    """Bound DuckDB's memory so a log of any size runs in a laptop's memory: past the limit
    (CHURNLIFE_MEMORY_LIMIT, default 1GB) joins, aggregates and sorts spill to a temporary folder
    of churnlife's own (never beside the user's data).
    CHURNLIFE_THREADS sets DuckDB's threads (default: one per core). Returns the folder."""
    spill = tempfile.mkdtemp(prefix="churnlife-spill-")
    limit = os.environ.get("CHURNLIFE_MEMORY_LIMIT", MEMORY_LIMIT)
    threads = os.environ.get("CHURNLIFE_THREADS")
    for name, value, sql, form in (
        ("CHURNLIFE_MEMORY_LIMIT", limit, "SET memory_limit = {}", "a size such as 2GB or 500MB"),
        ("CHURNLIFE_THREADS", threads, "SET threads = {}", "a whole number such as 2"),
    ):
        if value is None:
            continue
        try:
            con.execute(sql.format(int(value) if name == "CHURNLIFE_THREADS" else
                                   _literal(value))).fetchall()
        except (duckdb.Error, ValueError) as err:
            shutil.rmtree(spill, ignore_errors=True)
            raise UserError(
                f"{name} = {value!r} is not a setting churnlife can use ({_first_line(err)}). "
                f"Give {form}, or unset {name}."
            ) from None
    con.execute(f"SET temp_directory = {_literal(spill)}").fetchall()
    # Staged results need no particular row order (every query that returns rows orders them),
    # which lets DuckDB stream large results instead of holding them to keep their order.
    con.execute("SET preserve_insertion_order = false").fetchall()
    return spill


@contextmanager
def _engine_errors() -> Iterator[None]:
    """Turn the engine's complaints about the user's data or names into a UserError."""
    try:
        yield
    except duckdb.InterruptException:
        raise KeyboardInterrupt from None
    except RuntimeError as err:
        # DuckDB reports Ctrl-C during a query as RuntimeError("Query interrupted").
        if "interrupted" in str(err).lower():
            raise KeyboardInterrupt from None
        raise
    except duckdb.OutOfMemoryException as err:
        limit = os.environ.get("CHURNLIFE_MEMORY_LIMIT", MEMORY_LIMIT)
        raise UserError(
            f"the database ran out of the memory churnlife allows it ({limit}): "
            f"{_first_line(err)}. Set the environment variable CHURNLIFE_MEMORY_LIMIT higher "
            "(e.g. CHURNLIFE_MEMORY_LIMIT=4GB), or CHURNLIFE_THREADS=1 to need less at once."
        ) from None
    except duckdb.ConversionException as err:
        raise UserError(
            f"a column in the log does not hold the type churnlife expects: {_first_line(err)}. "
            "Check that [columns] event_time names a timestamp or date column, price a number "
            "and signup_date a date."
        ) from None
    except (duckdb.BinderException, duckdb.CatalogException) as err:
        raise UserError(
            f"the database refused the query: {_first_line(err)}. Check the table and column "
            "names in [source] and [columns]."
        ) from None
    except (duckdb.InvalidInputException, duckdb.IOException) as err:
        # e.g. a malformed CSV row, found only when the rows are read
        raise UserError(
            f"the log could not be read: {_first_line(err)}. Fix the file or table it names "
            "(for CSV, [source] read_options passes options to the reader)."
        ) from None


def _first_line(err: Exception) -> str:
    return str(err).strip().splitlines()[0] if str(err).strip() else type(err).__name__


def _literal(value: Any) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int | float):
        return repr(value)
    return "'" + str(value).replace("'", "''") + "'"


def open_source(config: Config) -> Source:
    """Open the configured engine: DuckDB (a file, or Parquet/CSV files), PostgreSQL or Spark."""
    if config.source.kind == "postgres":
        from churnlife.source_postgres import PostgresSource

        return PostgresSource(config)
    if config.source.kind == "spark":
        from churnlife.source_spark import SparkSource

        return SparkSource(config)
    return DuckDBSource(config)
