"""The bad-input corpus (cases in tests/bad_inputs.py) through the command line.

Every case that must stop: exit code 2, exactly one line on stderr starting "churnlife:" that
contains the pieces naming the problem and the fix, no traceback, the previous output folder
untouched and no temporary folder left beside it, the source files unchanged (SHA-256).
Every handled anomaly: exit 0 and summary.json counts it. The house rule behind these checks
(exit 2, one message, nothing written) is churnlife's own (README.md); the expected counts are
worked out by hand from each small log.
"""

from __future__ import annotations

import contextlib
import hashlib
import json
import subprocess
import sys
from pathlib import Path

import pytest

from churnlife.cli import main
from tests.bad_inputs import CASES, HANDLED_CASES, Case


def _tree(folder: Path) -> dict[str, str]:
    """Relative path → SHA-256 (or '<dir>'/'<link>') of everything under ``folder``."""
    if not folder.exists():
        return {}
    out = {}
    for p in sorted(folder.rglob("*")):
        rel = p.relative_to(folder).as_posix()
        if p.is_symlink():
            out[rel] = "<link>"
        elif p.is_dir():
            out[rel] = "<dir>"
        else:
            out[rel] = hashlib.sha256(p.read_bytes()).hexdigest()
    return out


def _prepare(case: Case, tmp: Path) -> tuple[Path, Path, Path]:
    data = tmp / "data"
    config = case.build(data)
    outputs = tmp / "outputs"
    outputs.mkdir(exist_ok=True)
    if case.output is not None:
        out = case.output(tmp)
    else:
        # a previous run's folder that a failed run must leave exactly as it was
        out = outputs / "report"
        out.mkdir()
        (out / "report.html").write_text("<p>previous run</p>")
        (out / "counts.csv").write_text("cohort,tenure\nall,1\n")
    return config, out, outputs


def _args(case: Case, config: Path, out: Path) -> list[str]:
    args = [case.command, "--config", str(config)]
    return [*args, "--output", str(out)] if case.command == "run" else args


def _check_stop(case: Case, code: int, stderr: str) -> None:
    assert code == 2, stderr
    assert "Traceback" not in stderr
    lines = stderr.strip().splitlines()
    assert len(lines) == 1, stderr
    assert lines[0].startswith("churnlife: ")
    for piece in case.message:
        assert piece in lines[0], f"{piece!r} not in message: {lines[0]}"


def _check_run(case: Case, code: int, stderr: str, out: Path) -> None:
    assert code == 0, stderr
    assert "Traceback" not in stderr
    summary = json.loads((out / "summary.json").read_text())
    for key, value in case.counts.items():
        assert summary["data"][key] == value, (key, summary["data"])
    texts = " ".join(n["text"] for n in summary["notes"])
    for piece in case.notes:
        assert piece in texts, (piece, summary["notes"])
    report = (out / "report.html").read_text()
    assert "Data quality" in report and "Warnings and notes" in report


def test_corpus_is_large_enough():
    ids = [c.id for c in CASES + HANDLED_CASES]
    assert len(ids) == len(set(ids))
    assert len(CASES) >= 40 and len(HANDLED_CASES) >= 10


@pytest.mark.parametrize("case", CASES + HANDLED_CASES, ids=lambda c: c.id)
def test_case_in_process(case: Case, tmp_path: Path, capsys, monkeypatch):
    config, out, outputs = _prepare(case, tmp_path)
    source_before = _tree(tmp_path / "data")
    outputs_before = _tree(outputs)
    if case.patch is not None:
        case.patch(monkeypatch, tmp_path)
    ctx = case.context(tmp_path / "data") if case.context else contextlib.nullcontext()
    with ctx:
        code = main(_args(case, config, out))
    stderr = capsys.readouterr().err
    if case.stop:
        _check_stop(case, code, stderr)
        assert _tree(outputs) == outputs_before, "a failed run changed the output folder"
    else:
        _check_run(case, code, stderr, out)
        assert not (out / "counts.csv").read_text().startswith("cohort,tenure\nall,1")
        assert sorted(p.name for p in outputs.iterdir()) == ["report"]  # no temp folders
    assert _tree(tmp_path / "data") == source_before, "the source changed"


