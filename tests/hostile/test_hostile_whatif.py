"""Hostile what-if requests (issue 15, item 3): an unknown feature to drop, an unknown group
level, a threshold out of range, no deployed model to drop a weight from, a malformed policy.
Each is refused with one error naming the option and a fix (exit 2, no traceback) by the
command line and the library alike, and no study file changes."""

from __future__ import annotations

import re
from pathlib import Path
from typing import Any

import pytest
from hostile_helpers import assert_refused, assert_unchanged, study_digests

from closecall import Study, UserError
from closecall.setup.demo import DEMO_SCORECARD
from closecall.suite.opening import open_study

# the data files' digests cache is refreshed whenever a command opens the (copied) study
DIGEST_CACHE = ".closecall/digests.json"


def _refused_unchanged(cli: Any, study_dir: Path, args: list[str], *needles: str) -> None:
    before = study_digests(study_dir)
    before.pop(DIGEST_CACHE, None)
    res = cli("whatif", "--config", str(study_dir / "closecall.toml"), *args)
    assert_refused(res, *needles)
    assert_unchanged(before, study_dir, allow_new=(DIGEST_CACHE,))


_CARD_SECTION = re.compile(r"\n\[deployed\]\nscorecard = [^\n]*\n(#[^\n]*\n)*")


def _deployed(study_dir: Path, how: str) -> Path:
    """The copied study with its model in use as ``card`` (the demo's published scorecard),
    ``scores`` (the pending file's deployed_score column) or ``none``, fitted."""
    config = study_dir / "closecall.toml"
    text = _CARD_SECTION.sub("\n", config.read_text())
    text = text.replace('deployed_score = "deployed_score"', "")
    if how == "card":
        (study_dir / "scorecard.csv").write_text(DEMO_SCORECARD)
        text += '\n[deployed]\nscorecard = "scorecard.csv"\n'
    elif how == "scores":
        text = text.replace(
            'group = ["heritage"]', 'group = ["heritage"]\ndeployed_score = "deployed_score"', 1
        )
    config.write_text(text)
    open_study(config)
    return config


def _with_card(study_dir: Path) -> Path:
    return _deployed(study_dir, "card")


def _without_deployed(study_dir: Path) -> Path:
    return _deployed(study_dir, "none")


BAD_THRESHOLDS = [
    (["--group-threshold", "Nowhere=0.4"], ("--group-threshold", "Nowhere", "Briar=P")),
    (["--group-threshold", "Briar=0"], ("--group-threshold", "out of range")),
    (["--group-threshold", "Briar=1"], ("--group-threshold", "out of range")),
    (["--group-threshold", "Briar=1.5"], ("--group-threshold", "out of range")),
    (["--group-threshold", "Briar=-0.2"], ("--group-threshold", "out of range")),
    (["--group-threshold", "Briar=nan"], ("--group-threshold", "out of range")),
    (["--group-threshold", "Briar=inf"], ("--group-threshold", "out of range")),
    (["--group-threshold", "Briar=high"], ("--group-threshold", "not a number")),
    (["--group-threshold", "Briar"], ("--group-threshold", "LEVEL=P")),
    (["--group-threshold", "=0.4"], ("--group-threshold", "LEVEL=P")),
    (
        ["--group-threshold", "Briar=0.4", "--group-threshold", "Briar=0.5"],
        ("--group-threshold", "two thresholds"),
    ),
]

BAD_POLICIES = [
    (["--model", "Pooled"], ("--model", "pooled, unaware")),
    (["--model", ""], ("--model",)),
    (["--lens", "reckless"], ("--lens", "equal-costs")),
    (["--against", "colour=red"], ("--against", "drop=heritage")),
    (["--against", "model"], ("--against",)),
    (["--against", "model=nonesuch"], ("--against", "nonesuch")),
    (["--against", "threshold=Briar=2"], ("--against", "out of range", "threshold")),
    (["--against", "drop=nonesuch"], ("--against", "nonesuch")),
    (["--level", "1"], ("--level",)),
    (["--level", "0"], ("--level",)),
    (["--level", "nan"], ("--level",)),
]


