"""The one-way flow in order: source → extract → estimators → report and tables.

``analyse`` does the computing and returns results for notebooks; ``write_outputs`` writes the
folder. The CLI calls both.
"""

from __future__ import annotations

import datetime as dt
import json
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import polars as pl

from churnlife import __version__
from churnlife.compare import Comparison, compare_cohorts, comparison_notes
from churnlife.config import Config
from churnlife.extract import Extract, run_extract
from churnlife.km import KaplanMeierResult, kaplan_meier
from churnlife.models.suite import DEFAULT_MODELS
from churnlife.notes import (
    Note,
    NumericWarnings,
    collect,
    fit_notes,
    json_safe,
    km_notes,
    numeric_warnings,
    runaway,
    unexplained_values,
)
from churnlife.outputs import atomic_folder
from churnlife.quality import anomaly_table
from churnlife.report import Section, charts_in, render
from churnlife.sections.comparison import comparison_sections
from churnlife.sections.models import model_results, price_effect_block
from churnlife.sections.overview import cautions_section, data_section, settings_section
from churnlife.sections.quality import notes_section, quality_section
from churnlife.sections.retention import retention_section
from churnlife.sections.value import value_notes, value_section
from churnlife.source import open_source


@dataclass
class Analysis:
    """Everything one run computed. ``sections`` is the report's content, in order."""

    config: Config
    extract: Extract
    km: KaplanMeierResult
    comparison: Comparison | None = None
    sections: list[Section] = field(default_factory=list)
    tables: dict[str, pl.DataFrame] = field(default_factory=dict)
    models: Any = None  # churnlife.models.suite.HazardModels, when models were fitted
    notes: list[Note] = field(default_factory=list)  # warnings for the reader (churnlife.notes)
    value: Any = None  # churnlife.value.valuation.Valuation, when customers were valued

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
            "value": json_safe(self.value.headline()) if self.value is not None else None,
            "notes": [n.as_dict() for n in self.notes],
        }


def _plain(value: Any) -> Any:
    if isinstance(value, dt.date | dt.datetime):
        return value.isoformat()
    if value is None or isinstance(value, bool | int | float | str):
        return value
    return int(value) if float(value).is_integer() else float(value)


def analyse(
    config: Config,
    models: Sequence[str] | None = DEFAULT_MODELS,
    horizon: int | None = None,
    band: str = "delta",
    compare: dict[str, Any] | None = None,
    value: bool = True,
    price_change: float | None = None,
) -> Analysis:
    """Run the extract and the estimators for ``config``; nothing is written anywhere.

    ``models``: hazard models to fit per cohort (churnlife.models.suite.MODEL_NAMES; None or ()
    for none); ``horizon`` and ``band`` set their extrapolation (default twice the longest
    observed tenure, delta-method bands). ``compare``: options for
    ``churnlife.compare.compare_cohorts`` (by, strata, ties, horizon); without it the config's
    cohorts are compared when there are two or more. ``value``: value the customers (needs the
    models; settings in [value]); ``price_change`` overrides [value] price_change."""
    source = open_source(config)
    extract = run_extract(config, source)
    km = kaplan_meier(extract.counts, config.confidence, config.interval)
    # numpy's overflow warnings from fits become one note each, not lines on the terminal
    comparing, fitting = NumericWarnings(), NumericWarnings()
    comparison = None
    if compare is not None or extract.counts["cohort"].n_unique() > 1:
        with numeric_warnings(comparing):
            comparison = compare_cohorts(
                extract,
                confidence=config.confidence,
                preferred_horizons=tuple(config.retention_at),
                **(compare or {}),
            )
    analysis = Analysis(config, extract, km, comparison)
    analysis.tables = {
        "counts": extract.counts,
        "km": km.to_polars(),
        "retention_at": km.retention_at(config.retention_at),
        "median_tenure": km.medians_table(),
        "data_quality": anomaly_table(extract.summary),
    }
    with numeric_warnings(comparing):  # the tables and sections take exp() of estimates
        if comparison is not None:
            analysis.tables.update(comparison.tables())
        results = [
            settings_section(config),
            data_section(extract.summary),
            quality_section(extract.summary),
            retention_section(km, config.tenure_unit, config.retention_at),
            *comparison_sections(comparison, config.tenure_unit),
        ]
    if models:
        with numeric_warnings(fitting):
            fitted, model_tables, section = model_results(
                extract.counts, config.tenure_unit, config.confidence, config.retention_at,
                models, horizon, band,
            )
            price = price_effect_block(extract, config)
        analysis.models = fitted
        analysis.tables.update(model_tables)
        if price is not None:
            analysis.tables["model_price_effect"] = price[0]
            section.blocks.insert(len(section.blocks) - 1, price[1])
        results.append(section)
    valuing, not_valued = NumericWarnings(), None
    if models and value and analysis.models is not None and analysis.models.fits:
        from churnlife.value.valuation import NothingToValue, value_customers

        with numeric_warnings(valuing):
            try:
                analysis.value = value_customers(
                    extract, config, analysis.models, analysis.tables["km"], price_change
                )
            except NothingToValue as why:
                not_valued = Note("warning", "value", f"Customers were not valued: {why}")
        if analysis.value is not None:
            analysis.tables.update(analysis.value.tables)
            results.append(value_section(analysis.value, config.tenure_unit))
    # Every NaN in a table or chart gets a note (churnlife.notes): known ones first, then a
    # generic warning for anything no note explains.
    notes = km_notes(km, config.tenure_unit) + comparison_notes(comparison)
    if comparison is not None and comparison.cox is not None:
        cox = comparison.cox
        notes += fit_notes(
            "Cox",
            cox.converged,
            at_boundary=runaway(cox.names, cox.se),
            covariance=cox.cov,
            table="hazard_ratios",
        )
    if analysis.models is not None:
        with numeric_warnings(fitting):
            notes += _model_notes(analysis.models)
    if analysis.value is not None:
        notes += value_notes(analysis.value)
    if not_valued is not None:
        notes.append(not_valued)
    notes += comparing.note("comparing cohorts") + fitting.note("fitting the hazard models")
    notes += valuing.note("valuing customers")
    specs = {c.name: c.chart.to_dict() for c in charts_in(results)}
    notes = collect(
        notes,
        unexplained_values(analysis.tables, specs, notes, {"retention_curves": "km"}),
    )
    analysis.notes = notes
    analysis.sections = [*results[:3], notes_section(notes), *results[3:], cautions_section(config)]
    return analysis


def _model_notes(models: Any) -> list[Note]:
    """Warnings for hazard-model fits: not converged (the optimiser's reason), estimates whose
    SE could not be computed (singular information), and models that could not be fitted."""
    out: list[Note] = []
    for f in models.fits:  # cohorts × models, a few dozen
        se = f.estimates()["se"].to_numpy()
        out += fit_notes(
            f"{f.name} model",
            f.convergence.converged,
            f.convergence.message,
            at_boundary=runaway(list(f.estimates()["parameter"]), se, limit=float("inf"))
            if f.convergence.converged
            else (),
            covariance=f.cov if f.convergence.converged else None,  # else already said
            cohort=f.cohort,
            table="model_parameters",
        )
    for cohort, model, reason in models.failures:
        out.append(
            Note("warning", "fit", f"The {model} model could not be fitted: {reason}.", cohort)
        )
    return out


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
            spec = json_safe(chart.chart.to_dict())
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
