"""Hostile fits (issue 10, items 3 and 4): held-out means held out; separation and degenerate
fits are reported, never silent.

Each case writes a small study whose history has a known defect — more columns than rows of pure
noise, complete separation (whole history, one split group), quasi-complete separation (whole
history, one fold only), a group with one outcome value. With penalty 0 ``closecall fit`` must
refuse it (exit 2, one error naming the model, fit, group and problem, a fix naming the penalty
key; every study file byte-identical, no snapshot). With a penalty it is fitted and flagged in
``fit --json``, ``explain --json``, their text output and the review screen. The held-out
scores of the penalised wide-noise study are checked against independent scikit-learn refits.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pytest
from hostile_helpers import Cli, assert_refused, assert_unchanged, study_digests
from scipy.special import expit
from sklearn.linear_model import LogisticRegression
from sklearn.metrics import roc_auc_score

from closecall.suite.opening import open_study

CONFIG = "closecall.toml"
DIGEST_CACHE = ".closecall/digests.json"


def _write(folder: Path, frame: pd.DataFrame, penalty: float) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    frame.to_csv(folder / "history.csv", index=False)
    (folder / CONFIG).write_text(
        f"""[study]
name = "hostile fit"
seed = 4

[data]
history = "history.csv"
id = "id"
outcome = "y"
favourable = "good"
group = "g"

