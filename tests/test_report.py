"""The report page: the "At a glance" summary shows the right figures with their intervals, a
section's headline plugs into the summary with no change to it, tables download as CSV from the
page, and the written folder holds each chart as PNG and SVG.

Sources: Freireich et al. (1963) 6-MP data in ../shared/reference (values.json: Kaplan–Meier
from statsmodels SurvfuncRight, log-log interval from scipy.stats.ecdf, medians and their
intervals from SurvfuncRight.quantile / quantile_ci)."""

from __future__ import annotations

import json
import re
import urllib.parse
from pathlib import Path

import numpy as np
import polars as pl
import pytest

from churnlife.counts import counts_from_durations
from churnlife.km import kaplan_meier
from churnlife.report import Headline, Section, Table, render, table_html
from churnlife.sections.glance import SLOTS, glance_section, km_headlines, retention_sentence


def _six_mp(reference: Path):
    d = pl.read_csv(reference / "freireich_6mp.csv")
    return kaplan_meier(counts_from_durations(d["time_weeks"], d["event"], cohort=d["group"]))


def _at(times: list[float], values: list[float], t: float) -> float:
    """A step function read at t: the value at the last time at or before t."""
    i = int(np.searchsorted(times, t, side="right")) - 1
    return 1.0 if i < 0 else values[i]


def test_glance_figures_match_reference_km_and_medians(reference, ref_values):
    ref = ref_values["freireich_6mp"]
    km = _six_mp(reference)
    heads = km_headlines(km, "weeks", (10, 20, 30))
    by = {(h.key, h.cohort, h.label): h for h in heads}
    km6, ll = ref["km_6mp"], ref["km_6mp_loglog_ci95"]
    for t in (10, 20, 30):
        h = by[("retention", "6-MP", f"after {t} weeks")]
        assert h.value == pytest.approx(_at(km6["times"], km6["survival"], t), abs=1e-8)
        assert h.lower == pytest.approx(_at(ll["times"], ll["lower"], t), abs=1e-8)
        assert h.upper == pytest.approx(_at(ll["times"], ll["upper"], t), abs=1e-8)
    pl_ref = ref["km_placebo"]
    for t in (10, 20):
        h = by[("retention", "placebo", f"after {t} weeks")]
        assert h.value == pytest.approx(_at(pl_ref["times"], pl_ref["survival"], t), abs=1e-8)
    # placebo's longest time is 23 weeks: 30 weeks is not shown as a number, and says why
    past = by[("retention", "placebo", "after 30 weeks")]
    assert past.value is None and past.number() == "—" and "not observed" in past.caution
    med = {h.cohort: h for h in heads if h.key == "median_tenure"}
    assert med["6-MP"].value == ref["median"]["6-MP"]
    assert (med["placebo"].lower, med["placebo"].upper) == tuple(
        ref["median"]["ci95_cloglog_placebo"]
    )
    assert med["6-MP"].upper == np.inf and med["6-MP"].interval_text() == "13–not reached"

    # and the page shows those figures: 6-MP after 10 weeks is 75.3% (50.3–88.9%)
    html = glance_section([Section("retention", "Retention", [], headlines=heads)], 2, 0.95)
    text = html.blocks[0].html
    assert "75.3%" in text and "50.3–88.9%" in text
    assert "23 weeks" in text and "8 weeks" in text and "4–11 weeks" in text
    # the opening sentence reads the last tenure every cohort reached (placebo ends at 23)
    assert retention_sentence(heads) == (
        "After 20 weeks, 62.7% of 6-MP and 9.5% of placebo customers were still subscribed."
    )
    assert retention_sentence(heads) in text


