"""Spark SQL runs churnlife's queries (translated by churnlife/dialects.py) and gives the same
results as DuckDB, the reference engine, on the same Parquet files: the counts table, the
per-customer spells, the summary and the data-quality counts, on the demo and on the hand-written
edge-case logs (tests/logs.py, whose answers tests/test_extract_edge_cases.py works out by hand).

One local Spark session (local[2]) serves the whole module. Without pyspark or Java the tests are
skipped, unless CHURNLIFE_REQUIRE_ENGINES=1 (CI), where they fail.
"""

from __future__ import annotations

import hashlib
import os
import shutil
import subprocess
import sys
import tomllib
from pathlib import Path
from typing import Any

import duckdb
import polars as pl
import pytest
from polars.testing import assert_frame_equal

from churnlife.config import parse_config
from churnlife.errors import UserError
from churnlife.extract import run_extract
from churnlife.source import open_source
from tests.engine_servers import engine_unavailable
from tests.logs import (
    CUT_SHORT_LOG,
    EDGE_CUSTOMERS,
    EDGE_EVENTS,
    PERIODS_CONFIG,
    PERIODS_LOG,
    UNITS_LOG,
    config_dict,
    write_log,
)

ROOT = Path(__file__).resolve().parents[1]
# a local session on a small log: a few shuffle partitions instead of Spark's 200
SPARK_CONF = {"spark.sql.shuffle.partitions": "2"}


@pytest.fixture(scope="module")
def spark():
    try:
        import pyspark  # noqa: F401
    except ImportError:
        engine_unavailable("pyspark is not installed (pip install 'churnlife[spark]')")
    java_home = os.environ.get("JAVA_HOME")
    if not shutil.which("java") and not (java_home and (Path(java_home) / "bin" / "java").exists()):
        engine_unavailable("no Java found (java on the PATH or JAVA_HOME) for a Spark session")
    from churnlife.source_spark import session_for

    session, owned, _ = session_for("local[2]", SPARK_CONF)
    yield session
    if owned:
        session.stop()


def _checksums(folder: Path) -> dict[str, str]:
    return {
        p.name: hashlib.sha256(p.read_bytes()).hexdigest()
        for p in sorted(folder.rglob("*")) if p.is_file()
    }


def _to_parquet(database: Path, tables: dict[str, str], folder: Path) -> None:
    """Each table (name → SELECT list) of the DuckDB file as folder/<name>.parquet."""
    con = duckdb.connect(str(database), read_only=True)
    con.execute("SET TimeZone = 'UTC'")
    for name, select in tables.items():
        target = str(folder / f"{name}.parquet").replace("'", "''")
        con.execute(f"COPY (SELECT {select} FROM {name}) TO '{target}' (FORMAT parquet)")
    con.close()


def _spark_source(**keys: Any) -> dict[str, Any]:
    return {"kind": "spark", "url": "local[2]", "spark_conf": SPARK_CONF, **keys}


def _files_source(events: str, customers: str) -> dict[str, Any]:
    return {"kind": "files", "events": events, "customers": customers}


def _cfg(source: dict[str, Any], **changes: dict[str, Any]) -> dict[str, Any]:
    """tests/logs.py's config for the edge-case logs, reading from ``source``."""
    cfg = config_dict(**changes)
    cfg["source"] = source
    return cfg


def _assert_same_counts(spark_counts: pl.DataFrame, duck_counts: pl.DataFrame) -> None:
    """Same columns, dtypes and rows. Whole numbers and labels exactly; exposure (a sum of
    doubles, whose last digit depends on the order in which an engine adds) to 1e-12."""
    keys = [c for c in duck_counts.columns if c not in ("exposure",)]
    assert spark_counts.schema == duck_counts.schema
    assert_frame_equal(
        spark_counts.sort(keys), duck_counts.sort(keys), check_exact=False, rel_tol=1e-12,
        abs_tol=1e-12,
    )