class TestThresholdsAndPolicies:
    @pytest.mark.parametrize(("args", "needles"), BAD_THRESHOLDS)
    def test_bad_group_threshold(
        self, study_dir: Path, cli: Any, args: list[str], needles: tuple[str, ...]
    ) -> None:
        _refused_unchanged(cli, study_dir, args, *needles)

    @pytest.mark.parametrize(("args", "needles"), BAD_POLICIES)
    def test_bad_policy(
        self, study_dir: Path, cli: Any, args: list[str], needles: tuple[str, ...]
    ) -> None:
        _refused_unchanged(cli, study_dir, args, *needles)


class TestDroppedWeights:
    def test_imported_scores_have_no_weight_to_drop(self, study_dir: Path, cli: Any) -> None:
        _deployed(study_dir, "scores")
        _refused_unchanged(cli, study_dir, ["--drop-weight", "heritage"], "imported as scores",
                           "[deployed] scorecard")  # fmt: skip

    def test_no_deployed_model_configured(self, study_dir: Path, cli: Any) -> None:
        _without_deployed(study_dir)
        _refused_unchanged(
            cli, study_dir, ["--drop-weight", "heritage"], "no deployed model", "scorecard"
        )

    def test_no_deployed_model_to_weigh(self, study_dir: Path, cli: Any) -> None:
        _without_deployed(study_dir)
        _refused_unchanged(cli, study_dir, ["--model", "deployed"], "--model", "no deployed")

    @pytest.mark.parametrize("feature", ["zone", "nonesuch", "Heritage", ""])
    def test_feature_the_card_does_not_score(self, study_dir: Path, cli: Any, feature: str) -> None:
        _with_card(study_dir)
        _refused_unchanged(cli, study_dir, ["--drop-weight", feature], "--drop-weight", "heritage")

    def test_card_study_still_answers(self, study_dir: Path, cli: Any) -> None:
        """The refusals above are of the input, not of the card study: a good request runs."""
        _with_card(study_dir)
        res = cli("whatif", "--config", str(study_dir / "closecall.toml"), "--drop-weight",
                  "heritage")  # fmt: skip
        assert res.code == 0, res
        assert "without heritage" in res.out


class TestLibrary:
    @pytest.mark.parametrize(
        "kwargs",
        [
            {"group_thresholds": {"Briar": 0.0}},
            {"group_thresholds": {"Briar": True}},
            {"group_thresholds": {"Nowhere": 0.5}},
            {"drop": ["nonesuch"]},
            {"lens": "nonesuch"},
            {"against": "lens"},
            {"level": float("inf")},
        ],
    )
    def test_refused_with_a_fix(self, study_dir: Path, kwargs: dict[str, Any]) -> None:
        study = Study.open(study_dir / "closecall.toml")
        before = study_digests(study_dir)
        with pytest.raises(UserError) as err:
            study.whatif(**kwargs)
        assert err.value.fix and err.value.about
        assert_unchanged(before, study_dir)


class TestQueueChangedBy:
    @pytest.mark.parametrize(
        ("policy", "needles"),
        [
            ("drop", ("--changed-by", "drop=heritage")),
            ("colour=red", ("--changed-by",)),
            ("model=nonesuch", ("--changed-by", "nonesuch")),
            ("threshold=Nowhere=0.3", ("--changed-by", "Nowhere", "threshold")),
            ("threshold=Briar=7", ("--changed-by", "out of range")),
            ("drop=nonesuch", ("--changed-by", "nonesuch")),
        ],
    )
    def test_refused_and_unchanged(
        self, study_dir: Path, cli: Any, policy: str, needles: tuple[str, ...]
    ) -> None:
        before = study_digests(study_dir)
        before.pop(DIGEST_CACHE, None)
        res = cli("queue", "--config", str(study_dir / "closecall.toml"), "--changed-by", policy)
        assert_refused(res, *needles)
        assert_unchanged(before, study_dir, allow_new=(DIGEST_CACHE,))
