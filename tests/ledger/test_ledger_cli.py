"""`closecall record` and `closecall ledger show|verify` on the demo study."""

from __future__ import annotations

import itertools
import json
import os
import sqlite3
import subprocess
import sys
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from ledger_helpers import entries_digest

from closecall.review.decisions import ledger_entries
from closecall.review.ledger import current_login
from closecall.suite.opening import open_study

_counter = itertools.count()

ConfigMaker = Callable[..., Path]


@pytest.fixture
def study_config(demo_config: Path, tmp_path: Path) -> ConfigMaker:
    """A config beside the shared demo data (its snapshot cache is reused) with its own ledger.

    Keyword arguments set [review] keys. The ledger lives in this test's tmp_path.
    """

    def make(**review: Any) -> Path:
        text = demo_config.read_text()
        head = text[: text.index("[review]")]
        lines = [f"ledger = {json.dumps(str(tmp_path / 'ledger.sqlite'))}"]
        lines += [f"{k} = {json.dumps(v)}" for k, v in review.items()]
        path = demo_config.parent / f"ledger-test-{os.getpid()}-{next(_counter)}.toml"
        path.write_text(head + "[review]\n" + "\n".join(lines) + "\n")
        return path

    return make


def _case(config: Path, k: int = 0) -> str:
    return str(open_study(config).snapshot.case_ids[k])


def _ledger(config: Path) -> Path:
    return open_study(config).config.review.ledger


def test_record_show_verify_on_the_demo(study_config: ConfigMaker, cli: Any) -> None:
    config = study_config()
    study = open_study(config)
    snap = study.snapshot
    case = str(snap.case_ids[5])
    r = cli(
        "record",
        case,
        "--action",
        "override-favourable",
        "--reason",
        "data-error",
        "--note",
        "Income letter received after scoring.",
        "--config",
        str(config),
    )
    assert r.code == 0, r
    assert f"recorded entry 1: case {case}, override-favourable (data-error), by " in r.out
    head_line = next(line for line in r.out.splitlines() if line.startswith("hash "))
    r = cli(
        "record",
        case,
        "--action",
        "uphold",
        "--note",
        "",
        "--supersedes",
        "1",
        "--config",
        str(config),
        "--json",
    )
    assert r.code == 0, r
    second = json.loads(r.out)
    assert second["seq"] == 2 and second["supersedes"] == 1
    assert second["prev_hash"] == head_line.split()[1]
    # the recorded margins are the snapshot's own: margin = logit(p) − logit(t)
    i = snap.case_index(case)
    assert second["reference_model"] == snap.reference == "pooled"
    assert second["reference_margin"] == pytest.approx(float(snap.margins("pooled")[i]), abs=0)
    assert second["reference_decision"] == (
        "favourable" if snap.margins("pooled")[i] > 0 else "unfavourable"
    )
    assert set(second["decisions"]) == set(snap.model_names)
    for model in snap.model_names:
        assert second["decisions"][model]["margin"] == float(snap.margins(model)[i])
    assert second["reviewer"] == current_login()
    assert second["snapshot_id"] == snap.id and second["current_snapshot_id"] is None

    r = cli("ledger", "show", "--config", str(config))
    assert r.code == 0 and "override-favourable" in r.out and "Income" in r.out
    r = cli("ledger", "show", "--case", case, "--json", "--config", str(config))
    shown = json.loads(r.out)
    assert shown["count"] == 2 and [row["seq"] for row in shown["rows"]] == [1, 2]
    assert shown["rows"][1] == second
    r = cli("ledger", "show", "--limit", "1", "--format", "csv", "--config", str(config))
    assert r.code == 0 and r.out.splitlines()[0].startswith("seq,format,time,reviewer,case_id")
    assert len(r.out.splitlines()) == 2 and r.out.splitlines()[1].startswith("2,2,")
    r = cli("ledger", "show", "--reviewer", "nobody-here", "--json", "--config", str(config))
    assert json.loads(r.out)["count"] == 0

    r = cli("ledger", "verify", "--config", str(config))
    assert r.code == 0, r
    assert "2 entries, chain intact" in r.out
    assert f"head 2 {second['hash']}" in r.out
    r = cli("ledger", "verify", "--anchor", head_line.split()[1], "--json", "--config", str(config))
    result = json.loads(r.out)
    assert r.code == 0 and result["ok"] and result["anchor_seq"] == 1


