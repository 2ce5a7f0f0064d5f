"""Notes and warnings (churnlife.notes): every empty value in a table or chart is explained, and a
fit that does not converge, runs off to a boundary or has a singular information matrix says so.

References: scipy.optimize.minimize's own ``success`` flag is the external judge of convergence;
numpy's eigenvalues judge singularity. Monotone likelihood in the Cox model when a group has no
events (estimates run off to infinity): Bryson & Johnson (1981), Technometrics 23, 381–386 (from
memory); churnlife.cox shows it on a cohort without churn.
"""

from __future__ import annotations

import json
import math

import numpy as np
import polars as pl
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import optimize

from churnlife.counts import counts_from_durations
from churnlife.km import kaplan_meier
from churnlife.notes import (
    Note,
    collect,
    fit_notes,
    information_problem,
    json_safe,
    km_notes,
    numeric_warnings,
    runaway,
    unexplained_values,
    warning,
)


def test_note_needs_a_known_level_and_text():
    with pytest.raises(ValueError):
        Note("error", "x", "text")
    with pytest.raises(ValueError):
        Note("info", "x", "  ")


def test_optimiser_that_stops_early_is_reported():
    """scipy reports success=False for Rosenbrock stopped after 3 iterations; the note says the
    fit did not converge and quotes scipy's reason."""
    res = optimize.minimize(optimize.rosen, x0=[-1.2, 1.0], method="BFGS",
                            options={"maxiter": 3})
    assert not res.success
    notes = fit_notes("Weibull", bool(res.success), str(res.message))
    assert len(notes) == 1 and notes[0].level == "warning"
    assert "did not converge" in notes[0].text and "Maximum number of iterations" in notes[0].text
    done = optimize.minimize(optimize.rosen, x0=[-1.2, 1.0], method="BFGS")
    assert done.success and fit_notes("Weibull", bool(done.success), str(done.message)) == []


def test_information_matrix_checks():
    x = np.array([[1.0, 2.0, 2.0], [1.0, 3.0, 3.0], [1.0, 5.0, 5.0], [1.0, 7.0, 7.0]])
    assert information_problem(x.T @ x) == "singular"  # two identical columns
    assert information_problem(np.array([[2.0, 0.5], [0.5, 1.0]])) == ""
    assert information_problem(np.array([[1.0, 0.0], [0.0, -2.0]])) == "not positive definite"
    assert information_problem(np.array([[np.nan, 0.0], [0.0, 1.0]])) == "not finite"
    notes = fit_notes("Gompertz", True, information=x.T @ x, table="fits")
    assert len(notes) == 1 and "singular" in notes[0].text and notes[0].covers == ("fits.*",)
    assert "singular" in fit_notes("Cox", True, covariance=np.full((2, 2), np.nan))[0].text
    assert fit_notes("Cox", True, at_boundary=["shape"])[0].text.count("boundary") == 1


def test_cox_on_a_cohort_without_churn_is_flagged_as_running_off():
    """Cohort 'b' never churns: the Cox estimate against it grows without bound (monotone
    likelihood), its SE explodes, and ``runaway`` names the term."""
    from churnlife.cox import cox_fit

    exit_ = np.array([1, 2, 2, 3, 4, 1, 2, 3, 4, 5], dtype=float)
    churned = np.array([1, 1, 0, 1, 1, 0, 0, 0, 0, 0])
    cohort = np.array(["a"] * 5 + ["b"] * 5)
    counts = counts_from_durations(exit_, churned, cohort=cohort).with_columns(
        pl.col("cohort").alias("plan")
    )
    fit = cox_fit(counts, ["plan"])
    assert runaway(fit.names, fit.se) == list(fit.names)
    # a cohort pair where both churn gives an ordinary, finite estimate
    churned2 = churned.copy()
    churned2[[6, 8]] = 1
    counts2 = counts_from_durations(exit_, churned2, cohort=cohort).with_columns(
        pl.col("cohort").alias("plan")
    )
    fit2 = cox_fit(counts2, ["plan"])
    assert runaway(fit2.names, fit2.se) == []


def test_km_notes_for_zero_retention_no_churn_and_no_median():
    exit_ = [1, 2, 2, 3, 1, 2, 3]
    churned = [1, 1, 1, 1, 0, 0, 0]
    cohort = ["gone"] * 4 + ["kept"] * 3
    km = kaplan_meier(counts_from_durations(exit_, churned, cohort=cohort))
    by = {(n.cohort, n.topic, n.level): n for n in km_notes(km, "months")}
    assert "retention is 0" in by[("gone", "retention", "warning")].text
    assert by[("gone", "retention", "warning")].covers == ("km.se", "km.upper")
    assert "No churn was observed" in by[("kept", "retention", "info")].text
    assert "not reached" in by[("kept", "median", "info")].text


