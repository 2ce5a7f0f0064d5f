"""The report's opening summary, "At a glance": the figures a decision rests on, each with its
interval and the caution it needs, gathered from the headlines the other sections carry
(``Section.headlines``). A section adds a figure by giving its Section a ``Headline``; the
summary needs no change for it. The headline builders for retention, median tenure, restricted
mean tenure and the hazard models' extrapolation are here too."""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np
import polars as pl

from churnlife.km import KaplanMeierResult
from churnlife.report import Headline, Section, Text, esc, headlines_in

# Groups in the order the summary shows them; any other key follows in order of appearance.
ORDER = (
    "retention",
    "median_tenure",
    "restricted_mean",
    "extrapolated",
    "value_new_customer",
    "value_active_base",
    "price_scenario",
)
# Figures the summary keeps a place for: shown as an empty card when no section supplies them.
SLOTS = {
    "value_new_customer": "Value per new customer",
    "value_active_base": "Value of the active customer base",
    "price_scenario": "Price scenario",
}


def _after(t: float, unit: str) -> str:
    return f"after {t:g} {unit[:-1] if t == 1 and unit.endswith('s') else unit}"


def km_headlines(km: KaplanMeierResult, unit: str, retention_at: Sequence[int]) -> list[Headline]:
    """Retention at the config's tenures and median tenure, per cohort, with intervals."""
    pct = round(km.confidence * 100)
    out = []
    for row in km.retention_at(list(retention_at)).iter_rows(named=True):
        seen = row["retention"] is not None
        out.append(
            Headline(
                "retention",
                "Share still subscribed",
                _after(row["tenure"], unit),
                row["retention"],
                row["lower"],
                row["upper"],
                fmt=".1%",
                cohort=row["cohort"],
                interval=f"{pct}% interval",
                caution="" if seen else f"— : not observed for {row['tenure']} {unit} yet.",
                missing="—",
                section="retention",
            )
        )
    for m in km.medians:
        reached = m.median == m.median
        out.append(
            Headline(
                "median_tenure",
                "Median tenure: the tenure by which half the customers had left",
                "",
                m.median if reached else None,
                m.lower if reached else None,
                m.upper if reached else None,
                fmt=".0f",
                unit=unit,
                cohort=m.cohort,
                interval=f"{pct}% interval",
                missing="not reached",
                caution=""
                if reached
                else "Not reached: more than half were still subscribed at the longest tenure "
                "observed.",
                section="retention",
            )
        )
    return out


def restricted_mean_headlines(comparison: Any, unit: str) -> list[Headline]:
    """Average tenure within the comparison's horizon per cohort (churnlife.nelson_aalen)."""
    if comparison is None:
        return []
    rm = comparison.rmst
    pct = round(rm.confidence * 100)
    out = []
    for row in rm.to_polars().iter_rows(named=True):
        out.append(
            Headline(
                "restricted_mean",
                f"Average tenure within the first {rm.horizon:g} {unit}",
                "",
                row["restricted_mean"],
                row["lower"],
                row["upper"],
                fmt=".1f",
                unit=unit,
                cohort=row["cohort"],
                interval=f"{pct}% interval",
                caution=""
                if row["observed_to_horizon"]
                else f"Not observed for the full {rm.horizon:g} {unit}: the average stops where "
                "the data stop.",
                section="restricted-mean",
            )
        )
    return out


def model_headlines(models: Any, bands: pl.DataFrame, unit: str) -> list[Headline]:
    """Per cohort, the best model's retention at the end of the extrapolation, with its band and
    the spread of the other converged models at the same tenure (model dependence)."""
    if models is None or bands.height == 0:
        return []
    pct = round(models.confidence * 100)
    out = []
    for (cohort, model), part in bands.group_by("cohort", "model", maintain_order=True):
        last = part.sort("tenure").row(-1, named=True)
        horizon = int(last["tenure"])
        fit = models.get(cohort, model)
        seen = int(fit.max_observed_tenure)
        others = [
            float(f.survival(np.array([float(horizon)]))[0])
            for f in models.for_cohort(cohort)
            if f.convergence.converged and f.name != model
        ]
        spread = (
            f"; the other {len(others)} fitted models give {min(others):.1%} to "
            f"{max(others):.1%} at {horizon} {unit}"
            if len(others) > 1
            else ""
        )
        out.append(
            Headline(
                "extrapolated",
                "Past the data: share still subscribed by the best-fitting model",
                f"{_after(horizon, unit)} ({model} model)",
                last["survival"],
                last["lower"],
                last["upper"],
                fmt=".1%",
                cohort=str(cohort),
                interval=f"{pct}% band",
                caution=f"{cohort}: observed only to {seen} {unit}{spread}.",
                section="extrapolation",
            )
        )
    return out


