"""A synthetic event log of N customers for the scale benchmarks: the demo business at any size.

The demo's vectorised simulation (churnlife.demo.generate: plans, channels, discrete-Weibull
churn with a never-churn share, failed and recovered charges, the price change, plan switches,
returns after a gap, duplicate rows and the log's other anomalies) runs on chunks of customers,
each chunk with its own seed and its own range of account ids, and each chunk is written straight
to Parquet by DuckDB: the same two tables and columns as the demo database,

    accounts(account_id, first_paid_on, acquisition_channel)
    subscription_events(account_id, occurred_at, kind, plan_code, amount, reason)

as folders of Parquet files, plus a churnlife.toml (the demo's config, [source] kind = "files")
beside them. About 10.6 events per customer: 10 M customers give about 106 M events (about
1.6 GB of Parquet). Memory stays at one chunk (about 1 GB for the default 500 000 customers).

    python benchmarks/scale_log.py --customers 1000000             # benchmarks/data/log-1m/
    python benchmarks/scale_log.py --customers 10000000 --jobs 2   # about 3 minutes on 2 cores
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import time
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

import duckdb
import numpy as np
import polars as pl
from churnlife.demo import generate as demo

DATA = Path(__file__).resolve().parent / "data"
FIRST_ID = 100_001  # the demo's first account id


def size_label(n: int) -> str:
    """1000000 -> '1m', 250000 -> '250k', 1500 -> '1500'."""
    for div, suffix in ((1_000_000, "m"), (1_000, "k")):
        if n % div == 0:
            return f"{n // div}{suffix}"
    return str(n)


def default_folder(n_customers: int) -> Path:
    return DATA / f"log-{size_label(n_customers)}"


def _chunk(args: tuple[int, int, int, int, str]) -> dict[str, int]:
    """Simulate one chunk of customers and write its two Parquet files."""
    index, first_id, n, seed, folder = args
    sim = demo.simulate(n, seed)
    rows, n_dup = demo._log_rows(sim, np.random.default_rng([seed, 1]))
    rows, _ = demo._add_anomalies(rows, np.random.default_rng([seed, 2]))
    first_paid = demo._first_paid_on(sim)
    shift = first_id - FIRST_ID  # the demo numbers every chunk from FIRST_ID
    accounts = pl.DataFrame(
        {
            "account_id": np.arange(first_id, first_id + n, dtype=np.int64),
            "first_paid_day": first_paid,
            "channel": sim.channel.astype(np.int64),
        }
    )
    events = pl.DataFrame(
        {
            "account": rows["account"] + shift,
            **{k: rows[k] for k in ("day", "tod", "kind", "plan", "amount", "reason")},
        }
    )
    out = Path(folder)
    name = f"part-{index:05d}.parquet"
    con = duckdb.connect(":memory:")
    try:
        con.execute("SET threads = 1")
        con.register("accounts_src", accounts.to_arrow())
        con.register("events_src", events.to_arrow())
        # The same casts as the demo database (demo/generate.py, _write_database).
        target = "'" + str(out / "accounts" / name).replace("'", "''") + "'"
        con.execute(
            f"""
            COPY (
                SELECT CAST(account_id AS BIGINT) AS account_id,
                       CAST(DATE '1970-01-01' + CAST(first_paid_day AS INTEGER) AS DATE)
                           AS first_paid_on,
                       CAST($channels[channel + 1] AS VARCHAR) AS acquisition_channel
                FROM accounts_src
            ) TO {target} (FORMAT parquet)
            """,
            {"channels": list(demo.CHANNELS)},
        )
        target = "'" + str(out / "subscription_events" / name).replace("'", "''") + "'"
        con.execute(
            f"""
            COPY (
                SELECT CAST(account AS BIGINT) AS account_id,
                       CAST(TIMESTAMP '1970-01-01' + to_seconds(day * 86400 + tod) AS TIMESTAMP)
                           AS occurred_at,
                       CAST($kinds[kind + 1] AS VARCHAR) AS kind,
                       CAST($plans[plan + 1] AS VARCHAR) AS plan_code,
                       CAST(round(amount, 2) AS DOUBLE) AS amount,
                       CAST(CASE WHEN reason < 0 THEN NULL ELSE $reasons[reason + 1] END
                            AS VARCHAR) AS reason
                FROM events_src
            ) TO {target} (FORMAT parquet, ROW_GROUP_SIZE 1000000)
            """,
            {
                "kinds": list(demo.KINDS),
                "plans": list(demo.PLANS),
                "reasons": list(demo.REASONS),
            },
        )
    finally:
        con.close()
    return {"customers": n, "events": int(rows["day"].size), "duplicate_rows": n_dup}


def config_text() -> str:
    """The demo's config with [source] pointing at the Parquet folders."""
    text = (Path(demo.__file__).parent / "churnlife.toml").read_text("utf-8")
    _, rest = text.split("[source]", 1)
    _, after = rest.split("[columns]", 1)
    head = (
        "# churnlife config for a scale-benchmark log (benchmarks/scale_log.py): the demo's\n"
        "# config, reading the log from the Parquet folders beside this file.\n\n"
    )
    source = (
        "[source]\n"
        'kind = "files"\n'
        'events = "subscription_events"      # a folder of Parquet files\n'
        'customers = "accounts"\n\n'
    )
    return head + source + "[columns]" + after


