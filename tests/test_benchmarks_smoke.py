"""The scale-log generator (benchmarks/scale_log.py) at a tiny size: the log it writes has the
demo's tables, columns and event kinds, one id range per chunk, and churnlife's extract reads it
through the config written beside it. No timings are checked here (benchmarks/run.py prints them).
"""

from __future__ import annotations

import importlib.util
from pathlib import Path

import duckdb
import pytest
from churnlife.demo import generate as demo

from churnlife.config import load_config
from churnlife.extract import run_extract
from churnlife.source import open_source

ROOT = Path(__file__).resolve().parents[1]


@pytest.fixture(scope="module")
def scale_log():
    spec = importlib.util.spec_from_file_location("scale_log", ROOT / "benchmarks" / "scale_log.py")
    assert spec is not None and spec.loader is not None
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


@pytest.fixture(scope="module")
def tiny_log(scale_log, tmp_path_factory):
    folder = tmp_path_factory.mktemp("scale") / "log-600"
    info = scale_log.build(folder, 600, seed=11, chunk=250)  # chunks of 250, 250 and 100
    return folder, info


def _con(folder: Path) -> duckdb.DuckDBPyConnection:
    con = duckdb.connect(":memory:")
    for table in ("accounts", "subscription_events"):
        files = folder / table / "*.parquet"
        con.execute(f"CREATE VIEW {table} AS SELECT * FROM read_parquet('{files}')")
    return con


def test_tables_columns_and_kinds_are_the_demos(tiny_log):
    folder, info = tiny_log
    con = _con(folder)
    tables = demo.model_parameters()["tables"]
    for table, columns in tables.items():
        assert [d[0] for d in con.execute(f"SELECT * FROM {table} LIMIT 0").description] == columns
    assert info["chunks"] == 3 and len(list((folder / "accounts").glob("*.parquet"))) == 3
    kinds = {k for (k,) in con.execute("SELECT DISTINCT kind FROM subscription_events").fetchall()}
    assert kinds <= set(demo.KINDS)
    assert {"subscribed", "renewed", "cancelled"} <= kinds
    n_events = con.execute("SELECT COUNT(*) FROM subscription_events").fetchone()[0]
    assert n_events == info["events"] > 600


def test_account_ids_are_unique_and_every_event_has_one(tiny_log):
    folder, _ = tiny_log
    con = _con(folder)
    n, n_distinct, lo, hi = con.execute(
        "SELECT COUNT(*), COUNT(DISTINCT account_id), MIN(account_id), MAX(account_id) "
        "FROM accounts"
    ).fetchone()
    assert n == n_distinct == 600 and (lo, hi) == (100_001, 100_600)
    # each chunk's events belong to that chunk's own accounts (the id ranges do not overlap)
    for part in sorted((folder / "accounts").glob("*.parquet")):
        events = folder / "subscription_events" / part.name
        orphans = con.execute(
            f"SELECT COUNT(*) FROM read_parquet('{events}') e "
            f"ANTI JOIN read_parquet('{part}') a USING (account_id)"
        ).fetchone()[0]
        assert orphans == 0, part.name
    first, last = con.execute(
        "SELECT MIN(occurred_at), MAX(occurred_at) FROM subscription_events"
    ).fetchone()
    assert str(first) >= demo.LOG_START and str(last) < "2026-01-01"


def test_extract_runs_on_the_log(tiny_log):
    folder, info = tiny_log
    cfg = load_config(folder / "churnlife.toml")
    assert cfg.source.kind == "files"
    source = open_source(cfg)
    try:
        ex = run_extract(cfg, source)
        assert ex.summary["n_rows"] == info["events"]
        assert ex.summary["n_duplicate_rows"] == info["duplicate_rows"]
        assert ex.summary["n_spells"] > 0 and ex.summary["n_late_entry"] > 0
        # every spell enters once and leaves once
        assert int(ex.counts["entered"].sum()) == ex.summary["n_spells"]
        left = ex.counts["churned"].sum() + ex.counts["censored"].sum()
        assert int(left) == ex.summary["n_spells"]
    finally:
        source.close()


def test_profile_names_each_query_file(tiny_log):
    """benchmarks/profile_extract.py (run as its own process: it wraps the source's methods)
    labels each query the extract runs by its file and reads DuckDB's operator profile."""
    import re
    import subprocess
    import sys

    folder, _ = tiny_log
    out = subprocess.run(
        [sys.executable, str(ROOT / "benchmarks" / "profile_extract.py"), str(folder),
         "--operators", "--top", "3"],
        capture_output=True, text=True, check=True, timeout=300,
    ).stdout
    labels = {m.group(1) for m in re.finditer(r"^(\w+)\s+(?:query|stage)\s", out, re.M)}
    assert {"customer_events", "marks", "spells", "counts", "summary", "quality"} <= labels
    for staged in ("customer_events", "marks", "spells"):
        assert re.search(rf"^{staged}\s+stage\s", out, re.M), staged
    assert "engine CPU" in out and "READ_PARQUET" in out
    cfg = load_config(folder / "churnlife.toml")
    source = open_source(cfg)
    try:
        n_spells = run_extract(cfg, source).summary["n_spells"]
    finally:
        source.close()
    assert f"{n_spells:,} spells" in out
