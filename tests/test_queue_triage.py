"""The queue in triage order: flips by kind, counts of what is listed, distances in words.

Every check recomputes the expected cases from the per-model margins the rows carry (the sign
of a margin is that model's decision under the operative lens) or from the analysis filters
themselves, not from the queue code under test.
"""

from __future__ import annotations

import json
import shutil
from pathlib import Path
from typing import Any

import numpy as np
import pytest

from closecall.analysis.dependence import rests_on
from closecall.analysis.multiplicity import ambiguous_cases
from closecall.core.errors import UserError
from closecall.review.query import QueueQuery, answer_queue
from closecall.review.triage import CLOSENESS_WORDS, TIER_KEYS, TIERS, closeness_codes
from closecall.suite.opening import OpenedStudy, open_study


def _queue(cli: Any, config: Path, *flags: str) -> dict[str, Any]:
    res = cli("queue", "--config", str(config), "--json", "--limit", "0", *flags)
    assert res.code == 0, res
    out: dict[str, Any] = json.loads(res.out)
    return out


def _model_flip(row: dict[str, Any], reference: str) -> bool:
    """Another model decides otherwise under the operative lens (signs of the margins)."""
    ref = row["margins"][reference] > 0
    return any((m > 0) != ref for name, m in row["margins"].items() if name != reference)


def test_default_order_is_triage_by_tier_then_nearest(
    demo_config: Path, demo_study: OpenedStudy, cli: Any
) -> None:
    data = _queue(cli, demo_config)
    assert data["sort"] == "triage"
    snap = demo_study.snapshot
    rows = data["rows"]
    # tiers recomputed from the rows' margins and the analysis filters themselves
    rows_of = snap.rows_of([r["case_id"] for r in rows])
    rest = rests_on(snap, "group") | rests_on(snap, "proxies")
    amb = ambiguous_cases(snap, {"config": demo_study.config})
    expected = []
    for r, i in zip(rows, rows_of, strict=True):
        if rest[i]:
            expected.append(0)
        elif _model_flip(r, data["reference"]):
            expected.append(1)
        elif amb[i]:
            expected.append(2)
        elif r["flip"]:
            expected.append(3)
        else:
            expected.append(4)
    assert [TIERS.index(r["tier"]) for r in rows] == expected
    # by tier, then nearest the threshold
    key = [(t, abs(r["margin"])) for t, r in zip(expected, rows, strict=True)]
    assert key == sorted(key)
    # every tier is present on the demo, and the first screen holds the group-resting cases
    assert set(expected) == set(range(len(TIERS)))
    assert all(r["tier"] == "rests on group" for r in rows[:20])
    assert [data["counts"][f"tier_{k}"] for k in TIER_KEYS] == [
        expected.count(t) for t in range(len(TIERS))
    ]


def test_flips_by_kind_partition_the_flips(demo_config: Path, cli: Any) -> None:
    every = _queue(cli, demo_config)
    ref = every["reference"]
    flips = {r["case_id"] for r in every["rows"] if r["flip"]}
    model = {r["case_id"] for r in every["rows"] if _model_flip(r, ref)}
    by_kind = {k: {r["case_id"] for r in _queue(cli, demo_config, "--flips", k)["rows"]}
               for k in ("any", "model", "lens")}  # fmt: skip
    assert by_kind["any"] == flips
    assert by_kind["model"] == model and model  # the demo has model flips
    assert by_kind["lens"] == flips - model and by_kind["lens"]  # … and lens-only flips
    c = every["counts"]
    assert (c["model_flips"], c["lens_flips"]) == (len(model), len(flips - model))
    # each filter narrows the default list
    assert all(len(s) < len(every["rows"]) for s in by_kind.values())