def build(
    folder: Path, n_customers: int, seed: int = 20261202, chunk: int = 500_000, jobs: int = 1
) -> dict[str, object]:
    """Write the log of ``n_customers`` into ``folder`` (replaced if it exists)."""
    if n_customers < 1 or chunk < 1:
        raise ValueError("customers and chunk must be positive")
    tmp = folder.with_name(folder.name + ".tmp")
    shutil.rmtree(tmp, ignore_errors=True)
    for table in ("accounts", "subscription_events"):
        (tmp / table).mkdir(parents=True)
    sizes = [min(chunk, n_customers - start) for start in range(0, n_customers, chunk)]
    firsts = np.cumsum([FIRST_ID, *sizes[:-1]])
    tasks = [
        (i, int(first), n, seed + i, str(tmp))
        for i, (first, n) in enumerate(zip(firsts, sizes, strict=True))
    ]
    t0 = time.perf_counter()
    if jobs > 1 and len(tasks) > 1:
        with ProcessPoolExecutor(max_workers=jobs) as pool:
            parts = list(pool.map(_chunk, tasks))
    else:
        parts = [_chunk(t) for t in tasks]
    (tmp / "churnlife.toml").write_text(config_text(), "utf-8")
    info: dict[str, object] = {
        "customers": n_customers,
        "events": sum(p["events"] for p in parts),
        "duplicate_rows": sum(p["duplicate_rows"] for p in parts),
        "chunks": len(tasks),
        "seed": seed,
        "seconds": round(time.perf_counter() - t0, 1),
    }
    (tmp / "log.json").write_text(json.dumps(info, indent=2) + "\n", "utf-8")
    shutil.rmtree(folder, ignore_errors=True)
    os.replace(tmp, folder)
    info["folder"] = str(folder)
    info["bytes"] = sum(p.stat().st_size for p in folder.rglob("*.parquet"))
    return info


def ensure(n_customers: int, seed: int = 20261202, jobs: int = 1) -> Path:
    """The log of ``n_customers`` under benchmarks/data/, built if it is not there yet."""
    folder = default_folder(n_customers)
    meta = folder / "log.json"
    if meta.is_file():
        info = json.loads(meta.read_text("utf-8"))
        if info.get("customers") == n_customers and info.get("seed") == seed:
            (folder / "churnlife.toml").write_text(config_text(), "utf-8")  # today's demo config
            return folder
    build(folder, n_customers, seed=seed, jobs=jobs)
    return folder


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--customers", type=int, default=1_000_000, help="customers to simulate")
    ap.add_argument("--out", type=Path, default=None, help="folder (default benchmarks/data/)")
    ap.add_argument("--seed", type=int, default=20261202)
    ap.add_argument("--chunk", type=int, default=500_000, help="customers per Parquet file")
    ap.add_argument("--jobs", type=int, default=1, help="chunks simulated in parallel")
    args = ap.parse_args(argv)
    folder = args.out or default_folder(args.customers)
    info = build(folder, args.customers, seed=args.seed, chunk=args.chunk, jobs=args.jobs)
    print(json.dumps(info, indent=2))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