def test_verify_exits_1_and_names_the_broken_entry(study_config: ConfigMaker, cli: Any) -> None:
    config = study_config()
    case = _case(config)
    for k in range(3):
        r = cli("record", case, "--action", "defer", "--note", f"n{k}", "--config", str(config))
        assert r.code == 0, r
    conn = sqlite3.connect(_ledger(config), isolation_level=None)
    conn.execute("DROP TRIGGER entries_no_update")
    conn.execute("UPDATE entries SET action = 'uphold' WHERE seq = 2")
    conn.close()
    r = cli("ledger", "verify", "--config", str(config))
    assert r.code == 1
    assert "BROKEN after 1 good entries" in r.out and "entry 2 was altered" in r.out
    assert "entries_no_update were removed" in r.out
    r = cli("ledger", "verify", "--json", "--config", str(config))
    assert r.code == 1 and json.loads(r.out)["first_broken"] == 2


def test_verify_of_a_study_without_a_ledger(study_config: ConfigMaker, cli: Any) -> None:
    config = study_config()
    r = cli("ledger", "verify", "--config", str(config))  # a missing ledger is not "intact"
    assert r.code == 1 and "NOT VERIFIED" in r.out and "no ledger file at" in r.out
    assert "--allow-empty" in r.out and "chain intact" not in r.out
    r = cli("ledger", "verify", "--json", "--config", str(config))
    assert r.code == 1 and json.loads(r.out)["problem"]["kind"] == "no-ledger"
    r = cli("ledger", "verify", "--allow-empty", "--config", str(config))
    assert r.code == 0 and "0 entries" in r.out and "head 0 " + "0" * 64 in r.out
    r = cli("ledger", "verify", "--allow-empty", "--anchor", "ab" * 32, "--config", str(config))
    assert r.code == 1 and "not in the chain" in r.out
    r = cli("ledger", "verify", "--anchor", "not-a-hash", "--config", str(config))
    assert r.code == 2 and "not a head hash" in r.err
    assert not _ledger(config).exists()


REFUSALS = {
    "refused user": (
        {"reviewers": ["somebody-else"]},
        ["--action", "uphold", "--note", "ok"],
        "may not record reviews",
    ),
    "missing reason": ({}, ["--action", "override-favourable", "--note", "why"], "needs a reason"),
    "missing note": (
        {},
        ["--action", "override-unfavourable", "--reason", "data-error"],
        "needs a note",
    ),
    "blank note": (
        {},
        ["--action", "override-favourable", "--reason", "data-error", "--note", " \n\t "],
        "needs a note",
    ),
    "unknown action": ({}, ["--action", "approve", "--note", "x"], "unknown action 'approve'"),
    "unknown reason": (
        {},
        ["--action", "override-favourable", "--reason", "gut-feeling", "--note", "x"],
        "unknown reason code 'gut-feeling'",
    ),
    "bad supersedes": ({}, ["--action", "uphold", "--supersedes", "99"], "no ledger entry 99"),
    "unknown case": ({}, ["--action", "uphold"], "case 'NO-SUCH-CASE' is not among"),
}


