"""Compare cohorts: every comparison this stage makes, run on counts from one extract.

``compare_cohorts`` answers "do these cohorts retain differently, by how much, and is it more
than noise?" with the log-rank family (churnlife.logrank), a Cox model on the counts
(churnlife.cox), churn by cause (churnlife.causes), Nelson–Aalen and restricted mean tenure
(churnlife.nelson_aalen), and a signup-cohort × tenure retention grid. Each piece re-counts the
staged spells inside the engine (``Extract.counts_by``), so nothing here grows with customers.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import polars as pl
from scipy import stats

from churnlife.causes import CauseResult, cumulative_incidence
from churnlife.config import COHORT_KEYS
from churnlife.cox import CoxResult, ProportionalityCheck, cox_fit, proportionality_check
from churnlife.errors import UserError, did_you_mean
from churnlife.extract import Extract
from churnlife.km import kaplan_meier
from churnlife.logrank import LogRankResult, TrendResult, logrank_test, pairwise_tests, trend_test
from churnlife.nelson_aalen import RestrictedMean, nelson_aalen, restricted_mean
from churnlife.notes import Note, info

ORDERED_KEYS = ("signup_month", "signup_quarter", "signup_year")
# (label, weight, rho, gamma, what it emphasises)
TEST_FAMILY = (
    ("log-rank", "logrank", 0.0, 0.0, "every tenure equally"),
    ("Gehan–Breslow (Wilcoxon)", "gehan-breslow", 0.0, 0.0, "early tenures (most at risk)"),
    ("Tarone–Ware", "tarone-ware", 0.0, 0.0, "early tenures, less strongly"),
    ("Peto–Peto–Prentice", "peto-peto", 0.0, 0.0, "early tenures, by the pooled retention"),
    ("Fleming–Harrington (0, 1)", "fleming-harrington", 0.0, 1.0, "late tenures"),
)
HEATMAP_MAX_TENURES = 48
HEATMAP_MIN_AT_RISK = 10


def parse_by(text: str | list[str] | tuple[str, ...]) -> tuple[str, ...]:
    """Cohort attributes from "plan,channel" (or a list), validated against churnlife's list."""
    items = [t.strip() for t in text.split(",")] if isinstance(text, str) else list(text)
    items = [t for t in items if t]
    for item in items:
        if item not in COHORT_KEYS:
            raise UserError(
                f'"{item}" is not a cohort attribute.{did_you_mean(item, COHORT_KEYS)} Choose from '
                f"{', '.join(COHORT_KEYS)}."
            )
    if len(set(items)) != len(items):
        raise UserError(f"cohort attributes repeat in {items}; name each once.")
    return tuple(items)


def _label(by: tuple[str, ...]) -> pl.Expr:
    """The cohort label queries/counts.sql builds, for the ``by`` attributes alone."""
    parts = [pl.col(c).cast(pl.String).fill_null("(none)") for c in by]
    return pl.concat_str(parts, separator=" · ") if len(parts) > 1 else parts[0]


