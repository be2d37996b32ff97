"""The command line and the review screen list the same cases for the same queue request.

Both build a :class:`closecall.review.query.QueueQuery` and call one engine function; before
that each merged the ledger's review states itself and they disagreed after a deferral (the
command line treated a deferred case as reviewed, the screen as unreviewed).
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import numpy as np
import pytest

from closecall.core.errors import UserError
from closecall.review.decisions import record_review
from closecall.review.query import QueueQuery, answer_queue
from closecall.suite.opening import OpenedStudy
from closecall.tui.session import ListSettings, ReviewSession

#: (CLI flags, the review screen's settings) for the same request.
REQUESTS = [
    ([], ListSettings()),
    (["--unreviewed"], ListSettings(unreviewed=True)),
    (["--unreviewed", "--flips", "any"], ListSettings(unreviewed=True, flips="any")),
    (["--flips", "model"], ListSettings(flips="model")),
    (["--flips", "lens", "--sort", "closeness"], ListSettings(flips="lens", sort="closeness")),
    (["--unreviewed", "--sort", "ambiguity"], ListSettings(unreviewed=True, sort="ambiguity")),
    (["--unreviewed", "--ambiguous"], ListSettings(unreviewed=True, ambiguous=True)),
    (["--unreviewed", "--rests-on", "proxies"], ListSettings(unreviewed=True, rests_on="proxies")),
    (
        ["--unreviewed", "--sort", "dependence", "--group", "Briar"],
        ListSettings(unreviewed=True, sort="dependence", group="Briar"),
    ),
]


def _review_some(study: OpenedStudy) -> list[str]:
    """Uphold, override, defer and supersede on the first five close calls."""
    order = answer_queue(study).queue.order
    a, b, c, d, e = (str(study.snapshot.case_ids[r]) for r in order[:5])
    reason = study.config.review.reasons[0]
    record_review(study, a, "uphold", None, "")
    record_review(study, b, "override-favourable", reason, "the income was misread")
    record_review(study, c, "defer", None, "waiting for a document")
    first = record_review(study, d, "override-unfavourable", reason, "wrong form")
    record_review(study, d, "defer", None, "ask again", supersedes=first.seq)
    deferred = record_review(study, e, "defer", None, "later")
    record_review(study, e, "uphold", None, "", supersedes=deferred.seq)
    return [a, b, c, d, e]


def _cli_ids(cli: Any, config: Path, flags: list[str]) -> list[str]:
    res = cli("queue", "--config", str(config), "--json", "--limit", "0", *flags)
    assert res.code == 0, res
    return [r["case_id"] for r in json.loads(res.out)["rows"]]


def test_cli_and_review_screen_list_the_same_cases(
    study: OpenedStudy, study_config: Path, cli: Any
) -> None:
    a, b, c, d, e = _review_some(study)
    session = ReviewSession(study)
    session.refresh_reviews()
    ids = np.asarray(study.snapshot.case_ids)
    for flags, settings in REQUESTS:
        listed = [str(x) for x in ids[session.rebuild(settings).order]]
        assert _cli_ids(cli, study_config, flags) == listed, flags
    header = json.loads(cli("queue", "--config", str(study_config), "--json").out)["counts"]
    session.rebuild(ListSettings())
    assert session.counts()["reviewed"] == header["reviewed"] == 3  # a, b, e: decided
    assert header["deferred"] == 2  # c, d
    unreviewed = set(_cli_ids(cli, study_config, ["--unreviewed"]))
    # decided cases (uphold, override, a superseded deferral) leave; deferrals stay listed
    assert {a, b, e}.isdisjoint(unreviewed) and {c, d} <= unreviewed


@pytest.mark.parametrize(
    ("field", "value"),
    [
        ("band", float("nan")),
        ("band", -0.1),
        ("band", float("inf")),
        ("epsilon", 0.0),
        ("epsilon", float("nan")),
        ("limit", -1),
        ("sort", "loudness"),
        ("rests_on", "zone"),
    ],
)
def test_queue_query_refuses_bad_values(field: str, value: object) -> None:
    with pytest.raises(UserError) as err:
        QueueQuery(**{field: value})  # type: ignore[arg-type]
    assert err.value.fix


def test_queue_query_refuses_an_unknown_model_or_group(study: OpenedStudy) -> None:
    with pytest.raises(UserError, match="no model 'best'"):
        answer_queue(study, QueueQuery(ambiguous=True, model="best"))
    with pytest.raises(UserError, match="no group level 'Nowhere'"):
        answer_queue(study, QueueQuery(group="Nowhere"))


def test_cli_refuses_a_nan_band(study_config: Path, cli: Any) -> None:
    res = cli("queue", "--config", str(study_config), "--band", "nan")
    assert res.code == 2 and "band" in res.err and "Traceback" not in res.err
