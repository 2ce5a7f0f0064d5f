"""--show-sql on DuckDB: the statements are printed, not run, and they are the ones that run."""

from __future__ import annotations

from polars.testing import assert_frame_equal

from churnlife.cli import main
from churnlife.show_sql import extract_statements
from churnlife.source import open_source


def test_listing_runs_to_the_extracts_counts(demo_config, demo_extract):
    source = open_source(demo_config)
    statements = extract_statements(demo_config, source)
    titles = [t for t, _ in statements]
    assert titles[1].startswith("the spells") and titles[2].startswith("survival counts")
    keep, counts = statements[1][1], statements[2][1]
    con = source._con  # type: ignore[attr-defined]
    con.execute(keep.text, keep.values).fetchall()  # the printed CREATE TEMP TABLE
    shown = con.sql(counts.text, params=counts.values).pl()
    assert_frame_equal(shown.drop("cohort_all", strict=False), demo_extract.counts)
    source.close()


def test_cli_prints_and_writes_nothing(demo_folder, capsys, tmp_path):
    code = main(["run", "--config", str(demo_folder / "churnlife.toml"), "--show-sql",
                 "--output", str(tmp_path / "out")])
    out = capsys.readouterr().out
    assert code == 0
    assert "for DuckDB" in out and "CREATE TEMP TABLE churnlife_spells" in out
    assert "-- bound values:" in out
    assert not (tmp_path / "out").exists()