@pytest.mark.parametrize(
    "flags",
    [
        ["--group", "Briar"],
        ["--flips", "model", "--group", "Aster"],
        ["--ambiguous"],
        ["--rests-on", "proxies", "--sort", "id"],
    ],
)
def test_counts_are_of_the_listed_cases(demo_config: Path, cli: Any, flags: list[str]) -> None:
    data = _queue(cli, demo_config, *flags)
    rows, c, band = data["rows"], data["counts"], data["band"]
    assert c["listed"] == len(rows) < c["close_calls"] <= c["cases"]
    assert c["within_band"] == sum(abs(r["margin"]) <= band for r in rows)
    assert c["flips"] == sum(r["flip"] for r in rows)
    assert c["model_flips"] == sum(_model_flip(r, data["reference"]) for r in rows)
    assert sum(c[f"tier_{k}"] for k in TIER_KEYS) == len(rows)
    assert c["reviewed"] == sum(r["state"] not in ("open", "defer") for r in rows)


def test_table_footer_counts_the_filtered_cases(demo_config: Path, cli: Any) -> None:
    data = _queue(cli, demo_config, "--group", "Briar")
    c = data["counts"]
    res = cli("queue", "--config", str(demo_config), "--group", "Briar", "--limit", "5")
    assert res.code == 0, res
    text = " ".join(res.out.split())
    assert f"{c['listed']:,} listed (group Briar) of {c['cases']:,} cases" in text
    assert "showing the first 5" in text
    assert f"Of the listed: {c['within_band']:,} within" in text
    assert f"{c['flips']:,} flip ({c['model_flips']:,} by another model" in text
    whole = _queue(cli, demo_config)["counts"]
    assert c["within_band"] < whole["within_band"] and c["flips"] < whole["flips"]


def test_rows_say_why_and_who_differs_in_words(demo_config: Path, cli: Any) -> None:
    data = _queue(cli, demo_config)
    first = data["lens"]
    for r in data["rows"]:
        # the phrase names the models that decide otherwise under the operative lens
        models = {m for m, pair in ((p.split("@")[0], p) for p in r["differs"])
                  if pair.endswith("@" + first)}  # fmt: skip
        named = {x for x in r["others_differ"] if not x.endswith(" lens") and "@" not in x}
        assert len(named) == len(models)
        assert bool(r["others_differ"]) == r["flip"]
        assert r["why"] and len(r["why"]) <= 16
    res = cli("queue", "--config", str(demo_config), "--limit", "8")
    assert "rests on group" in res.out and "PUNSD" not in res.out
    assert "+0.00" not in res.out and "−0.00" not in res.out and "-0.00" not in res.out


def test_distance_words_follow_the_band() -> None:
    # cut-points: a quarter of the band, the band, twice the band (docs/tui.md)
    band = 0.8
    margins = np.array([0.0, 0.2, -0.2, 0.21, 0.8, -0.81, 1.6, -1.61, 5.0])
    words = [CLOSENESS_WORDS[c] for c in closeness_codes(margins, band)]
    assert words == ["on the line", "on the line", "on the line", "just above", "just above",
                     "below", "above", "well below", "well above"]  # fmt: skip


def test_distance_words_on_the_rows(demo_config: Path, cli: Any) -> None:
    data = _queue(cli, demo_config, "--all", "--sort", "margin")
    b = data["band"]
    for r in data["rows"][::37]:
        m = abs(r["margin"])
        side = "above" if r["margin"] > 0 else "below"
        want = ("on the line" if m <= b / 4 else f"just {side}" if m <= b
                else side if m <= 2 * b else f"well {side}")  # fmt: skip
        assert r["closeness"] == want, r


