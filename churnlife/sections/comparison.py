"""The cohort-comparison part of the report: log-rank tests, pairwise table, Cox hazard ratios
and the proportional-hazards check, with words on what they do and do not show."""

from __future__ import annotations

from dataclasses import dataclass

import polars as pl

from churnlife.cox import CoxResult, ProportionalityCheck, cox_fit, proportionality_check
from churnlife.logrank import LogRankResult, logrank_test, pairwise_tests
from churnlife.nelson_aalen import RestrictedMean, restricted_mean
from churnlife.report import Section, Table, Text, esc


@dataclass(frozen=True)
class Comparison:
    """Everything the comparison section shows, for the API and the tables."""

    overall: LogRankResult
    weighted: tuple[LogRankResult, ...]
    pairwise: pl.DataFrame
    cox: CoxResult | None
    ph_check: ProportionalityCheck | None
    restricted: RestrictedMean | None = None

    def tests_table(self) -> pl.DataFrame:
        rows = (self.overall, *self.weighted)
        names = {
            "logrank": "log-rank (equal weight at every tenure)",
            "gehan-breslow": "Gehan–Breslow (weights early tenures)",
            "fleming-harrington": "Fleming–Harrington ρ=0, γ=1 (weights late tenures)",
        }
        return pl.DataFrame(
            {
                "test": [names.get(r.weight, r.weight) for r in rows],
                "chi_square": [r.statistic for r in rows],
                "df": [r.df for r in rows],
                "p": [r.pvalue for r in rows],
            }
        )


def compare_cohorts(
    counts: pl.DataFrame, cohorts: tuple[str, ...], horizon: float | None = None
) -> Comparison | None:
    """Tests across the run's cohorts, a Cox model with the cohort attributes as covariates and
    the restricted mean tenure to ``horizon`` (None when there is a single cohort)."""
    if counts["cohort"].n_unique() < 2:
        return None
    overall = logrank_test(counts)
    weighted = (
        logrank_test(counts, weight="gehan-breslow"),
        logrank_test(counts, weight="fleming-harrington", rho=0.0, gamma=1.0),
    )
    cox = check = None
    if cohorts:
        cox = cox_fit(counts, list(cohorts))
        check = proportionality_check(cox, counts, list(cohorts))
    rm = restricted_mean(counts, horizon) if horizon else None
    return Comparison(overall, weighted, pairwise_tests(counts), cox, check, rm)


def comparison_section(comp: Comparison | None) -> Section:
    if comp is None:
        return Section(
            "comparison",
            "Are cohorts different?",
            [Text("<p>Only one cohort in this run: set [cohorts] by to compare cohorts.</p>")],
        )
    blocks = [
        Table(
            comp.tests_table(),
            caption="Tests of equal retention across all cohorts.",
            csv_name="cohort_tests.csv",
            formats={"chi_square": ".2f", "p": ".3g"},
        ),
        Table(
            comp.pairwise,
            caption="Every pair of cohorts; p adjusted for the number of pairs (Holm, Bonferroni).",
            csv_name="cohort_pairs.csv",
            formats={"chi_square": ".2f", "p": ".3g", "p_holm": ".3g", "p_bonferroni": ".3g"},
        ),
    ]
    if comp.cox is not None:
        ref = ", ".join(f"{k} = {v}" for k, v in comp.cox.reference.items())
        pct = round(comp.cox.confidence * 100)
        blocks.append(
            Table(
                comp.cox.to_polars().select("term", "hazard_ratio", "hr_lower", "hr_upper", "p"),
                caption=f"Hazard ratios from a Cox model ({comp.cox.ties} ties) against {ref}, "
                f"with {pct}% Wald intervals. Above 1: churns faster than the reference.",
                csv_name="hazard_ratios.csv",
                formats={"hazard_ratio": ".3f", "hr_lower": ".3f", "hr_upper": ".3f", "p": ".3g"},
            )
        )
    if comp.restricted is not None:
        rm = comp.restricted
        blocks.append(
            Table(
                rm.to_polars(),
                caption=f"Restricted mean tenure: expected tenure within the first {rm.horizon:g} "
                "units, the area under each retention curve, with its interval (Klein & "
                "Moeschberger's variance). observed_to_horizon false: the cohort was not followed "
                "that long and its value is not comparable.",
                csv_name="restricted_mean.csv",
                formats={"restricted_mean": ".2f", "se": ".3f", "lower": ".2f", "upper": ".2f"},
            )
        )
    if comp.ph_check is not None:
        blocks.append(Text(f'<div class="caution">{esc(comp.ph_check.verdict)}</div>'))
    blocks.append(
        Text(
            '<div class="caution">A small p says the cohorts\' retention differs by more than '
            "chance would usually produce; it does not say why. Cohorts are not randomised, so a "
            "difference may come from who joins each cohort rather than from the plan, channel or "
            "period itself. A large p does not prove the cohorts are the same.</div>"
        )
    )
    return Section(
        "comparison",
        "Are cohorts different?",
        blocks,
        lead="Whether the retention curves differ by more than chance, and by how much.",
    )
