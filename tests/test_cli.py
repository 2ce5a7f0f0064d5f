"""The command line end to end: the demo job, the offline report, and user mistakes (exit 2, one
message, no traceback, nothing written)."""

from __future__ import annotations

import json
import re
import subprocess
import sys
from pathlib import Path

import pytest

from churnlife.cli import main


def _run(*args: str, cwd: Path | None = None) -> subprocess.CompletedProcess:
    return subprocess.run(
        [sys.executable, "-m", "churnlife", *args],
        capture_output=True,
        text=True,
        cwd=cwd,
        timeout=300,
    )


def test_run_writes_the_output_folder(demo_folder, tmp_path):
    out = tmp_path / "out"
    proc = _run("run", "--config", str(demo_folder / "churnlife.toml"), "--output", str(out))
    assert proc.returncode == 0, proc.stderr
    for name in (
        "report.html",
        "counts.csv",
        "counts.parquet",
        "km.csv",
        "retention_at.csv",
        "median_tenure.csv",
        "summary.json",
        "retention_curves.svg",
    ):
        assert (out / name).is_file(), name
    summary = json.loads((out / "summary.json").read_text())
    assert summary["data"]["n_spells"] > 0
    html = (out / "report.html").read_text()
    # self-contained: no external scripts, styles or fetches
    assert not re.search(r"""<(script|link|img)[^>]+(src|href)=["']?https?:""", html)
    assert "vegaEmbed" in html and "Retention by cohort" in html
    assert "Read with care" in html
    assert "Are cohorts different?" in html and (out / "hazard_ratios.csv").is_file()
    # no temp folders left beside the output
    assert [p.name for p in tmp_path.iterdir()] == ["out"]


def test_rerun_replaces_folder_atomically(demo_folder, tmp_path):
    out = tmp_path / "out"
    (out).mkdir()
    (out / "old.txt").write_text("previous run")
    assert main(["run", "--config", str(demo_folder / "churnlife.toml"), "--output", str(out)]) == 0
    assert not (out / "old.txt").exists() and (out / "report.html").exists()


def test_bad_config_key_exits_2_with_hint(tmp_path, demo_folder):
    cfg = (demo_folder / "churnlife.toml").read_text().replace("grace_days", "grace_dayz")
    cfg = cfg.replace('database = "tidewell.duckdb"', f'database = "{demo_folder}/tidewell.duckdb"')
    path = tmp_path / "bad.toml"
    path.write_text(cfg)
    proc = _run("run", "--config", str(path), "--output", str(tmp_path / "out"))
    assert proc.returncode == 2
    assert (
        'unknown config key "grace_dayz"' in proc.stderr
        and 'Did you mean "grace_days"' in proc.stderr
    )
    assert "Traceback" not in proc.stderr
    assert not (tmp_path / "out").exists()


def test_missing_config_exits_2(tmp_path):
    proc = _run("run", "--config", str(tmp_path / "nope.toml"))
    assert proc.returncode == 2 and "config file not found" in proc.stderr
    assert "Traceback" not in proc.stderr


def test_missing_table_exits_2(tmp_path, demo_folder):
    cfg = (demo_folder / "churnlife.toml").read_text()
    cfg = cfg.replace('events = "subscription_events"', 'events = "subscription_event"')
    cfg = cfg.replace('database = "tidewell.duckdb"', f'database = "{demo_folder}/tidewell.duckdb"')
    path = tmp_path / "bad.toml"
    path.write_text(cfg)
    proc = _run("check", "--config", str(path))
    assert proc.returncode == 2, proc.stderr
    assert "subscription_event not found" in proc.stderr and "subscription_events" in proc.stderr
    assert "Traceback" not in proc.stderr


def test_help_has_examples():
    proc = _run("--help")
    assert proc.returncode == 0 and "examples:" in proc.stdout and "churnlife demo" in proc.stdout


@pytest.mark.parametrize("args", [["demo", "--customers", "5"]])
def test_demo_argument_errors(args, tmp_path):
    assert main([*args, "--folder", str(tmp_path / "d")]) == 2
