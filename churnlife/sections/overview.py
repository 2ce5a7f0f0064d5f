"""Run settings, what the log holds (data summary and anomalies), and the cautions."""

from __future__ import annotations

from typing import Any

from churnlife.config import Config
from churnlife.report import Section, Text, esc, params_html


def data_summary_rows(summary: dict[str, Any]) -> dict[str, str]:
    """The data summary in plain words (numbers from queries/summary.sql)."""
    spells = int(summary["n_spells"])

    def share(n: Any) -> str:
        return f"{int(n):,} ({int(n) / spells:.1%} of spells)" if spells else str(n)

    return {
        "event rows in the table": f"{int(summary['n_rows']):,}",
        "customers with events in the window": f"{int(summary['n_customers_in_window']):,}",
        "customers with at least one spell": f"{int(summary['n_customers_with_spells']):,}",
        "subscription spells": f"{spells:,}",
        "spells that began before the log (late entry)": share(summary["n_late_entry"]),
        "spells still active at the as-of date (censored)": share(summary["n_censored"]),
        "voluntary churn (cancellations)": share(summary["n_voluntary"]),
        "involuntary churn (failed payments not recovered)": share(summary["n_involuntary"]),
        "second or later spells (reactivations)": share(summary["n_repeat_spells"]),
        "first and last event": f"{summary['first_event']} … {summary['last_event']}",
        "longest observed tenure": str(summary["max_tenure"]),
    }


def anomaly_rows(summary: dict[str, Any]) -> dict[str, str]:
    """Problems found in the log and how each was handled (rules in churnlife.quality)."""
    from churnlife.quality import HANDLED

    return {
        f"{a.what} ({a.rule})": f"{int(summary[a.key] or 0):,}"
        for a in HANDLED
        if a.key in summary
    }


def settings_section(config: Config) -> Section:
    return Section(
        "settings",
        "How this run was set up",
        [Text(params_html(config.summary()))],
        lead="The window, tenure unit and rules every number below depends on.",
    )


def data_section(summary: dict[str, Any]) -> Section:
    return Section(
        "data",
        "What the log holds",
        [Text(params_html(data_summary_rows(summary)))],
        lead="Counts from the event log inside the analysis window, before any model.",
    )


def cautions_section(config: Config) -> Section:
    unit = config.tenure_unit
    items = [
        "Cohorts are not randomised. Customers who chose a plan, or arrived through a channel, or "
        "signed up in a given period differ in other ways too, so differences between cohorts are "
        "associations, not effects.",
        "Curves stop at the longest tenure each cohort has been observed; nothing here says what "
        "happens after that. Any figure that extends a curve depends on a model's assumptions.",
        f"Tenure is counted in whole {unit}: a churn counts in the {unit[:-1]} it happened, a "
        f"customer still active counts only the {unit} completed. Customers who began before the "
        "log are counted from the day the log starts (left truncation), so early tenures rest on "
        "newer customers only.",
        "Retention describes the past. churnlife supports a decision about pricing or budgets; "
        "it does not guarantee its outcome.",
    ]
    body = "".join(f'<div class="caution">{esc(t)}</div>' for t in items)
    return Section("cautions", "Read with care", [Text(body)])
