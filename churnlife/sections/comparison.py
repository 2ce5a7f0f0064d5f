"""The cohort-comparison part of the report: tests, hazard ratios, restricted mean tenure and
churn by cause, with words on what each shows and does not show."""

from __future__ import annotations

import polars as pl

from churnlife.charts_compare import cause_incidence, hazard_ratio_forest, retention_heatmap
from churnlife.compare import Comparison
from churnlife.report import Chart, Section, Table, Text, esc
from churnlife.sections.glance import restricted_mean_headlines


def p_text(column: str = "p") -> pl.Expr:
    """p-values as words a reader can scan: '< 0.0001' rather than 3e-152."""
    p = pl.col(column)
    return (
        pl.when(p.is_null() | p.is_nan())
        .then(pl.lit("—"))
        .when(p < 0.0001)
        .then(pl.lit("<\u00a00.0001"))  # no break inside the number
        .otherwise(p.round_sig_figs(2).cast(pl.String))
        .alias(column)
    )


def _para(text: str) -> Text:
    return Text(f"<p>{esc(text)}</p>")


def tests_section(cmp: Comparison, unit: str) -> Section:
    by = " × ".join(cmp.by)
    k = cmp.counts["cohort"].n_unique()
    best = cmp.tests.filter(pl.col("test") == "log-rank").row(0, named=True)
    verdict = (
        f"The {k} cohorts by {by} do not retain alike: a difference this large would be very "
        f"unlikely if churn were the same in all of them (log-rank p {_p(best['p'])})."
        if best["p"] < 0.05
        else f"The log-rank test finds no clear difference in churn between the {k} cohorts by "
        f"{by} (p {_p(best['p'])}). That is not proof that they retain alike: small cohorts or "
        "differences that cancel out over tenure are hard to see."
    )
    blocks = [
        _para(verdict),
        Table(
            cmp.tests.with_columns(p_text()),
            caption="Each test asks whether churn differs between cohorts more than chance "
            "would make it, weighting tenures differently (the emphasis column). They test "
            "for a difference, not its size or its cause; for the size see the hazard ratios "
            "and the restricted mean tenure below.",
            csv_name="cohort_tests.csv",
            formats={"chi_square": ".2f"},
        ),
        Table(
            cmp.logrank.to_polars(),
            caption="Churns observed in each cohort and the churns expected if every cohort had "
            "the pooled churn rate at each tenure (log-rank).",
            csv_name="cohort_observed_expected.csv",
            formats={"observed": ".0f", "expected": ".1f"},
        ),
        Table(
            cmp.pairwise.with_columns(p_text("p"), p_text("p_holm"), p_text("p_bonferroni")),
            caption="Every pair of cohorts compared with the log-rank test. With many pairs some "
            "small p-values arise by chance; the Holm and Bonferroni columns adjust for the "
            "number of pairs (Holm is the less conservative of the two).",
            csv_name="cohort_pairs.csv",
            formats={"chi_square": ".2f"},
        ),
        Chart(
            retention_heatmap(cmp.heatmap, unit, cmp.heatmap_by),
            "retention_heatmap",
            caption=f"Share of each {cmp.heatmap_by.replace('_', ' ')} cohort still subscribed "
            f"after each tenure. Read along a row for one cohort's decay and down a column to "
            "see whether newer cohorts keep customers better than older ones at the same tenure.",
        ),
    ]
    return Section(
        "comparison",
        "Are cohorts different?",
        blocks,
        lead=f"Tests of equal churn across cohorts by {by}, from the survival counts.",
    )


def _p(p: float) -> str:
    return "< 0.0001" if p < 0.0001 else f"= {p:.2g}"


