"""Hostile inputs for the disparity report's audit sections (issue 14): bad period units are
refused before anything is read; degenerate ledgers — a group never overridden (separation), a
single reviewer, outcomes that never vary — still give a report, never a traceback, and leave
every study file as it was."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from hostile_helpers import assert_refused, assert_unchanged, study_digests

from closecall.review.decisions import record_review
from closecall.suite.opening import open_study


@pytest.mark.parametrize("unit", ["week", "", "MONTH", "quarter; rm -rf /", "月"])
def test_unknown_period_unit_is_refused(cli, study_dir: Path, unit: str) -> None:  # type: ignore[no-untyped-def]
    before = study_digests(study_dir)
    res = cli("disparity", "-c", str(study_dir / "closecall.toml"), "--period", unit)
    assert_refused(res, "--period", "month, quarter")
    assert_unchanged(before, study_dir)


def _review(study_dir: Path, plan: dict[str, str]) -> None:
    """Record one review per case id in ``plan`` (action by id); overrides get a reason."""
    study = open_study(study_dir / "closecall.toml")
    for case, action in plan.items():
        reason = None if action in ("uphold", "defer") else "data-error"
        note = "hostile case" if reason else ""
        record_review(study, case, action=action, reason=reason, note=note)


def _cases(study_dir: Path) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    snap = open_study(study_dir / "closecall.toml").snapshot
    margin = np.asarray(snap.margins(snap.reference))
    ids = np.asarray(snap.case_ids).astype(str)
    groups = np.asarray(snap.group_labels).astype(str)
    return ids, groups, margin


def test_a_group_never_overridden_is_estimated_by_firth(cli, study_dir: Path) -> None:  # type: ignore[no-untyped-def]
    # Separation: every Briar case the model decided favourably is upheld, while some Aster
    # ones are overridden. The report estimates Briar by Firth's method instead of failing.
    ids, groups, margin = _cases(study_dir)
    fresh = np.arange(2, len(ids))  # the base study's two reviews stay as they are
    plan: dict[str, str] = {}
    for g, n_fav, n_over in (("Aster", 30, 8), ("Briar", 20, 0)):
        fav = fresh[(groups[fresh] == g) & (margin[fresh] > 0)][:n_fav]
        unf = fresh[(groups[fresh] == g) & (margin[fresh] <= 0)][:10]
        plan.update({ids[i]: "uphold" for i in fav})
        plan.update({ids[i]: "override-unfavourable" for i in fav[:n_over]})
        plan.update({ids[i]: "uphold" for i in unf})
        plan[ids[unf[0]]] = "override-favourable"
    _review(study_dir, plan)
    before = study_digests(study_dir)
    res = cli("disparity", "-c", str(study_dir / "closecall.toml"), "--json", "--boot", "200")
    assert res.code == 0, res
    data = json.loads(res.out)
    fit = data["conditional"][0]
    assert fit["fitted"] and fit["estimation"] == "Firth penalised likelihood"
    briar = next(r for r in fit["rows"] if r["group"] == "Briar")
    assert briar["events"] == 0 and 0 < briar["odds_ratio"] < 1 and briar["high"] is not None
    assert any("separation" in n for n in fit["notes"])
    assert_unchanged(before, study_dir)


def test_one_reviewer_gives_model_based_errors_and_says_so(cli, study_dir: Path) -> None:  # type: ignore[no-untyped-def]
    ids, _, margin = _cases(study_dir)
    rng = np.random.default_rng(4)
    plan = {
        ids[i]: str(rng.choice(["uphold", "uphold", "override-unfavourable"]))
        if margin[i] > 0
        else str(rng.choice(["uphold", "uphold", "override-favourable"]))
        for i in range(2, 80)
    }
    _review(study_dir, plan)
    res = cli("disparity", "-c", str(study_dir / "closecall.toml"), "--json", "--boot", "200")
    assert res.code == 0, res
    data = json.loads(res.out)
    for fit in data["conditional"]:
        if fit["fitted"] and fit["estimation"] == "maximum likelihood":
            assert fit["standard_errors"].startswith("model-based")
            assert fit["reviewers"] == 1
    assert data["families"][0]["name"] == "review"


def test_outcomes_that_never_vary_give_empty_rates_not_a_crash(
    cli,
    study_dir: Path,
    tmp_path: Path,  # type: ignore[no-untyped-def]
) -> None:
    ids, _, margin = _cases(study_dir)
    plan = {ids[i]: "uphold" for i in range(2, 60)}
    plan[ids[3]] = "override-unfavourable" if margin[3] > 0 else "override-favourable"
    _review(study_dir, plan)
    outcomes = tmp_path / "outcomes.csv"
    outcomes.write_text(
        "application_id,completed\n" + "".join(f"{c},yes\n" for c in ids[:60]), encoding="utf-8"
    )
    before = study_digests(study_dir)
    res = cli(
        "disparity",
        "-c",
        str(study_dir / "closecall.toml"),
        "--outcomes",
        str(outcomes),
        "--json",
        "--boot",
        "200",
    )
    assert res.code == 0, res
    data = json.loads(res.out)
    for row in data["errors"]["rows"]:
        assert row["model_false_favourable"]["cases"] == 0  # no unfavourable outcome at all
        assert row["model_false_favourable"]["rate"] is None
        gap = row["model_ff_gap"]
        if gap is not None:  # the gap of two empty rates is undefined, not a crash
            assert gap["difference"] is None and gap["p_value"] is None
        assert row["mcnemar"]["both_right"] + row["mcnemar"]["both_wrong"] >= 0
    assert data["errors"]["mcnemar_all"]["model_only"] >= 0
    assert_unchanged(before, study_dir)
