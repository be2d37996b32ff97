"""Hostile requests for the triage queue's new switches (kind of flip, triage sort): refused
with one error and a fix, for the command line and the library, and no study file changes."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import pytest
from hostile_helpers import assert_refused, assert_unchanged, study_digests

from closecall import QueueQuery, UserError

DIGEST_CACHE = ".closecall/digests.json"  # a cache refreshed on open (see the queue corpus)


class TestCommandLine:
    @pytest.mark.parametrize(
        ("flags", "needle"),
        [
            (["--flips", "sideways"], "sideways"),
            (["--flips", "Model"], "Model"),
            (["--flips", ""], "flip"),
            (["--flips", "model\x1b[31m"], "flip"),
            (["--sort", "Triage"], "Triage"),
        ],
    )
    def test_refused_and_unchanged(
        self, study_dir: Path, cli: Any, flags: list[str], needle: str
    ) -> None:
        before = study_digests(study_dir)
        before.pop(DIGEST_CACHE, None)
        res = cli("queue", "--config", str(study_dir / "closecall.toml"), *flags)
        assert_refused(res, needle)
        allowed = ("any", "model", "lens") if flags[0] == "--flips" else ("triage", "closeness")
        assert all(word in res.err for word in allowed)  # the fix lists what is allowed
        assert_unchanged(before, study_dir, allow_new=(DIGEST_CACHE,))


class TestLibrary:
    @pytest.mark.parametrize("flips", ["sideways", "MODEL", 1, "any "])
    def test_unknown_kind_refused(self, flips: Any) -> None:
        with pytest.raises(UserError) as err:
            QueueQuery(flips=flips)
        assert err.value.fix

    def test_bool_means_any_or_none(self) -> None:
        assert QueueQuery(flips=True).flips == "any"
        assert QueueQuery(flips=False).flips is None
