"""The disparity report for a study: ledger → effective reviews → outcomes joined → report."""

from __future__ import annotations

from dataclasses import replace
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from closecall.core.errors import UserError
from closecall.core.vocabulary import FAVOURABLE, UNFAVOURABLE
from closecall.reports.disparity.periods import check_period
from closecall.reports.disparity.report import (
    DisparityReport,
    HistoryInput,
    PopulationInput,
    build_report,
    check_report_parameters,
)
from closecall.reports.disparity.table import REVIEW_COLUMNS
from closecall.reports.export import load_or_create_key, pseudonymise, review_frame
from closecall.review.conflicts import conflicted_cases
from closecall.review.decisions import ledger_entries
from closecall.setup.load import read_table

if TYPE_CHECKING:
    from closecall.setup.config import StudyConfig
    from closecall.suite.opening import OpenedStudy


def load_outcomes(path: str | Path, config: StudyConfig) -> pd.DataFrame:
    """Read an outcome file into columns ``case_id`` and ``outcome`` (favourable/unfavourable).

    The file (CSV or Parquet) needs the study's id column (or ``case_id``) and its outcome
    column (or ``outcome``); the favourable value is the study's ``[data] favourable``. Empty
    outcome cells mean "not known yet".

    Raises
    ------
    UserError
        Missing columns (the message lists what the file has), duplicate ids, an outcome
        column with more than two values or without the favourable value.
    """
    path = Path(path)
    id_col, out_col = config.data.id, config.data.outcome
    frame = read_table(path, text_columns=(id_col, "case_id"))
    ids = id_col if id_col in frame.columns else "case_id" if "case_id" in frame.columns else None
    outs = (
        out_col if out_col in frame.columns else "outcome" if "outcome" in frame.columns else None
    )
    if ids is None or outs is None:
        wanted = [f"'{id_col}' (or 'case_id')"] if ids is None else []
        wanted += [f"'{out_col}' (or 'outcome')"] if outs is None else []
        shown = ", ".join(f"'{c}'" for c in list(frame.columns)[:12])
        raise UserError(
            f"{path}: no column {' and no column '.join(wanted)}; the file has {shown}",
            f"give the outcome file a case id column and an outcome column with "
            f"'{config.data.favourable}' for the favourable outcome",
        )
    case = frame[ids].astype(str).str.strip()
    dup = case.duplicated()
    if dup.any():
        raise UserError(
            f"{path}: case '{case[dup].iloc[0]}' appears more than once",
            "keep one outcome row per case",
        )
    raw = frame[outs]
    known = raw.notna()
    values = pd.unique(raw[known].astype(str).str.strip().str.lower())
    if len(values) > 2:
        shown = ", ".join(repr(v) for v in values[:5])
        raise UserError(
            f"{path}: outcome column '{outs}' has {len(values)} values ({shown}); it must have two",
            f"recode it to '{config.data.favourable}' and one other value, empty when unknown",
        )
    fav = config.data.favourable
    if (
        isinstance(fav, (int, float))
        and not isinstance(fav, bool)
        and (pd.api.types.is_numeric_dtype(raw))
    ):
        is_fav = raw.to_numpy(dtype=float) == float(fav)
    else:
        is_fav = (raw.astype(str).str.strip().str.lower() == str(fav).strip().lower()).to_numpy()
    if known.any() and not is_fav[known.to_numpy()].any():
        shown = ", ".join(repr(v) for v in values[:5])
        raise UserError(
            f"{path}: outcome column '{outs}' never takes the favourable value "
            f"{fav!r} (values: {shown})",
            "recode the file, or check [data] favourable in the study config",
        )
    outcome = pd.Series(
        np.where(is_fav, FAVOURABLE, UNFAVOURABLE), index=frame.index, dtype=object
    ).where(known, None)
    return pd.DataFrame({"case_id": case, "outcome": outcome})