def test_headline_number_and_interval_text():
    h = Headline("k", "T", "", 0.8234, 0.81, 0.83, fmt=".1%")
    assert (h.number(), h.interval_text()) == ("82.3%", "81.0–83.0%")
    m = Headline("k", "T", "", 14.0, 13.0, 15.0, fmt=".0f", unit="months")
    assert (m.number(), m.interval_text()) == ("14 months", "13–15 months")
    money = Headline("v", "T", "", 1234.5, 1100.25, 1390.0, fmt=",.2f", unit="EUR")
    assert money.number() == "1,234.50 EUR" and money.interval_text() == "1,100.25–1,390.00 EUR"
    assert Headline("k", "T", "", None, missing="not reached").number() == "not reached"
    change = Headline("p", "T", "", 226447.0, -270806.0, 789339.0, fmt="+,.0f")
    assert change.number() == "+226,447" and change.interval_text() == "−270,806 to +789,339"
    # a median interval on whole tenures can be one tenure: written once, not "14–14"
    one = Headline("k", "T", "", 14.0, 14.0, 14.0, fmt=".0f", unit="months")
    assert one.interval_text() == "14 months"
    d = m.as_dict()
    assert d["value"] == 14.0 and d["lower"] == 13.0 and d["unit"] == "months"
    assert json.loads(json.dumps(Headline("k", "T", "", 3.0, 1.0, float("inf")).as_dict()))[
        "upper_not_reached"
    ]


def test_a_value_headline_fills_its_slot_without_changing_the_summary():
    """How the value stage plugs in: its section carries a Headline with a slot key."""
    empty = glance_section([], 1, 0.95).blocks[0].html
    for title in SLOTS.values():
        assert title in empty
    assert empty.count("not computed in this run") == len(SLOTS)

    value = Section(
        "value",
        "Value",
        [],
        headlines=[
            Headline(
                "value_new_customer",
                "Value per new customer",
                "",
                182.4,
                160.0,
                205.9,
                fmt=",.2f",
                unit="EUR",
                interval="95% band",
                caution="Past 59 months this rests on the Weibull model's form.",
                section="value",
            )
        ],
    )
    html = glance_section([value], 1, 0.95).blocks[0].html
    assert "182.40 EUR" in html and "160.00–205.90 EUR" in html
    assert "rests on the Weibull" in html and 'href="#value"' in html
    assert html.count("not computed in this run") == len(SLOTS) - 1
    assert "they do not guarantee its outcome" in html  # money figures bring their caution


def test_grid_for_many_cohorts_and_labels_cards_otherwise():
    heads = [
        Headline("retention", "Share", f"after {t} months", 0.9 - t / 100, cohort=c, fmt=".1%")
        for c in ("a", "b")
        for t in (1, 12)
    ]
    grid = glance_section([Section("r", "R", [], headlines=heads)], 2, 0.95).blocks[0].html
    assert '<table class="grid">' in grid and grid.count("<tr>") == 3  # header + 2 cohorts
    one = glance_section([Section("r", "R", [], headlines=heads[:2])], 1, 0.95).blocks[0].html
    assert '<table class="grid">' not in one and one.count('class="card"') == 2


def test_table_csv_link_holds_the_whole_table():
    frame = pl.DataFrame({"cohort": ["a, the first", "b"] * 40, "retention": np.linspace(0, 1, 80)})
    html = table_html(Table(frame, csv_name="retention_at.csv", max_rows=10))
    href = re.search(r'download="retention_at-as-shown.csv" href="([^"]+)"', html).group(1)
    assert href.startswith("data:text/csv;charset=utf-8,")
    text = urllib.parse.unquote(href.split(",", 1)[1])
    back = pl.read_csv(text.encode())
    assert back.equals(frame)  # all 80 rows, though the page shows 10
    assert 'href="retention_at.csv"' in html and "Showing 10 of 80 rows" in html


def test_page_policy_forbids_loading_anything():
    page = render("T", "S", [Section("a", "A", [])], bundle="")
    policy = re.search(r'http-equiv="Content-Security-Policy" content="([^"]+)"', page).group(1)
    assert "default-src 'none'" in policy and "http" not in policy
    assert not re.search(r"""(src|href)=["']?(https?:|//)""", page)