@pytest.mark.parametrize("name", list(REFUSALS))
@pytest.mark.parametrize("existing", [True, False], ids=["with-entries", "no-ledger-yet"])
def test_refusals_exit_2_with_a_message_and_leave_the_ledger_unchanged(
    study_config: ConfigMaker, cli: Any, name: str, existing: bool
) -> None:
    review, args, message = REFUSALS[name]
    open_config = study_config()
    case = "NO-SUCH-CASE" if name == "unknown case" else _case(open_config)
    if existing:
        for k in range(2):
            r = cli(
                "record",
                case if name != "unknown case" else _case(open_config),
                "--action",
                "uphold",
                "--note",
                f"n{k}",
                "--config",
                str(open_config),
            )
            assert r.code == 0, r
    config = study_config(**review)
    ledger = _ledger(config)
    before = entries_digest(ledger)
    r = cli("record", case, *args, "--config", str(config))
    assert r.code == 2, r
    assert message in r.err
    assert "fix:" in r.err and "Traceback" not in r.err
    assert entries_digest(ledger) == before
    assert ledger.exists() == existing
    if name == "refused user":
        assert f"'{current_login()}'" in r.err and "[review] reviewers" in r.err


def test_readers_outside_the_lists_are_refused(study_config: ConfigMaker, cli: Any) -> None:
    config = study_config(reviewers=["alice"], analysts=["bob"])
    for args in (["ledger", "show"], ["ledger", "verify"]):
        r = cli(*args, "--config", str(config))
        assert r.code == 2
        assert f"login '{current_login()}' may not read" in r.err and "[review] analysts" in r.err
    me = current_login()
    config = study_config(reviewers=["alice"], analysts=[me])
    assert cli("ledger", "show", "--config", str(config)).code == 0
    assert cli("record", _case(config), "--action", "uphold", "--config", str(config)).code == 2
    config = study_config(reviewers=[me], analysts=["bob"])  # reviewers may read too
    assert cli("ledger", "verify", "--allow-empty", "--config", str(config)).code == 0


HOSTILE_NOTE = "[/x]\x1b[2J\x1b[31mred\x1b]0;pwned\x07 csi\x9b1m [bold]b\u202eevil\r\nend"


def test_hostile_note_is_stored_exactly_and_shown_safely(
    study_config: ConfigMaker, cli: Any
) -> None:
    config = study_config()
    case = _case(config)
    r = cli(
        "record",
        case,
        "--action",
        "override-unfavourable",
        "--reason",
        "other",
        "--note",
        HOSTILE_NOTE,
        "--config",
        str(config),
    )
    assert r.code == 0, r
    (entry,) = ledger_entries(open_study(config).config)
    assert entry.note == HOSTILE_NOTE
    for fmt in ("table", "csv", "json"):
        r = cli("ledger", "show", "--format", fmt, "--config", str(config))
        assert r.code == 0, r
        assert "\x1b" not in r.out and "\x07" not in r.out, fmt
        if fmt != "json":
            assert "\x9b" not in r.out and "\u202e" not in r.out, fmt
            assert "[/x]\\x1b" in r.out, fmt
    r = cli("ledger", "show", "--json", "--config", str(config))
    assert json.loads(r.out)["rows"][0]["note"] == HOSTILE_NOTE  # exact text through JSON
    # error messages that echo user input are escaped too
    r = cli("record", case, "--action", "\x1b[2Jup", "--config", str(config))
    assert r.code == 2 and "\x1b" not in r.err and "\\x1b[2Jup" in r.err


def test_100_kb_note_from_a_file(study_config: ConfigMaker, cli: Any, tmp_path: Path) -> None:
    config = study_config()
    note = "".join(chr(0x20 + (i * 7919) % 0x3000) for i in range(100_000)) + "\n\x00"
    note_file = tmp_path / "note.txt"
    note_file.write_bytes(note.encode("utf-8"))
    r = cli(
        "record",
        _case(config),
        "--action",
        "defer",
        "--note-file",
        str(note_file),
        "--config",
        str(config),
        "--json",
    )
    assert r.code == 0, r
    assert json.loads(r.out)["note"] == note
    (entry,) = ledger_entries(open_study(config).config)
    assert entry.note == note and len(entry.note.encode("utf-8")) > 100_000
    note_file.write_bytes(b"caf\xe9 au lait")
    r = cli(
        "record",
        _case(config),
        "--action",
        "defer",
        "--note-file",
        str(note_file),
        "--config",
        str(config),
    )
    assert r.code == 2 and "not valid UTF-8" in r.err
    assert len(ledger_entries(open_study(config).config)) == 1