def _rows(table: pl.DataFrame | None, needed: Sequence[str]) -> list[dict[str, Any]]:
    """The rows of a value table, or none if it is missing or lacks a column the summary reads."""
    if table is None or table.height == 0 or not set(needed) <= set(table.columns):
        return []
    return table.to_dicts()  # one row per cohort


def value_headlines(valuation: Any) -> list[Headline]:
    """Value per new customer, value of the active base and the price scenario's change in base
    value (churnlife.value), in the log's currency, each with its interval and caution."""
    if valuation is None:
        return []
    t = valuation.tables
    pct = round(valuation.confidence * 100)
    money = {"fmt": ",.0f", "interval": f"{pct}% interval", "section": "value"}
    out = []
    for r in _rows(t.get("value_new_customer"), ("cohort", "model", "value", "lower", "upper")):
        beyond = r.get("share_of_value_beyond_data")
        caution = (
            f"{r['cohort']}: {beyond:.0%} of this value comes from tenures no customer has "
            f"reached yet ({r['model']} model)."
            if beyond is not None and beyond == beyond and beyond > 0
            else ""
        )
        out.append(
            Headline(
                "value_new_customer",
                "Value per new customer (discounted, in the log's currency)",
                "",
                r["value"],
                r["lower"],
                r["upper"],
                cohort=r["cohort"],
                caution=caution,
                **money,
            )
        )
    base_cols = ("cohort", "active_customers", "value", "lower", "upper")
    for r in _rows(t.get("value_active_base"), base_cols):
        out.append(
            Headline(
                "value_active_base",
                "Value of today's active customers from now on (discounted)",
                f"{int(r['active_customers']):,} active customers",
                r["value"],
                r["lower"],
                r["upper"],
                cohort=r["cohort"],
                caution="Each active customer is valued from their current tenure; past the "
                "observed tenures the figure rests on the models.",
                **money,
            )
        )
    scen_cols = (
        "cohort",
        "price_change",
        "change_in_base_value",
        "change_in_base_lower",
        "change_in_base_upper",
        "break_even_hazard_ratio",
    )
    for r in _rows(t.get("price_scenario"), scen_cols):
        hr, even = r.get("hazard_ratio"), r["break_even_hazard_ratio"]
        pays = (
            f"{r['cohort']}: the change pays while churn after it rises by less than "
            f"×{even:.2f}" + (f" (estimated ×{hr:.2f})." if hr is not None and hr == hr else ".")
            if even is not None and even == even
            else ""
        )
        out.append(
            Headline(
                "price_scenario",
                f"Price change of {r['price_change']:+.0%}: change in the base's value",
                "",
                r["change_in_base_value"],
                r["change_in_base_lower"],
                r["change_in_base_upper"],
                cohort=r["cohort"],
                caution=pays,
                fmt="+,.0f",
                interval=f"{pct}% interval",
                section="value",
            )
        )
    return out


def _group_html(key: str, items: list[Headline]) -> str:
    first = items[0]
    link = f'<a href="#{esc(first.section)}">details</a>' if first.section else ""
    cohorts = list(dict.fromkeys(h.cohort for h in items))
    labels = list(dict.fromkeys(h.label for h in items))
    per_cohort = max(sum(h.cohort == c for h in items) for c in cohorts)
    if len(cohorts) > 1 and per_cohort > 1:
        cell = {(h.cohort, h.label): h for h in items}
        head = "".join(f"<th>{esc(lab)}</th>" for lab in labels)
        rows = []
        for c in cohorts:
            tds = []
            for lab in labels:
                h = cell.get((c, lab))
                if h is None:
                    tds.append("<td></td>")
                    continue
                iv = h.interval_text()
                tds.append(
                    f'<td><div class="fig">{esc(h.number())}</div>'
                    + (f'<div class="iv">{esc(iv)}</div>' if iv else "")
                    + "</td>"
                )
            rows.append(f"<tr><td>{esc(c)}</td>{''.join(tds)}</tr>")
        small = f'<p class="caption">Small figures: the {esc(first.interval)}.</p>'
        body = (
            f'<div class="table-wrap"><table class="grid"><thead><tr><th>cohort</th>'
            f"{head}</tr></thead><tbody>{''.join(rows)}</tbody></table></div>"
            + (small if first.interval else "")
        )
    else:
        cards = []
        for h in items:
            who = " · ".join(x for x in (h.cohort, h.label if len(labels) > 1 else "") if x)
            iv = h.interval_text()
            cards.append(
                '<div class="card">'
                + (f'<div class="who">{esc(who)}</div>' if who else "")
                + f'<div class="fig">{esc(h.number())}</div>'
                + (f'<div class="iv">{esc(h.interval)} {esc(iv)}</div>' if iv else "")
                + "</div>"
            )
        body = f'<div class="cards">{"".join(cards)}</div>'
        if len(labels) == 1 and first.label:
            link = f"{esc(first.label)} · {link}" if link else esc(first.label)
    cautions = list(dict.fromkeys(h.caution for h in items if h.caution))
    notes = (
        '<ul class="glance-cautions">' + "".join(f"<li>{esc(c)}</li>" for c in cautions) + "</ul>"
        if cautions
        else ""
    )
    return (
        f'<div class="glance-group" data-key="{esc(key)}"><h3>{esc(first.title)}'
        f"{' ' + link if link else ''}</h3>{body}{notes}</div>"
    )


