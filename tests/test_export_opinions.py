"""The analyst export and the disparity report with two reviewers on the same cases.

The rule under test is the project's own (docs/ledger.md, *Several reviewers on one case*):
a case's effective decisions are each reviewer's latest entry, less superseded ones
(closecall.review.conflicts.effective_entries); the case is in conflict when those decisions,
deferrals aside, name different actions. The export must carry every effective decision and
the conflict state; the disparity report counts one decision per case and leaves a case in
conflict at the model's decision. Each expected row below is worked out by hand from the
entries recorded, and cross-checked against the engine's per-case functions.

Another reviewer is injected by replacing the login lookup (tests only).
"""

from __future__ import annotations

from pathlib import Path

import pytest

from closecall.reports.disparity.from_study import study_review_table
from closecall.reports.export import export_reviews
from closecall.review import decisions as reviews
from closecall.review.conflicts import conflicted_cases, effective_entries
from closecall.review.ledger import access


@pytest.fixture(scope="module")
def study_config(tmp_path_factory: pytest.TempPathFactory) -> Path:
    from closecall.setup.demo import write_demo
    from closecall.suite.opening import open_study

    config = write_demo(tmp_path_factory.mktemp("opinions"), cases=600, seed=5)
    open_study(config)
    return config


@pytest.fixture
def two_reviewers(study_config: Path, monkeypatch: pytest.MonkeyPatch):  # type: ignore[no-untyped-def]
    """Cases A–D reviewed by alice and bob as the docstring of each case says."""
    from closecall.setup.config import load_config
    from closecall.suite.opening import open_study

    ledger = Path(load_config(study_config).review.ledger)
    ledger.unlink(missing_ok=True)
    for extra in ledger.parent.glob(ledger.name + "-*"):
        extra.unlink()
    study = open_study(study_config)
    snap = study.snapshot
    margins = snap.margins(snap.reference)
    unfav = [str(c) for c, m in zip(snap.case_ids, margins, strict=True) if m <= 0]
    a, b, c, d = unfav[:4]  # the model decides all four unfavourably
    reason = study.config.review.reasons[0]

    def as_(name: str) -> None:
        monkeypatch.setattr(access, "current_login", lambda: name)

    # A: alice upholds, bob overrides beside it as a second opinion -> conflict
    as_("alice")
    reviews.record_review(study, a, "uphold", None, "")
    as_("bob")
    reviews.record_review(study, a, "override-favourable", reason, "bob: docs", second_opinion=True)
    # B: both override to favourable (bob as a second opinion) -> two rows, agreed
    as_("alice")
    reviews.record_review(study, b, "override-favourable", reason, "alice: letter")
    as_("bob")
    reviews.record_review(study, b, "override-favourable", reason, "bob: ok", second_opinion=True)
    # C: alice upholds, then corrects herself -> only her latest
    as_("alice")
    first_c = reviews.record_review(study, c, "uphold", None, "")
    reviews.record_review(study, c, "override-favourable", reason, "alice: fixed", first_c.seq)
    # D: alice upholds, bob supersedes her entry -> only bob's
    first_d = reviews.record_review(study, d, "uphold", None, "")
    as_("bob")
    reviews.record_review(study, d, "override-favourable", reason, "bob: replaces", first_d.seq)
    return study, (a, b, c, d)


def test_export_carries_every_effective_decision_and_the_conflict(two_reviewers) -> None:  # type: ignore[no-untyped-def]
    study, (a, b, c, d) = two_reviewers
    entries = reviews.ledger_entries(study.config)
    table = export_reviews(study, entries).table
    got = {
        (r.case_id, r.reviewer, r.action, r.final_decision, r.opinions, bool(r.conflict))
        for r in table.itertuples()
    }
    fav, unfav = "favourable", "unfavourable"
    assert got == {  # worked out by hand from the entries above
        (a, "alice", "uphold", unfav, 2, True),
        (a, "bob", "override-favourable", fav, 2, True),
        (b, "alice", "override-favourable", fav, 2, False),
        (b, "bob", "override-favourable", fav, 2, False),
        (c, "alice", "override-favourable", fav, 1, False),
        (d, "bob", "override-favourable", fav, 1, False),
    }
    # the same rows as the engine's per-case rule, case by case
    for case in (a, b, c, d):
        expected = {e.seq for e in effective_entries([e for e in entries if e.case_id == case])}
        assert set(table.loc[table["case_id"] == case, "seq"]) == expected, case
    assert set(table.loc[table["conflict"], "case_id"]) == set(conflicted_cases(entries)) == {a}


def test_all_entries_marks_the_effective_ones(two_reviewers) -> None:  # type: ignore[no-untyped-def]
    study, (_, _, c, d) = two_reviewers
    table = export_reviews(study, reviews.ledger_entries(study.config), all_entries=True).table
    assert len(table) == 8
    assert int(table["effective"].sum()) == 6  # c's first and d's first are out
    assert set(table.loc[~table["effective"], "case_id"]) == {c, d}


def test_disparity_counts_one_decision_per_case_and_leaves_a_conflict_out(two_reviewers) -> None:  # type: ignore[no-untyped-def]
    study, (_, b, c, d) = two_reviewers
    table, notes = study_review_table(study)
    assert sorted(table["case_id"]) == sorted([b, c, d])  # a: reviewers disagree
    assert not table["case_id"].duplicated().any()  # the report's one-row-per-case rule
    assert set(table["final_decision"]) == {"favourable"}
    assert any("1 case(s) have reviewers' decisions in force that disagree" in n for n in notes)
