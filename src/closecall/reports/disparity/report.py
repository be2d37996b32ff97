"""The whole disparity report: every figure, assembled into one typed result."""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import asdict, dataclass, field
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from closecall.core.numbers import REPLICATES_MAX, check_count, check_seed
from closecall.reports.disparity.calibration import CalibrationReport, calibration_by_group
from closecall.reports.disparity.conditional import ConditionalFit, conditional_disparity
from closecall.reports.disparity.errors_by_group import ErrorComparison, error_rates
from closecall.reports.disparity.heldout import HeldOutErrors, held_out_error_rates
from closecall.reports.disparity.limits import LIMITS
from closecall.reports.disparity.multiplicity import Family, correct_family
from closecall.reports.disparity.overrides import OverrideComparison, override_rates
from closecall.reports.disparity.periods import PeriodReport, by_period
from closecall.reports.disparity.population import PopulationEffect, population_effect
from closecall.reports.disparity.power import Detectable, detectable_difference, detectable_w
from closecall.reports.disparity.profile import MarginBin, override_by_margin
from closecall.reports.disparity.rates import RateComparison, favourable_rates
from closecall.reports.disparity.reviewers import SMALL_CELL, ReviewerTable, reviewer_tables
from closecall.reports.disparity.table import check_reviews, group_order


@dataclass(frozen=True)
class PopulationInput:
    """Every case under review: its id, group and model decision (reference model, operative
    lens), from the current snapshot."""

    case_ids: NDArray[Any]
    group_codes: NDArray[np.integer]
    levels: Sequence[str]
    model_favourable: NDArray[np.bool_]


@dataclass(frozen=True)
class HistoryInput:
    """Held-out scores of the history for every model, with outcomes, groups and lenses."""

    held_out: Mapping[str, NDArray[np.float64]]
    y: NDArray[np.integer]
    group_codes: NDArray[np.integer]
    levels: Sequence[str]
    lenses: Sequence[tuple[str, float]]
    source: str = "out-of-fold scores of the history"


@dataclass(frozen=True)
class ReviewSummary:
    """What the report rests on."""

    reviews: int  # effective reviews (one per case)
    decided: int
    deferred: int
    groups: tuple[str, ...]
    reviewers: int
    with_outcome: int | None
    margin_min: float
    margin_max: float
    level: float
    n_boot: int
    seed: int


@dataclass(frozen=True)
class DisparityReport:
    """Human-versus-model disparity over the effective reviews of a study."""

    summary: ReviewSummary
    rates: RateComparison
    overrides: OverrideComparison
    conditional: tuple[ConditionalFit, ...]
    reviewers: tuple[ReviewerTable, ...]
    margin_profile: tuple[MarginBin, ...]
    errors: ErrorComparison | None
    warnings: tuple[str, ...]
    context: dict[str, Any]  # study name, snapshot id, reference model... (filled by caller)
    population: PopulationEffect | None = None
    calibration: CalibrationReport | None = None
    heldout_errors: HeldOutErrors | None = None
    periods: PeriodReport | None = None
    families: tuple[Family, ...] = ()
    test_power: tuple[tuple[str, Detectable], ...] = ()  # the override tests' power lines
    limits: dict[str, tuple[str, ...]] = field(default_factory=lambda: dict(LIMITS))

    def to_dict(self) -> dict[str, Any]:
        """Plain nested dicts and lists, ready for JSON."""
        return asdict(self)


def check_report_parameters(n_boot: int, seed: int) -> None:
    """Refuse bootstrap replicates or a seed the report cannot use, before any work."""
    check_count("n_boot", n_boot, 100, REPLICATES_MAX, example="2000")
    check_seed("seed", seed)


