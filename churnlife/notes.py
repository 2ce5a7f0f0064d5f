"""Plain-words notes that results carry to the report: "median not reached", "did not converge".

A ``Note`` is one or two sentences for a reader of the report, with a level (``info`` or
``warning``), a topic, optionally the cohort it is about, and the ``table.column`` names whose empty
values it explains. Estimators attach notes to their results (a ``notes`` field of the result
dataclass); the pipeline gathers them with ``collect`` and the report shows them in one section.

Rule: **no NaN or infinity reaches a chart or a table without a note saying why.** ``km_notes``
explains the empty values a Kaplan–Meier result can hold; ``unexplained_values`` is the safety net
that finds any non-finite value in the output tables or chart data that no note covers and adds a
generic warning for it; ``json_safe`` turns NaN/inf into JSON null so chart files stay valid JSON
and the gap is drawn as a gap. Model fits use ``fit_notes`` to say that an optimiser did not
converge, that an estimate sits on a boundary, or that the information matrix is singular.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import polars as pl

LEVELS = ("info", "warning")


@dataclass(frozen=True)
class Note:
    """One thing a reader must know to read a result right.

    Attributes
    ----------
    level : "info" (how to read a value) or "warning" (a value may be unreliable).
    topic : short tag of what it is about, e.g. "retention", "median", "fit", "data".
    text : plain words, complete sentences, no jargon a reader cannot look up.
    cohort : the cohort it is about, or None for the whole run.
    covers : "table.column" names whose empty (NaN) values this note explains.
    """

    level: str
    topic: str
    text: str
    cohort: str | None = None
    covers: tuple[str, ...] = ()

    def __post_init__(self) -> None:
        if self.level not in LEVELS:
            raise ValueError(f"note level must be one of {LEVELS}, not {self.level!r}")
        if not self.text.strip():
            raise ValueError("a note needs text")

    def as_dict(self) -> dict[str, Any]:
        return {
            "level": self.level,
            "topic": self.topic,
            "cohort": self.cohort,
            "text": self.text,
            "covers": list(self.covers),
        }


def info(topic: str, text: str, cohort: str | None = None, covers: Sequence[str] = ()) -> Note:
    return Note("info", topic, text, cohort, tuple(covers))


def warning(topic: str, text: str, cohort: str | None = None, covers: Sequence[str] = ()) -> Note:
    return Note("warning", topic, text, cohort, tuple(covers))


def collect(*groups: Iterable[Note] | Any) -> list[Note]:
    """Notes from lists of notes or from results with a ``notes`` attribute, duplicates dropped,
    warnings first (order otherwise kept)."""
    seen: set[Note] = set()
    out: list[Note] = []
    for group in groups:
        items = getattr(group, "notes", group)
        for note in items or ():
            if note not in seen:
                seen.add(note)
                out.append(note)
    return sorted(out, key=lambda n: n.level != "warning")


# -- Kaplan–Meier ------------------------------------------------------------------------------


def km_notes(km: Any, unit: str) -> list[Note]:
    """Notes for the empty values a ``KaplanMeierResult`` holds (churnlife.km).

    * retention reaching 0: Greenwood's SE and the upper limit are undefined there (NaN);
    * a cohort with no churn at all: a flat curve at 100 %, no median;
    * median not reached (NaN), or its interval open above (inf) or undefined (NaN).
    """
    out: list[Note] = []
    for curve in km.curves:
        name = curve.cohort
        if curve.churned.sum() == 0:
            out.append(
                info(
                    "retention",
                    f"No churn was observed in this cohort up to tenure {_num(curve.tenure.max())} "
                    f"{unit}, so its curve stays at 100% and has no interval width. That is what "
                    "the data show, not a forecast that nobody leaves.",
                    name,
                )
            )
        zero = np.flatnonzero(curve.survival <= 0)
        if zero.size:
            out.append(
                warning(
                    "retention",
                    f"Every customer still at risk churned by tenure {_num(curve.tenure[zero[0]])} "
                    f"{unit}, so retention is 0 from there on. Its standard error and the upper "
                    "end of its interval are undefined there; the tables leave them empty and the "
                    "chart draws no band. Few customers were left at risk: read that end loosely.",
                    name,
                    covers=("km.se", "km.upper"),
                )
            )
    for m in km.medians:
        curve = km.curve(m.cohort)
        if math.isnan(m.median):
            lowest = float(curve.survival.min()) if curve.survival.size else 1.0
            out.append(
                info(
                    "median",
                    f"Median tenure not reached: retention stayed above 50% (lowest {lowest:.1%}) "
                    f"through the longest tenure observed, {_num(curve.tenure.max())} {unit}.",
                    m.cohort,
                    covers=("median_tenure.median_tenure", "median_tenure.lower",
                            "median_tenure.upper"),
                )
            )
            continue
        if math.isnan(m.lower) or math.isnan(m.upper):
            out.append(
                warning(
                    "median",
                    "The median's confidence interval could not be formed (too few churns near "
                    "50% retention); only the point value is shown.",
                    m.cohort,
                    covers=("median_tenure.lower", "median_tenure.upper"),
                )
            )
        elif math.isinf(m.upper):
            out.append(
                info(
                    "median",
                    "The upper end of the median's interval is not reached within the observed "
                    "tenures (shown as 'not reached'); the true median may be later than the data "
                    "can show.",
                    m.cohort,
                    covers=("median_tenure.upper",),
                )
            )
    return out


# -- Model fits (for estimators that optimise a likelihood) ------------------------------------


def fit_notes(
    model: str,
    converged: bool,
    message: str = "",
    at_boundary: Sequence[str] = (),
    information: np.ndarray | None = None,
    cohort: str | None = None,
    rcond: float = 1e-10,
) -> list[Note]:
    """Warnings a model fit owes its reader.

    Parameters
    ----------
    model : the model's name as the report shows it, e.g. "Weibull".
    converged : whether the optimiser reported success.
    message : the optimiser's own reason, shown when it did not converge.
    at_boundary : names of parameters whose estimate sits on the edge of the allowed range.
    information : the observed information matrix (negative Hessian of the log-likelihood) at the
        estimate; a singular or non-positive-definite one means the SEs cannot be trusted.
    rcond : reciprocal condition number below which the matrix counts as singular.
    """
    out: list[Note] = []
    if not converged:
        reason = f" (the optimiser said: {message.strip().rstrip('.')})" if message.strip() else ""
        out.append(
            warning(
                "fit",
                f"The {model} fit did not converge{reason}. Its estimates and intervals are not "
                "reliable; compare with the Kaplan–Meier curve before using it.",
                cohort,
            )
        )
    if at_boundary:
        names = ", ".join(at_boundary)
        out.append(
            warning(
                "fit",
                f"The {model} fit hit a boundary of the allowed range for {names}. The data may "
                "fit a simpler model; intervals near a boundary are not reliable.",
                cohort,
            )
        )
    if information is not None:
        problem = information_problem(information, rcond)
        if problem:
            out.append(
                warning(
                    "fit",
                    f"The {model} fit's information matrix is {problem}, so its standard errors "
                    "and intervals cannot be computed reliably (some parameters are not "
                    "identified by these data).",
                    cohort,
                )
            )
    return out


def information_problem(information: np.ndarray, rcond: float = 1e-10) -> str:
    """'' if the matrix is a usable information matrix, else a few words on what is wrong."""
    a = np.asarray(information, dtype=float)
    if a.ndim != 2 or a.shape[0] != a.shape[1]:
        raise ValueError("information must be a square matrix")
    if not np.all(np.isfinite(a)):
        return "not finite"
    sym = (a + a.T) / 2
    eig = np.linalg.eigvalsh(sym)
    top = float(np.max(np.abs(eig))) if eig.size else 0.0
    lowest = float(np.min(eig)) if eig.size else 0.0
    if top == 0 or abs(lowest) <= rcond * top:
        return "singular"
    if lowest < 0:
        return "not positive definite"
    return ""


# -- The safety net: no unexplained NaN in outputs ---------------------------------------------


def _nonfinite_counts(frame: pl.DataFrame) -> dict[str, int]:
    counts: dict[str, int] = {}
    for name, dtype in frame.schema.items():
        if dtype.is_float():
            n = int(frame.select((~pl.col(name).is_finite()).sum()).item() or 0)
            if n:
                counts[name] = n
    return counts


def _count_nonfinite(value: Any) -> int:
    if isinstance(value, float):
        return 0 if math.isfinite(value) else 1
    if isinstance(value, dict):
        return sum(_count_nonfinite(v) for v in value.values())
    if isinstance(value, list | tuple):
        return sum(_count_nonfinite(v) for v in value)
    return 0


def unexplained_values(
    tables: dict[str, pl.DataFrame],
    charts: dict[str, dict[str, Any]],
    notes: Sequence[Note],
    chart_sources: dict[str, str] | None = None,
) -> list[Note]:
    """A warning for each table column or chart that holds NaN/inf no note explains.

    ``tables`` maps table names to frames, ``charts`` maps chart names to Vega-Lite specs
    (``chart.to_dict()``). A note explains ``table.column`` when it lists it in ``covers``
    (``table.*`` covers a whole table). A chart is explained by ``chart.*``, or, when
    ``chart_sources`` names the table it draws, by a note covering a column of that table.
    """
    covered = {c for n in notes for c in n.covers}
    sources = chart_sources or {}
    out: list[Note] = []
    for table, frame in tables.items():
        for column, n in _nonfinite_counts(frame).items():
            if f"{table}.{column}" not in covered and f"{table}.*" not in covered:
                out.append(
                    warning(
                        "values",
                        f"{n} value(s) in column {column} of table {table} could not be "
                        "computed (not a number); they are left empty. Treat the rows around "
                        "them with care.",
                        covers=(f"{table}.{column}",),
                    )
                )
    for chart, spec in charts.items():
        n = _count_nonfinite(spec)
        source = sources.get(chart)
        by_source = source is not None and any(c.startswith(f"{source}.") for c in covered)
        if n and f"{chart}.*" not in covered and not by_source:
            out.append(
                warning(
                    "values",
                    f"The chart {chart} has {n} point(s) that could not be computed; they are "
                    "left out of the drawing.",
                    covers=(f"{chart}.*",),
                )
            )
    return out


def json_safe(value: Any) -> Any:
    """A copy of a JSON-like value with NaN and ±inf replaced by None (JSON null)."""
    if isinstance(value, float):
        return value if math.isfinite(value) else None
    if isinstance(value, dict):
        return {k: json_safe(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [json_safe(v) for v in value]
    return value


def _num(x: float) -> str:
    return f"{float(x):g}"
