"""Similar cases: the blockwise exact search against scipy's KD-tree."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from scipy.spatial import cKDTree

import closecall.analysis.neighbours as nbmod
from analysis_helpers import one_file_demo
from closecall.analysis.neighbours import nearest_history, neighbours_for_case, similarity_weights
from closecall.suite.opening import OpenedStudy, open_study


def _scaled(snap, X):  # type: ignore[no-untyped-def]
    w = similarity_weights(snap)
    return np.asarray(X, dtype=float)[:, w > 0] * w[w > 0]


@pytest.mark.parametrize("blocks", [(256, 32768), (7, 101)])
def test_blockwise_search_equals_kdtree(
    demo_study: OpenedStudy, monkeypatch: pytest.MonkeyPatch, blocks: tuple[int, int]
) -> None:
    """Exact k-nearest neighbours equal scipy.spatial.cKDTree's (reference), also with tiny
    blocks that force many merges of the running k-best."""
    monkeypatch.setattr(nbmod, "QUERY_BLOCK", blocks[0])
    monkeypatch.setattr(nbmod, "HISTORY_BLOCK", blocks[1])
    snap = demo_study.snapshot
    rows = np.arange(0, snap.n_cases, 37)
    nb = nearest_history(snap, rows, k=6)
    tree = cKDTree(_scaled(snap, snap.hist_X))
    d, idx = tree.query(_scaled(snap, np.asarray(snap.X)[rows]), k=6)
    np.testing.assert_allclose(nb.distance, d, atol=1e-9)
    # ties may order differently; the distances pin the sets
    same = (nb.index == idx) | np.isclose(nb.distance, d)
    assert same.all()


def test_a_category_mismatch_counts_one_standard_deviation(demo_study: OpenedStudy) -> None:
    snap = demo_study.snapshot
    w = similarity_weights(snap)
    for f, start in zip(
        snap.encoder.features,
        np.cumsum([0] + [len(f.design_names()) for f in snap.encoder.features])[:-1],
        strict=True,
    ):
        block = w[start : start + len(f.design_names())]
        if f.is_group:
            assert np.all(block == 0)
        elif f.kind == "categorical":
            # two different non-reference levels differ in two one-hot columns: sqrt(2·½) = 1
            assert np.allclose(block, 1 / np.sqrt(2))


@pytest.fixture(scope="module")
def crossfit(tmp_path_factory: pytest.TempPathFactory) -> OpenedStudy:
    return open_study(one_file_demo(tmp_path_factory.mktemp("nbcf"), cases=800, seed=4))


def test_a_case_is_never_its_own_neighbour(crossfit: OpenedStudy) -> None:
    snap = crossfit.snapshot
    rows = np.arange(50)
    nb = nearest_history(snap, rows, k=3)
    assert not np.any(nb.index == rows[:, None])
    assert np.all(nb.distance[:, 0] >= 0)
    out = neighbours_for_case(snap, 0, k=4)
    assert len(out["neighbours"]) == 4
    assert str(snap.case_ids[0]) not in {n["case_id"] for n in out["neighbours"]}
    shares = [g["favourable_share"] for g in out["by_group"]]
    assert all(0 <= s <= 1 for s in shares)


def test_neighbours_within_one_group(demo_study: OpenedStudy, tmp_path: Path) -> None:
    snap = demo_study.snapshot
    hg = np.asarray(snap.hist_group_codes)
    nb = nearest_history(snap, np.arange(20), k=5, among=hg == 1)
    assert np.all(hg[nb.index] == 1)
