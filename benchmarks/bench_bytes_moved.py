"""Bytes moved from a PostgreSQL server: churnlife's extract against copying the log out.

churnlife sends its queries to the engine and brings back counts (cohorts × tenures). The
reference is what an analysis that copies the data would move: the event log and the customers
table read whole (``SELECT *``) through the same driver into Arrow. Both are measured in one run
on a throwaway PostgreSQL server (tests/engine_servers.py) holding the demo business's log.

    python benchmarks/bench_bytes_moved.py --customers 20000
"""

from __future__ import annotations

import argparse
import os
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from churnlife.demo.generate import build_demo  # noqa: E402

from churnlife.config import load_config  # noqa: E402
from churnlife.extract import run_extract  # noqa: E402
from churnlife.source import open_source  # noqa: E402
from tests.engine_servers import load_duckdb_tables, start_postgres  # noqa: E402


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--customers", type=int, default=20_000)
    args = ap.parse_args()
    server = start_postgres()
    try:
        folder = Path(tempfile.mkdtemp(prefix="churnlife-bytes-"))
        info = build_demo(folder / "tidewell.duckdb", n_customers=args.customers, seed=5)
        load_duckdb_tables(server.url, folder / "tidewell.duckdb")
        text = (ROOT / "demo" / "churnlife.toml").read_text()
        text = text.replace('kind = "duckdb"', 'kind = "postgres"')
        text = "\n".join(x for x in text.splitlines() if not x.startswith("database ="))
        (folder / "pg.toml").write_text(text)
        os.environ["CHURNLIFE_SOURCE_URL"] = server.url
        config = load_config(folder / "pg.toml")

        source = open_source(config)
        t0 = time.perf_counter()
        extract = run_extract(config, source)
        t_extract = time.perf_counter() - t0
        moved = source.bytes_fetched
        source.close()

        source = open_source(config)
        t0 = time.perf_counter()
        for role in ("events", "customers"):
            source.query(f"SELECT * FROM {source.relation(role)}", {})
        t_copy = time.perf_counter() - t0
        copied = source.bytes_fetched
        source.close()
    finally:
        server.stop()
    print(f"PostgreSQL 15 on loopback; demo log of {args.customers:,} customers, "
          f"{info.get('events', 0):,} events; {extract.counts.height} count rows")
    print(f"{'':28}{'bytes':>14}{'seconds':>10}")
    print(f"{'churnlife extract':28}{moved:>14,}{t_extract:>10.1f}")
    print(f"{'copy the log out (SELECT *)':28}{copied:>14,}{t_copy:>10.1f}")
    print(f"ratio of bytes moved: {moved / copied:.4f} (goal: counts-sized, far below 1)")


if __name__ == "__main__":
    main()
