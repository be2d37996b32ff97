"""Ledger anchors: `closecall ledger anchor` writes the head outside the reviewers' reach and
`ledger verify` checks it by default, so losing the ledger is never silent."""

from __future__ import annotations

import shutil
from pathlib import Path
from typing import Any

import pytest
from ledger_helpers import content

from closecall.review.ledger import open_ledger


def _study(tmp_path: Path) -> Path:
    (tmp_path / "anchors").mkdir()
    config = tmp_path / "closecall.toml"
    config.write_text(
        '[data]\nhistory = "h.csv"\nid = "id"\noutcome = "y"\nfavourable = 1\ngroup = "g"\n'
        '[review]\nledger = "ledger.sqlite"\n[team]\nanchor = "anchors/study.anchor"\n'
    )
    with open_ledger(tmp_path / "ledger.sqlite") as ledger:
        for k in range(3):
            ledger.append(content(f"n{k}", case_id=f"A-{k + 1}"))
    return config


@pytest.fixture
def anchored(tmp_path: Path, cli: Any) -> Path:
    config = _study(tmp_path)
    r = cli("ledger", "anchor", "--config", str(config))
    assert r.code == 0 and "anchored entry 3" in r.out, r.err
    text = (tmp_path / "anchors" / "study.anchor").read_text()
    assert text.startswith("closecall-anchor 3 ")
    return config


def test_verify_checks_the_anchor_by_default(anchored: Path, cli: Any) -> None:
    r = cli("ledger", "verify", "--config", str(anchored))
    assert r.code == 0 and "anchor found at entry 3" in r.out


def test_a_deleted_ledger_fails_even_with_allow_empty(anchored: Path, cli: Any) -> None:
    for suffix in ("", "-wal", "-shm"):
        (anchored.parent / f"ledger.sqlite{suffix}").unlink(missing_ok=True)
    r = cli("ledger", "verify", "--allow-empty", "--config", str(anchored))
    assert r.code == 1 and "is not in the chain" in r.out


def test_an_emptied_ledger_fails(anchored: Path, cli: Any) -> None:
    for suffix in ("-wal", "-shm"):
        (anchored.parent / f"ledger.sqlite{suffix}").unlink(missing_ok=True)
    (anchored.parent / "ledger.sqlite").write_bytes(b"")
    r = cli("ledger", "verify", "--allow-empty", "--config", str(anchored))
    assert r.code == 1 and "is not in the chain" in r.out


def test_a_replaced_ledger_fails(anchored: Path, cli: Any, tmp_path: Path) -> None:
    other = tmp_path / "other"
    other.mkdir()
    with open_ledger(other / "ledger.sqlite") as ledger:  # a fresh chain, five entries
        for k in range(5):
            ledger.append(content(f"x{k}", case_id=f"B-{k % 2 + 1}"))
    for suffix in ("", "-wal", "-shm"):
        (anchored.parent / f"ledger.sqlite{suffix}").unlink(missing_ok=True)
    shutil.copy(other / "ledger.sqlite", anchored.parent / "ledger.sqlite")
    r = cli("ledger", "verify", "--config", str(anchored))
    assert r.code == 1 and "is not in the chain" in r.out


def test_a_ledger_that_does_not_verify_is_not_anchored(tmp_path: Path, cli: Any) -> None:
    config = _study(tmp_path)
    import sqlite3

    conn = sqlite3.connect(tmp_path / "ledger.sqlite", isolation_level=None)
    conn.execute("DROP TRIGGER entries_no_update")
    conn.execute("UPDATE entries SET note = 'changed' WHERE seq = 2")
    conn.close()
    r = cli("ledger", "anchor", "--config", str(config))
    assert r.code == 2 and "not anchored" in r.err
    assert not (tmp_path / "anchors" / "study.anchor").exists()


def test_the_library_anchors_as_the_command_does(tmp_path: Path, cli: Any) -> None:
    """Ledger.anchor writes the head the command writes, and its to_dict is the command's JSON."""
    import json

    from closecall import Ledger, LedgerAnchor

    config = _study(tmp_path)
    shown = json.loads(cli("ledger", "anchor", "--json", "--config", str(config)).out)
    anchored = Ledger.open(config).anchor(tmp_path / "anchors" / "library.anchor")
    assert isinstance(anchored, LedgerAnchor) and anchored.seq == 3
    assert (anchored.seq, anchored.hash) == (shown["seq"], shown["hash"])
    assert shown["anchor"] == str(tmp_path / "anchors" / "study.anchor")
    assert anchored.to_dict() == {**shown, "anchor": str(anchored.path)}
    written = anchored.path.read_text()
    assert written == (tmp_path / "anchors" / "study.anchor").read_text()
    assert written == f"closecall-anchor 3 {anchored.hash}\n"


def test_an_anchor_in_a_missing_folder_is_refused(tmp_path: Path, cli: Any) -> None:
    config = _study(tmp_path)
    out = tmp_path / "nowhere" / "study.anchor"
    r = cli("ledger", "anchor", "--out", str(out), "--config", str(config))
    assert r.code == 2 and "Traceback" not in r.err and r.err.count("error:") == 1
    assert f"{out.parent}: no such folder for the anchor file" in r.err
    assert "install -d" in r.err and not out.parent.exists()
