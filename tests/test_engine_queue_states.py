"""The queue shows each case's review state from the ledger, as the review screen does."""

from __future__ import annotations

import json

from closecall.core.vocabulary import ACTIONS, STATE_OF_ACTION
from closecall.review.decisions import record_review


def test_state_codes_match_the_review_screen() -> None:
    assert all(STATE_OF_ACTION[a] == 1 + ACTIONS.index(a) for a in ACTIONS)


def test_queue_states_and_unreviewed_filter(tmp_path, cli) -> None:  # type: ignore[no-untyped-def]
    from closecall.setup.demo import write_demo
    from closecall.suite.opening import open_study

    config = write_demo(tmp_path, cases=800, seed=6)
    study = open_study(config)
    first = json.loads(cli("queue", "--config", str(config), "--json", "--limit", "3").out)
    assert [r["state"] for r in first["rows"]] == ["open"] * 3
    a, b = first["rows"][0]["case_id"], first["rows"][1]["case_id"]
    record_review(study, a, "uphold", None, "")
    record_review(study, b, "override-favourable", "data-error", "quote was misread")
    record_review(study, b, "defer", None, "waiting for the survey", supersedes=2)
    after = json.loads(cli("queue", "--config", str(config), "--json", "--limit", "3").out)
    states = {r["case_id"]: r["state"] for r in after["rows"]}
    assert states[a] == "uphold" and states[b] == "defer"  # the latest entry wins
    # one deferral policy (closecall.review.query): a deferral records no decision
    assert after["counts"]["reviewed"] == 1 and after["counts"]["deferred"] == 1
    rest = json.loads(
        cli("queue", "--config", str(config), "--json", "--unreviewed", "--limit", "0").out
    )
    ids = {r["case_id"] for r in rest["rows"]}
    assert a not in ids and b in ids  # the deferred case still awaits a decision
    assert rest["counts"]["listed"] == first["counts"]["listed"] - 1


def test_queue_chart_counts_match_numpy_histogram(demo_config, cli) -> None:  # type: ignore[no-untyped-def]
    """The margin distribution (review screen chart, `queue --chart`) against numpy.histogram."""
    import numpy as np

    from closecall.suite.opening import open_study

    snap = open_study(demo_config).snapshot
    res = cli("queue", "--config", str(demo_config), "--json", "--chart", "--limit", "1")
    dist = json.loads(res.out)["distribution"]
    margin = np.asarray(snap.margins(snap.reference))
    labels = np.asarray(snap.group_labels)
    edges = np.asarray(dist["edges"])
    assert dist["span"] == 3 * dist["band"]
    for g in dist["groups"]:
        mine = margin[labels == g["group"]]
        ref, _ = np.histogram(mine, bins=edges)
        np.testing.assert_array_equal(g["counts"], ref)
        assert g["within_band"] == int((np.abs(mine) <= dist["band"]).sum())
        assert g["cases"] == len(mine)
    table = cli("queue", "--config", str(demo_config), "--chart", "--limit", "1")
    assert table.code == 0 and "│" in table.out and "within ±" in table.out