def _assert_same_spells(spark_spells: pl.DataFrame, duck_spells: pl.DataFrame) -> None:
    keys = ["customer_id", "spell_number"]
    assert spark_spells.schema == duck_spells.schema
    assert_frame_equal(
        spark_spells.sort(keys), duck_spells.sort(keys), check_exact=False, rel_tol=1e-12,
        abs_tol=1e-12,
    )


# -- the demo --------------------------------------------------------------------------------


@pytest.fixture(scope="module")
def demo_files(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """The demo log (2 000 customers) as Parquet files, and the demo config's other tables."""
    from churnlife.demo.generate import build_demo

    work = tmp_path_factory.mktemp("spark_demo_build")
    build_demo(work / "tidewell.duckdb", n_customers=2_000, seed=7)
    folder = tmp_path_factory.mktemp("spark_demo")
    _to_parquet(
        work / "tidewell.duckdb", {"subscription_events": "*", "accounts": "*"}, folder
    )
    return folder


def _demo_raw(source: dict[str, Any]) -> dict[str, Any]:
    raw = tomllib.loads((ROOT / "demo" / "churnlife.toml").read_text())
    raw["source"] = source
    return raw


@pytest.fixture(scope="module")
def demo_pair(spark, demo_files: Path):
    """(Spark extract, DuckDB extract) of the demo, from the same Parquet files."""
    before = _checksums(demo_files)
    events, customers = "subscription_events.parquet", "accounts.parquet"
    duck_cfg = parse_config(_demo_raw(_files_source(events, customers)), base=demo_files)
    spark_cfg = parse_config(
        _demo_raw(_spark_source(file_format="parquet", events=events, customers=customers)),
        base=demo_files,
    )
    duck = run_extract(duck_cfg, open_source(duck_cfg))
    spark_source = open_source(spark_cfg)
    assert spark_source.dialect == "spark"
    yield run_extract(spark_cfg, spark_source), duck, spark_cfg, duck_cfg
    spark_source.close()
    assert _checksums(demo_files) == before  # nothing written to or beside the source files


def test_demo_counts_equal_duckdb(demo_pair):
    spark_ex, duck_ex, _, _ = demo_pair
    assert duck_ex.counts.height > 50  # a real table: 3 plans × dozens of tenures
    _assert_same_counts(spark_ex.counts, duck_ex.counts)


def test_demo_spells_equal_duckdb(demo_pair):
    spark_ex, duck_ex, _, _ = demo_pair
    _assert_same_spells(spark_ex.spells(), duck_ex.spells())


def test_demo_summary_and_data_quality_equal_duckdb(demo_pair):
    spark_ex, duck_ex, _, _ = demo_pair
    assert spark_ex.summary == duck_ex.summary
    # the demo plants anomalies (demo/generate.py), so the quality counts are not all zero
    assert duck_ex.summary["n_duplicate_rows"] > 0 and duck_ex.summary["n_late_entry"] > 0


def test_demo_price_episode_counts_equal_duckdb(demo_pair):
    """The spells split at a price rise (queries/first_rises.sql, episodes.sql), staged in the
    engine and counted there: the Cox price-effect model's input."""
    from churnlife.models.covariates import episodes_counts

    spark_ex, duck_ex, spark_cfg, duck_cfg = demo_pair
    _assert_same_counts(episodes_counts(spark_ex, spark_cfg), episodes_counts(duck_ex, duck_cfg))


def test_statement_is_spark_sql_with_bound_values(demo_pair):
    from churnlife.extract import marks_sql, parameters

    spark_ex, _, spark_cfg, _ = demo_pair
    source = spark_ex.source
    # a statement only (not run): the per-customer relation is named, not staged
    stmt = source.statement(marks_sql(spark_cfg, source, "churnlife_customer_events_0"),
                            parameters(spark_cfg))
    assert stmt.dialect == "spark" and "`occurred_at`" in stmt.text
    assert ":as_of" in stmt.text and stmt.values["as_of"] == spark_cfg.as_of
    assert "$" not in stmt.text  # every DuckDB marker became a Spark one


def test_shown_statements_are_the_ones_that_run(spark, demo_pair):
    """--show-sql on Spark: the printed per-customer, marks and spells statements, run by hand
    and kept under the printed names, and the printed counts statement give the extract's
    counts."""
    from churnlife.show_sql import extract_statements, listing
    from churnlife.source_spark import _to_polars

    spark_ex, _, spark_cfg, _ = demo_pair
    source = spark_ex.source
    statements = extract_statements(spark_cfg, source)
    # the per-customer pass, the marks, the spells, then the counts
    kept, (_, counts) = statements[1:4], statements[4]
    views = []
    try:
        for title, keep in kept:
            views.append(title.rsplit(" ", 1)[-1])
            spark.sql(keep.text, args=keep.values).localCheckpoint().createOrReplaceTempView(
                views[-1]
            )
        shown = _to_polars(spark.sql(counts.text, args=counts.values).toArrow())
    finally:
        for view in views:
            spark.catalog.dropTempView(view)
    _assert_same_counts(shown.drop("cohort_all", strict=False), spark_ex.counts)
    assert "for Spark SQL" in listing(spark_cfg, source)


def test_engine_error_names_the_column(demo_pair):
    spark_ex, _, _, _ = demo_pair
    source = spark_ex.source
    with pytest.raises(UserError, match=r"(?s)no_such_column.*\[columns\]"):
        source.query(f"SELECT no_such_column FROM {source.relation('events')}", {})


def test_slow_query_is_cancelled_at_the_statement_timeout(spark, demo_files):
    raw = _demo_raw(_spark_source(
        file_format="parquet", events="subscription_events.parquet",
        customers="accounts.parquet", statement_timeout_s=2,
    ))
    source = open_source(parse_config(raw, base=demo_files))
    ev = source.relation("events")
    try:
        with pytest.raises(UserError, match="statement_timeout_s = 2"):
            # ~10^13 row combinations: hours of work, cancelled after 2 s
            source.query(
                f"SELECT SUM(a.amount + b.amount + c.amount) AS s FROM {ev} AS a, {ev} AS b, "
                f"{ev} AS c", {},
            )
        # the session is still usable after the cancel
        assert source.query(f"SELECT COUNT(*) AS n FROM {ev}", {})["n"][0] > 0
    finally:
        source.close()


def test_close_drops_our_views_and_keeps_a_session_it_did_not_start(spark, demo_files):
    raw = _demo_raw(_spark_source(
        file_format="parquet", events="subscription_events.parquet", customers="accounts.parquet"
    ))
    source = open_source(parse_config(raw, base=demo_files))
    staged = source.stage("probe", f"SELECT 1 AS one FROM {source.relation('events')}", {})
    ours = {source.relation("events"), source.relation("customers"), staged}
    assert ours <= {t.name for t in spark.catalog.listTables()}
    source.close()
    assert not ours & {t.name for t in spark.catalog.listTables()}
    assert spark.sql("SELECT 1 AS x").collect()[0].x == 1  # the session was not stopped
    assert spark.conf.get("spark.sql.session.timeZone") == "UTC"


# -- the hand-written edge-case logs -------------------------------------------------------------


def _as_text_plus_ten(column: str) -> str:
    # the same instants as text in a zone ten hours ahead of UTC: 2022-04-13 23:00 UTC reads
    # 2022-04-14 09:00:00+10:00, a day later on the calendar, so an engine that dropped the
    # offset would date the event (and the spell's end) a day late
    return f"strftime({column} + INTERVAL 10 HOUR, '%Y-%m-%d %H:%M:%S') || '+10:00' AS {column}"


EDGE_CASES = {
    # name: (events, customers, config changes, how the events' ts column is stored, read via)
    "hand-worked, catalog tables": (
        EDGE_EVENTS, EDGE_CUSTOMERS, {"cohorts": {"by": ["plan"]}}, "*", "catalog",
    ),
    "hand-worked, zone-aware times": (
        EDGE_EVENTS, EDGE_CUSTOMERS, {"cohorts": {"by": ["plan", "channel"]}},
        "* REPLACE (CAST(ts AS TIMESTAMPTZ) AS ts)", "files",
    ),
    "hand-worked, text times with an offset": (
        EDGE_EVENTS, EDGE_CUSTOMERS, {"tenure": {"unit": "weeks"}},
        f"* REPLACE ({_as_text_plus_ten('ts')})", "files",
    ),
    # every column read as text (Spark's CSV reader without inferSchema): the text checks and
    # casts of queries/text_values.sql and events_normalised.sql
    "hand-worked, CSV read as text": (
        EDGE_EVENTS, EDGE_CUSTOMERS, {"cohorts": {"by": ["signup_quarter"]}}, "*", "csv",
    ),
    "days": (*UNITS_LOG, {"tenure": {"unit": "days"}}, "*", "files"),
    "periods": (*PERIODS_LOG, PERIODS_CONFIG, "*", "files"),
    "as-of cuts a unit short": (*CUT_SHORT_LOG, {}, "*", "files"),
}


@pytest.mark.parametrize("case", list(EDGE_CASES))
def test_edge_case_log_equals_duckdb(spark, tmp_path, case):
    events, customers, changes, ts_as, via = EDGE_CASES[case]
    database = write_log(tmp_path, events, customers)
    files = tmp_path / "files"
    files.mkdir()
    _to_parquet(database, {"ev": ts_as, "cu": "*"}, files)
    before = _checksums(files)
    duck_cfg = parse_config(
        _cfg(_files_source("ev.parquet", "cu.parquet"), **changes), base=files
    )
    if via == "catalog":
        for name in ("ev", "cu"):
            spark.read.parquet(str(files / f"{name}.parquet")).createOrReplaceTempView(name)
        source = _spark_source(events="ev", customers="cu")
    elif via == "csv":
        for name in ("ev", "cu"):
            con = duckdb.connect()
            con.execute(f"COPY (FROM '{files / name}.parquet') TO '{files / name}.csv' (HEADER)")
            con.close()
        before = _checksums(files)
        source = _spark_source(file_format="csv", events="ev.csv", customers="cu.csv",
                               read_options={"header": True})
    else:
        source = _spark_source(file_format="parquet", events="ev.parquet", customers="cu.parquet")
    spark_cfg = parse_config(_cfg(source, **changes), base=files)
    duck = run_extract(duck_cfg, open_source(duck_cfg))
    spark_source = open_source(spark_cfg)
    try:
        got = run_extract(spark_cfg, spark_source)
        _assert_same_counts(got.counts, duck.counts)
        got_spells = got.spells()
        if via == "csv":  # the customer ids are text there
            assert got_spells.schema["customer_id"] == pl.String
            got_spells = got_spells.with_columns(pl.col("customer_id").cast(pl.Int32))
        _assert_same_spells(got_spells, duck.spells())
        assert got.summary == duck.summary
    finally:
        spark_source.close()
        for name in ("ev", "cu"):
            spark.catalog.dropTempView(name)
    assert duck.counts.height > 0
    assert _checksums(files) == before
    if ts_as != "*":
        # the same instants stored another way: read in UTC they give the plain log's spells
        # (for the +10:00 text, an offset dropped would date spell 7's end a day late)
        plain = tmp_path / "plain"
        plain.mkdir()
        _to_parquet(database, {"ev": "*", "cu": "*"}, plain)
        ref_cfg = parse_config(_cfg(_files_source("ev.parquet", "cu.parquet"), **changes),
                               base=plain)
        _assert_same_spells(got_spells, run_extract(ref_cfg, open_source(ref_cfg)).spells())


# -- user mistakes -------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("table", "key", "value"),
    [
        ("source", "events", "events; drop table x"),
        ("source", "customers", "cu`; drop table cu; --"),
        ("columns", "event_time", 'ts" OR 1=1 --'),
    ],
)
def test_identifier_with_sql_in_it_is_refused(table, key, value, tmp_path):
    cfg = _cfg(_spark_source(events="ev", customers="cu"))
    cfg[table][key] = value
    with pytest.raises(UserError, match="not a plain SQL identifier"):
        parse_config(cfg, base=tmp_path)


