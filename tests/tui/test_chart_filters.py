"""The margin chart counts the cases the list's filters keep (issue 12 item 2), in both views.

Under a filter the chart counts the cases the filters keep at any distance from the threshold
(the close-call rule and the row limit aside): each group's "within the band" count is then
the list's own, and a group the filters leave out is said so. Each count is checked against
numpy.histogram over a population recomputed here from the stored margins and logits (not
from the queue), the way tests/tui/test_review_parts.py checks the unfiltered chart.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
from scipy.special import logit
from tui_helpers import open_queue, screen_text, synchronous, wait_until

from closecall.suite.opening import OpenedStudy
from closecall.tui.app import ReviewApp
from closecall.tui.queue_screen import QueueScreen


def _model_flips(study: OpenedStudy) -> np.ndarray:
    """Cases another model decides otherwise under the first cost lens (recomputed here)."""
    snap = study.snapshot
    cut = float(logit(snap.lenses[0].threshold))
    reference = np.asarray(snap.logit(snap.reference)) > cut
    flips = np.zeros(snap.n_cases, dtype=bool)
    for model in snap.model_names:
        flips |= (np.asarray(snap.logit(model)) > cut) != reference
    return flips


def _histogram(study: OpenedStudy, keep: np.ndarray, edges: np.ndarray) -> list[list[int]]:
    snap = study.snapshot
    margin = np.asarray(snap.margins(snap.reference))
    labels = np.asarray(snap.group_labels)
    # reference: numpy.histogram over the chart's own equal bins (its last bin is closed too)
    return [
        np.histogram(margin[keep & (labels == level)], bins=edges)[0].tolist()
        for level in snap.group_levels
    ]


def test_cli_chart_counts_the_model_flips_at_any_distance(
    study_config: Path, study: OpenedStudy, cli
) -> None:  # type: ignore[no-untyped-def]
    res = cli("queue", "--config", str(study_config), "--json", "--chart", "--flips", "model",
              "--limit", "1")  # fmt: skip
    assert res.code == 0, res
    data = json.loads(res.out)
    dist = data["distribution"]
    keep = _model_flips(study)
    margin = np.asarray(study.snapshot.margins(study.snapshot.reference))
    assert dist["counted"] == "kept by the filters"
    edges = np.asarray(dist["edges"])
    assert [g["counts"] for g in dist["groups"]] == _histogram(study, keep, edges)
    assert sum(g["cases"] for g in dist["groups"]) == int(keep.sum())
    # the chart's within-band cases are the list's (footer) within-band cases
    within = sum(g["within_band"] for g in dist["groups"])
    assert within == int((keep & (np.abs(margin) <= dist["band"])).sum())
    assert within == data["counts"]["within_band"]


def test_cli_chart_under_a_group_shows_that_group_only(
    study_config: Path, study: OpenedStudy, cli
) -> None:  # type: ignore[no-untyped-def]
    level, other = study.snapshot.group_levels[:2]
    res = cli("queue", "--config", str(study_config), "--json", "--chart", "--group", level)
    dist = json.loads(res.out)["distribution"]
    labels = np.asarray(study.snapshot.group_labels)
    counts = {g["group"]: g for g in dist["groups"]}
    assert counts[level]["cases"] == int((labels == level).sum())
    assert counts[other]["cases"] == 0 and not any(counts[other]["counts"])
    table = cli("queue", "--config", str(study_config), "--chart", "--group", level, "-n", "1")
    lines = table.out.splitlines()
    assert any(line.startswith(level) for line in lines)
    assert not any(line.startswith(other) for line in lines)  # left out, not an empty line
    n = int((labels == level).sum())
    assert f"counted: the {n:,} cases the filters keep, at any distance" in table.out


def test_cli_chart_with_no_filter_counts_every_case(
    study_config: Path, study: OpenedStudy, cli
) -> None:  # type: ignore[no-untyped-def]
    res = cli("queue", "--config", str(study_config), "--json", "--chart", "--limit", "1")
    dist = json.loads(res.out)["distribution"]
    assert dist["counted"] == "every case"
    everyone = np.ones(study.snapshot.n_cases, dtype=bool)
    assert [g["counts"] for g in dist["groups"]] == _histogram(
        study, everyone, np.asarray(dist["edges"])
    )


@synchronous
async def test_list_chart_follows_the_filters(study: OpenedStudy) -> None:
    app = ReviewApp(study=study, login="reviewer")
    async with app.run_test(size=(80, 24)) as pilot:
        await open_queue(pilot)
        screen = app.screen
        assert isinstance(screen, QueueScreen)
        await wait_until(pilot, lambda: screen.session.measures_ready)
        session = screen.session
        assert "filtered" not in screen_text(app)
        for key in ("f", "f"):  # any flips, then model flips
            before = session.queue
            await pilot.press(key)
            await wait_until(pilot, lambda b=before: session.queue is not b)  # type: ignore[misc]
        await pilot.pause(0.2)
        chart = session.group_chart(24)
        keep = _model_flips(study)
        assert chart.counts.tolist() == _histogram(study, keep, chart.edges)
        assert int(chart.within_band.sum()) == session.counts()["within_band"]
        text = screen_text(app)
        assert "log-odds, filtered" in text
        before = session.queue
        await pilot.press("g")  # the first group only: the other is said to be left out
        await wait_until(pilot, lambda: session.queue is not before)
        await pilot.pause(0.2)
        text = screen_text(app)
        other = study.snapshot.group_levels[1]
        line = next(x for x in text.splitlines() if x.strip().startswith(other))
        assert "left out by the filters" in line
