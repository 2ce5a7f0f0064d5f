"""churnlife's speed against reference implementations, measured side by side in one run.

Prints one table: for each benchmark the time churnlife takes, the time the reference takes on
the same data in the same run, their ratio, the goal, and how far the two answers agree; then the
whole pipeline on a large log (wall time and peak memory of a child process) and the cost of a fit
as customers grow at a fixed number of distinct tenures.

* extract: churnlife.extract.run_extract (checks, spells, counts, summary, data quality) on a
  scale log (benchmarks/scale_log.py) ÷ a bare DuckDB scan-and-group-by over the same Parquet
  files (one row per customer: events, first and last event time).          goal ≤ 2
* Kaplan–Meier: churnlife.km.kaplan_meier on the counts ÷ statsmodels SurvfuncRight on the
  per-customer rows (late entry included).                        goal ≥ 50×, same estimates
* Cox: churnlife.cox.cox_fit on counts per covariate pattern × tenure ÷ statsmodels PHReg on the
  rows, 3 categorical covariates, Efron ties.                   goal ≥ 20×, coefficients to 1e-6
* Weibull: churnlife's grouped likelihood on the counts ÷ scipy.stats.weibull_min.fit on the rows
  as CensoredData (churns interval-censored in (t-1, t], censorings right-censored at t: the same
  likelihood, so the same MLE).                                             goal ≥ 100×
* pipeline: churnlife.pipeline.analyse + write_outputs on the large log in a child process: wall
  time and the child's peak RSS.                                  goal < 60 s, < 2 GiB
* growth: Weibull, Kaplan–Meier and Cox fit time at 10^3 .. 10^6 customers, tenures fixed at
  0..60: the estimators read counts, so the time should stay flat.

Counting per-customer rows into counts (churnlife.counts.counts_from_durations, polars) is the
database's job in a real run (the extract benchmark times it there); it is printed, not counted in
the estimator ratios.

    python benchmarks/run.py --quick     # about a minute: small sizes
    python benchmarks/run.py             # the full run recorded in benchmarks/RESULTS.md
    python benchmarks/run.py --only extract,pipeline --pipeline-customers 10000000
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import resource
import subprocess
import sys
import time
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import polars as pl

sys.path.insert(0, str(Path(__file__).resolve().parent))

import scale_log

from churnlife.counts import counts_from_durations

GIB = 2**30
BENCHMARKS = ("extract", "km", "cox", "weibull", "pipeline", "growth")


@dataclass
class Row:
    name: str
    size: str
    ours: float
    ref: float | None
    goal: str
    met: bool | None
    agreement: str

    @property
    def ratio(self) -> str:
        if self.ref is None:
            return ""
        return f"{self.ref / self.ours:,.1f}×" if self.name != "extract" else (
            f"{self.ours / self.ref:,.2f}"
        )


def timed(f: Callable[[], Any], repeats: int = 1) -> tuple[float, Any]:
    """Best wall time of ``repeats`` calls, and the last result."""
    best, out = np.inf, None
    for _ in range(repeats):
        t0 = time.perf_counter()
        out = f()
        best = min(best, time.perf_counter() - t0)
    return best, out


def machine() -> str:
    cpu = "unknown CPU"
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                cpu = line.split(":", 1)[1].strip()
                break
    except OSError:
        pass
    mem = os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES") / GIB
    import duckdb
    import scipy
    import statsmodels

    load = ", ".join(f"{x:.1f}" for x in os.getloadavg())
    return (
        f"{cpu}, {os.cpu_count()} cores, {mem:.1f} GiB RAM, {platform.system()} "
        f"{platform.release()}; Python {platform.python_version()}, DuckDB {duckdb.__version__}, "
        f"polars {pl.__version__}, numpy {np.__version__}, scipy {scipy.__version__}, "
        f"statsmodels {statsmodels.__version__}; load average at start {load}"
    )


# --------------------------------------------------------------------------------------------
# Per-customer rows with known effects (Kaplan–Meier, Cox, growth)
# --------------------------------------------------------------------------------------------

PLANS = np.array(["monthly", "plus", "annual"])
CHANNELS = np.array(["organic", "social", "referral", "podcast"])
REGIONS = np.array(["north", "south", "west"])
LOG_HR = {
    "plan": np.array([0.0, 0.05, -1.1]),
    "channel": np.array([0.0, 0.3, -0.25, 0.1]),
    "region": np.array([0.0, 0.15, -0.1]),
}
MAX_TENURE = 48


def customers(n: int, seed: int = 1) -> dict[str, np.ndarray]:
    """Weibull churn (shape 0.8) scaled by plan, channel and region (proportional hazards);
    uniform follow-up up to 48 months; a fifth enter late. Whole-month tenures as churnlife
    counts them: a churn at ceil(t), a censoring at floor(t)."""
    rng = np.random.default_rng(seed)
    plan = rng.choice(3, n, p=[0.6, 0.25, 0.15])
    channel = rng.choice(4, n, p=[0.4, 0.3, 0.2, 0.1])
    region = rng.choice(3, n, p=[0.5, 0.3, 0.2])
    eta = LOG_HR["plan"][plan] + LOG_HR["channel"][channel] + LOG_HR["region"][region]
    t = 20.0 * (rng.exponential(1.0, n) / np.exp(eta)) ** (1 / 0.8)
    follow = rng.uniform(1, MAX_TENURE, n)
    entry = np.where(rng.random(n) < 0.2, np.floor(rng.uniform(0, 12, n)), 0.0)
    x = np.minimum(t, follow)
    churned = t <= follow
    exit_t = np.where(churned, np.ceil(x), np.floor(x))
    keep = exit_t > entry  # seen only if still active when observation began
    return {
        "plan": PLANS[plan[keep]],
        "channel": CHANNELS[channel[keep]],
        "region": REGIONS[region[keep]],
        "entry": entry[keep],
        "exit": exit_t[keep],
        "churned": churned[keep],
    }


def bench_km(n: int) -> Row:
    from statsmodels.duration.survfunc import SurvfuncRight

    from churnlife.km import kaplan_meier

    rows = customers(n)
    t_count, counts = timed(
        lambda: counts_from_durations(rows["exit"], rows["churned"], entry=rows["entry"])
    )
    t_ours, km = timed(lambda: kaplan_meier(counts), 5)
    # statsmodels keeps a subject at risk at its entry time (entry <= t); churnlife's rule is
    # entry < t, so on whole-number tenures the reference gets entry + 0.5 (DEVELOPERS.md).
    t_ref, ref = timed(
        lambda: SurvfuncRight(
            rows["exit"], rows["churned"].astype(float), entry=rows["entry"] + 0.5
        )
    )
    curve = km.curves[0]
    at = np.isin(curve.tenure, ref.surv_times)
    same_t = np.array_equal(curve.tenure[at], ref.surv_times)
    d_s = float(np.max(np.abs(curve.survival[at] - ref.surv_prob)))
    # where S reaches 0 both give no standard error (NaN): compare where both have one
    se, ref_se = curve.se[at], ref.surv_prob_se
    both = np.isfinite(se) & np.isfinite(ref_se)
    d_se = float(np.max(np.abs(se[both] - ref_se[both])))
    same_nan = bool(np.array_equal(np.isfinite(se), np.isfinite(ref_se)))
    ok = same_t and same_nan and d_s < 1e-10 and d_se < 1e-10
    return Row(
        "Kaplan–Meier", f"{n:,} customers", t_ours, t_ref, "≥ 50×",
        t_ref / t_ours >= 50 and ok,
        f"max |ΔS| {d_s:.1e}, |Δse| {d_se:.1e}{'' if same_nan else ' (NaN se differ)'} "
        f"({counts.height} count rows, counted in "
        f"{t_count:.2f} s)",
    )


def _cox_counts(rows: dict[str, np.ndarray]) -> pl.DataFrame:
    labels = (
        pl.Series(rows["plan"]) + "|" + pl.Series(rows["channel"]) + "|" + pl.Series(rows["region"])
    )
    counts = counts_from_durations(rows["exit"], rows["churned"], entry=rows["entry"],
                                   cohort=labels)
    parts = pl.col("cohort").str.split("|")
    return counts.with_columns(
        parts.list.get(0).alias("plan"),
        parts.list.get(1).alias("channel"),
        parts.list.get(2).alias("region"),
    )


COX_COVS = ["plan", "channel", "region"]
COX_REF = {"plan": "monthly", "channel": "organic", "region": "north"}


def bench_cox(n: int) -> Row:
    from statsmodels.duration.hazard_regression import PHReg

    from churnlife.cox import cox_fit

    rows = customers(n)
    t_count, counts = timed(lambda: _cox_counts(rows))
    t_ours, ours = timed(lambda: cox_fit(counts, COX_COVS, ties="efron", reference=COX_REF), 3)
    exog = np.column_stack(
        [(rows[name.split("=")[0]] == name.split("=")[1]).astype(float) for name in ours.names]
    )
    model = PHReg(rows["exit"], exog, status=rows["churned"].astype(float),
                  entry=rows["entry"] + 0.5, ties="efron")
    t_ref, fit = timed(model.fit)
    diff = float(np.max(np.abs(ours.coef - fit.params)))
    return Row(
        "Cox (Efron)", f"{n:,} customers, 3 covariates", t_ours, t_ref, "≥ 20×, Δ ≤ 1e-6",
        t_ref / t_ours >= 20 and diff <= 1e-6,
        f"max |Δcoef| {diff:.1e} ({counts.height} count rows, counted in {t_count:.2f} s)",
    )


def weibull_rows(n: int, seed: int = 1) -> tuple[np.ndarray, np.ndarray]:
    """Weibull (scale 18, shape 0.7) churn with uniform censoring over 60 periods."""
    rng = np.random.default_rng(seed)
    t = 18.0 * rng.weibull(0.7, n)
    cens = rng.uniform(0, 60, n)
    x = np.minimum(t, cens)
    died = t <= cens
    return np.where(died, np.ceil(x), np.floor(x)), died


def bench_weibull(n: int) -> Row:
    from scipy import stats

    from churnlife.models.base import fit_spec, grouped_from_counts
    from churnlife.models.parametric import Weibull

    exit_t, died = weibull_rows(n)
    data = grouped_from_counts(counts_from_durations(exit_t, died))
    t_ours, ours = timed(lambda: fit_spec(Weibull(), data), 5)
    rows = stats.CensoredData(
        interval=np.column_stack([exit_t[died] - 1, exit_t[died]]), right=exit_t[~died]
    )
    t_ref, (c, _, scale) = timed(lambda: stats.weibull_min.fit(rows, floc=0))
    d_shape = abs(ours.value("shape") - c) / c
    d_scale = abs(ours.value("scale") - scale) / scale
    return Row(
        "Weibull", f"{n:,} customers", t_ours, t_ref, "≥ 100×, same MLE",
        t_ref / t_ours >= 100 and max(d_shape, d_scale) < 1e-4,
        f"shape {ours.value('shape'):.5f} vs {c:.5f}, scale {ours.value('scale'):.4f} vs "
        f"{scale:.4f} (relative Δ {max(d_shape, d_scale):.1e})",
    )


# --------------------------------------------------------------------------------------------
# The extract and the whole pipeline on a scale log
# --------------------------------------------------------------------------------------------


def bare_scan(folder: Path) -> float:
    """A bare DuckDB scan-and-group-by over the log: one row per customer."""
    import duckdb

    pattern = str(folder / "subscription_events" / "**" / "*.parquet").replace("'", "''")
    con = duckdb.connect(":memory:")
    try:
        con.execute("SET enable_progress_bar = false")
        t0 = time.perf_counter()
        con.sql(
            "SELECT account_id, COUNT(*) AS n, MIN(occurred_at) AS first_at, "
            f"MAX(occurred_at) AS last_at FROM read_parquet('{pattern}') GROUP BY account_id"
        ).to_arrow_table()
        return time.perf_counter() - t0
    finally:
        con.close()


def bench_extract(n: int) -> Row:
    from churnlife.config import load_config
    from churnlife.extract import run_extract
    from churnlife.source import open_source

    folder = scale_log.ensure(n, jobs=2)
    info = json.loads((folder / "log.json").read_text())
    config = load_config(folder / "churnlife.toml")

    def extract():
        source = open_source(config)
        try:
            return run_extract(config, source)
        finally:
            source.close()

    base1 = bare_scan(folder)
    t_ours, ex = timed(extract)
    base = min(base1, bare_scan(folder))
    return Row(
        "extract", f"{n:,} customers, {info['events']:,} events", t_ours, base, "≤ 2",
        t_ours / base <= 2,
        f"{ex.summary['n_spells']:,} spells → {ex.counts.height} count rows",
    )


# Which query file a SQL text came from: a name each one alone contains.
QUERY_MARKS = (
    ("spells.sql (staged)", "instants_k0"), ("marks.sql (staged)", "first_in_log"),
    ("quality.sql", "mark_counts"),
    ("summary.sql", "all_rows"), ("episodes.sql", "rise_k0"), ("counts.sql", "full_step"),
    ("incomplete_rows.sql", "n_incomplete"), ("unknown_codes.sql", "n_events"),
)


def _engine_time_by_query() -> dict[str, float]:
    """Wrap DuckDBSource.query and .stage to add up engine time per query file."""
    from churnlife import source

    spent: dict[str, float] = {}

    def label(sql: str) -> str:
        return next((name for name, mark in QUERY_MARKS if mark in sql), "other")

    def wrap(method):
        def timed_method(self, *args):
            sql = args[1] if method.__name__ == "stage" else args[0]
            t0 = time.perf_counter()
            try:
                return method(self, *args)
            finally:
                key = label(sql)
                spent[key] = spent.get(key, 0.0) + time.perf_counter() - t0
        return timed_method

    source.DuckDBSource.query = wrap(source.DuckDBSource.query)
    source.DuckDBSource.stage = wrap(source.DuckDBSource.stage)
    return spent


def child_pipeline(config_path: str, out: str) -> None:
    """Run in the child process: the whole pipeline, stage times, engine time per query file and
    own peak RSS as JSON."""
    from churnlife.config import load_config
    from churnlife.pipeline import analyse, write_outputs

    spent = _engine_time_by_query()
    t0 = time.perf_counter()
    analysis = analyse(load_config(config_path))
    t1 = time.perf_counter()
    write_outputs(analysis, Path(out))
    t2 = time.perf_counter()
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024  # kB on Linux
    stages = {"analyse_s": t1 - t0, "write_s": t2 - t1, "peak_rss": peak,
              "spells": analysis.extract.summary["n_spells"],
              "engine_s": dict(sorted(spent.items(), key=lambda kv: -kv[1]))}
    print("PIPELINE " + json.dumps(stages))


def bench_pipeline(n: int) -> Row:
    folder = scale_log.ensure(n, jobs=2)
    info = json.loads((folder / "log.json").read_text())
    out = folder.parent / f"output-{scale_log.size_label(n)}"
    t0 = time.perf_counter()
    proc = subprocess.run(
        [sys.executable, __file__, "--child-pipeline", str(folder / "churnlife.toml"), str(out)],
        capture_output=True, text=True, check=False,
    )
    wall = time.perf_counter() - t0
    if proc.returncode != 0:
        raise RuntimeError(f"the pipeline child failed:\n{proc.stderr[-3000:]}")
    line = next(x for x in proc.stdout.splitlines() if x.startswith("PIPELINE "))
    stages = json.loads(line.removeprefix("PIPELINE "))
    # RUSAGE_CHILDREN: the largest peak of every child this process has waited for, so it also
    # covers log generation workers if the log was built in this run; the child's own figure
    # (RUSAGE_SELF, reported by the child) is the pipeline's peak.
    children_peak = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss * 1024
    peak = stages["peak_rss"]
    print("pipeline: engine time per query file (s): " + ", ".join(
        f"{k} {v:.1f}" for k, v in stages["engine_s"].items()), flush=True)
    return Row(
        "pipeline", f"{n:,} customers, {info['events']:,} events", wall, None,
        "< 60 s, < 2 GiB", wall < 60 and peak < 2 * GIB,
        f"peak RSS {peak / GIB:.2f} GiB (children max {children_peak / GIB:.2f} GiB); analyse "
        f"{stages['analyse_s']:.1f} s, write {stages['write_s']:.1f} s (process start and "
        f"imports are the rest); {stages['spells']:,} spells",
    )


def bench_growth(sizes: list[int]) -> list[Row]:
    from churnlife.cox import cox_fit
    from churnlife.km import kaplan_meier
    from churnlife.models.base import fit_spec, grouped_from_counts
    from churnlife.models.parametric import Weibull

    times: dict[str, list[float]] = {"Weibull": [], "Kaplan–Meier": [], "Cox": []}
    heights = []
    for n in sizes:
        exit_t, died = weibull_rows(n, seed=2)
        counts = counts_from_durations(exit_t, died)
        heights.append(counts.height)
        data = grouped_from_counts(counts)
        times["Weibull"].append(timed(lambda data=data: fit_spec(Weibull(), data), 5)[0])
        times["Kaplan–Meier"].append(timed(lambda c=counts: kaplan_meier(c), 5)[0])
        cc = _cox_counts(customers(n, seed=3))
        times["Cox"].append(timed(lambda cc=cc: cox_fit(cc, COX_COVS, reference=COX_REF), 3)[0])
    out = []
    for name, ts in times.items():
        growth = ts[-1] / ts[0]
        out.append(Row(
            f"growth: {name}", f"{sizes[0]:,} → {sizes[-1]:,} customers", ts[-1], None,
            "flat", growth < 3,
            "times " + ", ".join(f"{t * 1000:.1f}" for t in ts) + f" ms; last ÷ first "
            f"{growth:.2f} (count rows {heights[0]} → {heights[-1]})",
        ))
    return out


# --------------------------------------------------------------------------------------------


def print_table(rows: list[Row]) -> None:
    head = ("benchmark", "size", "churnlife s", "reference s", "ratio", "goal", "met", "agreement")
    cells = [
        (r.name, r.size, f"{r.ours:.3f}", "" if r.ref is None else f"{r.ref:.3f}", r.ratio,
         r.goal, {True: "yes", False: "NO", None: ""}[r.met], r.agreement)
        for r in rows
    ]
    widths = [max(len(h), *(len(c[i]) for c in cells)) for i, h in enumerate(head[:-1])]
    line = " | ".join(h.ljust(w) for h, w in zip(head[:-1], widths, strict=True))
    print(line + " | " + head[-1])
    print("-" * (len(line) + 12))
    for c in cells:
        print(" | ".join(x.ljust(w) for x, w in zip(c[:-1], widths, strict=True)) + " | " + c[-1])
    print("ratio: reference ÷ churnlife (times faster); extract: churnlife ÷ bare scan")


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="small sizes (about a minute)")
    ap.add_argument("--only", default=",".join(BENCHMARKS),
                    help=f"comma-separated subset of {', '.join(BENCHMARKS)}")
    ap.add_argument("--log-customers", type=int, help="extract benchmark log (default 1 M)")
    ap.add_argument("--fit-customers", type=int, help="Kaplan–Meier and Cox rows (default 1 M)")
    ap.add_argument("--weibull-customers", type=int, help="Weibull rows (default 200 000)")
    ap.add_argument("--pipeline-customers", type=int, help="pipeline log (default 10 M)")
    ap.add_argument("--child-pipeline", nargs=2, metavar=("CONFIG", "OUT"), help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    if args.child_pipeline:
        child_pipeline(*args.child_pipeline)
        return 0
    quick = args.quick
    sizes = {
        "log": args.log_customers or (100_000 if quick else 1_000_000),
        "fit": args.fit_customers or (200_000 if quick else 1_000_000),
        "weibull": args.weibull_customers or (20_000 if quick else 200_000),
        "pipeline": args.pipeline_customers or (100_000 if quick else 10_000_000),
    }
    growth = [1_000, 10_000, 100_000] if quick else [1_000, 10_000, 100_000, 1_000_000]
    only = [b.strip() for b in args.only.split(",") if b.strip()]
    unknown = set(only) - set(BENCHMARKS)
    if unknown:
        ap.error(f"unknown benchmarks {sorted(unknown)}; choose from {', '.join(BENCHMARKS)}")
    print("machine:", machine())
    t0 = time.perf_counter()
    rows: list[Row] = []
    if "pipeline" in only:  # first, so the child's memory is not measured after other work
        rows.append(bench_pipeline(sizes["pipeline"]))
    if "extract" in only:
        rows.append(bench_extract(sizes["log"]))
    if "km" in only:
        rows.append(bench_km(sizes["fit"]))
    if "cox" in only:
        rows.append(bench_cox(sizes["fit"]))
    if "weibull" in only:
        rows.append(bench_weibull(sizes["weibull"]))
    if "growth" in only:
        rows += bench_growth(growth)
    print()
    print_table(rows)
    print(f"\n(all benchmarks in {time.perf_counter() - t0:.0f} s)")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
