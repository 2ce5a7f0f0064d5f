"""The value command and the [value] config table: a run on the demo, and bad input (exit 2,
one message naming the problem and the fix, nothing written)."""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest

from churnlife.cli import main


@pytest.fixture()
def demo_copy(demo_folder: Path, tmp_path: Path) -> Path:
    for name in ("tidewell.duckdb", "churnlife.toml"):
        shutil.copyfile(demo_folder / name, tmp_path / name)
    return tmp_path / "churnlife.toml"


def test_value_command_prints_and_writes(demo_copy: Path, capsys):
    out = demo_copy.parent / "out"
    assert main(["value", "--config", str(demo_copy), "--price-change", "0.05",
                 "--output", str(out)]) == 0
    text = capsys.readouterr().out
    assert "active base:" in text and "price +5%" in text and "cautions" in text
    for name in ("value_new_customer", "value_by_tenure", "value_active_base", "base_forecast",
                 "price_scenario", "price_sweep", "revenue_retention"):
        assert (out / f"{name}.csv").is_file(), name
    html = (out / "report.html").read_text()
    assert "What customers are worth" in html


@pytest.mark.parametrize(
    "extra, words",
    [
        ("discount_rte = 0.1\n", "discount_rate"),
        ('timing = "middle"\n', "timing"),
        ("horizon_years = -1\n", "horizon_years"),
        ('model = "weibul"\n', "weibull"),
    ],
)
def test_bad_value_settings_exit_2(demo_copy: Path, capsys, extra: str, words: str):
    text = demo_copy.read_text()
    assert "[value]\n" in text
    demo_copy.write_text(text.replace("[value]\n", "[value]\n" + extra, 1))
    out = demo_copy.parent / "out"
    assert main(["value", "--config", str(demo_copy), "--output", str(out)]) == 2
    err = capsys.readouterr().err
    assert words in err and "Traceback" not in err
    assert not out.exists()


def test_price_change_out_of_range_exit_2(demo_copy: Path, capsys):
    out = demo_copy.parent / "out"
    assert main(["value", "--config", str(demo_copy), "--price-change", "7",
                 "--output", str(out)]) == 2
    assert "price change" in capsys.readouterr().err
    assert not out.exists()


def test_value_backtest_option_writes_its_table(demo_copy: Path, capsys):
    out = demo_copy.parent / "out"
    assert main(["value", "--config", str(demo_copy), "--backtest", "6",
                 "--output", str(out)]) == 0
    assert "backtest from 2025-06-30" in capsys.readouterr().out
    import polars as pl

    bt = pl.read_csv(out / "value_backtest.csv")
    assert set(bt["units_ahead"].to_list()) == set(range(1, 7))
    assert {"expected_active", "still_active", "relative_error", "covered"} <= set(bt.columns)
