"""The one-way flow in order: source → extract → estimators → report and tables.

``analyse`` does the computing and returns results for notebooks; ``write_outputs`` writes the
folder. The CLI calls both.
"""

from __future__ import annotations

import datetime as dt
import json
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import polars as pl

from churnlife import __version__
from churnlife.compare import Comparison, compare_cohorts
from churnlife.config import Config
from churnlife.extract import Extract, run_extract
from churnlife.km import KaplanMeierResult, kaplan_meier
from churnlife.outputs import atomic_folder
from churnlife.report import Section, charts_in, render
from churnlife.sections.compare import compare_sections
from churnlife.sections.overview import cautions_section, data_section, settings_section
from churnlife.sections.retention import retention_section
from churnlife.source import open_source


@dataclass
class Analysis:
    """Everything one run computed. ``sections`` is the report's content, in order."""

    config: Config
    extract: Extract
    km: KaplanMeierResult
    sections: list[Section] = field(default_factory=list)
    tables: dict[str, pl.DataFrame] = field(default_factory=dict)
    comparison: Comparison | None = None  # cohort comparisons (None with a single cohort)

    @property
    def counts(self) -> pl.DataFrame:
        return self.extract.counts

    def summary(self) -> dict[str, Any]:
        """A small machine-readable summary of the run (also written as summary.json)."""
        medians = {m.cohort: m.median for m in self.km.medians}
        return {
            "churnlife_version": __version__,
            "settings": self.config.summary(),
            "data": {k: _plain(v) for k, v in self.extract.summary.items()},
            "median_tenure": {k: (None if v != v else v) for k, v in medians.items()},
        }


def _plain(value: Any) -> Any:
    if isinstance(value, dt.date | dt.datetime):
        return value.isoformat()
    if value is None or isinstance(value, bool | int | float | str):
        return value
    return int(value) if float(value).is_integer() else float(value)


def analyse(config: Config, compare: dict[str, Any] | None = None) -> Analysis:
    """Run the extract and the estimators for ``config``; nothing is written anywhere.

    ``compare`` holds options for ``churnlife.compare.compare_cohorts`` (by, strata, ties,
    horizon); without it the config's cohorts are compared when there are two or more."""
    source = open_source(config)
    extract = run_extract(config, source)
    km = kaplan_meier(extract.counts, config.confidence, config.interval)
    analysis = Analysis(config, extract, km)
    if compare is not None or extract.counts["cohort"].n_unique() > 1:
        analysis.comparison = compare_cohorts(
            extract,
            confidence=config.confidence,
            preferred_horizons=tuple(config.retention_at),
            **(compare or {}),
        )
    analysis.tables = {
        "counts": extract.counts,
        "km": km.to_polars(),
        "retention_at": km.retention_at(config.retention_at),
        "median_tenure": km.medians_table(),
    }
    compared = []
    if analysis.comparison is not None:
        analysis.tables.update(analysis.comparison.tables())
        compared = compare_sections(analysis.comparison, config.tenure_unit)
    analysis.sections = [
        settings_section(config),
        data_section(extract.summary),
        retention_section(km, config.tenure_unit, config.retention_at),
        *compared,
        cautions_section(config),
    ]
    return analysis


def write_outputs(analysis: Analysis, folder: Path | None = None) -> Path:
    """Write tables (CSV and Parquet), charts (SVG and Vega-Lite JSON), summary.json and
    report.html into ``folder`` atomically."""
    import vl_convert as vlc

    target = Path(folder) if folder is not None else analysis.config.output_folder
    cfg = analysis.config
    with atomic_folder(target) as out:
        for name, frame in analysis.tables.items():
            out.table(name, frame)
        for chart in charts_in(analysis.sections):
            spec = chart.chart.to_dict()
            out.text(f"{chart.name}.vl.json", json.dumps(spec))
            out.text(f"{chart.name}.svg", vlc.vegalite_to_svg(spec))
        out.text("summary.json", json.dumps(analysis.summary(), indent=2))
        subtitle = (
            f"Customer retention from {cfg.log_start} to {cfg.as_of}, tenure in {cfg.tenure_unit}"
            f" · churnlife {__version__}"
        )
        footer = (
            "Made by churnlife from the event log named in the settings. Tables beside this file: "
            + ", ".join(f"{n}.csv" for n in analysis.tables)
            + "."
        )
        out.text("report.html", render("Retention report", subtitle, analysis.sections, footer))
    return target
