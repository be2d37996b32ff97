"""Cross-fitting, snapshots, the queue, and recovery of the demo's planted structure."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy.special import logit

from closecall.review.queue import build_queue, queue_rows
from closecall.setup.demo import TRUE, write_demo
from closecall.suite.coefficients import raw_coefficients
from closecall.suite.opening import open_study
from closecall.suite.snapshot import load_snapshot, snapshot_dir
from closecall.suite.solver import fit_logit


@pytest.fixture(scope="module")
def crossfit_config(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A demo study with one labelled file: margins are cross-fitted."""
    config = write_demo(tmp_path_factory.mktemp("cf"), cases=2500, seed=5)
    text = config.read_text().replace('pending = "pending.csv"', "")
    text = text.replace('deployed_score = "deployed_score"', "")
    config.write_text(text)
    return config


def test_cross_fitted_cases_are_scored_by_models_that_never_saw_them(crossfit_config: Path) -> None:
    study = open_study(crossfit_config)
    snap = study.snapshot
    assert snap.cross_fitted
    X, y, fold = np.asarray(snap.X), np.asarray(snap.hist_y), np.asarray(snap.arrays["fold"])
    K = study.config.model.folds
    assert set(np.unique(fold)) == set(range(K))
    W, row = snap.weights("pooled")
    np.testing.assert_array_equal(row, fold)  # each case is scored by its own fold's model
    for k in range(K):
        train = fold != k
        # Refit from scratch on the other folds only: the stored scoring model is that fit.
        ref = fit_logit(X[train], y[train], np.ones(X.shape[1], dtype=bool), 1.0)
        np.testing.assert_allclose(W[k], [ref.intercept, *ref.coef], atol=1e-5)
        held = fold == k
        np.testing.assert_allclose(
            np.asarray(snap.logit("pooled"))[held], ref.logit(X[held]), atol=1e-5
        )
    # the split model scores a case with its own group's model from the other folds
    _, rows = snap.weights("split")
    G = len(snap.group_levels)
    np.testing.assert_array_equal(rows, fold * G + np.asarray(snap.group_codes))


def test_snapshot_is_cached_and_changes_with_input(tmp_path: Path) -> None:
    config = write_demo(tmp_path, cases=800, seed=2)
    first = open_study(config)
    assert first.fitted_now
    again = open_study(config)
    assert not again.fitted_now and again.snapshot.id == first.snapshot.id
    np.testing.assert_array_equal(
        np.asarray(again.snapshot.logit("pooled")), np.asarray(first.snapshot.logit("pooled"))
    )
    config.write_text(config.read_text().replace("band = 0.5", "band = 0.4"))
    assert open_study(config).snapshot.id == first.snapshot.id  # review settings: same fit
    config.write_text(config.read_text().replace("penalty = 1.0", "penalty = 2.0"))
    changed = open_study(config)
    assert changed.fitted_now and changed.snapshot.id != first.snapshot.id
    # the snapshot is JSON + .npy, readable without pickle
    folder = snapshot_dir(changed.config, changed.snapshot.id)
    meta = json.loads((folder / "meta.json").read_text())
    assert meta["id"] == changed.snapshot.id
    for f in folder.glob("*.npy"):
        np.load(f, allow_pickle=False)
    assert load_snapshot(folder).n_cases == changed.snapshot.n_cases


def test_same_inputs_give_the_same_results_in_a_new_folder(tmp_path: Path) -> None:
    a = open_study(write_demo(tmp_path / "a", cases=600, seed=9)).snapshot
    b = open_study(write_demo(tmp_path / "b", cases=600, seed=9)).snapshot
    np.testing.assert_array_equal(np.asarray(a.logit("split")), np.asarray(b.logit("split")))


