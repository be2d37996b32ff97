"""Decisions that don't collide: recording refuses to contradict another reviewer silently.

Another reviewer is injected by replacing the login lookup (tests only): the tool itself
always takes the login from the OS account of the process.
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from closecall.cli.errors import error_lines
from closecall.core.errors import UserError
from closecall.core.vocabulary import CONFLICT, STATE_NAMES
from closecall.review import decisions as reviews
from closecall.review.conflicts import ConflictingDecision, conflicted_cases, last_seq
from closecall.review.ledger import access
from closecall.review.states import ledger_states


@pytest.fixture(scope="module")
def study_config(tmp_path_factory: pytest.TempPathFactory) -> Path:
    from closecall.setup.demo import write_demo
    from closecall.suite.opening import open_study

    config = write_demo(tmp_path_factory.mktemp("conflicts"), cases=600, seed=5)
    open_study(config)
    return config


@pytest.fixture
def fresh(study_config: Path, tmp_path: Path):  # type: ignore[no-untyped-def]
    """The study with an empty ledger (each test starts from none)."""
    from closecall.setup.config import load_config
    from closecall.suite.opening import open_study

    ledger = load_config(study_config).review.ledger
    ledger.unlink(missing_ok=True)
    for extra in ledger.parent.glob(ledger.name + "-*"):
        extra.unlink()
    return open_study(study_config)


def as_login(monkeypatch: pytest.MonkeyPatch, name: str) -> None:
    monkeypatch.setattr(access, "current_login", lambda: name)


def _case(study) -> str:  # type: ignore[no-untyped-def]
    return str(study.snapshot.case_ids[0])


def test_other_reviewers_decision_refuses_with_its_details(fresh, monkeypatch) -> None:  # type: ignore[no-untyped-def]
    case = _case(fresh)
    as_login(monkeypatch, "alice")
    first = reviews.record_review(fresh, case, "uphold", None, "checked the file")
    as_login(monkeypatch, "bob")
    with pytest.raises(ConflictingDecision) as err:
        reviews.record_review(fresh, case, "override-favourable", "data-error", "misread")
    message = err.value.message
    assert f"entry {first.seq} by alice" in message and "uphold" in message
    assert "checked the file" in message and first.time[:10] in message
    remedy = err.value.remedy  # the engine names its fields; the command line words them
    assert remedy is not None and (remedy.field, remedy.value) == ("supersedes", str(first.seq))
    assert f"--supersedes {first.seq}" in (error_lines(err.value)[1] or "")
    assert "--second-opinion" in (error_lines(err.value)[1] or "")
    assert [e.seq for e in err.value.others] == [first.seq]
    assert last_seq(fresh.config) == 1  # nothing recorded
    # the same reviewer correcting themself is not a collision
    as_login(monkeypatch, "alice")
    again = reviews.record_review(fresh, case, "defer", None, "wait for the letter")
    assert again.seq == 2


def test_supersedes_replaces_and_second_opinion_stands_beside(fresh, monkeypatch) -> None:  # type: ignore[no-untyped-def]
    a, b = (str(c) for c in fresh.snapshot.case_ids[:2])
    as_login(monkeypatch, "alice")
    ea = reviews.record_review(fresh, a, "uphold", None, "")
    eb = reviews.record_review(fresh, b, "uphold", None, "")
    as_login(monkeypatch, "bob")
    reviews.record_review(fresh, a, "override-favourable", "data-error", "x", supersedes=ea.seq)
    reviews.record_review(fresh, b, "override-favourable", "data-error", "y", second_opinion=True)
    states = ledger_states(fresh)
    rows = fresh.snapshot.rows_of([a, b])
    # a: bob's entry replaced alice's (one decision in force); b: two disagree = conflict
    assert STATE_NAMES[int(states[rows[0]])] == "override-favourable"
    assert int(states[rows[1]]) == CONFLICT and STATE_NAMES[CONFLICT] == "conflict"
    with pytest.raises(UserError, match="contradict each other"):
        reviews.record_review(fresh, a, "uphold", None, "", supersedes=ea.seq, second_opinion=True)
    # resolving: alice supersedes bob's second opinion; the conflict goes
    as_login(monkeypatch, "alice")
    with pytest.raises(ConflictingDecision):
        reviews.record_review(fresh, b, "uphold", None, "still uphold")
    reviews.record_review(fresh, b, "uphold", None, "agreed with bob: uphold", supersedes=4)
    assert int(ledger_states(fresh)[rows[1]]) != CONFLICT
    assert eb.seq == 2


def test_the_screen_only_stops_decisions_made_since_it_opened(fresh, monkeypatch) -> None:  # type: ignore[no-untyped-def]
    case = _case(fresh)
    as_login(monkeypatch, "alice")
    reviews.record_review(fresh, case, "uphold", None, "")
    seen = last_seq(fresh.config)  # bob opens the case now: alice's entry is on his screen
    as_login(monkeypatch, "carol")
    reviews.record_review(fresh, case, "uphold", None, "", second_opinion=True)
    as_login(monkeypatch, "bob")
    with pytest.raises(ConflictingDecision) as err:
        reviews.record_review(fresh, case, "defer", None, "", seen_seq=seen)
    assert [e.reviewer for e in err.value.others] == ["carol"]  # only what came after


def test_conflicts_ignore_deferrals_and_superseded_entries() -> None:
    from closecall.review.ledger import Entry

    def e(seq: int, case: str, who: str, action: str, sup: int | None = None) -> Entry:
        return Entry(
            seq, "2026-12-03T22:00:00Z", who, case, "s", None, "pooled", "favourable", 0.1,
            {}, action, None, "", sup, "0" * 64, "0" * 64,
        )  # fmt: skip

    entries = [
        e(1, "A", "alice", "uphold"),
        e(2, "A", "bob", "defer"),  # a deferral decides nothing
        e(3, "B", "alice", "uphold"),
        e(4, "B", "bob", "override-favourable"),  # disagree
        e(5, "C", "alice", "uphold"),
        e(6, "C", "bob", "override-favourable", sup=5),  # replaced: one in force
        e(7, "D", "alice", "override-favourable"),
        e(8, "D", "alice", "uphold"),  # alice changed her mind: only her latest counts
        e(9, "D", "bob", "uphold"),
    ]
    assert conflicted_cases(entries) == ["B"]


def test_cli_record_refuses_then_accepts_with_flags(study_config, fresh, cli, monkeypatch) -> None:  # type: ignore[no-untyped-def]
    case = _case(fresh)
    cfg = str(study_config)
    as_login(monkeypatch, "alice")
    assert cli("record", case, "-a", "uphold", "--config", cfg).code == 0
    as_login(monkeypatch, "bob")
    res = cli("record", case, "-a", "defer", "--note", "later", "--config", cfg)
    assert res.code == 2 and "entry 1 by alice" in res.err and "Traceback" not in res.err
    assert "--second-opinion" in res.err and "--supersedes 1" in res.err
    res = cli("record", case, "-a", "override-unfavourable", "-r", "data-error", "-n", "no",
              "--second-opinion", "--config", cfg, "--json")  # fmt: skip
    assert res.code == 0 and json.loads(res.out)["seq"] == 2
    queue = json.loads(cli("queue", "--config", cfg, "--json", "--all", "--limit", "0").out)
    states = {r["case_id"]: r["state"] for r in queue["rows"]}
    assert states[case] == "conflict"
    help_text = cli("record", "--help").out
    assert "--second-opinion" in help_text and "--supersedes" in help_text


def test_conflict_code_matches_the_review_screen() -> None:
    from closecall.tui import marks

    assert marks.CONFLICT == CONFLICT and marks.STATE_WORD[CONFLICT].endswith("conflict")
