"""Nelson–Aalen and restricted mean tenure.

Sources: 6-MP Nelson–Aalen H(t) and Σ d/n² in ../shared/reference/values.json (H printed in Klein &
Moeschberger 2003, recalled from memory; variance a library value); restricted mean checked against
the area under scipy.stats.ecdf's survival function, and its variance against Klein & Moeschberger
(2003) §4.5's formula written out here on statsmodels SurvfuncRight's risk sets.
"""

from __future__ import annotations

import numpy as np
import polars as pl
import pytest
from scipy import integrate, stats
from statsmodels.duration.survfunc import SurvfuncRight

from churnlife.counts import counts_from_durations
from churnlife.nelson_aalen import nelson_aalen, restricted_mean


@pytest.fixture(scope="module")
def six_mp(reference):
    return pl.read_csv(reference / "freireich_6mp.csv")


def test_nelson_aalen_6mp(six_mp, ref_values):
    ref = ref_values["freireich_6mp"]["nelson_aalen_6mp"]
    g = six_mp.filter(pl.col("group") == "6-MP")
    na = nelson_aalen(counts_from_durations(g["time_weeks"], g["event"]))
    at = na.filter(pl.col("tenure").is_in(ref["times"]))
    np.testing.assert_allclose(at["cumulative_hazard"], ref["cumhaz"], atol=ref["tol_abs"])
    np.testing.assert_allclose(at["variance"], ref["var_aalen"], atol=ref["tol_abs"])


@pytest.mark.parametrize("horizon", [10.0, 20.0, 30.0])
def test_restricted_mean_6mp(six_mp, horizon):
    g = six_mp.filter(pl.col("group") == "6-MP")
    t, e = g["time_weeks"].to_numpy().astype(float), g["event"].to_numpy()
    rm = restricted_mean(counts_from_durations(t, e), horizon)
    sf = stats.ecdf(stats.CensoredData(uncensored=t[e == 1], right=t[e == 0])).sf
    grid = np.linspace(0, horizon, 200_001)
    area = integrate.trapezoid(sf.evaluate(grid), grid)
    assert rm.estimate[0] == pytest.approx(area, abs=2e-4)  # trapezoid on a step function
    sm = SurvfuncRight(t, e)
    ti, s, n, d = sm.surv_times, sm.surv_prob, sm.n_risk, sm.n_events
    keep = ti <= horizon
    edges = np.append(ti[keep], horizon)
    a_i = np.array(
        [np.sum(s[keep][k:] * np.diff(edges)[k:]) for k in range(keep.sum())]
    )  # ∫_{t_i}^τ S
    var = np.sum(a_i**2 * d[keep] / (n[keep] * (n[keep] - d[keep])))
    assert rm.se[0] == pytest.approx(np.sqrt(var), rel=1e-10)
    assert rm.reached[0]


def test_difference_and_ratio(six_mp):
    counts = counts_from_durations(six_mp["time_weeks"], six_mp["event"], cohort=six_mp["group"])
    rm = restricted_mean(counts, 20.0)
    diff, se, lo, hi = rm.difference("6-MP", "placebo")
    assert diff > 0 and lo < diff < hi and se > 0
    r, rlo, rhi = rm.ratio("6-MP", "placebo")
    assert r == pytest.approx(rm.estimate[0] / rm.estimate[1]) and rlo < r < rhi


def test_horizon_past_the_data_is_flagged(six_mp):
    g = six_mp.filter(pl.col("group") == "placebo")
    rm = restricted_mean(counts_from_durations(g["time_weeks"], g["event"]), 100.0)
    assert not rm.reached[0]