def study_review_table(study: OpenedStudy) -> tuple[pd.DataFrame, list[str]]:
    """Effective reviews of the study's ledger in the disparity table's layout, with notes.

    One row per case (:func:`closecall.reports.export.case_decision_mask`): with a second
    opinion that agrees, the latest decision; a case in conflict is left out (and counted).

    Reviews of cases missing from the current snapshot (no group) or with no finite margin are
    left out and counted in the notes.
    """
    entries = ledger_entries(study.config)
    if not entries:
        raise UserError(
            f"{study.config.review.ledger}: the ledger has no reviews yet",
            "record reviews first (closecall review), or for the demo: closecall demo-reviews 300",
        )
    # one decision per case: a case whose reviewers disagree has no settled human decision,
    # so it is left out of the reviews and keeps the model's decision (docs/disparity.md)
    table = review_frame(study, entries, per_case=True)
    notes: list[str] = []
    disagree = len(conflicted_cases(entries))
    if disagree:
        notes.append(
            f"{disagree} case(s) have reviewers' decisions in force that disagree (conflict) and "
            "are left out of the reviews: their model decision stands until one decision "
            "supersedes the other"
        )
    no_group = table["group"].isna()
    if no_group.any():
        notes.append(
            f"{int(no_group.sum())} reviewed case(s) are not in the current snapshot "
            f"{study.snapshot.id} and are left out"
        )
    no_margin = table["margin"].isna()
    if no_margin.any():
        notes.append(f"{int(no_margin.sum())} review(s) have no finite margin and are left out")
    table = table[~no_group & ~no_margin].reset_index(drop=True)
    stale = int((table["snapshot_id"] != study.snapshot.id).sum())
    if stale:
        notes.append(
            f"{stale} review(s) were made on an earlier snapshot; their margins and decisions "
            "are as the reviewer saw them"
        )
    return table[[*REVIEW_COLUMNS, "time", "snapshot_id"]], notes


def study_population(study: OpenedStudy) -> PopulationInput:
    """Every case under review with its reference-model decision under the operative lens."""
    snap = study.snapshot
    return PopulationInput(
        case_ids=np.asarray(snap.case_ids),
        group_codes=np.asarray(snap.group_codes),
        levels=snap.group_levels,
        model_favourable=np.asarray(snap.margins(snap.reference)) > 0,
    )


def study_history(study: OpenedStudy) -> HistoryInput:
    """Every model's out-of-fold log-odds of the history, with outcomes, groups and lenses."""
    snap = study.snapshot
    held_out = {m: np.asarray(snap.arrays[f"oof__{m}"], dtype=float) for m in snap.model_names}
    k = int(snap.meta.get("folds", 0))
    return HistoryInput(
        held_out=held_out,
        y=np.asarray(snap.hist_y),
        group_codes=np.asarray(snap.hist_group_codes),
        levels=snap.group_levels,
        lenses=[(lens.name, lens.threshold) for lens in snap.lenses],
        source=(
            f"history cases scored by {k}-fold cross-fitting (each by a model not trained on it)"
            if k
            else "out-of-fold scores of the history"
        ),
    )


def study_report(
    study: OpenedStudy,
    *,
    outcomes: str | Path | None = None,
    key_file: str | Path | None = None,
    level: float = 0.95,
    n_boot: int = 2000,
    seed: int = 0,
    period: str = "month",
) -> DisparityReport:
    """The disparity report over the study's effective reviews, the whole population of cases
    under review and the held-out history.

    Parameters
    ----------
    study
        The open study.
    outcomes
        Outcome file to join (see :func:`load_outcomes`); adds error rates by group.
    key_file
        Pseudonymise reviewer names with this key (created owner-only if missing).
    level, n_boot, seed, period
        Passed to :func:`closecall.reports.disparity.report.build_report`.
    """
    check_report_parameters(n_boot, seed)
    check_period(period)
    table, notes = study_review_table(study)
    if key_file is not None:
        from closecall.setup.output_files import study_files

        key, _ = load_or_create_key(key_file, study_files(study.config, outcomes=outcomes))
        table["reviewer"] = pseudonymise(table["reviewer"], key, "reviewer")
    if outcomes is not None:
        out = load_outcomes(outcomes, study.config)
        table = table.merge(out, on="case_id", how="left", validate="one_to_one")
        if table["outcome"].isna().all():
            raise UserError(
                f"{outcomes}: none of the {len(table)} reviewed cases has an outcome in this file",
                f"check that its id column holds the study's '{study.config.data.id}' values",
            )
    snap = study.snapshot
    context = {
        "study": study.config.name,
        "snapshot_id": snap.id,
        "reference_model": snap.reference,
        "ledger": str(study.config.review.ledger),
        "outcomes_file": None if outcomes is None else str(outcomes),
        "reviewers_pseudonymised": key_file is not None,
        "period": period,
    }
    report = build_report(
        table.drop(columns=["snapshot_id"]),
        level=level,
        n_boot=n_boot,
        seed=seed,
        context=context,
        population=study_population(study),
        history=study_history(study),
        period=period,
    )
    if notes:
        report = replace(report, warnings=(*notes, *report.warnings))
    return report
