"""The event log in Spark: catalog tables, or files read by Spark, queried with Spark SQL.

churnlife's queries (queries/*.sql, DuckDB's SQL) are translated for Spark by
churnlife/dialects.py and run with ``spark.sql(text, args=values)``: values are bound as named
parameters, never pasted. Results come back through Arrow (``DataFrame.toArrow``) into polars.

Nothing is written to the user's tables or files. Files named in the config are registered as
temporary views of the session (``churnlife_events``, ``churnlife_customers``); a staged result
(the spells) is computed once (``localCheckpoint``) and kept as a temporary view of our own
(``churnlife_<name>_<n>``). ``close`` drops those views, and stops the session only if this source
started it.

The session's time zone is UTC while the source is open (times with a zone are read in UTC, as in
DuckDB); a session that was already running gets its earlier setting back on ``close``.
"""

from __future__ import annotations

import contextlib
import itertools
import logging
import os
import sys
import tempfile
import threading
import uuid
import warnings
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import polars as pl
import pyarrow as pa

from churnlife.config import Config, redact_url
from churnlife.dialects import Statement, translate
from churnlife.errors import UserError, did_you_mean
from churnlife.source import quote_duckdb

# Session settings churnlife needs while it runs (restored on close for a session it reused).
_SQL_SETTINGS = {
    "spark.sql.session.timeZone": "UTC",
    # casts that cannot read a value fail, as DuckDB's do (TRY_CAST is used where a NULL is meant)
    "spark.sql.ansi.enabled": "true",
}

# Only errors reach the terminal: Spark's own start-up notices and warnings are not the user's.
_LOG4J2 = """\
rootLogger.level = error
rootLogger.appenderRef.stderr.ref = console
appender.console.type = Console
appender.console.name = console
appender.console.target = SYSTEM_ERR
appender.console.layout.type = PatternLayout
appender.console.layout.pattern = %d{HH:mm:ss} %p %c{1}: %m%n%ex
"""

_views = itertools.count(1)  # our temporary views get names no other source in the process uses
_sources = itertools.count(1)


def quote_spark(identifier: str) -> str:
    """Backticks around each dotted part, inner backticks doubled (Spark SQL's rule)."""
    return ".".join("`" + part.replace("`", "``") + "`" for part in identifier.split("."))


def _first_line(err: BaseException) -> str:
    text = str(err).strip()
    return text.splitlines()[0] if text else type(err).__name__


