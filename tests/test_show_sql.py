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
    assert titles[1].startswith("each customer's first event")
    assert titles[2].startswith("each customer's spell boundary marks")
    assert titles[3].startswith("the spells") and titles[4].startswith("survival counts")
    con = source._con  # type: ignore[attr-defined]
    # the printed CREATE TEMP TABLEs: the per-customer pass, the marks, then the spells
    for _, keep in statements[1:4]:
        con.execute(keep.text, keep.values).fetchall()
    counts = statements[4][1]
    shown = con.sql(counts.text, params=counts.values).pl()
    assert_frame_equal(shown.drop("cohort_all", strict=False), demo_extract.counts)
    source.close()


def test_cli_prints_and_writes_nothing(demo_folder, capsys, tmp_path):
    code = main(["run", "--config", str(demo_folder / "churnlife.toml"), "--show-sql",
                 "--output", str(tmp_path / "out")])
    out = capsys.readouterr().out
    assert code == 0
    assert "for DuckDB" in out and "CREATE TEMP TABLE churnlife_spells_3" in out
    assert "-- bound values:" in out
    assert not (tmp_path / "out").exists()
