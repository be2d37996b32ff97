"""The review engine: validation before any write, access, drafts and soft claims."""

from __future__ import annotations

from datetime import timedelta
from pathlib import Path
from typing import Any

import pytest
from ledger_helpers import FakeStudy, entries_digest, make_study

from closecall.core.errors import AccessDenied, UserError
from closecall.review import decisions as reviews
from closecall.review.ledger import current_login, drafts


def _study(tmp_path: Path, **review: Any) -> FakeStudy:
    return make_study(tmp_path, **review)


def test_record_review_fills_the_entry_from_the_snapshot(tmp_path: Path) -> None:
    study = _study(tmp_path)
    entry = reviews.record_review(study, "B-1", "override-unfavourable", "data-error", "wrong")
    # FakeSnapshot gives case B-1 (row 3) margin 0.25 * (3 - 2) under "pooled"
    assert (entry.reference_model, entry.reference_decision) == ("pooled", "favourable")
    assert entry.reference_margin == 0.25
    assert entry.decisions["split"] == {"decision": "unfavourable", "margin": -0.25}
    assert entry.reviewer == current_login() and entry.snapshot_id == study.snapshot.id
    assert entry.current_snapshot_id is None  # no data files: current id unknown, not guessed
    fix = reviews.record_review(study, "B-1", "uphold", None, "", supersedes=entry.seq)
    assert fix.supersedes == 1
    assert [e.seq for e in reviews.case_history(study, "B-1")] == [1, 2]
    assert reviews.case_history(study, "A-1") == []
    with pytest.raises(UserError, match="case 'Z-9'"):
        reviews.case_history(study, "Z-9")


@pytest.mark.parametrize(
    ("args", "message"),
    [
        (("Z-9", "uphold", None, ""), "case 'Z-9'"),
        (("A-1", "approve", None, ""), "unknown action"),
        (("A-1", "override-favourable", None, "why"), "needs a reason"),
        (("A-1", "override-favourable", "  ", "why"), "needs a reason"),
        (("A-1", "override-favourable", "other", ""), "needs a note"),
        (("A-1", "defer", "not-a-code", ""), "unknown reason code"),
        (("A-1", "defer", None, "caf\udce9"), "not valid UTF-8"),
        (("A-1", "defer", None, "x" * 1_000_001), "at most 1,000,000"),
    ],
)
def test_bad_input_is_refused_before_the_ledger_is_touched(
    tmp_path: Path, args: tuple[Any, ...], message: str
) -> None:
    study = _study(tmp_path)
    ledger = study.config.review.ledger
    with pytest.raises(UserError, match=message):
        reviews.record_review(study, *args)
    assert not ledger.exists()  # not even created
    reviews.record_review(study, "A-1", "uphold", None, "first")
    before = entries_digest(ledger)
    with pytest.raises(UserError, match=message):
        reviews.record_review(study, *args)
    assert entries_digest(ledger) == before


def test_supersedes_must_be_an_earlier_entry_of_the_same_case(tmp_path: Path) -> None:
    study = _study(tmp_path)
    with pytest.raises(UserError, match="no ledger entry 1"):
        reviews.record_review(study, "A-1", "uphold", None, "", supersedes=1)
    reviews.record_review(study, "A-1", "uphold", None, "")
    with pytest.raises(UserError, match="about case 'A-1', not 'A-2'"):
        reviews.record_review(study, "A-2", "uphold", None, "", supersedes=1)


def test_access_lists(tmp_path: Path) -> None:
    me = current_login()
    open_study = _study(tmp_path)  # empty lists: anyone may record and read
    reviews.record_review(open_study, "A-1", "uphold", None, "")
    assert len(reviews.ledger_entries(open_study.config)) == 1

    not_me = _study(tmp_path, reviewers=["someone"], analysts=["else"])
    with pytest.raises(AccessDenied, match=rf"login '{me}' may not record") as info:
        reviews.record_review(not_me, "A-1", "uphold", None, "")
    assert info.value.exit_code == 2 and "[review] reviewers" in str(info.value)
    for action in (
        lambda: reviews.ledger_entries(not_me.config),
        lambda: reviews.verify_ledger(not_me.config),
        lambda: reviews.active_claims(not_me, ["A-1"]),
    ):
        with pytest.raises(AccessDenied, match="may not read"):
            action()
    for action in (
        lambda: reviews.save_draft(not_me, "A-1", "x"),
        lambda: reviews.claim_case(not_me, "A-1"),
    ):
        with pytest.raises(AccessDenied, match="may not record"):
            action()

    analyst = _study(tmp_path, reviewers=["someone"], analysts=[me])
    assert len(reviews.ledger_entries(analyst.config)) == 1
    with pytest.raises(AccessDenied):
        reviews.record_review(analyst, "A-1", "uphold", None, "")
    reviewer = _study(tmp_path, reviewers=[me], analysts=["else"])
    reviews.record_review(reviewer, "A-1", "defer", None, "")
    assert reviews.verify_ledger(reviewer.config).entries == 2


