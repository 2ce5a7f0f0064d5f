"""DuckDB's memory limit and threads from the environment (README.md, "Large logs"): bad values
and a limit too small for the log stop with a message naming the variable (exit 2 at the CLI),
and the spill folder is churnlife's own, removed when the source closes."""

from __future__ import annotations

from pathlib import Path

import pytest

from churnlife.errors import UserError
from churnlife.extract import run_extract
from churnlife.source import open_source


@pytest.mark.parametrize(
    ("name", "value"), [("CHURNLIFE_MEMORY_LIMIT", "lots"), ("CHURNLIFE_THREADS", "two")]
)
def test_unreadable_setting_names_the_variable(demo_config, monkeypatch, name, value):
    monkeypatch.setenv(name, value)
    with pytest.raises(UserError, match=f"{name} = '{value}'"):
        open_source(demo_config)


def test_limit_too_small_for_the_log_says_how_to_fix_it(demo_config, monkeypatch):
    monkeypatch.setenv("CHURNLIFE_MEMORY_LIMIT", "2MB")
    source = open_source(demo_config)
    try:
        with pytest.raises(UserError, match="CHURNLIFE_MEMORY_LIMIT higher"):
            run_extract(demo_config, source)
    finally:
        source.close()


def test_settings_apply_and_spill_folder_is_removed(demo_config, monkeypatch):
    monkeypatch.setenv("CHURNLIFE_MEMORY_LIMIT", "300MB")
    monkeypatch.setenv("CHURNLIFE_THREADS", "1")
    source = open_source(demo_config)
    con = source._con
    limit, threads, spill = con.execute(
        "SELECT current_setting('memory_limit'), current_setting('threads'), "
        "current_setting('temp_directory')"
    ).fetchone()
    assert threads == 1 and limit.replace(" ", "").startswith(("286.1MiB", "300"))
    assert Path(spill).is_dir() and Path(spill).name.startswith("churnlife-spill-")
    source.close()
    assert not Path(spill).exists()