@dataclass(frozen=True)
class Comparison:
    """Everything ``compare_cohorts`` found.

    Attributes
    ----------
    by, strata : the cohort attributes compared, and the attribute compared within (or None).
    horizon : the restricted mean tenure horizon (tenure units).
    counts : counts per ``by`` cohort × tenure.
    tests : the k-sample test family (test, emphasis, chi_square, df, p), with the stratified and
        trend tests when they apply.
    logrank : the plain log-rank test (observed and expected churn per cohort).
    pairwise : every pair of cohorts, log-rank p with Holm and Bonferroni adjustment.
    trend : test for a trend across time-ordered cohorts (signup month/quarter/year), else None.
    stratified : the log-rank test within levels of ``strata``, else None.
    cox : Cox model with each ``by`` attribute as a categorical covariate (``strata`` as strata),
        None when it could not be estimated (see ``notes``); ph_check its proportional-hazards
        check (covariate × log-tenure interactions, likelihood-ratio test).
    hazard_ratios : the Cox coefficients as a table: term, level, reference, log_hr, se,
        hazard_ratio, lower, upper, z, p.
    nelson_aalen : cohort, tenure, at_risk, churned, cumulative_hazard, variance.
    rmst, rmst_contrasts : restricted mean tenure to ``horizon`` per cohort, and each cohort's
        difference from and ratio to the reference cohort, with intervals.
    causes : churn by cause (Aalen–Johansen).
    heatmap : cohort, tenure, retention, at_risk: Kaplan–Meier retention for each signup cohort
        (``heatmap_by``) while at least 10 customers are at risk.
    """

    by: tuple[str, ...]
    strata: str | None
    horizon: float
    counts: pl.DataFrame
    tests: pl.DataFrame
    logrank: LogRankResult
    pairwise: pl.DataFrame
    trend: TrendResult | None
    stratified: LogRankResult | None
    cox: CoxResult | None
    ph_check: ProportionalityCheck | None
    hazard_ratios: pl.DataFrame | None
    nelson_aalen: pl.DataFrame
    rmst: RestrictedMean
    rmst_contrasts: pl.DataFrame
    causes: CauseResult
    heatmap: pl.DataFrame
    heatmap_by: str
    notes: tuple[str, ...] = ()

    def _repr_html_(self) -> str:  # shown in notebooks
        from churnlife.notebook import comparison_html

        return comparison_html(self)

    def cox_tests(self) -> pl.DataFrame | None:
        """The Cox model's global tests of "every hazard ratio is 1"."""
        if self.cox is None:
            return None
        tests = (self.cox.lr_test, self.cox.wald_test, self.cox.score_test)
        return pl.DataFrame(
            {
                "test": ["likelihood ratio", "Wald", "score"],
                "chi_square": [t.statistic for t in tests],
                "df": [t.df for t in tests],
                "p": [t.pvalue for t in tests],
            }
        )

    def ph_table(self) -> pl.DataFrame | None:
        """Each coefficient's drift per unit of log tenure, and the joint likelihood-ratio test."""
        check = self.ph_check
        if check is None:
            return None
        z = check.interaction / check.se
        return pl.DataFrame(
            {
                "term": [*check.terms, "all terms (likelihood ratio)"],
                "drift_per_log_tenure": [*check.interaction.tolist(), None],
                "se": [*check.se.tolist(), None],
                "chi_square": [*(z**2).tolist(), check.lr.statistic],
                "df": [*([1] * len(check.terms)), check.lr.df],
                "p": [*(2 * stats.norm.sf(np.abs(z))).tolist(), check.lr.pvalue],
            }
        )

    def tables(self) -> dict[str, pl.DataFrame]:
        """Tables for the output folder (CSV and Parquet), by file stem."""
        out = {
            "cohort_tests": self.tests,
            "cohort_observed_expected": self.logrank.to_polars(),
            "cohort_pairs": self.pairwise,
            "nelson_aalen": self.nelson_aalen,
            "restricted_mean": self.rmst.to_polars(),
            "restricted_mean_contrasts": self.rmst_contrasts,
            "churn_by_cause": self.causes.incidence,
            "cause_specific_hazards": self.causes.hazards,
            "churn_cause_shares": self.causes.shares(self.horizon),
            "retention_heatmap": self.heatmap,
        }
        if self.cox is not None and self.hazard_ratios is not None:
            out["hazard_ratios"] = self.hazard_ratios
            out["cox_tests"] = self.cox_tests()
            out["cox_baseline"] = self.cox.baseline_cumulative_hazard()
        ph = self.ph_table()
        if ph is not None:
            out["cox_ph_check"] = ph
        return out


def _tests_table(
    counts: pl.DataFrame, trend: TrendResult | None, stratified: LogRankResult | None
) -> tuple[pl.DataFrame, LogRankResult]:
    rows = []
    plain = None
    for label, weight, rho, gamma, emphasis in TEST_FAMILY:
        r = logrank_test(counts, weight=weight, rho=rho, gamma=gamma)
        plain = plain or r
        rows.append((label, emphasis, r.statistic, r.df, r.pvalue))
    if stratified is not None:
        rows.append(
            (
                f"log-rank within {', '.join(stratified.strata[:6])}"
                + (" …" if len(stratified.strata) > 6 else ""),
                "every tenure, each stratum its own risk sets",
                stratified.statistic,
                stratified.df,
                stratified.pvalue,
            )
        )
    if trend is not None:
        rows.append(
            ("trend across signup order", "a steady rise or fall", trend.statistic, 1, trend.pvalue)
        )
    table = pl.DataFrame(
        {
            "test": [r[0] for r in rows],
            "emphasis": [r[1] for r in rows],
            "chi_square": [r[2] for r in rows],
            "df": [r[3] for r in rows],
            "p": [r[4] for r in rows],
        }
    )
    assert plain is not None
    return table, plain


