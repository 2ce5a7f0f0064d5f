"""Kaplan–Meier on the published 6-MP remission data and a left-truncated example.

Sources (values and tolerances from ../shared/reference/values.json, see its README):
* Freireich et al. (1963) 6-MP data; KM, Greenwood SE and medians as printed in Kleinbaum & Klein
  (2012) ch. 2 and Klein & Moeschberger (2003) §4.2 (recalled from memory; the checks use the
  values recomputed with statsmodels SurvfuncRight and scipy.stats.ecdf, which agree with the
  printed digits).
* left_truncation_example: statsmodels SurvfuncRight(time, event, entry=entry) values.
"""

from __future__ import annotations

import numpy as np
import polars as pl
import pytest

from churnlife.counts import counts_from_durations
from churnlife.km import kaplan_meier


def _six_mp(reference):
    d = pl.read_csv(reference / "freireich_6mp.csv")
    counts = counts_from_durations(d["time_weeks"], d["event"], cohort=d["group"])
    return kaplan_meier(counts)


@pytest.mark.parametrize(("group", "key"), [("6-MP", "km_6mp"), ("placebo", "km_placebo")])
def test_km_and_greenwood_match_reference(reference, ref_values, group, key):
    ref = ref_values["freireich_6mp"][key]
    curve = _six_mp(reference).curve(group)
    at = np.isin(curve.tenure, ref["times"])
    np.testing.assert_array_equal(curve.tenure[at], ref["times"])
    np.testing.assert_array_equal(curve.at_risk[at], ref["n_risk"])
    np.testing.assert_array_equal(curve.churned[at], ref["n_events"])
    np.testing.assert_allclose(curve.survival[at], ref["survival"], atol=ref["tol_abs"], rtol=0)
    se_ref = np.array([np.nan if v is None else v for v in ref["greenwood_se"]])
    np.testing.assert_allclose(curve.se[at], se_ref, atol=ref["tol_abs"], rtol=0)


def test_km_agrees_with_printed_table(reference, ref_values):
    """Kleinbaum & Klein ch. 2 printed S(t) to 4 decimals (recalled from memory)."""
    pub = ref_values["freireich_6mp"]["km_6mp"]["published"]["survival"]
    curve = _six_mp(reference).curve("6-MP")
    at = curve.churned > 0
    np.testing.assert_allclose(np.round(curve.survival[at], 4), pub["value"], atol=1e-12)


def test_loglog_interval_matches_reference(reference, ref_values):
    ref = ref_values["freireich_6mp"]["km_6mp_loglog_ci95"]
    curve = _six_mp(reference).curve("6-MP")
    at = np.isin(curve.tenure, ref["times"])
    np.testing.assert_allclose(curve.lower[at], ref["lower"], atol=ref["tol_abs"], rtol=0)
    np.testing.assert_allclose(curve.upper[at], ref["upper"], atol=ref["tol_abs"], rtol=0)


def test_median_and_interval(reference, ref_values):
    """Medians 23 and 8 weeks (Kleinbaum & Klein ch. 2, from memory); intervals are statsmodels'
    quantile_ci(0.5, method='cloglog') values."""
    ref = ref_values["freireich_6mp"]["median"]
    km = _six_mp(reference)
    med = {m.cohort: m for m in km.medians}
    assert med["6-MP"].median == ref["6-MP"]
    assert med["placebo"].median == ref["placebo"]
    lo, hi = ref["ci95_cloglog_6-MP"]
    assert med["6-MP"].lower == lo and hi is None and med["6-MP"].upper == np.inf
    assert (med["placebo"].lower, med["placebo"].upper) == tuple(ref["ci95_cloglog_placebo"])


def test_left_truncation_risk_sets(reference, ref_values):
    ref = ref_values["left_truncation_example"]["km_with_entry"]
    d = pl.read_csv(reference / "left_truncation_example.csv")
    curve = kaplan_meier(counts_from_durations(d["time"], d["event"], entry=d["entry"])).curve(
        "all"
    )
    at = np.isin(curve.tenure, ref["times"])
    np.testing.assert_array_equal(curve.at_risk[at], ref["n_risk"])
    np.testing.assert_allclose(curve.survival[at], ref["survival"], atol=ref["tol_abs"], rtol=0)
    np.testing.assert_allclose(curve.se[at], ref["greenwood_se"], atol=ref["tol_abs"], rtol=0)
    # Ignoring entry gives the (wrong) values the reference keeps for contrast: entry matters.
    wrong = ref_values["left_truncation_example"]["km_ignoring_entry"]["survival"]
    assert not np.allclose(curve.survival[at], wrong)


def test_plain_interval_is_clipped_normal(reference):
    d = pl.read_csv(reference / "freireich_6mp.csv")
    km = kaplan_meier(counts_from_durations(d["time_weeks"], d["event"]), interval="plain")
    c = km.curve("all")
    z = 1.959963984540054  # scipy.stats.norm.ppf(0.975)
    at = (c.churned > 0) & (c.survival > 0)
    np.testing.assert_allclose(c.lower[at], np.clip(c.survival - z * c.se, 0, 1)[at], atol=1e-12)
    np.testing.assert_allclose(c.upper[at], np.clip(c.survival + z * c.se, 0, 1)[at], atol=1e-12)