@pytest.mark.parametrize(
    "case", [c for c in CASES + HANDLED_CASES if c.subprocess], ids=lambda c: c.id
)
def test_case_as_a_program(case: Case, tmp_path: Path):
    """The same through `python -m churnlife`, in a fresh interpreter."""
    assert case.patch is None
    config, out, outputs = _prepare(case, tmp_path)
    source_before = _tree(tmp_path / "data")
    outputs_before = _tree(outputs)
    ctx = case.context(tmp_path / "data") if case.context else contextlib.nullcontext()
    with ctx:
        proc = subprocess.run(
            [sys.executable, "-m", "churnlife", *_args(case, config, out)],
            capture_output=True,
            text=True,
            timeout=300,
        )
    if case.stop:
        _check_stop(case, proc.returncode, proc.stderr)
        assert _tree(outputs) == outputs_before
    else:
        _check_run(case, proc.returncode, proc.stderr, out)
    assert _tree(tmp_path / "data") == source_before


def test_time_zone_aware_times_are_read_in_utc(tmp_path: Path):
    """23:30 at UTC-05:00 on 31 January is 04:30 UTC on 1 February, whatever the machine's zone:
    the spell's start date is 2022-02-01 (README.md, "Data quality": times with a zone are UTC)."""
    from churnlife.config import parse_config
    from churnlife.extract import run_extract
    from churnlife.source import open_source
    from tests.bad_inputs import EV_SCHEMA, config, log

    build = log(
        [(1, "2022-01-31 23:30:00-05:00", "start", "m", 10.0, None),
         (2, "2022-01-31 23:30:00+00:00", "start", "m", 10.0, None)],
        [(1, "2022-02-01", "web"), (2, "2022-01-31", "web")],
        ev_schema=EV_SCHEMA.replace("ts TIMESTAMP", "ts TIMESTAMPTZ"),
    )
    build(tmp_path)
    cfg = parse_config(config(), base=tmp_path)
    starts = run_extract(cfg, open_source(cfg)).spells()["start_date"].to_list()
    assert [d.isoformat() for d in starts] == ["2022-02-01", "2022-01-31"]


def test_text_times_with_offsets_are_converted_to_utc(tmp_path: Path):
    """'2022-03-01 01:00+02:00' is 2022-02-28 23:00 UTC: the spell starts on 28 February."""
    from churnlife.config import parse_config
    from churnlife.extract import run_extract
    from churnlife.source import open_source
    from tests.bad_inputs import config, text_times

    text_times(["2022-03-01 01:00:00+02:00", "2022-03-01T01:00:00Z"])(tmp_path)
    cfg = parse_config(config(), base=tmp_path)
    starts = run_extract(cfg, open_source(cfg)).spells().sort("customer_id")["start_date"]
    assert [d.isoformat() for d in starts] == ["2022-02-28", "2022-03-01"]


def test_nonpositive_price_gets_no_band(tmp_path: Path):
    """The rule for prices of zero or less: the spell stays, with no price band."""
    from churnlife.config import parse_config
    from churnlife.extract import run_extract
    from churnlife.source import open_source
    from tests.bad_inputs import HEALTHY_CUSTOMERS, HEALTHY_EVENTS, config, log

    events = [(*e[:4], -10.0 if e[0] == 2 else e[4], e[5]) for e in HEALTHY_EVENTS]
    log(events, HEALTHY_CUSTOMERS)(tmp_path)
    cfg = parse_config(config(cohorts={"by": ["price_band"], "price_bands": [50]}), base=tmp_path)
    spells = run_extract(cfg, open_source(cfg)).spells()
    bands = dict(zip(spells["customer_id"], spells["price_band"], strict=True))
    assert bands[2] is None and bands[1] == "under 50" and bands[4] == "50 and over"