def retention_grid(counts: pl.DataFrame, min_at_risk: int = HEATMAP_MIN_AT_RISK) -> pl.DataFrame:
    """Kaplan–Meier retention per cohort × tenure, kept while ``min_at_risk`` are at risk, on at
    most 48 tenures (every tenure if there are that few, else evenly spaced ones)."""
    km = kaplan_meier(counts)
    table = km.to_polars().filter((pl.col("tenure") > 0) & (pl.col("at_risk") >= min_at_risk))
    tenures = np.unique(table["tenure"].to_numpy())
    if tenures.size > HEATMAP_MAX_TENURES:
        keep = np.unique(np.linspace(tenures[0], tenures[-1], HEATMAP_MAX_TENURES).round())
        table = table.filter(pl.col("tenure").is_in(keep.astype(np.int64).tolist()))
    return table.select("cohort", "tenure", pl.col("survival").alias("retention"), "at_risk")


def default_horizon(counts: pl.DataFrame, preferred: tuple[int, ...] | list[int]) -> float:
    """The largest of ``preferred`` tenures (e.g. the report's retention_at) that every cohort
    has been observed to; else the shortest cohort's longest observed tenure."""
    shortest = float(counts.group_by("cohort").agg(pl.col("tenure").max())["tenure"].min())
    fits = [float(t) for t in preferred if 0 < t <= shortest]
    return max(fits) if fits else shortest


def _reference_levels(counts: pl.DataFrame, by: tuple[str, ...]) -> dict[str, str]:
    """Per attribute, the level with the most customers entering: the others are compared with
    the best-measured level."""
    size = "entered" if "entered" in counts.columns else "at_risk"
    out = {}
    for col in by:
        sizes = (
            counts.group_by(pl.col(col).cast(pl.String).fill_null("(none)").alias("_lvl"))
            .agg(pl.col(size).sum().alias("_n"))
            .sort(["_n", "_lvl"], descending=[True, False])
        )
        out[col] = str(sizes["_lvl"][0])
    return out


def hazard_ratio_table(cox: CoxResult) -> pl.DataFrame:
    """Cox coefficients with each level and its reference spelled out."""
    table = cox.to_polars()
    terms, levels, refs = [], [], []
    for name in cox.names:
        term, _, level = name.partition("=")
        terms.append(term)
        levels.append(level)
        refs.append(cox.reference.get(term, "") if level else "")
    return pl.DataFrame({"term": terms, "level": levels, "reference": refs}).hstack(
        table.select(
            "log_hr",
            "se",
            "hazard_ratio",
            pl.col("hr_lower").alias("lower"),
            pl.col("hr_upper").alias("upper"),
            "z",
            "p",
        )
    )


def _contrasts(rm: RestrictedMean, reference: str) -> pl.DataFrame:
    """Each cohort against ``reference``: difference and ratio of restricted means."""
    rows = []
    for c in rm.cohorts:
        if c == reference:
            continue
        diff, se, lo, hi = rm.difference(c, reference)
        ratio, r_lo, r_hi = rm.ratio(c, reference)
        p = float(2 * stats.norm.sf(abs(diff / se))) if se > 0 else float("nan")
        rows.append((c, reference, diff, se, lo, hi, p, ratio, r_lo, r_hi))
    names = ("cohort", "reference", "difference", "se", "lower", "upper", "p", "ratio",
             "ratio_lower", "ratio_upper")  # fmt: skip
    return pl.DataFrame(
        {n: [r[i] for r in rows] for i, n in enumerate(names)},
        schema_overrides={"cohort": pl.String, "reference": pl.String},
    )