def build_report(
    reviews: pd.DataFrame,
    *,
    level: float = 0.95,
    n_boot: int = 2000,
    seed: int = 0,
    reference_group: str | None = None,
    context: dict[str, Any] | None = None,
    population: PopulationInput | None = None,
    history: HistoryInput | None = None,
    period: str = "month",
) -> DisparityReport:
    """Compute every figure of the disparity report from a table of effective reviews.

    Parameters
    ----------
    reviews
        One row per reviewed case, columns :data:`closecall.reports.disparity.table.REVIEW_COLUMNS`
        and optionally ``outcome`` ("favourable", "unfavourable" or missing) and ``time``
        (the review's ISO 8601 entry time, for the figures by period).
    level
        Confidence level of every interval.
    n_boot
        Bootstrap replicates for the change and ratio intervals.
    seed
        Seed for the bootstrap and Monte Carlo tests; same seed, same report.
    reference_group
        Reference group of the odds ratios (default: the largest estimable group).
    context
        Extra facts to carry into the report (study, snapshot, reference model).
    population
        Every case under review, for the whole-population effect (optional).
    history
        Held-out scores of the history, for calibration and error rates by group (optional).
    period
        "month" or "quarter": the unit of the figures over time.

    Raises
    ------
    UserError
        No reviews, only deferrals, a single group, or an unknown period unit.

    References
    ----------
    Uniform Guidelines on Employee Selection Procedures, 29 CFR 1607.4(D).
    B. Green and Y. Chen, "Disparate interactions", FAT* 2019.
    """
    check_report_parameters(n_boot, seed)
    df = check_reviews(reviews)
    rates = favourable_rates(df, level=level, n_boot=n_boot, seed=seed)
    overrides = override_rates(df, level=level, seed=seed)
    conditional = tuple(
        conditional_disparity(df, d, reference_group=reference_group, level=level)
        for d in ("to_unfavourable", "to_favourable")
    )
    errors = error_rates(df, level=level) if "outcome" in df.columns else None
    reviewers = reviewer_tables(df, level=level, seed=seed)
    periods = by_period(df, period, level=level, seed=seed) if "time" in df.columns else None
    warn = _review_warnings(df, rates, population is not None)
    pop = None if population is None else _population(df, population, level, n_boot, seed, warn)
    calibration, heldout = _history_sections(history, level)
    return DisparityReport(
        summary=_summary(df, level, n_boot, seed),
        rates=rates,
        overrides=overrides,
        conditional=conditional,
        reviewers=reviewers,
        margin_profile=override_by_margin(df, level=level),
        errors=errors,
        warnings=tuple(warn),
        context=dict(context or {}),
        population=pop,
        calibration=calibration,
        heldout_errors=heldout,
        periods=periods,
        families=_families(
            overrides, conditional, reviewers, periods, calibration, heldout, errors
        ),
        test_power=_override_power(overrides),
    )


def _review_warnings(df: pd.DataFrame, rates: RateComparison, whole: bool) -> list[str]:
    """What the reviewed-case figures describe, small groups, and left-out deferrals."""
    warn: list[str] = [
        "the reviewed-case rates describe close calls only; the whole-population section "
        "gives every case"
        if whole
        else "the rates describe reviewed cases only (close calls), not every decision the "
        "model made"
    ]
    small = [r.group for r in rates.rows if r.decided < SMALL_CELL]
    if small:
        warn.append(
            f"fewer than {SMALL_CELL} decided reviews in group(s) {', '.join(small)}: "
            "read the intervals, not the point values"
        )
    deferred = int((~df["decided"]).sum())
    if deferred:
        warn.append(f"{deferred} deferred review(s) have no final decision and are left out")
    return warn


def _history_sections(
    history: HistoryInput | None, level: float
) -> tuple[CalibrationReport | None, HeldOutErrors | None]:
    """Calibration and held-out error rates by group, when the history's scores are given."""
    if history is None:
        return None, None
    calibration = calibration_by_group(
        history.held_out,
        history.y,
        history.group_codes,
        history.levels,
        history.lenses,
        level=level,
        source=history.source,
    )
    heldout = held_out_error_rates(
        history.held_out,
        history.y,
        history.group_codes,
        history.levels,
        history.lenses,
        level=level,
        source=history.source,
    )
    return calibration, heldout


def _summary(df: pd.DataFrame, level: float, n_boot: int, seed: int) -> ReviewSummary:
    """What the report rests on: counts of reviews, groups, reviewers and margins."""
    with_outcome = "outcome" in df.columns
    return ReviewSummary(
        reviews=len(df),
        decided=int(df["decided"].sum()),
        deferred=int((~df["decided"]).sum()),
        groups=tuple(group_order(df)),
        reviewers=int(df["reviewer"].nunique()),
        with_outcome=(int((df["decided"] & df["outcome"].notna()).sum()) if with_outcome else None),
        margin_min=float(df["margin"].min()),
        margin_max=float(df["margin"].max()),
        level=level,
        n_boot=n_boot,
        seed=seed,
    )


def _population(
    df: pd.DataFrame,
    population: PopulationInput,
    level: float,
    n_boot: int,
    seed: int,
    warn: list[str],
) -> PopulationEffect:
    """The whole-population effect; reviews are matched to cases by id (vectorised), and a
    warning added to ``warn`` for reviewed cases that are not among them."""
    ids = pd.Index(np.asarray(population.case_ids).astype(str))
    rows = ids.get_indexer(pd.Index(df["case_id"].astype(str)))
    found = rows >= 0
    effect = population_effect(
        population.group_codes,
        population.levels,
        population.model_favourable,
        rows[found],
        df["decided"].to_numpy()[found],
        df["final_fav"].to_numpy()[found],
        level=level,
        n_boot=n_boot,
        seed=seed,
    )
    missing = int((~found).sum())
    if missing:
        warn.append(
            f"{missing} reviewed case(s) are not among the cases under review and are left "
            "out of the whole-population figures"
        )
    return effect


