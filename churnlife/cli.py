"""Command line: ``churnlife demo``, ``churnlife run``, ``churnlife check``.

A user's mistake (``UserError``) prints one message and exits 2, with no traceback.
"""

from __future__ import annotations

import argparse
import json
import shutil
import sys
import time
from importlib import resources
from pathlib import Path

from churnlife import __version__
from churnlife.errors import InterruptedAfterWrite, UserError
from churnlife.progress import shown_on

EXAMPLES = """\
examples:
  churnlife demo                          build the demo database and analyse it
  churnlife demo --folder /tmp/tidewell   the same, in another folder
  churnlife check --config my.toml        validate a config against the data; write nothing
  churnlife check --config my.toml --show-sql   print the SQL the extract sends; run none of it
  churnlife run --config my.toml          analyse; write tables, charts and report.html
  churnlife run --config my.toml --output out/2026-12
  churnlife models --config my.toml       fit hazard models per cohort; print their ranking
  churnlife run --config my.toml --models weibull,sbg,piecewise --horizon 60
  churnlife compare --config my.toml --by plan,channel --strata signup_year
"""


def _parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(
        prog="churnlife",
        description="Customer churn and subscription lifetime from a subscription event log.",
        epilog=EXAMPLES,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument("--version", action="version", version=f"churnlife {__version__}")
    sub = p.add_subparsers(dest="command", metavar="COMMAND")

    demo = sub.add_parser(
        "demo",
        help="build the demo business's database and config, then analyse it",
        description="Build the Tidewell Coffee Club demo (a fictional coffee-bean subscription) "
        "as a DuckDB file plus its config, then run the analysis on it.",
        epilog="example:\n  churnlife demo --folder churnlife-demo",
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    demo.add_argument("--folder", default="churnlife-demo", help="where to put it all")
    demo.add_argument("--customers", type=int, default=60_000, help="customers to simulate")
    demo.add_argument("--seed", type=int, default=20261202, help="random seed")
    demo.add_argument("--build-only", action="store_true", help="build the data; skip analysis")
    _script_options(demo)

    for name, text in (
        ("run", "analyse the log named in a config and write the output folder"),
        ("check", "validate a config and the data it names; print the data summary"),
    ):
        cmd = sub.add_parser(
            name,
            help=text,
            description=text,
            epilog=f"example:\n  churnlife {name} --config churnlife-demo/churnlife.toml",
            formatter_class=argparse.RawDescriptionHelpFormatter,
        )
        cmd.add_argument("--config", required=True, help="path of the TOML config")
        cmd.add_argument(
            "--show-sql",
            action="store_true",
            help="print the extract's SQL as the engine would receive it (with the values it "
            "binds), and stop: nothing but column names and types is read",
        )
        if name == "run":
            cmd.add_argument("--output", help="output folder (default: [output] folder)")
            _model_options(cmd)
            _script_options(cmd)
    val = sub.add_parser(
        "value",
        help="value customers: per new and active customer, the base, a price scenario",
        description="Fit the hazard models, value new and active customers per cohort with "
        "intervals ([value] settings), forecast today's base and run a price-change scenario. "
        "Prints the results and writes the output folder (tables, charts, report.html).",
        epilog="examples:\n  churnlife value --config churnlife-demo/churnlife.toml\n"
        "  churnlife value --config my.toml --price-change 0.08 --output out",
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    val.add_argument("--config", required=True, help="path of the TOML config")
    val.add_argument(
        "--price-change", type=float, help="scenario price change, e.g. 0.10 for +10 %%"
    )
    val.add_argument("--output", help="output folder (default: [output] folder)")
    val.add_argument(
        "--backtest",
        type=int,
        metavar="UNITS",
        help="also check the base forecast: move the as-of date back UNITS tenure units, "
        "forecast, and compare with the log (table value_backtest)",
    )
    _script_options(val)
    models = sub.add_parser(
        "models",
        help="fit the hazard models per cohort and print their ranking; writes nothing",
        description="Fit churn hazard models to each cohort's survival counts and print the "
        "ranking (AIC, BIC, deviation from Kaplan–Meier) and each cohort's best model.",
        epilog="examples:\n  churnlife models --config churnlife-demo/churnlife.toml\n"
        "  churnlife models --config my.toml --models weibull,sbg,piecewise",
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    models.add_argument("--config", required=True, help="path of the TOML config")
    _model_options(models)
    cmp = sub.add_parser(
        "compare",
        help="compare cohorts: tests, hazard ratios, restricted mean tenure, churn by cause",
        description="Compare cohorts of the log named in a config: log-rank family, a Cox model "
        "on the survival counts, restricted mean tenure and churn by cause. Prints the results; "
        "with --output also writes the full output folder (tables, charts, report.html).",
        epilog="examples:\n  churnlife compare --config churnlife-demo/churnlife.toml --by "
        "plan,channel\n  churnlife compare --config my.toml --by plan --strata channel "
        "--horizon 12 --output out",
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    cmp.add_argument("--config", required=True, help="path of the TOML config")
    cmp.add_argument(
        "--by", help="cohort attributes, comma-separated (default: the config's [cohorts] by)"
    )
    cmp.add_argument("--strata", help="an attribute to compare within (e.g. channel)")
    cmp.add_argument("--ties", choices=["efron", "breslow"], default="efron", help="Cox ties")
    cmp.add_argument("--horizon", type=float, help="restricted mean tenure horizon (tenure units)")
    cmp.add_argument("--output", help="also write the output folder here")
    _script_options(cmp)
    return p


def _script_options(cmd: argparse.ArgumentParser) -> None:
    cmd.add_argument(
        "--quiet", action="store_true", help="print nothing but errors (no progress, no summary)"
    )
    cmd.add_argument(
        "--json",
        action="store_true",
        help="print the run's summary (summary.json) as JSON on stdout, and nothing else there",
    )


def _model_options(cmd: argparse.ArgumentParser) -> None:
    from churnlife.models.suite import DEFAULT_MODELS, MODEL_NAMES

    cmd.add_argument(
        "--models",
        default=",".join(DEFAULT_MODELS),
        help=f"comma-separated hazard models to fit, or none (from: {', '.join(MODEL_NAMES)})",
    )
    cmd.add_argument(
        "--horizon", type=int, help="extrapolate to this tenure (default: twice the longest seen)"
    )
    cmd.add_argument(
        "--band",
        choices=("delta", "bootstrap"),
        default="delta",
        help="how the extrapolation bands are computed (default: delta)",
    )


def _model_list(text: str) -> tuple[str, ...]:
    from churnlife.models.suite import model_fitter

    names = tuple(n.strip() for n in text.split(",") if n.strip())
    if names in ((), ("none",)):
        return ()
    for n in names:
        model_fitter(n)  # raises UserError naming the unknown model
    return names


def _models(config_path: str, models: str, horizon: int | None, band: str) -> int:
    from churnlife.config import load_config
    from churnlife.extract import run_extract
    from churnlife.models.suite import fit_models
    from churnlife.source import open_source

    names = _model_list(models) or ("weibull",)
    config = load_config(config_path)
    extract = run_extract(config, open_source(config))
    fitted = fit_models(extract.counts, names, config.confidence)
    ranking = fitted.ranking()
    for cohort in fitted.cohorts:
        _say(f"{cohort}:")
        part = ranking.filter(ranking["cohort"] == cohort)
        for rank, model, aic, dev, ok in (
            part.select("rank", "model", "aic", "max_deviation", "converged").head(12).rows()
        ):
            flag = "" if ok else "  (did not converge)"
            _say(f"  {rank:>2}. {model:<17} AIC {aic:12.1f}   max gap to KM {dev:.3f}{flag}")
    for cohort, model, reason in fitted.failures:
        _say(f"  not fitted: {cohort} · {model}: {reason}")
    return 0


_QUIET = False  # --quiet or --json: the progress lines below are not printed


def _say(msg: str) -> None:
    if not _QUIET:
        print(msg, flush=True)


def _print_json(analysis: object) -> None:
    print(json.dumps(analysis.summary(), indent=2), flush=True)  # type: ignore[attr-defined]


def _run(
    config_path: str,
    output: str | None,
    models: str | None = None,
    horizon: int | None = None,
    band: str = "delta",
    as_json: bool = False,
) -> int:
    from churnlife.config import load_config
    from churnlife.pipeline import analyse, write_outputs

    t0 = time.perf_counter()
    config = load_config(config_path)
    _say(f"churnlife: reading {config.source.events} ({config.source.kind}) …")
    if models is None:
        analysis = analyse(config)
    else:
        analysis = analyse(config, _model_list(models), horizon, band)
    s = analysis.extract.summary
    _say(
        f"  {int(s['n_spells']):,} spells of {int(s['n_customers_with_spells']):,} customers; "
        f"{analysis.counts.height:,} count rows over {len(analysis.km.curves)} cohorts"
    )
    folder = write_outputs(analysis, Path(output).resolve() if output else None)
    if analysis.comparison is not None:
        from churnlife.sections.comparison import summary_lines

        _say(summary_lines(analysis.comparison, config.tenure_unit)[0])
    for m in analysis.km.medians:
        med = "not reached" if m.median != m.median else f"{m.median:g} {config.tenure_unit}"
        _say(f"  median tenure, {m.cohort}: {med}")
    if analysis.value is not None:
        from churnlife.sections.value import value_lines

        for line in value_lines(analysis.value, config.tenure_unit):
            _say(line)
    _say(f"  wrote {folder}/report.html ({time.perf_counter() - t0:.1f} s)")
    if as_json:
        _print_json(analysis)
    return 0


def _value(args: argparse.Namespace) -> int:
    from churnlife.config import load_config
    from churnlife.pipeline import analyse, write_outputs
    from churnlife.sections.value import value_lines

    t0 = time.perf_counter()
    config = load_config(args.config)
    _say(f"churnlife: reading {config.source.events} ({config.source.kind}) …")
    analysis = analyse(config, price_change=args.price_change)
    if analysis.value is None:
        raise UserError(
            "no cohort could be valued: no hazard model could be fitted. Check the counts "
            "(churnlife models --config ...) or group small cohorts together."
        )
    for line in value_lines(analysis.value, config.tenure_unit, full=True):
        _say(line)
    if args.backtest:
        from churnlife.value.backtest import forecast_backtest

        if not 1 <= args.backtest <= 60:
            raise UserError("--backtest takes 1 to 60 tenure units, e.g. --backtest 12.")
        bt = forecast_backtest(config, args.backtest)
        analysis.tables["value_backtest"] = bt
        worst = float(bt.filter(bt["cohort"] == "all cohorts")["relative_error"].abs().max() or 0)
        _say(
            f"  backtest from {bt['backtest_as_of'][0]}: largest error of the forecast base "
            f"{worst:.1%}; interval covered {bt['covered'].mean():.0%} of cohort-steps"
        )
    folder = write_outputs(analysis, Path(args.output).resolve() if args.output else None)
    _say(f"  wrote {folder}/report.html ({time.perf_counter() - t0:.1f} s)")
    if args.json:
        _print_json(analysis)
    return 0


def _compare(args: argparse.Namespace) -> int:
    from churnlife.compare import parse_by
    from churnlife.config import load_config
    from churnlife.pipeline import analyse, write_outputs
    from churnlife.sections.comparison import summary_lines

    t0 = time.perf_counter()
    config = load_config(args.config)
    options = {"ties": args.ties, "horizon": args.horizon, "strata": args.strata}
    if args.by is not None:
        options["by"] = parse_by(args.by)
    _say(f"churnlife: reading {config.source.events} ({config.source.kind}) …")
    analysis = analyse(config, models=(), compare=options)
    assert analysis.comparison is not None
    for line in summary_lines(analysis.comparison, config.tenure_unit):
        _say(line)
    if args.output:
        folder = write_outputs(analysis, Path(args.output).resolve())
        _say(f"  wrote {folder}/report.html ({time.perf_counter() - t0:.1f} s)")
    if args.json:
        _print_json(analysis)
    return 0


def _check(config_path: str) -> int:
    from churnlife.config import load_config
    from churnlife.extract import run_extract
    from churnlife.sections.overview import anomaly_rows, data_summary_rows
    from churnlife.source import open_source

    config = load_config(config_path)
    extract = run_extract(config, open_source(config))
    _say(f"config {config_path} is valid and the data can be read.")
    for k, v in {**data_summary_rows(extract.summary), **anomaly_rows(extract.summary)}.items():
        _say(f"  {k}: {v}")
    return 0


def _show_sql(config_path: str) -> int:
    from churnlife.config import load_config
    from churnlife.show_sql import listing
    from churnlife.source import open_source

    config = load_config(config_path)
    source = open_source(config)
    try:
        print(listing(config, source), end="")
    finally:
        source.close()
    return 0


def _demo(folder: str, customers: int, seed: int, build_only: bool, as_json: bool) -> int:
    from churnlife.demo.generate import build_demo

    if customers < 100:
        raise UserError("--customers must be at least 100.")
    target = Path(folder).resolve()
    target.mkdir(parents=True, exist_ok=True)
    db = target / "tidewell.duckdb"
    t0 = time.perf_counter()
    info = build_demo(db, n_customers=customers, seed=seed)
    config = target / "churnlife.toml"
    with resources.as_file(resources.files("churnlife.demo").joinpath("churnlife.toml")) as src:
        shutil.copyfile(src, config)
    _say(
        f"churnlife: built {db} ({info.get('customers', customers):,} customers, "
        f"{info.get('events', 0):,} events) in {time.perf_counter() - t0:.1f} s; config {config}"
    )
    if build_only:
        return 0
    return _run(str(config), None, as_json=as_json)


def main(argv: list[str] | None = None) -> int:
    global _QUIET
    args = _parser().parse_args(argv)
    quiet = getattr(args, "quiet", False)
    _QUIET = quiet or getattr(args, "json", False)
    # progress of long steps on stderr, only when it is a terminal (churnlife.progress)
    with shown_on(sys.stderr, enabled=not quiet):
        return _dispatch(args)


def _dispatch(args: argparse.Namespace) -> int:
    try:
        if getattr(args, "show_sql", False):
            return _show_sql(args.config)
        if args.command == "demo":
            return _demo(args.folder, args.customers, args.seed, args.build_only, args.json)
        if args.command == "run":
            return _run(
                args.config, args.output, args.models, args.horizon, args.band, args.json
            )
        if args.command == "models":
            return _models(args.config, args.models, args.horizon, args.band)
        if args.command == "check":
            return _check(args.config)
        if args.command == "compare":
            return _compare(args)
        if args.command == "value":
            return _value(args)
        _parser().print_help()
        return 2
    except UserError as err:
        print(f"churnlife: {err}", file=sys.stderr)
        return 2
    except InterruptedAfterWrite as done:
        print(
            f"churnlife: interrupted just after {done.folder} was completely written; it holds "
            "this run's output.",
            file=sys.stderr,
        )
        return 130
    except KeyboardInterrupt:
        print(
            "churnlife: interrupted; the output folder was left as it was before this run "
            "(nothing half-written).",
            file=sys.stderr,
        )
        return 130


if __name__ == "__main__":
    sys.exit(main())