def cox_section(cmp: Comparison) -> Section | None:
    cox, table = cmp.cox, cmp.hazard_ratios
    if cox is None or table is None:
        if not cmp.notes:
            return None
        return Section(
            "hazard-ratios", "How much faster do they churn?", [_para(n) for n in cmp.notes]
        )
    pct = round(cox.confidence * 100)
    strata = (
        f" Each {cox.strata} has its own baseline churn curve (strata), so the ratios compare "
        f"customers within the same {cox.strata}."
        if cox.strata
        else ""
    )
    blocks = [
        _para(
            "A hazard ratio compares the churn rate of a level with its reference level at the "
            "same tenure, holding the other terms fixed: 1.25 means a 25% higher churn rate "
            "among customers still subscribed, 0.80 a 20% lower one. The model assumes the "
            "ratio is the same at every tenure; the check below tests that." + strata
        ),
        Chart(
            hazard_ratio_forest(table, cox.confidence, cox.ties, cox.strata),
            "hazard_ratio_forest",
            caption=f"Hazard ratios with {pct}% Wald intervals (log scale). Right of the dashed "
            "line: churns faster than the reference level.",
        ),
        Table(
            table.with_columns(p_text()),
            caption=f"Cox model fitted on counts per covariate pattern and tenure ({cox.ties} "
            f"ties, {cox.n_churned:,} churns). log_hr is the log hazard ratio.",
            csv_name="hazard_ratios.csv",
            formats={c: ".3f" for c in ("log_hr", "se", "hazard_ratio", "lower", "upper", "z")},
        ),
    ]
    tests = cmp.cox_tests()
    if tests is not None:
        blocks.append(
            Table(
                tests.with_columns(p_text()),
                caption="Global tests that every hazard ratio is 1. They agree when the sample "
                "is large; the likelihood-ratio test is the one to quote when they differ.",
                csv_name="cox_tests.csv",
                formats={"chi_square": ".2f"},
            )
        )
    ph = cmp.ph_table()
    if cmp.ph_check is not None and ph is not None:
        blocks += [
            Text(
                '<h3>Is one ratio per level enough?</h3><div class="caution">'
                f"{esc(cmp.ph_check.verdict)}</div>"
            ),
            Table(
                ph.with_columns(p_text()),
                caption="Each coefficient's drift per unit of log tenure (the model refitted with "
                "covariate × log-tenure terms), and the likelihood-ratio test of no drift in any "
                "term: a form of the Grambsch–Therneau check that needs only the counts.",
                csv_name="cox_ph_check.csv",
                formats={"drift_per_log_tenure": ".3f", "se": ".3f", "chi_square": ".2f"},
            ),
        ]
    return Section(
        "hazard-ratios",
        "How much faster do they churn?",
        blocks,
        lead="Hazard ratios from a Cox proportional hazards model on the survival counts.",
    )


def rmst_section(cmp: Comparison, unit: str) -> Section:
    r = cmp.rmst
    ref = cmp.rmst_contrasts["reference"][0] if cmp.rmst_contrasts.height else ""
    pct = round(r.confidence * 100)
    h = f"{r.horizon:g}"
    return Section(
        "restricted-mean",
        f"Tenure kept in the first {h} {unit}",
        [
            _para(
                f"The restricted mean tenure is the average number of {unit}, out of the first "
                f"{h}, that a customer of the cohort stays subscribed: the area under its "
                "retention curve up to that tenure. It reads as time kept, which turns into "
                "revenue more directly than a hazard ratio, and needs no assumption about the "
                "shape of the curves. It says nothing about tenure after the horizon."
            ),
            Table(
                r.to_polars().drop("horizon"),
                caption=f"Restricted mean tenure to {h} {unit} with {pct}% intervals (Klein & "
                "Moeschberger's variance).",
                csv_name="restricted_mean.csv",
                formats={c: ".2f" for c in ("restricted_mean", "se", "lower", "upper")},
            ),
            Table(
                cmp.rmst_contrasts.with_columns(p_text()),
                caption=f"Each cohort against {ref}, the largest: difference in {unit} kept "
                f"and the ratio of restricted means, with {pct}% intervals.",
                csv_name="restricted_mean_contrasts.csv",
                formats={
                    **{c: ".2f" for c in ("difference", "se", "lower", "upper")},
                    **{c: ".3f" for c in ("ratio", "ratio_lower", "ratio_upper")},
                },
            ),
        ],
        lead=f"Average {unit} subscribed within the first {h}, per cohort.",
        headlines=restricted_mean_headlines(cmp, unit),
    )


def causes_section(cmp: Comparison, unit: str) -> Section:
    c = cmp.causes
    shares = c.shares(cmp.horizon)
    h = f"{cmp.horizon:g}"
    return Section(
        "churn-causes",
        "Why customers leave",
        [
            _para(
                "Customers leave by cancelling (voluntary) or through a failed payment that is "
                "not recovered (involuntary). The cumulative incidence is the share of a cohort "
                "that has left by each cause by a given tenure, counting that a customer who "
                "left for one reason can no longer leave for the other."
            ),
            Chart(
                cause_incidence(c, unit),
                "churn_by_cause",
                caption="Cumulative incidence of churn by cause with pointwise intervals "
                "(Aalen–Johansen, delta-method variance).",
            ),
            Table(
                shares,
                caption=f"Churns by cause and their share of all churns observed; the "
                f"cumulative incidence of each cause by tenure {h} and its share of all churn "
                "by then.",
                csv_name="churn_cause_shares.csv",
                formats={
                    "share": ".1%",
                    "cif_at_horizon": ".1%",
                    "cif_lower": ".1%",
                    "cif_upper": ".1%",
                    "share_of_incidence": ".1%",
                },
            ),
        ],
        lead="How much of churn is cancellation and how much is failed payment, per cohort.",
    )