def test_written_folder_has_png_and_svg_per_chart_and_headlines(demo_config, tmp_path):
    from churnlife.pipeline import analyse, write_outputs

    run = analyse(demo_config, models=("weibull", "sbg", "exponential"))
    out = write_outputs(run, tmp_path / "out")
    specs = sorted(p.name.removesuffix(".vl.json") for p in out.glob("*.vl.json"))
    assert specs
    for name in specs:
        assert (out / f"{name}.svg").read_text().lstrip().startswith("<svg")
        assert (out / f"{name}.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    html = (out / "report.html").read_text()
    assert html.index('id="glance"') < html.index('id="retention"')
    # every linked file beside the report exists
    for link in set(re.findall(r'href="([\w.-]+\.(?:csv|png|svg))"', html)):
        assert (out / link).is_file(), link
    summary = json.loads((out / "summary.json").read_text())
    kinds = {h["key"] for h in summary["headlines"]}
    assert {"retention", "median_tenure", "extrapolated"} <= kinds
    table = pl.read_csv(out / "retention_at.csv")
    for h in summary["headlines"]:
        if h["key"] == "retention" and h["value"] is not None:
            t = int(h["label"].split()[1])
            row = table.filter((pl.col("cohort") == h["cohort"]) & (pl.col("tenure") == t))
            assert row["retention"][0] == pytest.approx(h["value"], abs=1e-12)
    extra = [h for h in summary["headlines"] if h["key"] == "extrapolated"]
    assert all("observed only to" in h["caution"] for h in extra)
    # each extrapolated figure is its model's curve at the horizon; the caution gives where the
    # other fitted models land there (model dependence)
    bands = pl.read_csv(out / "model_extrapolation.csv")
    for h in extra:
        last = bands.filter(pl.col("cohort") == h["cohort"]).sort("tenure").row(-1, named=True)
        assert h["value"] == pytest.approx(last["survival"], abs=1e-12)
        fit = run.models.get(h["cohort"], last["model"])
        assert f"observed only to {int(fit.max_observed_tenure)} " in h["caution"]
        others = [
            float(f.survival(np.array([float(last["tenure"])]))[0])
            for f in run.models.for_cohort(h["cohort"])
            if f.convergence.converged and f.name != last["model"]
        ]
        assert len(others) == 2  # three models fitted
        assert f"give {min(others):.1%} to {max(others):.1%} at {last['tenure']} " in h["caution"]
    # the value stage's figures fill their places in the summary, with the written numbers
    assert set(SLOTS) <= kinds and "not computed in this run" not in html
    new = pl.read_csv(out / "value_new_customer.csv")
    for h in (h for h in summary["headlines"] if h["key"] == "value_new_customer"):
        row = new.filter(pl.col("cohort") == h["cohort"]).row(0, named=True)
        assert (h["value"], h["lower"], h["upper"]) == pytest.approx(
            (row["value"], row["lower"], row["upper"]), rel=1e-12
        )
    base = summary["value"]["active_base_value"]
    whole = [h for h in summary["headlines"] if h["key"] == "value_active_base"]
    assert any(
        h["cohort"] == "all cohorts" and h["value"] == pytest.approx(base["value"]) for h in whole
    )


def test_estimate_text_in_compact_tables():
    from churnlife.report import estimate_column, estimate_text

    assert estimate_text(588.4, 567.0, 631.2, ",.0f") == "588 (567–631)"
    assert estimate_text(-12.0, -40.0, 15.0, ",.0f") == "−12 (−40 to 15)"
    assert estimate_text(float("nan"), 1.0, 2.0, ",.0f") == "—"
    assert estimate_text(3.0, None, 4.0, ".1f") == "3.0"
    frame = pl.DataFrame({"v": [1.0, 2.0], "lo": [0.5, 2.0], "hi": [1.5, 2.0]})
    assert estimate_column(frame, "v", "lo", "hi", ".1f") == ["1.0 (0.5–1.5)", "2.0 (2.0)"]
