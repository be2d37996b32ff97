"""The corpus fixtures themselves: the base study is fitted and holds two reviews."""

from __future__ import annotations

from pathlib import Path

from hostile_helpers import assert_unchanged, study_digests


def test_base_study_copies_and_verifies(study_dir: Path, cli) -> None:  # type: ignore[no-untyped-def]
    before = study_digests(study_dir)
    assert any(k.startswith(".closecall/snapshots/") for k in before)
    res = cli("ledger", "verify", "--config", str(study_dir / "closecall.toml"), "--json")
    assert res.code == 0, res
    assert '"entries": 2' in res.out.replace(" ", "").replace('"entries":2', '"entries": 2')
    assert_unchanged(before, study_dir, allow_new=(".closecall/",))
