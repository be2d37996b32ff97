"""closecall.Study: the library surface gives what the command line gives, as typed results."""

from __future__ import annotations

import dataclasses
import json
import subprocess
import sys
from pathlib import Path
from typing import Any

import numpy as np
import pytest

import closecall
from closecall import QueueQuery, Study, UserError

HEAVY = ("pandas", "sklearn", "textual", "scipy")


def test_import_closecall_stays_light() -> None:
    """`import closecall` loads none of the heavy libraries (python -X importtime shows each)."""
    res = subprocess.run(
        [sys.executable, "-X", "importtime", "-c", "import closecall; closecall.__version__"],
        capture_output=True,
        text=True,
        check=True,
    )
    loaded = {line.split("|")[-1].strip().split(".")[0] for line in res.stderr.splitlines()}
    assert loaded.isdisjoint(HEAVY), sorted(loaded & set(HEAVY))


def test_public_names() -> None:
    for name in closecall.__all__:
        assert getattr(closecall, name) is not None
    assert closecall.Study is Study
    with pytest.raises(AttributeError):
        closecall.NoSuchThing  # noqa: B018


def test_queue_frame_is_the_cli_queue(demo_config: Path, cli: Any) -> None:
    study = Study.open(demo_config)
    result = study.queue(QueueQuery(flips=True, sort="ambiguity"))
    frame = result.to_frame()
    flags = ("--json", "-n", "0", "--flips", "any", "--sort", "ambiguity")
    rows = json.loads(cli("queue", "--config", str(demo_config), *flags).out)["rows"]
    assert list(frame["case_id"]) == [r["case_id"] for r in rows] == list(result.case_ids)
    np.testing.assert_allclose(frame["margin"], [r["margin"] for r in rows])
    np.testing.assert_allclose(frame["ambiguity"], [r["ambiguity"] for r in rows])
    for m in study.opened.snapshot.model_names:
        np.testing.assert_allclose(frame[f"margin_{m}"], [r["margins"][m] for r in rows])
        assert list(frame[f"decision_{m}"]) == [r["decisions"][m] for r in rows]
    assert list(frame["differs"]) == [";".join(r["differs"]) for r in rows]
    # flat: no list or dict in any cell; JSON-ready to_dict
    assert not any(isinstance(v, (list, dict)) for v in frame.to_numpy().ravel())
    assert json.loads(json.dumps(result.to_dict()))["rows"][0]["case_id"] == rows[0]["case_id"]


def test_results_are_frozen(demo_config: Path) -> None:
    study = Study.open(demo_config)
    result = study.queue(QueueQuery(limit=2))
    assert len(result) == 2
    with pytest.raises(dataclasses.FrozenInstanceError):
        result.band = 9.0  # type: ignore[misc]
    with pytest.raises(dataclasses.FrozenInstanceError):
        study.opened = None  # type: ignore[misc,assignment]


def test_explain_is_the_cli_explanation(demo_config: Path, cli: Any) -> None:
    study = Study.open(demo_config)
    case = study.queue(QueueQuery(limit=1)).case_ids[0]
    mine = study.explain(case)
    theirs = json.loads(cli("explain", case, "--config", str(demo_config), "--json").out)
    assert mine.margin == pytest.approx(theirs["margin"])
    assert (mine.case_id, mine.group, mine.decision) == (case, theirs["group"], theirs["decision"])
    assert json.loads(json.dumps(mine.to_dict())) == theirs


def test_record_and_ledger(tmp_path: Path, cli: Any) -> None:
    from closecall.setup.demo import write_demo

    config = write_demo(tmp_path / "study", cases=600, seed=5)
    study = Study.open(config)
    before = len(study.ledger.show())
    case = study.queue(QueueQuery(unreviewed=True, limit=1)).case_ids[0]
    entry = study.record(case, "defer", note="later")
    assert case in study.queue(QueueQuery(unreviewed=True)).case_ids
    study.record(case, "uphold", supersedes=entry.seq)
    assert case not in study.queue(QueueQuery(unreviewed=True)).case_ids
    shown = study.ledger.show()
    assert len(shown) == before + 2
    theirs = json.loads(cli("ledger", "show", "--config", str(config), "--json").out)
    assert json.loads(json.dumps(shown.to_dict()))["entries"] == theirs["rows"]
    assert list(shown.to_frame()["seq"]) == [e.seq for e in shown.entries]
    assert study.ledger.verify().ok
    exported = study.ledger.export()
    assert case in set(exported["case_id"])


@pytest.mark.parametrize(
    ("call", "needle"),
    [
        (lambda s: s.compare(n_boot=2), "n_boot: 2 is out of range"),  # the engine's check
        (lambda s: s.disparity(n_boot=2), "n_boot: 2 is out of range"),
        (lambda s: s.bands(epsilon=float("nan")), "epsilon"),
        (lambda s: s.bands(epsilon=-1.0), "epsilon"),
        (lambda s: s.model(level=1.5), "level"),
        (lambda s: s.queue(QueueQuery(group="Nowhere")), "Nowhere"),
        (lambda s: s.explain("no-such-case"), "no-such-case"),
    ],
)
def test_library_refuses_what_the_cli_refuses(demo_config: Path, call: Any, needle: str) -> None:
    study = Study.open(demo_config)
    with pytest.raises(UserError) as err:
        call(study)
    assert needle in err.value.message and err.value.fix


def test_reports_are_json_ready(demo_config: Path) -> None:
    study = Study.open(demo_config)
    for report in (study.proxies(), study.model(), study.bands()):
        data = json.loads(json.dumps(report.to_dict()))
        assert data["snapshot"] == study.snapshot_id
    pooled = next(m for m in study.model().to_dict()["models"] if m["model"] == "pooled")
    assert pooled["rows"][0]["term"] == "(intercept)"
    assert any(r["group"] for r in pooled["rows"])
