"""The review screens' pieces without a running app: marks, the session's arrays, the sections."""

from __future__ import annotations

import math

import numpy as np
import pytest

from closecall.analysis.explain import explain_case
from closecall.core.text import signed, sparkline
from closecall.core.vocabulary import TO_FAVOURABLE, UPHELD, model_letters
from closecall.review.decisions import record_review
from closecall.suite.opening import OpenedStudy
from closecall.tui import case_sections
from closecall.tui.marks import band_glyph, block_bar
from closecall.tui.session import ListSettings, ReviewSession


def test_band_glyph_marks_threshold_band_and_margin() -> None:
    # span ±2 over 9 cells: cells are 4/9 wide; the threshold is the middle (5th) cell
    # cell of v = floor((v + 2) / (4/9)): 0.5 → 5, 0.9 → 6, 1.3 → 7
    assert band_glyph(0.9, 0.5, 1.3, span=2.0) == "····┼━●━·"
    assert band_glyph(0.1, -0.5, 0.7, span=2.0) == "···━●━━··"  # the margin's cell is the middle
    assert band_glyph(-0.3, -0.9, 0.4, span=2.0) == "··━●┿━···"  # band straddles: ┿
    assert band_glyph(5.0, 4.5, 5.5, span=2.0) == "····┼···▸"  # off the axis to the right
    assert band_glyph(-0.3, math.nan, math.nan, span=2.0) == "···●┼····"  # no band known


def test_signs_and_bars_carry_direction_without_colour() -> None:
    assert signed(-0.4242) == "−0.42" and signed(0.4) == "+0.40" and signed(math.nan) == "—"
    assert block_bar(0.5, 1.0, 10) == "▸" * 5
    assert block_bar(-1.0, 1.0, 10) == "◂" * 10
    assert sparkline([0, 1, 2, 4, 8], 8) == " ▁▂▄█"  # eighths of the tallest, rounded up


def test_model_letters_are_distinct() -> None:
    letters = model_letters(["pooled", "unaware", "proxy_free", "split", "deployed", "pilot"])
    assert letters == {
        "pooled": "P",
        "unaware": "U",
        "proxy_free": "N",
        "split": "S",
        "deployed": "D",
        "pilot": "I",
    }


def test_group_chart_matches_numpy_histogram(study: OpenedStudy) -> None:
    session = ReviewSession(study)
    chart = session.group_chart(24)
    margin = np.asarray(study.snapshot.margins(study.snapshot.reference))
    codes = np.asarray(study.snapshot.group_codes)
    for g in range(len(chart.levels)):
        # reference: numpy.histogram over the same equal bins (its last bin is closed too)
        expected, _ = np.histogram(margin[codes == g], bins=24, range=(-chart.span, chart.span))
        assert chart.counts[g].tolist() == expected.tolist()
        assert chart.within_band[g] == int((np.abs(margin[codes == g]) <= session.band).sum())


def test_id_search_agrees_with_a_plain_scan(study: OpenedStudy) -> None:
    session = ReviewSession(study)
    session.rebuild()
    ids = np.asarray(study.snapshot.case_ids)
    for prefix in ("HR-00012", "HR-0049", "HR-", "XX"):
        rows = session.rows_with_prefix(prefix)
        assert sorted(rows.tolist()) == np.flatnonzero(np.char.startswith(ids, prefix)).tolist()
        pos, matches = session.find(prefix)
        listed = [i for i, r in enumerate(session.queue.order) if ids[r].startswith(prefix)]  # type: ignore[union-attr]
        assert matches == len(rows)
        assert pos == (listed[0] if listed else None)


