"""Where the extract's time goes: wall time per query file, and DuckDB's operator profile.

Runs ``run_extract`` once on a log made by benchmarks/scale_log.py and prints, for every query
the extract sends to DuckDB, the query file it came from (queries/<name>.sql), its wall time and
the rows it returned or staged. With ``--operators`` each query runs with DuckDB's profiler
(``PRAGMA enable_profiling = 'json'``) and the slowest operators are listed under it (operator
time as DuckDB reports it: summed over threads), with the query's peak buffer memory and what it
spilled to disk. Profiling adds its own overhead: compare wall times from runs without it.

    python benchmarks/scale_log.py --customers 1000000 --out /tmp/log-1m
    python benchmarks/profile_extract.py /tmp/log-1m --bare
    CHURNLIFE_MEMORY_LIMIT=200MB python benchmarks/profile_extract.py /tmp/log-1m --operators
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import sys
import tempfile
import time
from collections.abc import Callable
from importlib import resources
from pathlib import Path
from typing import Any

from churnlife import extract as extract_module
from churnlife import source as source_module
from churnlife.config import load_config
from churnlife.errors import UserError
from churnlife.extract import read_query


class Recorder:
    """Labels each SQL text by the query file it was filled from, and times what runs."""

    def __init__(self, operators: bool, top: int) -> None:
        self.operators = operators
        self.top = top
        self.filled: dict[str, str] = {}
        self.rows: list[dict[str, Any]] = []
        names = [p.name[:-4] for p in resources.files("churnlife.queries").iterdir()
                 if p.name.endswith(".sql")]
        self.templates = {read_query(name): name for name in names}
        self.load = os.getloadavg()[0]

    def label(self, sql: str) -> str:
        return self.filled.get(sql) or self.templates.get(sql.strip()) or "other"

    def wrap_fill(self, fill: Callable[[str, dict[str, str]], str]) -> Callable[..., str]:
        def recording_fill(sql: str, slots: dict[str, str]) -> str:
            out = fill(sql, slots)
            name = self.templates.get(sql.strip())
            if name is not None:
                self.filled[out] = name
            return out

        return recording_fill

    def run(self, con: Any, kind: str, sql: str, call: Callable[[], Any]) -> Any:
        path = None
        if self.operators:
            fd, path = tempfile.mkstemp(suffix=".json", prefix="churnlife-profile-")
            os.close(fd)
            con.execute("PRAGMA enable_profiling = 'json'").fetchall()
            con.execute(f"PRAGMA profiling_output = '{path}'").fetchall()
        t0 = time.perf_counter()
        result = None
        failed = True
        try:
            result = call()
            failed = False
            return result
        finally:
            seconds = time.perf_counter() - t0
            if self.operators:
                con.execute("PRAGMA disable_profiling").fetchall()
            row: dict[str, Any] = {"query": self.label(sql), "kind": kind, "seconds": seconds,
                                   "failed": failed}
            if kind == "query" and result is not None:
                row["rows"] = result.height
            if path is not None:
                row["profile"] = _read_profile(Path(path))
                os.unlink(path)
            self.rows.append(row)


def _read_profile(path: Path) -> dict[str, Any]:
    """Operators (name, time, rows, a short description) and the query's memory figures."""
    try:
        doc = json.loads(path.read_text("utf-8"))
    except (OSError, ValueError):
        return {"operators": [], "system": {}}
    ops: list[dict[str, Any]] = []

    def walk(node: dict[str, Any]) -> None:
        info = node.get("extra_info") or {}
        what = " ".join(
            f"{k}: {v if isinstance(v, str) else ', '.join(map(str, v))}"
            for k, v in info.items()
            if k in ("Groups", "Aggregates", "Projections", "Function", "Join Type",
                     "Conditions", "Expressions", "Text", "Table", "Filters", "CTE Name")
        )
        ops.append({"name": node.get("name", "?"), "seconds": float(node.get("timing") or 0),
                    "rows": int(node.get("intermediate_rows") or 0), "what": what})
        for child in node.get("children", []):
            walk(child)

    for root in doc.get("operator", []):
        walk(root)
    query = doc.get("query", {})
    return {"operators": ops, "system": doc.get("system", {}),
            "cpu_time": float(query.get("cpu_time") or 0)}