def retention_sentence(items: Sequence[Headline]) -> str:
    """The summary's first sentence in plain words, e.g. "After 12 months, 82.9% of beans_annual
    and 52.8% of beans_monthly customers were still subscribed." ("" without retention)."""
    rows = [h for h in items if h.key == "retention"]
    cohorts = list(dict.fromkeys(h.cohort for h in rows))
    seen = [h for h in rows if h.value is not None]
    labels = list(dict.fromkeys(h.label for h in seen))
    complete = [lab for lab in labels if sum(h.label == lab for h in seen) == len(cohorts)]
    if not complete:
        return ""
    pick = next((lab for lab in complete if lab.split()[1:2] == ["12"]), complete[-1])
    chosen = [h for h in seen if h.label == pick]
    lead = pick[0].upper() + pick[1:]
    if len(chosen) == 1:
        h = chosen[0]
        return (
            f"{lead}, {h.number()} of customers were still subscribed ({h.interval} "
            f"{h.interval_text()})."
        )
    parts = [f"{h.number()} of {h.cohort}" for h in chosen]
    joined = ", ".join(parts[:-1]) + f" and {parts[-1]}"
    return f"{lead}, {joined} customers were still subscribed."


def glance_section(sections: Sequence[Section], n_cohorts: int, confidence: float) -> Section:
    """The summary up front, from the headlines of ``sections`` (in their order)."""
    items = headlines_in(list(sections))
    groups: dict[str, list[Headline]] = {}
    for h in items:
        groups.setdefault(h.key, []).append(h)
    keys = [k for k in ORDER if k in groups] + [k for k in groups if k not in ORDER]
    sentence = retention_sentence(items)
    parts = [f'<p class="gist">{esc(sentence)}</p>'] if sentence else []
    parts += [_group_html(k, groups[k]) for k in keys]
    empty = [title for key, title in SLOTS.items() if key not in groups]
    if empty:
        cards = "".join(
            f'<div class="card empty"><div class="who">{esc(t)}</div>'
            '<div class="fig">not computed in this run</div></div>'
            for t in empty
        )
        parts.append(
            '<div class="glance-group" data-key="not-computed"><h3>Value and scenarios</h3>'
            f'<div class="cards">{cards}</div></div>'
        )
    general = [
        "Every figure is an estimate from the log with its interval: the range a repeat of the "
        "same business would be expected to give, not a guarantee.",
    ]
    if n_cohorts > 1:
        general.append(
            "Cohorts are not randomised: customers chose their plan or channel, so differences "
            "between cohorts are associations, not effects of the plan or channel."
        )
    if any(h.key == "extrapolated" for h in items):
        general.append(
            "Figures past the longest observed tenure come from a model's form, not from data: "
            "they depend on the model chosen, and their bands hold parameter uncertainty only. "
            "Treat them as scenarios and compare models before relying on one."
        )
    if any(h.key in SLOTS for h in items):
        general.append(
            "Money figures rest on the retention curves and their extrapolation; they support a "
            "decision, they do not guarantee its outcome."
        )
    if any(h.key == "price_scenario" for h in items):
        general.append(
            "The price response is estimated from past increases the business chose, not from a "
            "randomised test, and only over the sizes of increase seen."
        )
    box = "".join(f"<li>{esc(t)}</li>" for t in general)
    parts.append(
        f'<div class="caution"><strong>Before using these figures</strong><ul>{box}</ul></div>'
    )
    pct = round(confidence * 100)
    return Section(
        "glance",
        "At a glance",
        [Text("".join(parts))],
        lead=f"The headline figures, each with its {pct}% interval; the sections below show how "
        "each was reached.",
    )