def test_review_states_follow_the_latest_entry(study: OpenedStudy) -> None:
    session = ReviewSession(study)
    session.rebuild()
    order = session.queue.order  # type: ignore[union-attr]
    a, b = (str(study.snapshot.case_ids[r]) for r in order[:2])
    record_review(study, a, "uphold", None, "")
    record_review(study, b, "defer", None, "")
    record_review(study, b, "override-favourable", study.config.review.reasons[0], "why")
    session.refresh_reviews()
    assert session.states[order[0]] == UPHELD and session.states[order[1]] == TO_FAVOURABLE
    assert session.counts()["reviewed"] == 2
    q = session.rebuild(ListSettings(unreviewed=True))
    assert order[0] not in q.order and order[1] not in q.order
    assert len(q) == len(order) - 2


def test_ambiguous_filter_keeps_straddling_bands(study: OpenedStudy) -> None:
    """The filter keeps exactly the listed cases whose band holds 0, and it must drop some:
    with the filter off the same assertions fail (the list holds cases that do not straddle)."""
    session = ReviewSession(study)
    everything = session.rebuild(ListSettings(ambiguous=False)).order.copy()
    q = session.rebuild(ListSettings(ambiguous=True))
    limits = session.band_limits()
    assert limits is not None and len(q) > 0
    lo, hi = limits
    straddles = (lo <= 0) & (hi >= 0)  # recomputed here from the band's two ends
    assert not straddles[everything].all()  # the filter has something to remove
    assert set(q.order.tolist()) == set(everything[straddles[everything]].tolist())


def test_sections_say_directions_in_words(study: OpenedStudy) -> None:
    session = ReviewSession(study)
    session.rebuild()
    case_id = str(study.snapshot.case_ids[session.queue.order[0]])  # type: ignore[union-attr]
    d = explain_case(study, case_id)
    contributions = case_sections.contributions(d, 78).plain
    top = d["dependence"]["contributions"][0]
    assert top["feature"] in contributions and signed(top["contribution"]) in contributions
    parts = case_sections.parts(d).plain
    assert f"group part {signed(d['dependence']['group_part'])}" in parts
    for cp in d["counterparts"]:
        text = case_sections.counterparts(d).plain
        assert f"as {cp['group']}" in text
        assert ("⇄ flips" in text) == (cp["flips_group_swapped"] or cp["flips_carried"])
    assert case_sections.history([]).plain == "no decision recorded yet"


@pytest.mark.parametrize("width", [80, 120])
def test_case_list_rows_fit_the_width(study: OpenedStudy, width: int) -> None:
    from closecall.tui.case_list import DISTANCE_WIDTH, STATE_WIDTH, WHY_WIDTH, Layout

    session = ReviewSession(study)
    q = session.rebuild()
    lay = Layout.fit(session, width, len(q))
    used = 2 + lay.rank + 1 + lay.case + 1 + lay.group + 1 + DISTANCE_WIDTH + 1 + WHY_WIDTH + 1
    used += lay.differs + 1 + 7 * lay.margin + 11 * lay.band + 5 * lay.dep + STATE_WIDTH
    assert used + 11 * len(lay.extra_models) <= width - 1


@pytest.mark.parametrize("sort", ["ambiguity", "dependence"])
def test_session_order_matches_the_queue_command(study: OpenedStudy, sort: str) -> None:
    """The session reuses cached measures; its order must be build_queue's own."""
    from closecall.review.queue import build_queue

    session = ReviewSession(study)
    mine = session.rebuild(ListSettings(sort=sort, flips="any"))
    engine = build_queue(
        study.snapshot,
        band=session.band,
        flips_only=True,
        sort=sort,
        options={"config": study.config},
    )
    assert mine.order.tolist() == engine.order.tolist()


@pytest.mark.parametrize("part", ["group", "proxies"])
def test_rests_on_filter_matches_the_queue_command(study: OpenedStudy, part: str) -> None:
    from closecall.review.queue import build_queue

    session = ReviewSession(study)
    mine = session.rebuild(ListSettings(rests_on=part, ambiguous=True, sort="closeness"))
    engine = build_queue(
        study.snapshot,
        band=session.band,
        rests_on_part=part,
        ambiguous_only=True,
        options={"config": study.config},
    )
    assert len(mine) > 0
    assert mine.order.tolist() == engine.order.tolist()