def compare_cohorts(
    extract: Extract,
    by: tuple[str, ...] | list[str] | None = None,
    strata: str | None = None,
    ties: str = "efron",
    horizon: float | None = None,
    confidence: float = 0.95,
    preferred_horizons: tuple[int, ...] = (12, 6, 3, 1),
) -> Comparison:
    """Run every cohort comparison on one extract.

    Parameters
    ----------
    extract : the run's extract (its staged spells are re-counted for each grouping).
    by : cohort attributes (default: the config's ``[cohorts] by``). With two or more, the
        tests compare their combinations and the Cox model has one categorical term each.
    strata : an attribute to compare within (stratified log-rank; Cox strata).
    ties : Cox tie handling, "efron" or "breslow".
    horizon : RMST horizon in tenure units (default: the largest of ``preferred_horizons``
        every cohort has reached).
    """
    by = parse_by(list(by) if by is not None else list(extract.cohort_columns))
    if not by:
        raise UserError(
            "nothing to compare: name cohort attributes with --by (e.g. --by plan,channel) or "
            "under [cohorts] by in the config."
        )
    if ties not in ("efron", "breslow"):
        raise UserError(f'ties must be "efron" or "breslow", not "{ties}".')
    if strata is not None:
        (strata,) = parse_by([strata])
        if strata in by:
            raise UserError(f"--strata {strata} is also in --by; compare within another attribute.")
    counts = extract.counts if tuple(extract.cohort_columns) == by else extract.counts_by(list(by))
    n_cohorts = counts["cohort"].n_unique()
    if n_cohorts < 2:
        raise UserError(
            f"{', '.join(by)} has one cohort only in this data: nothing to compare. Choose other "
            "attributes with --by."
        )
    shortest = float(counts.group_by("cohort").agg(pl.col("tenure").max())["tenure"].min())
    if horizon is not None and not 0 < horizon <= shortest:
        raise UserError(
            f"the restricted-mean horizon {horizon:g} is outside the tenures every cohort was "
            f"observed for (up to {shortest:g}). Choose --horizon between 0 and {shortest:g}."
        )
    trend = None
    if len(by) == 1 and by[0] in ORDERED_KEYS:
        trend = trend_test(counts, sorted(counts["cohort"].unique().to_list()))
    stratified = None
    cox_counts = counts
    if strata is not None:
        cox_counts = extract.counts_by([*by, strata])
        relabelled = cox_counts.with_columns(_label(by).alias("cohort"))
        stratified = logrank_test(relabelled, strata=strata)
    tests, plain = _tests_table(counts, trend, stratified)
    notes: list[str] = []
    cox = check = table = None
    fit = cox_fit(
        cox_counts,
        list(by),
        ties=ties,
        strata=strata,
        reference=_reference_levels(cox_counts, by),
        confidence=confidence,
    )
    if fit.converged and np.all(np.isfinite(fit.se)) and np.max(np.abs(fit.coef)) < 20:
        cox, table = fit, hazard_ratio_table(fit)
        check = proportionality_check(fit, cox_counts, list(by))
    else:
        drift = [n for n, b in zip(fit.names, fit.coef, strict=True) if abs(b) > 10]
        notes.append(
            "No hazard ratios: the Cox model did not settle"
            + (f" ({', '.join(drift)} drift towards an infinite ratio)" if drift else "")
            + ". A level with no churn, or where everyone churns, has no finite ratio; merge it "
            "with another level or leave it out."
        )
    horizon = float(horizon) if horizon is not None else default_horizon(counts, preferred_horizons)
    rm = restricted_mean(counts, horizon, confidence)
    sizes = (
        counts.group_by("cohort")
        .agg(pl.col("entered").sum())
        .sort(["entered", "cohort"], descending=[True, False])
    )
    heat_key = next((k for k in by if k in ORDERED_KEYS), "signup_quarter")
    heat_counts = counts if by == (heat_key,) else extract.counts_by([heat_key])
    return Comparison(
        by=by,
        strata=strata,
        horizon=horizon,
        counts=counts,
        tests=tests,
        logrank=plain,
        pairwise=pairwise_tests(counts),
        trend=trend,
        stratified=stratified,
        cox=cox,
        ph_check=check,
        hazard_ratios=table,
        nelson_aalen=nelson_aalen(counts),
        rmst=rm,
        rmst_contrasts=_contrasts(rm, str(sizes["cohort"][0])),
        causes=cumulative_incidence(counts, confidence=confidence),
        heatmap=retention_grid(heat_counts),
        heatmap_by=heat_key,
        notes=tuple(notes),
    )


def comparison_notes(cmp: Comparison | None) -> list[Note]:
    """Notes for the values the comparison leaves empty, so the reader knows why."""
    if cmp is None:
        return []
    notes = []
    untested = int(cmp.pairwise["p"].is_nan().sum())
    if untested:
        notes.append(
            info(
                "comparison",
                f"{untested} pair(s) of cohorts were never at risk at the same churn tenures "
                "(e.g. signup periods far apart), so the log-rank test cannot compare them; their "
                "p-values are left empty and the Holm and Bonferroni adjustments count only the "
                "pairs that were tested.",
                covers=["cohort_pairs.p", "cohort_pairs.p_holm", "cohort_pairs.p_bonferroni"],
            )
        )
    shares = cmp.causes.shares(cmp.horizon)
    if int(shares["share_of_incidence"].is_nan().sum()):
        notes.append(
            info(
                "comparison",
                f"Some cohorts have no churn observed by tenure {cmp.horizon:g} (for instance "
                "cohorts seen only from later tenures), so each cause's share of their churn by "
                "then is undefined and left empty.",
                covers=["churn_cause_shares.share_of_incidence"],
            )
        )
    return notes