@pytest.mark.slow  # starts the whole CLI in a new process
def test_invalid_utf8_on_the_command_line_is_refused(
    study_config: ConfigMaker, tmp_path: Path
) -> None:
    config = study_config()
    case = _case(config)
    env = {**os.environ, "LANG": "C.UTF-8", "LC_ALL": "C.UTF-8", "COLUMNS": "200"}
    argv: list[str | bytes] = [
        sys.executable,
        "-m",
        "closecall",
        "record",
        case,
        "--action",
        "override-favourable",
        "--reason",
        "other",
        "--note",
        b"caf\xe9 \xff\xfe",
        "--config",
        str(config),
    ]
    proc = subprocess.run(argv, capture_output=True, env=env, timeout=120)
    err = proc.stderr.decode("utf-8", "replace")
    assert proc.returncode == 2, err
    assert "not valid UTF-8" in err and "Traceback" not in err
    assert not _ledger(config).exists()


def test_a_review_against_a_stale_snapshot_records_both_ids(
    study_config: ConfigMaker, cli: Any
) -> None:
    from closecall.review.decisions import record_review

    config = study_config()
    study = open_study(config)
    text = config.read_text()
    assert "penalty = 1.0" in text
    config.write_text(text.replace("penalty = 1.0", "penalty = 2.5"))  # the study moved on
    entry = record_review(study, _case(config, 3), "uphold", None, "seen before the refit")
    assert entry.snapshot_id == study.snapshot.id
    assert entry.current_snapshot_id not in (None, entry.snapshot_id)
    from closecall.setup.config import load_config
    from closecall.suite.snapshot import snapshot_id

    assert entry.current_snapshot_id == snapshot_id(load_config(config))
    config.write_text(text)
    fresh = record_review(open_study(config), _case(config, 3), "uphold", None, "current")
    assert fresh.current_snapshot_id is None


@pytest.mark.parametrize("args", [["record"], ["ledger"], ["ledger", "show"], ["ledger", "verify"]])
def test_every_command_help_has_an_example(cli: Any, args: list[str]) -> None:
    r = cli(*args, "--help")
    assert r.code == 0
    assert "Example" in r.out and "closecall " + " ".join(args[:1]) in r.out


def test_reference_margins_match_the_snapshot_arrays(study_config: ConfigMaker) -> None:
    """The recorded decisions are the snapshot's, vectorised margins compared entry-wise."""
    from closecall.review.decisions import record_review

    config = study_config()
    study = open_study(config)
    snap = study.snapshot
    picks = [0, 7, len(snap.case_ids) - 1]
    entries = [
        record_review(study, str(snap.case_ids[i]), "defer", None, f"pick {i}") for i in picks
    ]
    got = np.array([e.reference_margin for e in entries])
    np.testing.assert_array_equal(got, snap.margins(snap.reference)[picks])


def test_tampered_values_are_escaped_in_show_and_verify(
    study_config: ConfigMaker, cli: Any
) -> None:
    config = study_config()
    r = cli("record", _case(config), "--action", "defer", "--note", "n", "--config", str(config))
    assert r.code == 0, r
    conn = sqlite3.connect(_ledger(config), isolation_level=None)
    conn.execute("DROP TRIGGER entries_no_update")
    conn.execute(
        "UPDATE entries SET time = '\x1b[2J2026', action = '\x1b]0;x\x07', hash = '\x1b[31m'"
    )
    conn.close()
    for args in (["ledger", "show"], ["ledger", "show", "--format", "csv"], ["ledger", "verify"]):
        r = cli(*args, "--config", str(config))
        assert "\x1b" not in r.out and "\x07" not in r.out, args
        assert "\\x1b" in r.out, args
    assert cli("ledger", "verify", "--config", str(config)).code == 1
