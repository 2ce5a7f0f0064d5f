"""`churnlife compare` end to end on the demo, and its bad-input messages (exit 2, one line).

No outside source: these check the command's contract (what it prints and writes); the numbers
behind it are checked in tests/test_compare_*.py and tests/test_cox.py.
"""

from __future__ import annotations

import json

import pytest

from churnlife.cli import main


def test_compare_prints_and_writes(demo_folder, tmp_path, capsys):
    out = tmp_path / "cmp"
    code = main(
        [
            "compare",
            "--config",
            str(demo_folder / "churnlife.toml"),
            "--by",
            "plan,channel",
            "--strata",
            "signup_year",
            "--horizon",
            "12",
            "--output",
            str(out),
        ]
    )
    printed = capsys.readouterr().out
    assert code == 0
    assert "log-rank across 12 cohorts by plan × channel" in printed
    assert "log-rank within" in printed and "strata signup_year" in printed
    assert "restricted mean tenure, first 12 months" in printed
    assert "not randomised" in printed
    html = (out / "report.html").read_text()
    for title in (
        "Are cohorts different?",
        "How much faster do they churn?",
        "Why customers leave",
    ):
        assert title in html
    for name in ("cohort_tests", "hazard_ratios", "cox_ph_check", "churn_by_cause",
                 "restricted_mean_contrasts", "retention_heatmap"):  # fmt: skip
        assert (out / f"{name}.csv").is_file() and (out / f"{name}.parquet").is_file()
    spec = json.loads((out / "hazard_ratio_forest.vl.json").read_text())
    assert "layer" in spec  # the dashed line at 1, the intervals and the points


def test_compare_without_output_writes_nothing(demo_folder, tmp_path, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)
    assert main(["compare", "--config", str(demo_folder / "churnlife.toml")]) == 0
    assert "log-rank across 3 cohorts by plan" in capsys.readouterr().out
    assert list(tmp_path.iterdir()) == []


@pytest.mark.parametrize(
    ("args", "message"),
    [
        (["--by", "plan,chanel"], 'Did you mean "channel"'),
        (["--by", "plan", "--strata", "plan"], "also in --by"),
        (["--horizon", "1000"], "Choose --horizon between"),
    ],
)
def test_bad_options_exit_2(demo_folder, capsys, args, message):
    code = main(["compare", "--config", str(demo_folder / "churnlife.toml"), *args])
    err = capsys.readouterr().err
    assert code == 2
    assert message in err and len(err.strip().splitlines()) == 1