durations = st.lists(
    st.tuples(st.integers(0, 6), st.integers(1, 10), st.booleans(), st.sampled_from("ab")),
    min_size=1,
    max_size=40,
)


@settings(max_examples=200, deadline=None, database=None)
@given(durations, st.sampled_from(["log-log", "plain"]))
def test_every_empty_km_value_is_explained(rows, interval):
    """For any counts, every NaN/inf in the KM tables is covered by a note from km_notes, so the
    safety net (unexplained_values) has nothing left to add."""
    entry = [min(a, b - 1) for a, b, _, _ in rows]
    km = kaplan_meier(
        counts_from_durations([b for _, b, _, _ in rows], [e for _, _, e, _ in rows],
                              entry=entry, cohort=[c for *_, c in rows]),
        interval=interval,
    )
    tables = {"km": km.to_polars(), "median_tenure": km.medians_table()}
    notes = km_notes(km, "months")
    assert unexplained_values(tables, {}, notes) == []


def test_safety_net_and_json_safe():
    frame = pl.DataFrame({"a": [1.0, float("nan")], "b": [1.0, float("inf")], "c": [1, 2]})
    found = unexplained_values({"t": frame}, {}, [])
    assert {n.covers for n in found} == {("t.a",), ("t.b",)}
    covered = [warning("x", "explained", covers=("t.a", "t.b"))]
    assert unexplained_values({"t": frame}, {}, covered) == []
    spec = {"datasets": {"d": [{"y": float("nan")}, {"y": 1.0}, {"y": float("-inf")}]}}
    assert unexplained_values({}, {"chart": spec}, [])[0].covers == ("chart.*",)
    assert unexplained_values({"t": frame}, {"chart": spec}, covered, {"chart": "t"}) == []
    safe = json_safe(spec)
    assert safe == {"datasets": {"d": [{"y": None}, {"y": 1.0}, {"y": None}]}}
    json.dumps(safe, allow_nan=False)


def test_collect_puts_warnings_first_and_drops_repeats():
    a, b = warning("x", "careful"), Note("info", "x", "by the way")

    class Result:
        notes = (b, a)

    assert collect([b], Result(), [a]) == [a, b]


def test_report_of_a_log_where_everyone_churns(tmp_path):
    """One customer who cancels: retention 0, SE and upper limit undefined. The chart files are
    strict JSON, the report's embedded specs hold no NaN, and the report shows the warning."""
    from churnlife.config import parse_config
    from churnlife.pipeline import analyse, write_outputs
    from tests.bad_inputs import HEALTHY_CUSTOMERS, HEALTHY_EVENTS, config, log

    log(HEALTHY_EVENTS[:3], HEALTHY_CUSTOMERS[:1])(tmp_path / "data")
    run = analyse(parse_config(config(), base=tmp_path / "data"))
    assert math.isnan(run.km.curves[0].upper[-1])  # the value the note has to explain
    out = write_outputs(run, tmp_path / "out")
    def strict(constant: str) -> None:
        pytest.fail(f"non-JSON constant {constant} in an output file")

    for path in out.glob("*.vl.json"):
        json.loads(path.read_text(), parse_constant=strict)
    json.loads((out / "summary.json").read_text(), parse_constant=strict)
    html = (out / "report.html").read_text()
    specs = html[html.index("const specs = "):]
    specs = specs[: specs.index("\n")]
    assert "NaN" not in specs and "Infinity" not in specs
    assert "retention is 0 from there on" in html and "Warnings and notes" in html


def test_numeric_warnings_become_one_note_and_others_pass_through():
    import warnings

    with warnings.catch_warnings(record=True) as outside:
        warnings.simplefilter("always")
        with numeric_warnings() as caught:
            np.exp(np.array([1000.0, 2000.0]))
            np.log(np.array([-1.0]))
            warnings.warn("kept", DeprecationWarning, stacklevel=1)
    assert [str(w.message) for w in outside] == ["kept"]
    assert caught.count == 2 and "overflow encountered in exp" in caught.messages[0]
    (note,) = caught.note("fitting the hazard models")
    assert note.level == "info" and "2 floating-point" in note.text
    with numeric_warnings() as none:
        np.exp(1.0)
    assert none.note("x") == []