def test_the_review_list_reads_the_rows_words_from_the_answer(
    demo_config: Path, demo_study: OpenedStudy, cli: Any
) -> None:
    """The words the review list draws for a row (distance, who decides otherwise) and its
    header's attribute come from Study.answer and Study: the same as `closecall queue --json`."""
    from closecall.api.study import Study

    data = _queue(cli, demo_config, "--all", "--sort", "margin")
    study = Study(demo_study)
    answer = study.answer(QueueQuery(all_cases=True, sort="margin"))
    codes = answer.closeness_codes()
    assert codes.shape == (demo_study.snapshot.n_cases,)
    rows = [int(r) for r in answer.listed]
    assert len(rows) == len(data["rows"])
    for r, shown in list(zip(rows, data["rows"], strict=True))[::17]:
        assert CLOSENESS_WORDS[int(codes[r])] == shown["closeness"], shown
        assert answer.others_differ(r) == shown["others_differ"], shown
    assert any(answer.others_differ(r) for r in rows) and not all(
        answer.others_differ(r) for r in rows
    )
    assert study.group_attribute == data["group_attribute"] == "heritage"


def test_an_unknown_kind_of_flip_is_refused() -> None:
    with pytest.raises(UserError, match="kind of flip 'sideways'"):
        QueueQuery(flips="sideways")
    assert QueueQuery(flips=True).flips == "any" and QueueQuery(flips=False).flips is None


@pytest.fixture(scope="module")
def no_proxy_study(tmp_path_factory: pytest.TempPathFactory, demo_config: Path) -> Path:
    """The demo with no proxy flagged: the proxy-free model is the unaware one."""
    folder = tmp_path_factory.mktemp("no-proxy")
    for source in demo_config.parent.iterdir():  # the data and any card the config names
        if source.is_file() and source.suffix in (".csv", ".toml"):
            shutil.copy(source, folder / source.name)
    text = (demo_config.parent / "closecall.toml").read_text()
    text = text.replace("[proxies]\n", '[proxies]\nnever = ["zone", "depot_distance_km"]\n')
    (folder / "closecall.toml").write_text(text)
    snap = open_study(folder / "closecall.toml").snapshot
    assert not snap.meta["proxies"]["proxies"]
    return folder / "closecall.toml"


def test_an_identical_model_is_named_once(no_proxy_study: Path, cli: Any) -> None:
    data = _queue(cli, no_proxy_study)
    assert data["same_as"] == {"proxy_free": "unaware"}
    assert not any("proxy-free" in r["others_differ"] for r in data["rows"])
    res = cli("queue", "--config", str(no_proxy_study), "--limit", "5")
    text = " ".join(res.out.split())
    assert "proxy-free = unaware: the same weights (no proxy flagged)" in text


def test_the_demo_has_no_identical_models(demo_study: OpenedStudy) -> None:
    answer = answer_queue(demo_study, QueueQuery(limit=1))
    assert answer.queue.same_as == {}


def test_the_library_frame_carries_the_tier_and_the_distance(demo_config: Path, cli: Any) -> None:
    from closecall import Study

    frame = Study.open(demo_config).queue(QueueQuery(flips="lens")).to_frame()
    rows = _queue(cli, demo_config, "--flips", "lens")["rows"]
    assert list(frame["tier"]) == [r["tier"] for r in rows]
    assert list(frame["closeness"]) == [r["closeness"] for r in rows]


def test_explain_and_compare_name_an_identical_model_once(no_proxy_study: Path, cli: Any) -> None:
    case = _queue(cli, no_proxy_study)["rows"][0]["case_id"]
    for args in (["explain", case], ["compare", "--boot", "100"]):
        res = cli(*args, "--config", str(no_proxy_study))
        assert res.code == 0, res
        text = " ".join(res.out.split())
        assert "proxy-free = unaware: the same weights (no proxy flagged)" in text, args
        assert "proxy_free" not in res.out and " proxy-free " not in text.split("proxy-free =")[0]


def test_explain_names_each_model_once_by_its_one_name(demo_config: Path, cli: Any) -> None:
    case = _queue(cli, demo_config)["rows"][0]["case_id"]
    res = cli("explain", case, "--config", str(demo_config))
    assert res.code == 0, res
    assert "proxy-free" in res.out and "proxy_free" not in res.out
    assert "the same weights" not in res.out  # the demo flags proxies: no model is another