class SparkSource:
    """A SparkSession (started for the master URL, or the one already running)."""

    dialect = "spark"

    def __init__(self, config: Config) -> None:
        src = config.source
        self._timeout = src.statement_timeout_s
        self._views: list[str] = []
        self._stages: list[Any] = []  # checkpointed DataFrames, kept while their views exist
        self._names: dict[str, str] = {}
        self._spark, self._owned, self._restore = session_for(src.resolve_url(), src.spark_conf)
        n = next(_sources)
        try:
            if src.file_format is None:
                for role, name in (("events", src.events), ("customers", src.customers)):
                    if name is not None:
                        self._names[role] = quote_duckdb(name)
            else:
                for role, path in (("events", src.events), ("customers", src.customers)):
                    if path is not None:
                        view = f"churnlife_{role}" + (f"_{n}" if n > 1 else "")
                        self._read_files(role, path, src.file_format, src.read_options, view)
        except BaseException:
            self.close()
            raise

    # -- the relations -------------------------------------------------------------------------

    def _read_files(
        self, role: str, path: str, file_format: str, options: dict[str, Any], view: str
    ) -> None:
        from pyspark.errors import PySparkException

        if not any(ch in path for ch in "*?[") and not Path(path).exists() and "://" not in path:
            raise UserError(
                f"[source] {role} file not found: {path}. Give a {file_format} file, folder or "
                "glob (relative to the config file), or a path Spark can read (hdfs://, s3a://)."
            )
        reader = self._spark.read.format(file_format)
        if options:
            reader = reader.options(**{str(k): _option(v) for k, v in options.items()})
        try:
            frame = reader.load(path)
            frame.createOrReplaceTempView(view)
        except PySparkException as err:
            raise UserError(
                f"Spark cannot read [source] {role} = {path} as {file_format}: "
                f"{_first_line(err)}. Check the path, [source] file_format and read_options."
            ) from None
        self._views.append(view)
        self._names[role] = view

    def relation(self, role: str) -> str:
        return self._names[role]

    def quote(self, identifier: str) -> str:
        """The identifier as churnlife's query text (DuckDB's SQL) writes it: double quotes. The
        translation writes it for Spark with backticks, inner backticks doubled (quote_spark)."""
        return quote_duckdb(identifier)

    def columns(self, role: str) -> list[str]:
        from pyspark.errors import AnalysisException

        name = self._names[role].replace('"', "")
        try:
            return list(self._spark.table(quote_spark(name)).columns)
        except AnalysisException:
            try:
                tables = sorted(t.name for t in self._spark.catalog.listTables())
            except Exception:  # a catalog that cannot list is no reason to fail
                tables = []
            raise UserError(
                f"table {name} not found in the Spark catalog.{did_you_mean(name, tables)} "
                f"Tables there: {', '.join(tables) or '(none)'}. Fix [source] {role} (or set "
                "[source] file_format to read files)."
            ) from None

    # -- running SQL ---------------------------------------------------------------------------

    def statement(self, sql: str, params: dict[str, Any]) -> Statement:
        return translate(sql, params, "spark")

    def query(self, sql: str, params: dict[str, Any]) -> pl.DataFrame:
        stmt = self.statement(sql, params)
        with self._running(), _quiet_warnings():
            table = self._spark.sql(stmt.text, args=stmt.values or None).toArrow()
        return _to_polars(table)

    def stage(self, name: str, sql: str, params: dict[str, Any]) -> str:
        stmt = self.statement(sql, params)
        view = f"churnlife_{name}_{next(_views)}"
        with self._running():
            frame = self._spark.sql(stmt.text, args=stmt.values or None).localCheckpoint()
            frame.createOrReplaceTempView(view)
        self._views.append(view)
        self._stages.append(frame)
        return view

    def plan_stage(
        self, name: str, sql: str, params: dict[str, Any]
    ) -> tuple[str, Statement | None]:
        """What ``stage`` would run (nothing is run): the query, whose result churnlife computes
        once (localCheckpoint) and keeps as a temporary view of the session under the name
        returned."""
        view = f"churnlife_{name}_{next(_views)}"
        stmt = self.statement(sql, params)
        note = (f"-- computed once (localCheckpoint) and kept as the temporary view {view} of "
                "churnlife's session\n")
        return view, Statement(note + stmt.text, stmt.values, stmt.dialect)

    @contextlib.contextmanager
    def _running(self) -> Iterator[None]:
        """Run Spark jobs in a job group of our own: cancelled after statement_timeout_s, or on
        Ctrl-C; the engine's complaints become a UserError."""
        sc = self._spark.sparkContext
        group = f"churnlife-{uuid.uuid4().hex[:12]}"
        sc.setJobGroup(group, "churnlife query", interruptOnCancel=True)
        timed_out = threading.Event()

        def cancel() -> None:
            timed_out.set()
            sc.cancelJobGroup(group)

        timer = threading.Timer(self._timeout, cancel)
        timer.daemon = True
        timer.start()
        try:
            with _engine_errors(self._timeout, timed_out):
                yield
        except KeyboardInterrupt:
            sc.cancelJobGroup(group)
            raise
        finally:
            timer.cancel()
            sc.setLocalProperty("spark.jobGroup.id", None)
            sc.setLocalProperty("spark.job.description", None)

    def close(self) -> None:
        spark = getattr(self, "_spark", None)
        if spark is None:
            return
        for view in reversed(self._views):
            with contextlib.suppress(Exception):
                spark.catalog.dropTempView(view)
        for frame in self._stages:
            with contextlib.suppress(Exception):
                frame.unpersist()
        self._views, self._stages = [], []
        if self._owned:
            with contextlib.suppress(Exception):
                spark.stop()
            _log_path().unlink(missing_ok=True)
        else:
            for key, value in self._restore.items():
                with contextlib.suppress(Exception):
                    if value is None:
                        spark.conf.unset(key)
                    else:
                        spark.conf.set(key, value)
        self._spark = None


def _option(value: Any) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    return str(value)


def session_for(url: str, conf: dict[str, str]) -> tuple[Any, bool, dict[str, str | None]]:
    """The running SparkSession, or a new one for ``url``; whether we started it; the settings
    to restore on close."""
    try:
        from pyspark.sql import SparkSession
    except ImportError:
        raise UserError(
            '[source] kind = "spark" needs pyspark: pip install "churnlife[spark]" (and Java 17 '
            "or later on the PATH or in JAVA_HOME)."
        ) from None
    active = SparkSession.getActiveSession()
    if active is not None:
        restore: dict[str, str | None] = {}
        for key, value in {**_SQL_SETTINGS, **conf}.items():
            with contextlib.suppress(Exception):
                restore[key] = active.conf.get(key, None)
                active.conf.set(key, value)
        return active, False, restore
    local = url == "local" or url.startswith("local[")
    if local and not os.environ.get("SPARK_LOCAL_IP"):
        os.environ["SPARK_LOCAL_IP"] = "127.0.0.1"
    builder = SparkSession.builder.master(url).appName("churnlife")
    settings: dict[str, str] = {
        "spark.ui.showConsoleProgress": "false",
        "spark.driver.extraJavaOptions": f"-Dlog4j2.configurationFile={_log_config()}",
        **_SQL_SETTINGS,
    }
    if local:
        # a local session needs no web UI; its catalogue stays out of the working folder
        settings["spark.ui.enabled"] = "false"
        settings["spark.sql.warehouse.dir"] = str(Path(tempfile.gettempdir()) / "churnlife-spark"
                                                  / "warehouse")
    options_key = "spark.driver.extraJavaOptions"  # the user's options join our log setting
    java_options = f"{settings[options_key]} {conf.get(options_key, '')}".strip()
    settings.update(conf)
    settings[options_key] = java_options
    for key, value in settings.items():
        builder = builder.config(key, value)
    log = _log_path()
    try:
        with _stderr_to(log), _quiet_warnings():
            spark = builder.getOrCreate()
    except Exception as err:  # the JVM's failure to start, in any form
        raise UserError(
            f"cannot start a Spark session for master {redact_url(url)}: {_first_line(err)}"
            f"{_last_lines(log)}. Check the master URL ([source] url or the url_env environment "
            "variable), that Java 17 or later is installed (JAVA_HOME), and [source] spark_conf."
        ) from None
    spark.sparkContext.setLogLevel("ERROR")
    return spark, True, {}


