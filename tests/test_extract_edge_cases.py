"""The SQL extract on small hand-written logs whose answers are worked out by hand below.

Tenure rules (DEVELOPERS.md): active on every day from start to end inclusive; exit instant =
end date + 1 day; months are calendar months; a churn counts at ceil(exit), a censoring at
floor(exit), entry at floor(entry).
"""

from __future__ import annotations

import datetime as dt

import polars as pl
import pytest

from churnlife.errors import UserError
from tests.logs import (
    CUT_SHORT_LOG,
    EDGE_CUSTOMERS,
    EDGE_EVENTS,
    PERIODS_CONFIG,
    PERIODS_LOG,
    UNITS_LOG,
    M,
    config_dict,
    extract,
    write_log,
)


@pytest.fixture()
def spells(tmp_path):
    write_log(tmp_path, EDGE_EVENTS, EDGE_CUSTOMERS)
    ex = extract(tmp_path, config_dict(cohorts={"by": ["plan"]}))
    return ex, ex.spells()


def _row(spells: pl.DataFrame, cid: int, n: int = 1) -> dict:
    rows = spells.filter((pl.col("customer_id") == cid) & (pl.col("spell_number") == n))
    assert rows.height == 1
    return rows.to_dicts()[0]


def test_late_entrant(spells):
    _, s = spells
    r = _row(s, 1)
    assert r["late_entry"] and r["start_date"] == dt.date(2021, 11, 15)
    # entry: 1 whole month (to 12-15) + 17 of 31 days to 01-01; exit 03-21: 4 months + 6/31.
    assert r["entry_exact"] == pytest.approx(1 + 17 / 31)
    assert r["exit_exact"] == pytest.approx(4 + 6 / 31)
    assert (r["entry_t"], r["exit_t"], r["churned"], r["cause"]) == (1, 5, True, "voluntary")
    assert r["cancel_reason"] == "price"


def test_recovered_failure_is_not_churn(spells):
    _, s = spells
    r = _row(s, 2)
    assert not r["churned"] and r["end_date"] is None
    assert (r["entry_t"], r["exit_t"]) == (0, 5)  # censored at as-of: 07-01 is 5 whole months


def test_unrecovered_failure_is_involuntary_churn(spells):
    _, s = spells
    r = _row(s, 3)
    assert r["churned"] and r["cause"] == "involuntary" and r["end_date"] == dt.date(2022, 4, 10)
    # active through 04-10, the anniversary: 1 month + 1/30 day, so churn counts in month 2.
    assert r["exit_exact"] == pytest.approx(1 + 1 / 30) and r["exit_t"] == 2


def test_reactivation_after_long_gap_is_a_new_spell(spells):
    _, s = spells
    first, second = _row(s, 4, 1), _row(s, 4, 2)
    assert first["churned"] and first["exit_t"] == 1
    assert second["start_date"] == dt.date(2022, 3, 21) and not second["churned"]  # 2023 ignored
    assert s.filter(pl.col("customer_id") == 4).height == 2


def test_short_gap_continues_the_spell(spells):
    _, s = spells
    r = _row(s, 5)
    assert s.filter(pl.col("customer_id") == 5).height == 1
    assert r["start_date"] == dt.date(2022, 1, 10) and not r["churned"]


def test_failure_still_in_grace_at_as_of_is_censored(spells):
    _, s = spells
    r = _row(s, 6)
    assert not r["churned"] and r["exit_t"] == 1


def test_duplicates_and_second_start(spells):
    ex, s = spells
    r = _row(s, 7)
    assert s.filter(pl.col("customer_id") == 7).height == 1
    assert r["start_date"] == dt.date(2022, 2, 14) and r["end_date"] == dt.date(2022, 4, 13)
    assert r["exit_t"] == 2  # through 04-13 = 1 month + 28/31 days → month 2
    assert ex.summary["n_duplicate_rows"] == 1


def test_same_day_cancel_is_one_day(tmp_path, spells):
    _, s = spells
    r = _row(s, 8)
    assert r["exit_exact"] == pytest.approx(1 / 30) and r["exit_t"] == 1 and r["churned"]


