"""House rule (DEVELOPERS.md): no Python loop over customers anywhere in churnlife/. Per-row
iteration over a frame (iter_rows, rows(), to_dicts() inside a loop) is only allowed where the rows
are bounded by design (report tables capped at max_rows, a handful of unknown event codes)."""

from __future__ import annotations

import ast
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
ALLOWED = {
    # (file, function): why the rows there are few
    ("churnlife/report.py", "table_html"): "rows capped at Table.max_rows",
    ("churnlife/extract.py", "_check_codes"): "at most 20 unknown event codes",
    ("churnlife/source.py", "columns"): "the database's table names, for a hint",
    ("churnlife/quality.py", "count_anomalies"): "the columns of one summary row",
    ("churnlife/cli.py", "_models"): "the model ranking, at most 12 rows per cohort",
    ("churnlife/sections/comparison.py", "summary_lines"): "tests, coefficients and cohorts",
    ("churnlife/sections/value.py", "value_lines"): "one row per cohort",
    ("churnlife/value/scenario.py", "price_responses"): "one row per cohort",
    ("churnlife/value/valuation.py", "headline"): "one row per cohort",
}
ROW_ITERATORS = {"iter_rows", "rows", "to_dicts", "iterrows", "itertuples", "fetchall"}


def _offenders() -> list[str]:
    found = []
    for path in sorted((ROOT / "churnlife").rglob("*.py")) + sorted((ROOT / "demo").rglob("*.py")):
        rel = path.relative_to(ROOT).as_posix()
        tree = ast.parse(path.read_text())
        for func in ast.walk(tree):
            if not isinstance(func, ast.FunctionDef | ast.AsyncFunctionDef):
                continue
            for node in ast.walk(func):
                iters = []
                if isinstance(node, ast.For | ast.comprehension):
                    iters.append(node.iter)
                for it in iters:
                    for call in ast.walk(it):
                        if (
                            isinstance(call, ast.Call)
                            and isinstance(call.func, ast.Attribute)
                            and call.func.attr in ROW_ITERATORS
                            and (rel, func.name) not in ALLOWED
                        ):
                            found.append(f"{rel}:{call.lineno} in {func.name}: .{call.func.attr}()")
    return found


def test_no_row_loops():
    assert _offenders() == []