def install(recorder: Recorder) -> None:
    """Wrap DuckDBSource.query/.stage and extract.fill (the extract's own queries)."""
    cls = source_module.DuckDBSource
    query, stage = cls.query, cls.stage
    extract_module.fill = recorder.wrap_fill(extract_module.fill)  # quality.py imports it late

    def timed_query(self: Any, sql: str, params: dict[str, Any]) -> Any:
        return recorder.run(self._con, "query", sql, lambda: query(self, sql, params))

    def timed_stage(self: Any, name: str, sql: str, params: dict[str, Any]) -> Any:
        return recorder.run(self._con, "stage", sql, lambda: stage(self, name, sql, params))

    cls.query = timed_query  # type: ignore[method-assign]
    cls.stage = timed_stage  # type: ignore[method-assign]


def _mib(n: Any) -> str:
    return f"{int(n or 0) / 2**20:,.0f} MiB"


def report(recorder: Recorder, total: float, top: int) -> None:
    by_query: dict[str, float] = {}
    for r in recorder.rows:
        by_query[r["query"]] = by_query.get(r["query"], 0.0) + r["seconds"]
    print(f"{'query':<22} {'kind':<6} {'wall s':>8} {'rows':>10}")
    for r in recorder.rows:
        rows = "FAILED" if r["failed"] else f"{r['rows']:,}" if "rows" in r else ""
        print(f"{r['query']:<22} {r['kind']:<6} {r['seconds']:>8.2f} {rows:>10}")
        prof = r.get("profile")
        if prof and r["query"] != "other":  # "other": the column-type probes (LIMIT 0)
            sysinfo = prof["system"]
            print(f"    engine CPU {prof['cpu_time']:.2f} s, peak buffer memory "
                  f"{_mib(sysinfo.get('peak_buffer_memory'))}, spilled "
                  f"{_mib(sysinfo.get('total_bytes_spilled'))}, peak temp folder "
                  f"{_mib(sysinfo.get('peak_temp_dir_size'))}")
            for op in sorted(prof["operators"], key=lambda o: -o["seconds"])[:top]:
                print(f"    {op['seconds']:>7.2f} s {op['rows']:>11,} rows  {op['name']:<22} "
                      f"{op['what'][:90]}")
    print()
    print("per query file (wall s): " + ", ".join(
        f"{k} {v:.2f}" for k, v in sorted(by_query.items(), key=lambda kv: -kv[1])))
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 2**20
    print(f"extract total {total:.2f} s wall, peak RSS {peak:.2f} GiB, load average at start "
          f"{recorder.load:.1f}, threads {os.environ.get('CHURNLIFE_THREADS', 'default')}, "
          f"memory limit {os.environ.get('CHURNLIFE_MEMORY_LIMIT', source_module.MEMORY_LIMIT)}")


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("log", type=Path, help="a folder written by benchmarks/scale_log.py")
    ap.add_argument("--operators", action="store_true",
                    help="profile each query with DuckDB's profiler and list its slowest operators")
    ap.add_argument("--top", type=int, default=8, help="operators listed per query")
    ap.add_argument("--bare", action="store_true",
                    help="also time run.py's bare scan-and-group-by of the same log (the "
                         "extract benchmark's reference) and print the ratio")
    args = ap.parse_args(argv)
    config_path = args.log / "churnlife.toml"
    if not config_path.is_file():
        print(f"{config_path} not found: give a folder made by benchmarks/scale_log.py",
              file=sys.stderr)
        return 2
    config = load_config(config_path)
    recorder = Recorder(args.operators, args.top)
    install(recorder)
    info = json.loads((args.log / "log.json").read_text("utf-8"))
    print(f"log {args.log}: {info['customers']:,} customers, {info['events']:,} events")
    source = source_module.open_source(config)
    t0 = time.perf_counter()
    try:
        ex = extract_module.run_extract(config, source)
    except UserError as err:  # e.g. out of memory under CHURNLIFE_MEMORY_LIMIT: say where
        report(recorder, time.perf_counter() - t0, args.top)
        print(f"the extract stopped: {err}")
        return 1
    finally:
        source.close()
    total = time.perf_counter() - t0
    print(f"{ex.summary['n_spells']:,} spells, {ex.counts.height} count rows")
    report(recorder, total, args.top)
    if args.bare:
        from run import bare_scan  # benchmarks/run.py, beside this script

        bare = min(bare_scan(args.log), bare_scan(args.log))
        print(f"bare scan-and-group-by {bare:.2f} s (best of 2, right after the extract): "
              f"extract ÷ bare scan = {total / bare:.1f}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