def _override_power(overrides: OverrideComparison) -> tuple[tuple[str, Detectable], ...]:
    """A power line for each override × group test: two groups, the rate a two-sample test
    detects against the largest group's; more groups, Cohen's w of the k×2 table."""
    out: list[tuple[str, Detectable]] = []
    rows = overrides.rows
    sizes = (
        ("override × group", [r.decided for r in rows], [r.overridden for r in rows]),
        (
            "to unfavourable × group (model favourable)",
            [r.model_favourable for r in rows],
            [r.to_unfavourable for r in rows],
        ),
        (
            "to favourable × group (model unfavourable)",
            [r.model_unfavourable for r in rows],
            [r.to_favourable for r in rows],
        ),
    )
    for name, n, k in sizes:
        live = [(a, b) for a, b in zip(n, k, strict=True) if a > 0]
        if len(live) < 2:
            continue
        if len(live) == 2:
            (n0, k0), (n1, _) = live
            out.append((name, detectable_difference(k0 / n0, n0, n1)))
        else:
            out.append((name, detectable_w(sum(a for a, _ in live), len(live) - 1)))
    return tuple(out)


def _families(
    overrides: OverrideComparison,
    conditional: tuple[ConditionalFit, ...],
    reviewers: tuple[ReviewerTable, ...],
    periods: PeriodReport | None,
    calibration: CalibrationReport | None,
    heldout: HeldOutErrors | None,
    errors: ErrorComparison | None,
) -> tuple[Family, ...]:
    """The report's tests in stated families, each corrected by Holm and Benjamini–Hochberg."""
    out = [_review_family(overrides, conditional, reviewers, periods)]
    if calibration is not None and heldout is not None:
        out.append(_model_family(calibration, heldout))
    if errors is not None:
        out.append(_outcomes_family(errors))
    return tuple(out)


def _review_family(
    overrides: OverrideComparison,
    conditional: tuple[ConditionalFit, ...],
    reviewers: tuple[ReviewerTable, ...],
    periods: PeriodReport | None,
) -> Family:
    """Every test of whether review outcomes depend on the group, corrected as one family."""
    review: list[tuple[str, str, float | None]] = [
        ("overrides", t.name, t.p_value) for t in overrides.tests
    ]
    for fit in conditional:
        what = fit.direction.replace("_", " ")
        review += [
            ("equal margin", f"{what}: {r.group} vs {fit.reference_group}", r.p_value)
            for r in fit.rows
            if fit.fitted and r.group != fit.reference_group
        ]
    review += [
        ("by reviewer", f"{r.reviewer}: override × group", r.test.p_value) for r in reviewers
    ]
    if periods is not None and len(periods.periods) > 1:
        review += [
            ("by period", f"{p.period}: override × group", p.test.p_value) for p in periods.periods
        ]
    return correct_family(
        "review",
        "every test in this report of whether review outcomes depend on the group: the "
        "override × group tables, the odds ratios at equal margin, each reviewer's table"
        + (" and each period's table" if periods is not None and len(periods.periods) > 1 else ""),
        review,
    )


def _model_family(calibration: CalibrationReport, heldout: HeldOutErrors) -> Family:
    """Every test of the models on held-out history, corrected as one family."""
    model: list[tuple[str, str, float | None]] = []
    for c in calibration.rows:
        if c.group == "all":
            continue
        model.append(("calibration", f"{c.model} {c.group}: intercept = 0", _finite(c.intercept_p)))
        model.append(("calibration", f"{c.model} {c.group}: slope = 1", _finite(c.slope_p)))
    for e in heldout.rows:
        for label, gap in (("false favourable", e.ff_gap), ("false unfavourable", e.fu_gap)):
            if gap is not None:
                model.append(
                    ("held-out errors", f"{e.model} {e.lens} {e.group}: {label}", gap.p_value)
                )
    return correct_family(
        "model",
        "every test of the models on held-out history: each group's calibration "
        "intercept and slope, and each group's error rates against the reference group, "
        "for every model and lens",
        model,
    )


def _outcomes_family(errors: ErrorComparison) -> Family:
    """Every test on the reviewed cases with known outcomes, corrected as one family."""
    joined: list[tuple[str, str, float | None]] = []
    for r in errors.rows:
        for label, gap in (
            ("model false favourable", r.model_ff_gap),
            ("final false favourable", r.final_ff_gap),
            ("model false unfavourable", r.model_fu_gap),
            ("final false unfavourable", r.final_fu_gap),
        ):
            if gap is not None:
                joined.append(("outcomes", f"{r.group}: {label}", gap.p_value))
        joined.append(("outcomes", f"{r.group}: model vs final (McNemar)", r.mcnemar.p_value))
    return correct_family(
        "outcomes",
        "every test on the reviewed cases with known outcomes: each group's error rates "
        "against the reference group, model and final, and McNemar's test per group",
        joined,
    )


def _finite(x: float) -> float | None:
    return float(x) if np.isfinite(x) else None