def test_drafts_survive_until_recorded(tmp_path: Path) -> None:
    study = _study(tmp_path)
    assert reviews.load_draft(study, "A-2") is None
    reviews.save_draft(study, "A-2", "The applicant's letter says", "override-favourable")
    reviews.save_draft(
        study, "A-2", "The applicant's letter says the income", "override-favourable"
    )
    # a new process (a dropped SSH connection, a restart) finds the draft again
    again = make_study(tmp_path)
    draft = reviews.load_draft(again, "A-2")
    assert draft is not None
    assert (draft.note, draft.action, draft.reviewer) == (
        "The applicant's letter says the income",
        "override-favourable",
        current_login(),
    )
    assert reviews.verify_ledger(study.config).entries == 0  # drafts are not entries
    reviews.record_review(again, "A-2", "override-favourable", "other", draft.note)
    assert reviews.load_draft(study, "A-2") is None
    reviews.save_draft(study, "A-3", "never mind")
    reviews.drop_draft(study, "A-3")
    assert reviews.load_draft(study, "A-3") is None
    with pytest.raises(UserError, match="not valid UTF-8"):
        reviews.save_draft(study, "A-3", "bad \udcff")
    with pytest.raises(UserError, match="case 'Q'"):
        reviews.save_draft(study, "Q", "x")


def test_claims_are_advice_and_expire(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    study = _study(tmp_path)
    assert reviews.active_claims(study, ["A-1"]) == {}
    claim = reviews.claim_case(study, "A-1")
    assert claim.reviewer == current_login() and claim.expires_at > claim.claimed_at
    claims = reviews.active_claims(study, ["A-1", "A-2"])
    assert list(claims) == ["A-1"] and claims["A-1"][0].reviewer == current_login()
    reviews.record_review(study, "A-1", "uphold", None, "")  # a claim never blocks recording
    reviews.release_claim(study, "A-1")
    assert reviews.active_claims(study) == {}
    earlier = drafts.utc_now() - timedelta(minutes=5)
    with monkeypatch.context() as m:  # a 1-minute claim taken 5 minutes ago has expired
        m.setattr(drafts, "utc_now", lambda: earlier)
        reviews.claim_case(_study(tmp_path, claim_minutes=1), "A-2")
    assert reviews.active_claims(study, ["A-2"]) == {}


def test_verify_ledger_checks_the_anchor_format(tmp_path: Path) -> None:
    study = _study(tmp_path)
    with pytest.raises(UserError, match="not a head hash"):
        reviews.verify_ledger(study.config, "1234")
    result = reviews.verify_ledger(study.config)  # no ledger file: not "0 entries, intact"
    assert not result.ok and result.problem is not None and result.problem.kind == "no-ledger"
    result = reviews.verify_ledger(study.config, allow_empty=True)
    assert result.ok and result.entries == 0
    assert not study.config.review.ledger.exists()  # reading never creates it
    entry = reviews.record_review(study, "A-1", "uphold", None, "")
    result = reviews.verify_ledger(study.config, entry.hash)
    assert result.ok and result.anchor_seq == 1 and result.head_hash == entry.hash


def test_my_drafts_and_pages_of_entries(tmp_path: Path) -> None:
    study = _study(tmp_path)
    assert reviews.my_drafts(study) == []  # no ledger yet
    reviews.save_draft(study, "A-2", "letter seen")
    reviews.save_draft(study, "B-1", "ask for payslips")
    assert sorted(d.case_id for d in reviews.my_drafts(study)) == ["A-2", "B-1"]
    assert {d.reviewer for d in reviews.my_drafts(study)} == {current_login()}
    for case_id in ("A-1", "A-2", "A-3"):
        reviews.record_review(study, case_id, "defer", None, "")
    assert [d.case_id for d in reviews.my_drafts(study)] == ["B-1"]  # A-2's went on record
    older = reviews.ledger_entries(study.config, limit=2, before=3)
    assert [(e.seq, e.case_id) for e in older] == [(1, "A-1"), (2, "A-2")]
    with pytest.raises(UserError, match="entries before 0"):
        reviews.ledger_entries(study.config, before=0)
