"""The report's data-quality part (handled anomalies beside their rules) and its notes part
(warnings and reading notes carried by the results, churnlife.notes)."""

from __future__ import annotations

from typing import Any

from churnlife.notes import Note
from churnlife.quality import anomaly_table
from churnlife.report import Section, Table, Text, esc

_NOTE_STYLE = "border-color:#1f6f78;background:#eef5f5"


def quality_section(summary: dict[str, Any]) -> Section:
    table = anomaly_table(summary)
    found = int(table["count"].sum())
    rows = int(summary.get("n_rows") or 0)
    lead = (
        "Nothing unusual was found in the log."
        if found == 0
        else f"{found:,} anomalies in {rows:,} event rows, each handled by the rule beside it."
    )
    return Section(
        "quality",
        "Data quality",
        [
            Table(
                table,
                caption="Anomalies churnlife handles by a stated rule (README.md, 'Data "
                "quality'). Problems it cannot handle stop the run instead. Counts are of "
                "events unless the row says otherwise.",
                csv_name="data_quality.csv",
                max_rows=len(table) + 1,
            )
        ],
        lead=lead,
    )


def notes_section(notes: list[Note]) -> Section:
    if not notes:
        body = "<p>No warnings: every value in this report could be computed.</p>"
    else:
        items = []
        for n in notes:
            who = f"<strong>{esc(n.cohort)}</strong>: " if n.cohort else ""
            label = "Warning" if n.level == "warning" else "Note"
            # warnings in the amber caution style; reading notes in the report's teal
            style = "" if n.level == "warning" else f' style="{_NOTE_STYLE}"'
            items.append(f'<div class="caution"{style}><em>{label}.</em> {who}{esc(n.text)}</div>')
        body = "".join(items)
    n_warn = sum(n.level == "warning" for n in notes)
    return Section(
        "notes",
        "Warnings and notes",
        [Text(body)],
        lead=f"{n_warn} warning(s) and {len(notes) - n_warn} note(s) on how to read the values "
        "below; empty cells in tables are explained here.",
    )
