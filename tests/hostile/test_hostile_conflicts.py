"""Hostile input for recording decisions (issue 12, items 7 and 11): reason codes and collisions.

Every case runs one command on a fresh copy of the fitted demo study (2 ledger entries by the
test's own login) and must be refused with one message and a fix, no traceback, and every
study file byte-identical afterwards. Another reviewer is injected by replacing the login
lookup (tests only).
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from hostile_helpers import assert_refused, assert_unchanged, study_digests

from closecall.review.ledger import access
from closecall.setup.config import DEFAULT_REASONS


@pytest.fixture(autouse=True)
def settled(study_dir: Path, cli) -> None:  # type: ignore[no-untyped-def]
    """Open the copied study once: its digests cache is keyed on ctime, which copying changed."""
    cli("fit", "--config", str(study_dir / "closecall.toml"))


def _first_entry(cli, cfg: str) -> dict:  # type: ignore[no-untyped-def]
    rows = json.loads(cli("ledger", "show", "--json", "--config", cfg).out)["rows"]
    return dict(rows[0])


class TestReasonCodes:
    @pytest.mark.parametrize("code", ["not-a-code", "DATA-ERROR", "data-error ", "other\u200b"])
    def test_unknown_code_is_refused_with_the_list(self, study_dir: Path, cli, code: str) -> None:  # type: ignore[no-untyped-def]
        before = study_digests(study_dir)
        cfg = str(study_dir / "closecall.toml")
        res = cli("record", "HR-0000011", "-a", "override-favourable", "-r", code, "-n", "x",
                  "--config", cfg)  # fmt: skip
        assert_refused(res, "unknown reason code", *DEFAULT_REASONS)
        assert_unchanged(before, study_dir)

    def test_reasons_lists_the_studys_codes(self, study_dir: Path, cli) -> None:  # type: ignore[no-untyped-def]
        cfg = study_dir / "closecall.toml"
        text = cfg.read_text()
        cfg.write_text(text.replace("[review]", '[review]\nreasons = ["letter-seen", "other"]', 1))
        shown = json.loads(cli("reasons", "--json", "--config", str(cfg)).out)
        assert [r["code"] for r in shown["reasons"]] == ["letter-seen", "other"]
        assert shown["reasons"][0]["meaning"] is None and shown["reasons"][1]["default"]
        res = cli("record", "HR-0000011", "-a", "override-favourable", "-r", "data-error",
                  "-n", "x", "--config", str(cfg))  # fmt: skip
        assert_refused(res, "letter-seen, other")

    def test_reasons_with_a_missing_config_is_refused(self, tmp_path: Path, cli) -> None:  # type: ignore[no-untyped-def]
        assert_refused(cli("reasons", "--config", str(tmp_path / "nope.toml")), "nope.toml")

    def test_record_help_lists_the_codes(self, cli) -> None:  # type: ignore[no-untyped-def]
        text = "".join(cli("record", "--help").out.split())  # help wraps inside codes
        assert "closecallreasons" in text
        assert all(c in text for c in DEFAULT_REASONS)


class TestCollisions:
    def test_another_reviewers_decision_is_not_contradicted(
        self, study_dir: Path, cli, monkeypatch: pytest.MonkeyPatch
    ) -> None:  # type: ignore[no-untyped-def]
        cfg = str(study_dir / "closecall.toml")
        first = _first_entry(cli, cfg)
        before = study_digests(study_dir)
        monkeypatch.setattr(access, "current_login", lambda: "someone-else")
        res = cli("record", first["case_id"], "-a", "override-unfavourable", "-r", "other",
                  "-n", "no", "--config", cfg)  # fmt: skip
        assert_refused(res, f"entry {first['seq']} by {first['reviewer']}", "first look",
                       "--second-opinion", f"--supersedes {first['seq']}")  # fmt: skip
        assert_unchanged(before, study_dir)

    def test_supersede_and_second_opinion_together(
        self, study_dir: Path, cli, monkeypatch: pytest.MonkeyPatch
    ) -> None:  # type: ignore[no-untyped-def]
        cfg = str(study_dir / "closecall.toml")
        first = _first_entry(cli, cfg)
        before = study_digests(study_dir)
        monkeypatch.setattr(access, "current_login", lambda: "someone-else")
        res = cli("record", first["case_id"], "-a", "uphold", "--supersedes", str(first["seq"]),
                  "--second-opinion", "--config", cfg)  # fmt: skip
        assert_refused(res, "contradict each other")
        assert_unchanged(before, study_dir)

    def test_superseding_an_entry_of_another_case(self, study_dir: Path, cli) -> None:  # type: ignore[no-untyped-def]
        cfg = str(study_dir / "closecall.toml")
        first = _first_entry(cli, cfg)
        before = study_digests(study_dir)
        res = cli("record", "HR-0000011", "-a", "uphold", "--supersedes", str(first["seq"]),
                  "--config", cfg)  # fmt: skip
        assert_refused(res, f"entry {first['seq']} is about case")
        assert_unchanged(before, study_dir)
