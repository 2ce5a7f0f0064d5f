"""Command-line and notebook display of a run: --json prints summary.json and nothing else,
--quiet prints nothing, progress of long steps appears on stderr only when it is a terminal, and
result objects show as HTML tables in notebooks (``_repr_html_``)."""

from __future__ import annotations

import io
import json
import os
import pty
import subprocess
import sys

import pytest

from churnlife.progress import TerminalProgress, shown_on, step


def _cli(*args: str, **kw) -> subprocess.CompletedProcess:
    return subprocess.run(
        [sys.executable, "-m", "churnlife", *args],
        capture_output=True,
        text=True,
        timeout=600,
        **kw,
    )


def test_json_prints_the_summary_and_nothing_else(demo_folder, tmp_path):
    out = tmp_path / "out"
    proc = _cli(
        "run",
        "--config",
        str(demo_folder / "churnlife.toml"),
        "--output",
        str(out),
        "--models",
        "weibull",
        "--json",
    )
    assert proc.returncode == 0 and proc.stderr == "", proc.stderr
    printed = json.loads(proc.stdout)  # the whole of stdout is one JSON document
    assert printed == json.loads((out / "summary.json").read_text())
    assert printed["data"]["n_spells"] > 0
    assert {h["key"] for h in printed["headlines"]} >= {"retention", "median_tenure"}


def test_quiet_prints_nothing(demo_folder, tmp_path):
    proc = _cli(
        "run",
        "--config",
        str(demo_folder / "churnlife.toml"),
        "--output",
        str(tmp_path / "out"),
        "--models",
        "none",
        "--quiet",
    )
    assert proc.returncode == 0, proc.stderr
    assert proc.stdout == "" and proc.stderr == ""
    assert (tmp_path / "out" / "report.html").is_file()


def test_quiet_still_reports_a_mistake(tmp_path):
    proc = _cli("run", "--config", str(tmp_path / "missing.toml"), "--quiet")
    assert proc.returncode == 2 and "config file not found" in proc.stderr


def test_progress_shows_on_a_terminal_only(demo_folder, tmp_path):
    """stderr is a pseudo-terminal here: the long steps are shown with their times."""
    leader, follower = pty.openpty()
    proc = subprocess.Popen(
        [
            sys.executable,
            "-m",
            "churnlife",
            "run",
            "--config",
            str(demo_folder / "churnlife.toml"),
            "--output",
            str(tmp_path / "out"),
            "--models",
            "weibull,sbg",
            "--band",
            "bootstrap",
        ],
        stdout=subprocess.PIPE,
        stderr=follower,
        text=True,
    )
    os.close(follower)
    seen = b""
    while True:
        try:
            chunk = os.read(leader, 4096)
        except OSError:  # the terminal closes when the run ends
            break
        if not chunk:
            break
        seen += chunk
    os.close(leader)
    stdout = proc.stdout.read() if proc.stdout else ""
    assert proc.wait(timeout=600) == 0
    text = seen.decode()
    for label in (
        "reading the log and counting spells",
        "comparing cohorts",
        "fitting hazard models and bootstrap bands",
        "writing tables, charts and the report",
    ):
        assert f"✓ {label} (" in text, text[-500:]
    assert "✓" not in stdout and "wrote" in stdout  # progress never goes to stdout


def test_progress_display_lines():
    class Tty(io.StringIO):
        def isatty(self) -> bool:
            return True

    tty = Tty()
    with shown_on(tty) as shown:
        assert shown
        with step("fitting"):
            pass
        with pytest.raises(KeyboardInterrupt), step("bootstrap"):
            raise KeyboardInterrupt
    with step("after"):  # display switched off again
        pass
    lines = tty.getvalue().replace("\r\033[K", "\n").split("\n")
    assert any(line.startswith("  ✓ fitting (") for line in lines)
    assert any(line.startswith("  ✗ bootstrap (") for line in lines)
    assert "after" not in tty.getvalue()
    plain = io.StringIO()  # not a terminal: nothing is shown
    with shown_on(plain) as shown, step("fitting"):
        assert not shown
    assert plain.getvalue() == ""
    assert isinstance(TerminalProgress(plain).interval, float)


def test_results_show_as_html_in_notebooks(demo_config):
    from churnlife.pipeline import analyse

    run = analyse(demo_config, models=("weibull", "sbg"))
    page = run._repr_html_()
    assert "Share still subscribed" in page and "95% interval" in page
    assert "retention_at" in page and "model_extrapolation" in page  # the tables it holds
    km = run.km._repr_html_()
    med = {m.cohort: m.median for m in run.km.medians}
    assert "Median tenure" in km and f"{med['beans_monthly']:.0f}" in km
    first = run.km.retention_at([1]).row(0, named=True)
    assert f"{first['retention'] * 100:.1f}% (" in km
    cmp = run.comparison._repr_html_()
    assert "log-rank" in cmp.lower() and "Hazard ratios" in cmp and "not randomised" in cmp
    models = run.models._repr_html_()
    best = run.models.best("beans_monthly").name
    assert best in models and "AIC" in models
    for html in (page, km, cmp, models):
        assert "<script" not in html and html.count("<table") >= 1
