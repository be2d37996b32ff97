"""Hostile input to the set-up commands (found while moving them behind the library, issue
13): each was a traceback or a garbled message; now one message, exit 2, the study unchanged."""

from __future__ import annotations

from pathlib import Path
from typing import Any

from hostile_helpers import assert_refused, assert_unchanged, study_digests


def test_ledger_setup_with_something_that_is_not_a_url(study_dir: Path, cli: Any) -> None:
    before = study_digests(study_dir)
    assert_refused(cli("ledger", "setup", "notaurl"), "notaurl: not a PostgreSQL URL")
    assert_unchanged(before, study_dir)


def test_team_setup_with_an_unknown_group(study_dir: Path, cli: Any) -> None:
    before = study_dir.stat().st_mode, study_dir.stat().st_gid
    config = study_dir / "closecall.toml"
    text = assert_refused(
        cli("team", "setup", "--group", "no-such-group-x", "--config", str(config)),
        "no group no-such-group-x on this server",
    )
    assert "getgrnam" not in text
    assert (study_dir.stat().st_mode, study_dir.stat().st_gid) == before


def test_ledger_anchor_into_a_missing_folder(study_dir: Path, cli: Any, tmp_path: Path) -> None:
    config = study_dir / "closecall.toml"
    before = study_digests(study_dir)
    out = tmp_path / "nowhere" / "study.anchor"
    assert_refused(
        cli("ledger", "anchor", "--out", str(out), "--config", str(config)),
        f"{out.parent}: no such folder for the anchor file",
    )
    assert not out.parent.exists()
    assert_unchanged(before, study_dir)