def _silence_python_loggers() -> None:
    """pyspark logs every engine error it raises on its own stderr handler; churnlife turns the
    error into one message of its own instead."""
    from pyspark.logger import PySparkLogger

    for name in ("SQLQueryContextLogger", "DataFrameQueryContextLogger"):
        PySparkLogger.getLogger(name).setLevel(logging.CRITICAL)


def _log_path() -> Path:
    """Where the Java process's own output goes (its start-up notices, warnings, and anything it
    prints later): a file of churnlife's own, not the user's terminal."""
    folder = Path(tempfile.gettempdir()) / "churnlife-spark"
    folder.mkdir(exist_ok=True)
    return folder / f"spark-{os.getpid()}.log"


def _last_lines(log: Path, n: int = 3) -> str:
    try:
        lines = [ln for ln in log.read_text(errors="replace").splitlines() if ln.strip()]
    except OSError:
        return ""
    if not lines:
        return ""
    return " (Spark said: " + " / ".join(lines[-n:]) + f"; all of it is in {log})"


@contextlib.contextmanager
def _stderr_to(path: Path) -> Iterator[None]:
    """Point file descriptor 2 at ``path`` while the Java process starts: it inherits that as its
    stderr for good, while Python's stderr is restored afterwards."""
    sys.stderr.flush()
    saved = os.dup(2)
    fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_APPEND, 0o600)
    try:
        os.dup2(fd, 2)
        yield
    finally:
        os.dup2(saved, 2)
        os.close(saved)
        os.close(fd)


@contextlib.contextmanager
def _quiet_warnings() -> Iterator[None]:
    with warnings.catch_warnings():
        # pyspark's note about the installed pandas version (churnlife uses Arrow, not pandas)
        warnings.filterwarnings("ignore", message=".*PySpark does not yet fully support pandas")
        yield


def _log_config() -> str:
    path = Path(tempfile.gettempdir()) / "churnlife-spark" / "log4j2.properties"
    path.parent.mkdir(exist_ok=True)
    if not path.is_file() or path.read_text() != _LOG4J2:
        tmp = path.with_suffix(f".{os.getpid()}.tmp")
        tmp.write_text(_LOG4J2)
        tmp.replace(path)
    return str(path)


@contextlib.contextmanager
def _engine_errors(timeout: int, timed_out: threading.Event) -> Iterator[None]:
    from py4j.protocol import Py4JJavaError
    from pyspark.errors import AnalysisException, PySparkException

    try:
        yield
    except AnalysisException as err:
        raise UserError(
            f"Spark refused the query: {_first_line(err)}. Check the table and column names in "
            "[source] and [columns]."
        ) from None
    except (PySparkException, Py4JJavaError) as err:
        if timed_out.is_set():
            raise UserError(
                f"a query ran longer than [source] statement_timeout_s = {timeout} seconds and "
                "was cancelled. Raise statement_timeout_s, or give the Spark cluster more "
                "resources."
            ) from None
        text = _first_line(err)
        if "CAST" in text.upper() or "PARSE" in text.upper():
            raise UserError(
                f"a column in the log does not hold the type churnlife expects: {text}. Check "
                "that [columns] event_time names a timestamp or date column, price a number "
                "and signup_date a date."
            ) from None
        raise UserError(
            f"Spark could not run the query: {text}. Check the table and column names in "
            "[source] and [columns], and that the files or tables can be read."
        ) from None


def _to_polars(table: pa.Table) -> pl.DataFrame:
    """Arrow from Spark → polars with the types DuckDB's results have: whole-number decimals
    (Spark's SUM and literals) become Int64, other decimals Float64; Spark's TIMESTAMP (an
    instant, shown in the session's UTC) becomes a plain timestamp, as DuckDB's TIMESTAMP is."""
    frame: pl.DataFrame = pl.from_arrow(table)  # type: ignore[assignment]
    casts = []
    for name, dtype in frame.schema.items():
        if isinstance(dtype, pl.Decimal):
            target = pl.Int64 if dtype.scale == 0 else pl.Float64
            casts.append(pl.col(name).cast(target))
        elif isinstance(dtype, pl.Datetime) and dtype.time_zone is not None:
            casts.append(pl.col(name).dt.convert_time_zone("UTC").dt.replace_time_zone(None))
    return frame.with_columns(casts) if casts else frame