def test_quote_doubles_backticks():
    from churnlife.dialects import translate
    from churnlife.source import quote_duckdb
    from churnlife.source_spark import quote_spark

    assert quote_spark("sales.we`ird") == "`sales`.`we``ird`"
    # the query text quotes as DuckDB does; the translation writes Spark's quoting
    sql = f"SELECT {quote_duckdb('we`ird')} FROM {quote_duckdb('sales.ev')}"
    assert translate(sql, {}, "spark").text.split() == ["SELECT", "`we``ird`", "FROM",
                                                         "`sales`.`ev`"]


def test_unknown_column_is_named(spark, tmp_path):
    database = write_log(tmp_path, EDGE_EVENTS, EDGE_CUSTOMERS)
    _to_parquet(database, {"ev": "*", "cu": "*"}, tmp_path)
    cfg = _cfg(
        _spark_source(file_format="parquet", events="ev.parquet", customers="cu.parquet"),
        columns={"event_time": "event_ts"},
    )
    config = parse_config(cfg, base=tmp_path)
    source = open_source(config)
    try:
        with pytest.raises(UserError, match='event_time = "event_ts" is not a column'):
            run_extract(config, source)
    finally:
        source.close()


def test_unknown_table_is_named(spark, tmp_path):
    config = parse_config(
        _cfg(_spark_source(events="no_such_events", customers="cu")), base=tmp_path
    )
    source = open_source(config)
    try:
        with pytest.raises(UserError, match=r"table no_such_events not found.*\[source\] events"):
            run_extract(config, source)
    finally:
        source.close()


