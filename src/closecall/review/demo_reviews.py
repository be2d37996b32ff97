"""Simulated reviews for the demo study: real ledger entries from a seeded reviewer model.

The entries go through the ledger's own checks and chain like any other, but carry simulated
reviewer names (``sim-reviewer-N``) and say in their note that they are simulated, so they can
never pass for real decisions. A ledger that already holds real reviews is refused.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

from closecall.core.errors import Fix, UserError
from closecall.core.numbers import check_count, check_number, check_seed
from closecall.core.vocabulary import DEFER, UPHOLD
from closecall.reports.disparity.simulate import simulate_actions
from closecall.review.decisions import check_action, check_note, check_reason
from closecall.review.ledger import EntryContent, NoLedger
from closecall.review.ledger.access import require_record
from closecall.review.ledger.backend import is_database, open_any_ledger

if TYPE_CHECKING:
    from closecall.suite.opening import OpenedStudy

SIM_PREFIX = "sim-reviewer-"


def _reviewed_cases(study: OpenedStudy) -> tuple[set[str], bool]:
    """Case ids already in the ledger, and whether any entry is a real (non-simulated) one."""
    try:
        with open_any_ledger(study.config.review.ledger, readonly=True) as ledger:
            entries = ledger.entries()
    except NoLedger:
        return set(), False
    real = any(not e.reviewer.startswith(SIM_PREFIX) for e in entries)
    return {e.case_id for e in entries}, real


def simulate_reviews(
    study: OpenedStudy,
    n: int,
    seed: int = 7,
    *,
    bias: float = 2.0,
    biased_group: str | None = None,
    reviewers: int = 4,
    biased_reviewers: int | None = None,
    base_rate: float = 0.3,
) -> int:
    """Record ``n`` simulated reviews of close calls in the study's ledger.

    Cases are drawn (seeded) from the unreviewed close calls, ``|margin| <= [review] band``
    under the reference model and first cost lens, widening to the nearest cases when there are
    too few. Actions follow :func:`closecall.reports.disparity.simulate.simulate_actions`.

    Parameters
    ----------
    study
        The open study.
    n
        Number of reviews to record.
    seed
        Seed of every random choice.
    bias
        Odds ratio of "override to unfavourable" for ``biased_group`` against the others at
        equal margin, for the biased reviewers (1.0: no bias).
    biased_group
        Default: the group with the lowest favourable share under the reference model.
    reviewers
        Number of simulated reviewers the cases are shared among.
    biased_reviewers
        How many of them carry the bias (default: all).
    base_rate
        Override probability at margin 0.

    Returns
    -------
    The number of entries recorded.

    Raises
    ------
    UserError
        Bad counts, an unknown group, no unreviewed cases, or a ledger with real reviews.
    """
    config = study.config
    nb, done = _check_request(study, n, seed, bias, reviewers, biased_reviewers)
    snap = study.snapshot
    margin = snap.margins(snap.reference)
    groups = np.asarray(snap.group_labels).astype(str)
    biased_group = _biased_group(margin, groups, biased_group)
    pool = _case_pool(study, margin, done, n)
    rng = np.random.default_rng(seed)
    chosen = rng.choice(pool, size=min(n, len(pool)), replace=False)
    reviewer_of = rng.integers(0, reviewers, size=len(chosen))
    is_biased = reviewer_of < nb
    actions = simulate_actions(
        margin[chosen],
        np.where(is_biased, groups[chosen], ""),  # only biased reviewers see the group
        rng,
        biased_group=biased_group,
        bias=bias,
        base_rate=base_rate,
    )
    reasons = [r for r in config.review.reasons if r != "other"] or list(config.review.reasons)
    reason_pick = rng.integers(0, len(reasons), size=len(chosen))
    note = f"Simulated review for the demo (closecall demo-reviews, seed {seed}); not a decision."
    contents = []
    for k, i in enumerate(chosen):  # one entry per simulated review, not per case of the study
        action = check_action(str(actions[k]))
        reason = None if action in (UPHOLD, DEFER) else reasons[int(reason_pick[k])]
        contents.append(
            _entry(study, int(i), f"{SIM_PREFIX}{int(reviewer_of[k]) + 1}", action, reason, note)
        )
    with open_any_ledger(config.review.ledger) as ledger:
        for content in contents:
            ledger.append(content)
    return len(contents)


def _check_request(
    study: OpenedStudy,
    n: int,
    seed: int,
    bias: float,
    reviewers: int,
    biased_reviewers: int | None,
) -> tuple[int, set[str]]:
    """Refuse a database ledger, bad counts or a ledger with real reviews; the number of
    biased reviewers and the cases already reviewed."""
    config = study.config
    if is_database(config.review.ledger):
        raise UserError(
            f"{config.path}: [review] ledger names a PostgreSQL database, which records every "
            "entry as the database user who sends it, so simulated reviewers cannot be recorded "
            "there (and simulated reviews never belong in a team's ledger)",
            "simulate on a demo study whose [review] ledger is a file (closecall demo writes "
            'one with ledger = "ledger.sqlite")',
        )
    require_record(config.review, config.path)
    check_count("n", n, 1, example="300")
    check_count("reviewers", reviewers, 1, example="4")
    check_number("bias", bias, 0, low_open=True, example="2.0")
    check_seed("seed", seed)
    nb = reviewers if biased_reviewers is None else biased_reviewers
    if not 0 <= nb <= reviewers:
        raise UserError(
            f"{nb} must be between 0 and {reviewers}",
            Fix("biased_reviewers", range=f"a whole number from 0 to {reviewers}"),
            about="biased_reviewers",
        )
    done, real = _reviewed_cases(study)
    if real:
        raise UserError(
            f"{config.review.ledger}: this ledger holds real reviews; simulated ones would mix "
            "with them",
            "simulate only on a fresh demo study (a new demo written into an empty folder)",
        )
    return nb, done


def _biased_group(margin: np.ndarray, groups: np.ndarray, biased_group: str | None) -> str:
    """The group named (checked), or the one with the lowest favourable share."""
    levels = sorted(set(groups.tolist()))
    if biased_group is None:
        shares = {g: float((margin[groups == g] > 0).mean()) for g in levels}
        return min(levels, key=lambda g: (shares[g], g))
    if biased_group not in levels:
        raise UserError(
            f"'{biased_group}' is not a group of this study",
            Fix("biased_group", allowed=tuple(levels)),
            about="biased_group",
        )
    return biased_group


def _case_pool(study: OpenedStudy, margin: np.ndarray, done: set[str], n: int) -> np.ndarray:
    """Rows of the unreviewed (pending) close calls, widened to the nearest cases when there
    are fewer than ``n``."""
    snap = study.snapshot
    ids = np.asarray(snap.case_ids).astype(str)
    open_case = ~np.isin(ids, np.array(sorted(done), dtype=str))
    pending = np.asarray(snap.outcome) < 0
    if pending.any():
        open_case &= pending
    candidates = np.flatnonzero(open_case)
    if len(candidates) == 0:
        raise UserError("every case already has a review", "start from a fresh demo study")
    dist = np.abs(margin[candidates])
    pool = candidates[dist <= study.config.review.band]
    if len(pool) < n:
        pool = candidates[np.argsort(dist, kind="stable")[: min(n, len(candidates))]]
    return pool


def _entry(
    study: OpenedStudy, row: int, reviewer: str, action: str, reason: str | None, note: str
) -> EntryContent:
    """One simulated reviewer's entry on the case at ``row``, with every model's decision."""
    config, snap = study.config, study.snapshot
    decisions = snap.decisions_for(row)
    ref = decisions[snap.reference]
    return EntryContent(
        reviewer=reviewer,
        case_id=str(np.asarray(snap.case_ids)[row]),
        snapshot_id=str(snap.id),
        current_snapshot_id=None,
        reference_model=snap.reference,
        reference_decision=str(ref["decision"]),
        reference_margin=float(ref["margin"]),
        decisions={
            m: {"decision": str(d["decision"]), "margin": float(d["margin"])}
            for m, d in decisions.items()
        },
        action=action,
        reason=check_reason(config, action, reason),
        note=check_note(action, note),
    )
