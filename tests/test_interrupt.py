"""Ctrl-C (SIGINT) in the middle of a run: the previous output folder stays exactly as it was, no
temporary folder is left, and the program exits 130 with one line and no traceback.

Each test runs the real command line (churnlife.cli.main) in a fresh interpreter with one step
slowed down deterministically (a patch that prints a marker and waits), sends SIGINT when the marker
appears, and inspects the folders. Exit status 130 = 128 + SIGINT is the shell convention for a
program stopped by Ctrl-C (common practice, no single source).
"""

from __future__ import annotations

import hashlib
import json
import signal
import subprocess
import sys
import textwrap
from pathlib import Path

import pytest

from tests.bad_inputs import log

ROOT = Path(__file__).resolve().parents[1]

# The child restores Python's own Ctrl-C handler: a process started in the background by a shell
# inherits SIGINT ignored, and would then never see the signal this test sends.
PRELUDE = """
import signal, sys, time
signal.signal(signal.SIGINT, signal.default_int_handler)
sys.path.insert(0, {root!r})
from churnlife import cli
"""

SLOW_WRITE = """
from churnlife import outputs
real_table = outputs.OutputFolder.table
def table(self, name, frame, parquet=True):
    real_table(self, name, frame, parquet)
    print("PAUSED", flush=True)  # one table is written into the temporary folder
    time.sleep(120)
outputs.OutputFolder.table = table
"""

SLOW_QUERY = """
from churnlife import source
real_query = source.DuckDBSource.query
def query(self, sql, params):
    print("PAUSED", flush=True)
    # a query that runs for minutes inside DuckDB, through the real query path
    real_query(self, "SELECT count(*) FROM range(100000000000) t(x) WHERE x % 7 = 3", {})
    return real_query(self, sql, params)
source.DuckDBSource.query = query
"""

SIGNAL_DURING_SWAP = """
import os
from churnlife import outputs
real_replace = os.replace
def replace(src, dst):
    real_replace(src, dst)
    if ".previous-" in str(dst):  # the old folder was moved aside, the new one not yet in
        os.kill(os.getpid(), signal.SIGINT)
        time.sleep(0.2)
outputs.os.replace = replace
"""

RUN = """
sys.exit(cli.main(["run", "--config", {config!r}, "--output", {out!r}]))
"""


def _tree(folder: Path) -> dict[str, str]:
    return {
        p.relative_to(folder).as_posix(): hashlib.sha256(p.read_bytes()).hexdigest()
        for p in sorted(folder.rglob("*"))
        if p.is_file()
    }


def _setup(tmp: Path) -> tuple[Path, Path]:
    config = log()(tmp / "data")
    out = tmp / "outputs" / "report"
    out.mkdir(parents=True)
    (out / "report.html").write_text("<p>the previous run's report</p>")
    (out / "counts.csv").write_text("cohort,tenure\nall,1\n")
    return config, out


def _interrupt(patch: str, config: Path, out: Path, wait_for_marker: bool = True):
    script = (
        textwrap.dedent(PRELUDE.format(root=str(ROOT)))
        + textwrap.dedent(patch)
        + textwrap.dedent(RUN.format(config=str(config), out=str(out)))
    )
    proc = subprocess.Popen(
        [sys.executable, "-c", script],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
    )
    try:
        if wait_for_marker:
            assert proc.stdout is not None
            for line in proc.stdout:
                if line.strip() == "PAUSED":
                    break
            else:
                pytest.fail("the run ended before reaching the slowed step")
            proc.send_signal(signal.SIGINT)
        _, stderr = proc.communicate(timeout=60)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.communicate()
    return proc.returncode, stderr


def _one_clean_line(stderr: str) -> str:
    assert "Traceback" not in stderr, stderr
    lines = stderr.strip().splitlines()
    assert len(lines) == 1, stderr
    return lines[0]


@pytest.mark.parametrize(
    ("patch", "where"),
    [(SLOW_WRITE, "while writing the output tables"), (SLOW_QUERY, "inside a DuckDB query")],
    ids=["during-write", "during-query"],
)
def test_interrupt_leaves_previous_output(tmp_path, patch, where):
    config, out = _setup(tmp_path)
    before = _tree(out)
    source_before = _tree(tmp_path / "data")
    code, stderr = _interrupt(patch, config, out)
    assert code == 130, f"{where}: {stderr}"
    line = _one_clean_line(stderr)
    assert line.startswith("churnlife: interrupted; the output folder was left"), line
    assert _tree(out) == before, f"{where}: the previous output changed"
    assert sorted(p.name for p in out.parent.iterdir()) == ["report"], "temporary folder left"
    assert _tree(tmp_path / "data") == source_before


def test_interrupt_during_the_swap_finishes_it(tmp_path):
    """Ctrl-C between moving the previous folder aside and moving the new one in: the swap is
    completed first (never a missing folder), then the run stops with 130 and says so."""
    config, out = _setup(tmp_path)
    code, stderr = _interrupt(SIGNAL_DURING_SWAP, config, out, wait_for_marker=False)
    assert code == 130, stderr
    assert "completely written" in _one_clean_line(stderr)
    summary = json.loads((out / "summary.json").read_text())
    assert summary["data"]["n_spells"] == 6
    assert (out / "report.html").read_text() != "<p>the previous run's report</p>"
    assert sorted(p.name for p in out.parent.iterdir()) == ["report"]


def test_duckdb_interrupt_becomes_keyboard_interrupt():
    """DuckDB reports Ctrl-C inside a query as RuntimeError("Query interrupted") (seen with the
    duckdb Python client here); whether Python's own KeyboardInterrupt then overtakes it depends
    on timing, so the source maps it explicitly, and the CLI's exit 130 does not depend on luck."""
    from churnlife.source import _engine_errors

    with pytest.raises(KeyboardInterrupt), _engine_errors():
        raise RuntimeError("Query interrupted")
    with pytest.raises(RuntimeError, match="something else"), _engine_errors():
        raise RuntimeError("something else")