[model]
penalty = {penalty}
folds = 5
"""
    )
    return folder / CONFIG


def _frame(n: int, seed: int) -> tuple[pd.DataFrame, np.random.Generator]:
    """Two groups, two standard-normal features, an outcome that overlaps on both."""
    rng = np.random.default_rng(seed)
    x1, x2 = rng.normal(size=n), rng.normal(size=n)
    good = rng.random(n) < expit(0.6 * x1 - 0.4 * x2)
    frame = pd.DataFrame(
        {
            "id": [f"H{i:04d}" for i in range(n)],
            "g": np.where(np.arange(n) % 2 == 0, "A", "B"),
            "x1": x1.round(4),
            "x2": x2.round(4),
            "y": np.where(good, "good", "bad"),
        }
    )
    return frame, rng


def _complete_whole() -> pd.DataFrame:
    frame, _ = _frame(300, 1)
    frame["y"] = np.where(frame["x1"] > 0, "good", "bad")  # x1 alone decides every case
    return frame


def _complete_in_group() -> pd.DataFrame:
    frame, _ = _frame(300, 2)
    b = frame["g"] == "B"
    frame.loc[b, "y"] = np.where(frame.loc[b, "x1"] > 0, "good", "bad")  # only in group B
    return frame


def _quasi_whole() -> pd.DataFrame:
    frame, rng = _frame(300, 3)
    on = rng.random(len(frame)) < 0.06
    frame["flag"] = np.where(on, "on", "off")
    frame.loc[on, "y"] = "good"  # every flagged case is favourable, the rest overlap
    return frame


def _quasi_one_fold() -> pd.DataFrame:
    """Five 'rare' cases, four favourable and one not: the whole history overlaps, but the
    training rows of the fold that holds the unfavourable one are quasi-separated."""
    frame, _ = _frame(300, 4)
    frame["note"] = "common"
    rare = frame.index[frame["g"] == "A"][:5]
    frame.loc[rare, "note"] = "rare"
    frame.loc[rare, "y"] = ["good", "good", "good", "good", "bad"]
    return frame


def _one_outcome_group() -> pd.DataFrame:
    frame, _ = _frame(300, 5)
    frame.loc[:39, "g"] = "C"
    frame.loc[:39, "y"] = "good"  # group C's history: one outcome value
    return frame


# name: (data, the flag that must appear at a penalty, needles of the refusal at penalty 0)
CASES: dict[str, tuple[Any, dict[str, Any], tuple[str, ...]]] = {
    "complete separation, whole history": (
        _complete_whole,
        {"model": "pooled", "group": None, "fit": "whole history"},
        ("pooled model", "whole history", "complete separation", "x1"),
    ),
    "complete separation, one split group": (
        _complete_in_group,
        {"model": "split", "group": "B", "fit": "whole history"},
        ("split model", "group 'B'", "complete separation", "x1"),
    ),
    "quasi-complete separation, whole history": (
        _quasi_whole,
        {"model": "pooled", "group": None, "fit": "whole history"},
        ("pooled model", "whole history", "quasi-complete separation", "flag=on"),
    ),
    "quasi-complete separation, one fold only": (
        _quasi_one_fold,
        {"model": "pooled", "group": None},
        ("pooled model", "fold ", "quasi-complete separation", "note=rare"),
    ),
    "one outcome value in a group": (
        _one_outcome_group,
        {"model": "split", "group": "C", "fit": "whole history"},
        ("split model", "group 'C'", "one outcome value", "favourable outcome"),
    ),
}
PROBLEM = {
    "complete separation, whole history": "complete_separation",
    "complete separation, one split group": "complete_separation",
    "quasi-complete separation, whole history": "quasi_complete_separation",
    "quasi-complete separation, one fold only": "quasi_complete_separation",
    "one outcome value in a group": "one_outcome",
}


def _refused_at_zero(cli: Cli, config: Path, *needles: str) -> str:
    """`closecall fit` refuses; every file of the study is unchanged and no snapshot made."""
    study = config.parent
    before = study_digests(study)
    res = cli("fit", "--config", str(config))
    text = assert_refused(res, *needles, "penalty", "[model]")
    assert "fix: set a penalty above 0" in text
    assert_unchanged(before, study, allow_new=(DIGEST_CACHE,))
    return text


def _fit_json(cli: Cli, config: Path) -> dict[str, Any]:
    res = cli("fit", "--config", str(config), "--json")
    assert res.code == 0, res
    return dict(json.loads(res.out))


def _scored_case(config: Path, flag: dict[str, Any]) -> str:
    """A case under review scored by the flagged fit (its row of the model's weights)."""
    snap = open_study(config).snapshot
    _, rows = snap.weights(flag["model"])
    return str(snap.case_ids[int(np.flatnonzero(np.asarray(rows) == flag["row"])[0])])


# --------------------------------------------------------------------------- wide pure noise


def _wide_noise(n: int = 100, p: int = 150, seed: int = 8) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    frame = pd.DataFrame(rng.normal(size=(n, p)).round(5), columns=[f"f{j:03d}" for j in range(p)])
    frame.insert(0, "id", [f"N{i:04d}" for i in range(n)])
    frame["g"] = np.where(np.arange(n) % 2 == 0, "A", "B")
    frame["y"] = np.where(rng.random(n) < 0.5, "good", "bad")  # independent of everything
    return frame


class TestWideNoise:
    """More feature columns than history rows, outcome pure noise (item 3: held-out means held
    out). Before issue 10, penalty 0 gave held-out AUC 1.000: every fold fit started at the
    whole-history interpolating fit, which has no finite optimum to move to."""

    def test_penalised_held_out_scores_equal_independent_refits(
        self, cli: Cli, tmp_path: Path
    ) -> None:
        lam = 1.0
        config = _write(tmp_path / "study", _wide_noise(), lam)
        out = _fit_json(cli, config)
        snap = open_study(config).snapshot
        X = np.asarray(snap.hist_X)
        y = np.asarray(snap.hist_y)
        fold = np.asarray(snap.arrays["fold"])
        groups = np.asarray(snap.hist_group_codes)
        masks = snap.meta["masks"]
        nongroup = ~snap.encoder.group_mask
        for model in ("pooled", "unaware", "proxy_free", "split"):
            oof = np.asarray(snap.arrays[f"oof__{model}"])
            ref = np.full(len(y), np.nan)
            for k in np.unique(fold):
                for g in np.unique(groups) if model == "split" else [None]:
                    train = (fold != k) & (True if g is None else groups == g)
                    test = (fold == k) & (True if g is None else groups == g)
                    mask = nongroup if g is not None else np.asarray(masks[model], dtype=bool)
                    # reference: scikit-learn LogisticRegression, same folds and design,
                    # C = 1/lambda (its objective is ours: sum of losses + |w|^2 / (2C))
                    clf = LogisticRegression(
                        C=1.0 / lam, solver="newton-cholesky", tol=1e-12, max_iter=1000
                    ).fit(X[train][:, mask], y[train])
                    ref[test] = clf.decision_function(X[test][:, mask])
            np.testing.assert_allclose(oof, ref, atol=1e-6, err_msg=model)
            auc = roc_auc_score(y, oof)
            assert auc == pytest.approx(roc_auc_score(y, ref), abs=1e-12)
            assert abs(auc - 0.5) < 0.2, (model, auc)  # noise: near 0.5, nowhere near 1.0
        flagged = {(f["model"], f["fit"], f["problem"]) for f in out["fit_flags"]}
        for fit in ["whole history"] + [f"fold {k} of 5" for k in range(1, 6)]:
            assert ("pooled", fit, "more_columns_than_rows") in flagged
            assert ("pooled", fit, "complete_separation") in flagged
        assert any(n.startswith("fit flag: pooled model: more columns") for n in out["notes"])

    def test_unpenalised_is_refused(self, cli: Cli, tmp_path: Path) -> None:
        config = _write(tmp_path / "study", _wide_noise(), 0)
        _refused_at_zero(cli, config, "pooled model", "more columns than rows", "152 columns")


# --------------------------------------------------------------------------- separation


class TestSeparation:
    """Complete and quasi-complete separation (Albert & Anderson 1984) and a group with one
    outcome value: refused without a penalty, flagged with one."""

    @pytest.mark.parametrize("case", list(CASES))
    def test_refused_at_penalty_zero(self, cli: Cli, tmp_path: Path, case: str) -> None:
        make, _, needles = CASES[case]
        config = _write(tmp_path / "study", make(), 0)
        text = _refused_at_zero(cli, config, *needles)
        if case.endswith("one fold only"):
            assert "whole history" not in text

    @pytest.mark.parametrize("case", list(CASES))
    def test_flagged_at_a_penalty(self, cli: Cli, tmp_path: Path, case: str) -> None:
        make, expect, _ = CASES[case]
        config = _write(tmp_path / "study", make(), 1.0)
        out = _fit_json(cli, config)
        hits = [
            f
            for f in out["fit_flags"]
            if f["problem"] == PROBLEM[case] and all(f.get(k) == v for k, v in expect.items())
        ]
        assert hits, out["fit_flags"]
        if case.endswith("one fold only"):
            fits = {f["fit"] for f in out["fit_flags"] if f["model"] == "pooled"}
            assert len(fits) == 1 and next(iter(fits)).startswith("fold "), fits
        same = {(f["model"], f["group"]) for f in hits}
        scoring = next(
            f
            for f in out["fit_flags"]
            if f["problem"] == PROBLEM[case]
            and (f["model"], f["group"]) in same
            and f["row"] is not None
        )
        case_id = _scored_case(config, scoring)
        res = cli("explain", case_id, "--config", str(config), "--json")
        assert res.code == 0, res
        this = json.loads(res.out)["fit_flags"]["this_case"]
        assert any(f["problem"] == PROBLEM[case] for f in this), this
        text = cli("explain", case_id, "--config", str(config))
        assert text.code == 0 and "fit flag:" in text.out
        table = cli("fit", "--config", str(config))
        assert table.code == 0 and "fit flags:" in table.out


def test_review_screen_shows_the_flag_line(tmp_path: Path) -> None:
    """The case screen of a case scored by a flagged fit carries a visible flag line."""
    import asyncio

    from closecall.tui.app import ReviewApp
    from closecall.tui.case_screen import CaseScreen

    sys_path = Path(__file__).resolve().parents[1] / "tui"
    import sys

    sys.path.insert(0, str(sys_path))
    from tui_helpers import open_queue, screen_text, wait_until

    config = _write(tmp_path / "study", _one_outcome_group(), 1.0)
    study = open_study(config)
    snap = study.snapshot
    row = int(np.flatnonzero(np.asarray(snap.group_labels) == "C")[0])

    async def run() -> None:
        app = ReviewApp(study=study, login="reviewer")
        async with app.run_test(size=(120, 40)) as pilot:
            await open_queue(pilot)
            assert app.session is not None
            app.push_screen(CaseScreen(app.session, row))
            await wait_until(pilot, lambda: isinstance(app.screen, CaseScreen))
            await wait_until(pilot, lambda: app.screen.details is not None)  # type: ignore[attr-defined]
            shown = screen_text(app)
            assert "⚑ fit flagged: " in shown and "split (one outcome value)" in shown, shown

    asyncio.run(run())