def association_caution(cmp: Comparison) -> Section:
    items = [
        f"The cohorts by {' × '.join(cmp.by)} were not assigned at random. A plan or channel with "
        "lower churn may simply attract customers who would have stayed anyway, so the tests and "
        "ratios here describe associations; they do not say that moving customers to another "
        "plan or channel would change their churn.",
        "A small p-value says a difference is unlikely to be chance alone; with many customers "
        "even a commercially trivial difference gets one. Judge the size from the hazard ratios, "
        "the restricted mean tenure and the curves.",
        "Hazard ratios average over the tenures observed; late tenures rest on older cohorts "
        "only, who signed up under other conditions.",
    ]
    body = "".join(f'<div class="caution">{esc(t)}</div>' for t in items)
    return Section("compare-cautions", "Reading the comparisons", [Text(body)])


def comparison_sections(cmp: Comparison | None, unit: str) -> list[Section]:
    """The comparison sections in report order (one short section with a single cohort)."""
    if cmp is None:
        return [
            Section(
                "comparison",
                "Are cohorts different?",
                [Text("<p>Only one cohort in this run: set [cohorts] by to compare cohorts.</p>")],
            )
        ]
    sections = [tests_section(cmp, unit)]
    cox = cox_section(cmp)
    if cox is not None:
        sections.append(cox)
    sections += [rmst_section(cmp, unit), causes_section(cmp, unit), association_caution(cmp)]
    return sections


def summary_lines(cmp: Comparison, unit: str) -> list[str]:
    """The comparison in a few lines for the terminal (the first line alone for ``run``)."""
    k = cmp.counts["cohort"].n_unique()
    lr = cmp.tests.row(0, named=True)
    lines = [
        f"  log-rank across {k} cohorts by {' × '.join(cmp.by)}: chi-square "
        f"{lr['chi_square']:.1f} on {lr['df']} df, p {_p(lr['p'])}"
    ]
    for row in cmp.tests.slice(1).iter_rows(named=True):
        lines.append(
            f"    {row['test']}: chi-square {row['chi_square']:.1f} on {row['df']} df, "
            f"p {_p(row['p'])}"
        )
    cox, table = cmp.cox, cmp.hazard_ratios
    if cox is not None and table is not None:
        lines.append(
            f"  hazard ratios (Cox, {cox.ties} ties"
            + (f", strata {cox.strata}" if cox.strata else "")
            + f", {round(cox.confidence * 100)}% interval):"
        )
        for row in table.iter_rows(named=True):
            what = (
                f"{row['term']}: {row['level']} vs {row['reference']}"
                if row["reference"]
                else f"{row['term']} (per unit)"
            )
            lines.append(
                f"    {what}  {row['hazard_ratio']:.3f} ({row['lower']:.3f}–{row['upper']:.3f})"
            )
    if cmp.ph_check is not None:
        lines.append(f"  proportional hazards: {cmp.ph_check.verdict}")
    for note in cmp.notes:
        lines.append(f"  {note}")
    rm = cmp.rmst.to_polars()
    lines.append(f"  restricted mean tenure, first {cmp.horizon:g} {unit}:")
    for row in rm.iter_rows(named=True):
        lines.append(
            f"    {row['cohort']}  {row['restricted_mean']:.2f} "
            f"({row['lower']:.2f}–{row['upper']:.2f})"
        )
    shares = cmp.causes.shares()
    lines.append("  share of churn by cause:")
    for cohort in shares["cohort"].unique(maintain_order=True).to_list():
        part = shares.filter(pl.col("cohort") == cohort)
        text = ", ".join(f"{c} {s:.0%}" for c, s in zip(part["cause"], part["share"], strict=True))
        lines.append(f"    {cohort}: {text}")
    lines.append("  cohorts were not randomised: the differences are associations, not effects.")
    return lines
