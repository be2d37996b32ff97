"""Hostile queue requests: the one QueueQuery refuses them for the command line and the library
alike (exit 2, one error with a fix, no traceback) and no study file changes."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import pytest
from hostile_helpers import assert_refused, assert_unchanged, study_digests

from closecall import QueueQuery, Study, UserError

# the data files' digests cache (size, mtime -> SHA-256) is refreshed whenever a command opens
# the study (the copy's files have new mtimes); it is a cache, not a study record
DIGEST_CACHE = ".closecall/digests.json"

BAD_FLAGS = [
    (["--band", "nan"], "band"),
    (["--band", "-0.5"], "band"),
    (["--band", "inf"], "band"),
    (["--epsilon", "nan"], "epsilon"),
    (["--epsilon", "0"], "epsilon"),
    (["--epsilon", "-0.01"], "epsilon"),
    (["--limit", "-3"], "limit"),
    (["--sort", "loudness"], "loudness"),
    (["--rests-on", "zone"], "zone"),
    (["--group", "Nowhere"], "Nowhere"),
]


class TestCommandLine:
    @pytest.mark.parametrize(("flags", "needle"), BAD_FLAGS)
    def test_refused_and_unchanged(
        self, study_dir: Path, cli: Any, flags: list[str], needle: str
    ) -> None:
        before = study_digests(study_dir)
        before.pop(DIGEST_CACHE, None)
        res = cli("queue", "--config", str(study_dir / "closecall.toml"), *flags)
        assert_refused(res, needle)
        assert_unchanged(before, study_dir, allow_new=(DIGEST_CACHE,))


class TestLibrary:
    @pytest.mark.parametrize(
        "changes",
        [
            {"band": float("nan")},
            {"band": -1.0},
            {"epsilon": float("inf")},
            {"limit": -1},
            {"limit": True},
            {"sort": "Closeness"},
            {"rests_on": "proxy"},
        ],
    )
    def test_query_refused(self, changes: dict[str, Any]) -> None:
        with pytest.raises(UserError) as err:
            QueueQuery(**changes)
        assert err.value.fix

    def test_unknown_model_and_group_refused_unchanged(self, study_dir: Path) -> None:
        before = study_digests(study_dir)
        before.pop(DIGEST_CACHE, None)
        study = Study.open(study_dir / "closecall.toml")
        for query in (QueueQuery(ambiguous=True, model="best"), QueueQuery(group="Nowhere")):
            with pytest.raises(UserError) as err:
                study.queue(query)
            assert err.value.fix and "--" not in err.value.message
        assert_unchanged(before, study_dir, allow_new=(DIGEST_CACHE,))