def test_missing_files_are_named(spark, tmp_path):
    config = parse_config(
        _cfg(_spark_source(file_format="parquet", events="nope.parquet", customers="cu.parquet")),
        base=tmp_path,
    )
    with pytest.raises(UserError, match=r"\[source\] events file not found: .*nope.parquet"):
        open_source(config)


# -- the command line ----------------------------------------------------------------------------


def test_cli_run_on_spark_end_to_end(spark, demo_files, demo_pair, tmp_path):
    """`churnlife run` from config alone, in its own process (it starts and stops its own Spark
    session, the master URL from the environment): exit 0, the report written, the counts the
    DuckDB run counts, and no Spark or Java chatter on the terminal."""
    _, duck_ex, _, _ = demo_pair
    text = (ROOT / "demo" / "churnlife.toml").read_text()
    head, rest = text.split("[source]", 1)
    rest = rest.split("\n[", 1)[1]
    config = tmp_path / "spark.toml"
    config.write_text(
        head + "[source]\n"
        'kind = "spark"\n'
        'file_format = "parquet"\n'
        f'events = "{demo_files / "subscription_events.parquet"}"\n'
        f'customers = "{demo_files / "accounts.parquet"}"\n'
        'spark_conf = { "spark.sql.shuffle.partitions" = "2" }\n'
        "\n[" + rest
    )
    out = tmp_path / "out"
    env = {**os.environ, "CHURNLIFE_SOURCE_URL": "local[2]"}
    proc = subprocess.run(
        [sys.executable, "-m", "churnlife", "run", "--config", str(config), "--output", str(out)],
        capture_output=True, text=True, env=env, timeout=900, cwd=tmp_path,
    )
    assert proc.returncode == 0, proc.stderr
    assert (out / "report.html").is_file() and (out / "summary.json").is_file()
    counts = pl.read_parquet(out / "counts.parquet")
    _assert_same_counts(counts.select(duck_ex.counts.columns), duck_ex.counts)
    for noise in ("WARN", "Setting default log level", "Traceback", "log4j", "WARNING"):
        assert noise not in proc.stderr, proc.stderr
    # nothing left in the working folder (no spark-warehouse, no metastore)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out", "spark.toml"]