def test_queue_ranks_flips_first_then_closeness(demo_study) -> None:  # type: ignore[no-untyped-def]
    snap = demo_study.snapshot
    q = build_queue(snap, band=0.5)
    # Reference: the order rebuilt with pandas from the snapshot's log-odds (not the queue's
    # grid): a flip is any model × lens decision other than the reference model's under the
    # first lens; close calls are |margin| <= band; flips first, then the smallest |margin|.
    cols = [
        np.asarray(snap.logit(m)) > logit(lens.threshold)
        for m in snap.model_names
        for lens in snap.lenses
    ]
    ref = np.asarray(snap.logit(snap.reference)) > logit(snap.lenses[0].threshold)
    plain_flip = np.any([c != ref for c in cols], axis=0)
    frame = pd.DataFrame(
        {
            "flip": plain_flip,
            "closeness": np.abs(
                np.asarray(snap.logit(snap.reference)) - logit(snap.lenses[0].threshold)
            ),
        }
    )
    kept = frame[(frame["closeness"] <= 0.5) | frame["flip"]]
    expected = kept.sort_values(["flip", "closeness"], ascending=[False, True], kind="stable")
    assert q.order.tolist() == expected.index.tolist()
    only = build_queue(snap, band=0.5, flips_only=True, group="Briar")
    assert len(only) and np.all(plain_flip[only.order])
    assert set(np.asarray(snap.group_labels)[only.order]) == {"Briar"}
    rows = queue_rows(snap, only, 0, 3)
    assert rows[0]["differs"] and rows[0]["group"] == "Briar"
    # decisions per (model, lens) equal the sign of each margin
    for (model, lens), col in zip(q.grid.pairs, q.grid.favourable.T, strict=True):
        np.testing.assert_array_equal(col, np.asarray(snap.margins(model, lens)) > 0)


@pytest.fixture(scope="module")
def big_demo(tmp_path_factory: pytest.TempPathFactory):  # type: ignore[no-untyped-def]
    config = write_demo(tmp_path_factory.mktemp("big"), cases=40000, seed=1)
    config.write_text(config.read_text().replace("penalty = 1.0", "penalty = 0"))
    return open_study(config).snapshot


def test_demo_structure_is_recovered(big_demo) -> None:  # type: ignore[no-untyped-def]
    """The generator's planted truth (docs/demo.md) shows up in the fits: this is a check of
    our own generator against our own models, not an outside reference."""
    snap = big_demo
    pooled = raw_coefficients(snap, "pooled")
    # label bias: 30 % of Briar completions recorded as failures. The implied shift in the
    # log-odds of a recorded completion is log(0.7) at low rates and larger near 50 %.
    bias = TRUE["briar_completion_recorded_as_failure"]
    assert -1.0 < pooled["heritage=Briar"] < np.log(1 - bias) / 2
    # true effects with their signs and rough sizes (raw units)
    assert pooled["quotes_obtained"] == pytest.approx(TRUE["quotes"], rel=0.35)
    assert pooled["prior_grant=yes"] == pytest.approx(TRUE["prior_grant"], rel=0.5)
    assert pooled["self_funded_share"] == pytest.approx(TRUE["self_funded_share"], rel=0.35)
    # household size acts differently by group: the split model finds it
    levels = snap.group_levels
    aster = raw_coefficients(snap, "split", levels.index("Aster"))
    briar = raw_coefficients(snap, "split", levels.index("Briar"))
    assert briar["household_size"] > 0.15 > 0 > aster["household_size"] - 0.05
    assert briar["household_size"] - aster["household_size"] > 0.2
    # the proxies are the two planted ones, and the unaware model leans on them
    assert set(snap.proxies.proxies) == {"zone", "depot_distance_km"}
    unaware = raw_coefficients(snap, "unaware")
    assert unaware["depot_distance_km"] < pooled["depot_distance_km"]
    # the split model fits Briar better than the pooled one (held-out log-loss)
    ll = {(m["model"], m["group"]): m["log_loss"] for m in snap.metrics}
    assert ll[("split", "Briar")] < ll[("pooled", "Briar")]


def test_a_moved_study_keeps_its_snapshot_id(tmp_path: Path) -> None:
    import shutil

    config = write_demo(tmp_path / "here", cases=500, seed=4)
    first = open_study(config).snapshot.id
    shutil.copytree(tmp_path / "here", tmp_path / "there")
    moved = open_study(tmp_path / "there" / "closecall.toml")
    assert moved.snapshot.id == first and not moved.fitted_now


def test_edited_data_gives_a_new_snapshot(tmp_path: Path) -> None:
    """The data digest is cached by size and modification time; an edit is still seen."""
    import os

    config = write_demo(tmp_path, cases=500, seed=4)
    first = open_study(config).snapshot.id
    pending = tmp_path / "pending.csv"
    text = pending.read_text()
    pending.write_text(text.replace("HR-", "HQ-", 1))
    st = pending.stat()
    os.utime(pending, ns=(st.st_atime_ns, st.st_mtime_ns + 1_000_000))
    assert open_study(config).snapshot.id != first