def test_events_after_as_of_are_ignored(spells):
    ex, _ = spells
    assert ex.summary["n_after_as_of"] == 1


def test_counts_by_hand(spells):
    ex, _ = spells
    m = ex.counts.filter(pl.col("plan") == M).sort("tenure")
    # Monthly spells: 1 (late, entry 1, churn 5), 2 (censored 5), 3 (churn 2), 4a (churn 1),
    # 4b (censored 3), 6 (censored 1), 7 (churn 2), 8 (churn 1).
    by_t = {r["tenure"]: r for r in m.to_dicts()}
    assert by_t[0]["entered"] == 7 and by_t[1]["entered"] == 1
    assert by_t[1]["at_risk"] == 7 and by_t[1]["churned"] == 2 and by_t[1]["censored"] == 1
    assert by_t[2]["at_risk"] == 5 and by_t[2]["churned"] == 2
    assert by_t[2]["churned_involuntary"] == 1 and by_t[2]["churned_voluntary"] == 1
    assert by_t[3]["at_risk"] == 3 and by_t[3]["censored"] == 1
    assert by_t[5]["at_risk"] == 2 and by_t[5]["churned"] == 1 and by_t[5]["censored"] == 1


@pytest.mark.parametrize(
    ("unit", "exit_exact"),
    [("days", 47.0), ("weeks", 47 / 7)],
)
def test_other_units(tmp_path, unit, exit_exact):
    write_log(tmp_path, *UNITS_LOG)  # 02-01 to 03-19
    r = extract(tmp_path, config_dict(tenure={"unit": unit})).spells().to_dicts()[0]
    assert r["exit_exact"] == pytest.approx(exit_exact)  # 02-01 .. 03-19 inclusive = 47 days


def test_periods_unit_uses_plan_length(tmp_path):
    write_log(tmp_path, *PERIODS_LOG)  # annual plan, 01-10 to 04-09
    cfg = config_dict(**PERIODS_CONFIG)  # a whole year observed
    r = extract(tmp_path, cfg).spells().to_dicts()[0]
    assert r["exit_exact"] == pytest.approx(3 / 12) and r["exit_t"] == 1


def test_unknown_event_code_stops_the_run(tmp_path):
    write_log(tmp_path, [(1, "2022-02-01 08:00", "begin", M, 10, None)], [(1, "2022-02-01", "web")])
    with pytest.raises(UserError, match='unknown event codes in the log: "begin"'):
        extract(tmp_path, config_dict())


def test_missing_column_is_named(tmp_path):
    write_log(tmp_path, [(1, "2022-02-01 08:00", "start", M, 10, None)], [(1, "2022-02-01", "web")])
    cfg = config_dict(columns={"event_time": "event_ts"})
    with pytest.raises(UserError, match='event_time = "event_ts" is not a column'):
        extract(tmp_path, cfg)


def test_source_file_is_unchanged(tmp_path):
    import hashlib

    path = write_log(
        tmp_path, [(1, "2022-02-01 08:00", "start", M, 10, None)], [(1, "2022-02-01", "web")]
    )
    before = hashlib.sha256(path.read_bytes()).hexdigest()
    extract(tmp_path, config_dict()).spells()
    assert hashlib.sha256(path.read_bytes()).hexdigest() == before


def test_churn_in_the_unit_cut_short_by_as_of_is_not_counted(tmp_path):
    """As-of 06-30: a spell started 03-10 has 3 whole months in the window (to 06-10). A cancel on
    06-20 falls in month 4, which the window cuts short, so it is censored at 3: customers still
    active in month 4 could not be counted as surviving it either."""
    write_log(tmp_path, *CUT_SHORT_LOG)
    ex = extract(tmp_path, config_dict())
    s = {r["customer_id"]: r for r in ex.spells().to_dicts()}
    assert s[1]["churned"] and not s[1]["churn_counted"] and s[1]["exit_t"] == 3
    assert s[2]["churned"] and s[2]["churn_counted"] and s[2]["exit_t"] == 3
    assert int(ex.counts["churned"].sum()) == 1 and int(ex.counts["censored"].sum()) == 1
