"""Tampering with the ledger file by hand is detected, and the first broken entry is named."""

from __future__ import annotations

import json
import sqlite3
from collections.abc import Iterator
from pathlib import Path

import pytest
from ledger_helpers import content

from closecall.review.ledger import GENESIS_HASH, DamagedLedger, NoLedger, entry_hash, open_ledger
from closecall.review.ledger.entry import HASHED_FIELDS as ENTRY_FIELDS
from closecall.review.ledger.schema import TRIGGERS, expected_objects, normalise_sql

N = 10


@pytest.fixture
def ledger_path(tmp_path: Path) -> Path:
    path = tmp_path / "l.sqlite"
    with open_ledger(path) as ledger:
        for i in range(N):
            ledger.append(content(f"note {i}", case_id=("A-1", "A-2", "B-1")[i % 3]))
        assert ledger.verify().ok
    return path


def tamper(path: Path, *sql: str, params: tuple[object, ...] = ()) -> None:
    """Run SQL as an attacker with write access would: triggers dropped first."""
    conn = sqlite3.connect(path, isolation_level=None)
    conn.execute("DROP TRIGGER IF EXISTS entries_no_update")
    conn.execute("DROP TRIGGER IF EXISTS entries_no_delete")
    for statement in sql:
        conn.execute(statement, params if "?" in statement else ())
    conn.close()


def rows(path: Path) -> Iterator[dict[str, object]]:
    with open_ledger(path, readonly=True) as ledger:
        yield from ledger.iter_rows()


def verify(path: Path, anchor: str | None = None):  # type: ignore[no-untyped-def]
    with open_ledger(path, readonly=True) as ledger:
        return ledger.verify(anchor)


EDITS = {
    "time": "'2020-01-01T00:00:00.000000Z'",
    "reviewer": "'mallory'",
    "case_id": "'B-2'",
    "snapshot_id": "'0000000000000000'",
    "current_snapshot_id": "'ffffffffffffffff'",
    "reference_model": "'deployed'",
    "reference_decision": "'unfavourable'",
    "reference_margin": "-0.125",
    "decisions": """'{"pooled":{"decision":"favourable","margin":0.5}}'""",
    "action": "'override-favourable'",
    "reason": "'policy-exception'",
    "note": "'note 3 (improved)'",
    "supersedes": "1",
    "format": "1",  # format 1 hashes fewer fields (no signature)
    "signature": "'AAAA'",
    "prev_hash": "'" + "1" * 64 + "'",
    "hash": "'" + "2" * 64 + "'",
}


def test_every_hashed_field_has_an_edit_case() -> None:
    assert set(EDITS) | {"seq"} == {*ENTRY_FIELDS, "hash"}


@pytest.mark.parametrize("column", list(EDITS))
def test_an_edited_field_names_its_entry(ledger_path: Path, column: str) -> None:
    tamper(ledger_path, f"UPDATE entries SET {column} = {EDITS[column]} WHERE seq = 4")
    result = verify(ledger_path)
    assert not result.ok
    assert result.problem is not None
    assert (result.problem.kind, result.first_broken) == ("edited", 4)
    assert "entry 4 was altered" in result.problem.message
    assert result.verified == 3 and result.entries == N
    assert "triggers-missing" in [p.kind for p in result.problems]


def test_a_deleted_entry_shows_as_a_gap(ledger_path: Path) -> None:
    tamper(ledger_path, "DELETE FROM entries WHERE seq = 5")
    result = verify(ledger_path)
    assert result.problem is not None
    assert (result.problem.kind, result.first_broken) == ("missing", 5)
    assert "entry 5 is missing" in result.problem.message


def test_swapped_entries_are_detected(ledger_path: Path) -> None:
    tamper(
        ledger_path,
        "UPDATE entries SET seq = -1 WHERE seq = 3",
        "UPDATE entries SET seq = 3 WHERE seq = 4",
        "UPDATE entries SET seq = 4 WHERE seq = -1",
    )
    result = verify(ledger_path)
    assert result.problem is not None
    assert (result.problem.kind, result.first_broken) == ("edited", 3)


def test_swapped_entries_with_recomputed_hashes_break_the_links(ledger_path: Path) -> None:
    by_seq = {int(r["seq"]): r for r in rows(ledger_path)}  # type: ignore[call-overload]
    statements = ["DELETE FROM entries WHERE seq IN (3, 4)"]
    tamper(ledger_path, *statements)
    conn = sqlite3.connect(ledger_path, isolation_level=None)
    for new_seq, old in ((3, by_seq[4]), (4, by_seq[3])):
        row = {**old, "seq": new_seq}
        row["hash"] = entry_hash({**row, "decisions": json.loads(str(row["decisions"]))})
        cols = list(row)
        conn.execute(
            f"INSERT INTO entries ({', '.join(cols)}) VALUES ({', '.join('?' for _ in cols)})",
            [row[c] for c in cols],
        )
    conn.close()
    result = verify(ledger_path)
    assert result.problem is not None
    assert (result.problem.kind, result.first_broken) == ("wrong-predecessor", 3)
    assert "entry 3 does not follow entry 2" in result.problem.message


def _forge(path: Path, seq: int, prev_hash: str) -> str:
    """Replace entry ``seq`` with a forged one whose own hash is correctly recomputed."""
    original = next(r for r in rows(path) if r["seq"] == seq)
    forged = {
        **original,
        "note": "forged approval",
        "action": "override-favourable",
        "reason": "other",
        "prev_hash": prev_hash,
    }
    forged["hash"] = entry_hash({**forged, "decisions": json.loads(str(forged["decisions"]))})
    tamper(path, f"DELETE FROM entries WHERE seq = {seq}")
    conn = sqlite3.connect(path, isolation_level=None)
    cols = list(forged)
    conn.execute(
        f"INSERT INTO entries ({', '.join(cols)}) VALUES ({', '.join('?' for _ in cols)})",
        [forged[c] for c in cols],
    )
    conn.close()
    return str(forged["hash"])


def test_a_forged_entry_with_a_wrong_predecessor_is_named(ledger_path: Path) -> None:
    _forge(ledger_path, 6, prev_hash="ab" * 32)
    result = verify(ledger_path)
    assert result.problem is not None
    assert (result.problem.kind, result.first_broken) == ("wrong-predecessor", 6)


def test_a_forged_entry_linked_to_its_predecessor_breaks_the_next_link(ledger_path: Path) -> None:
    prev = next(r for r in rows(ledger_path) if r["seq"] == 5)["hash"]
    _forge(ledger_path, 6, prev_hash=str(prev))
    result = verify(ledger_path)
    assert result.problem is not None
    assert (result.problem.kind, result.first_broken) == ("wrong-predecessor", 7)


def test_a_forged_entry_appended_at_the_end_is_named(ledger_path: Path) -> None:
    with open_ledger(ledger_path) as ledger:
        ledger.append(content("last real"))
    _forge(ledger_path, N + 1, prev_hash=GENESIS_HASH)
    result = verify(ledger_path)
    assert result.problem is not None
    assert (result.problem.kind, result.first_broken) == ("wrong-predecessor", N + 1)


def test_a_truncated_tail_is_caught_only_with_an_anchor(ledger_path: Path) -> None:
    anchor = verify(ledger_path).head_hash
    tamper(ledger_path, f"DELETE FROM entries WHERE seq > {N - 3}")
    # without an anchor only the dropped triggers give it away (a known limit, see docs)
    assert [p.kind for p in verify(ledger_path).problems] == ["triggers-missing"]
    result = verify(ledger_path, anchor)
    assert not result.ok
    assert result.problem is not None and result.problem.kind == "anchor-not-found"
    assert result.verified == N - 3 and result.head_seq == N - 3


def test_a_whole_rewritten_chain_is_caught_by_the_anchor(ledger_path: Path) -> None:
    anchor = verify(ledger_path).head_hash
    old = list(rows(ledger_path))
    tamper(ledger_path, "DELETE FROM entries")
    conn = sqlite3.connect(ledger_path, isolation_level=None)
    prev = GENESIS_HASH
    for r in old:  # the attacker rewrites entry 2 and re-chains everything after it
        row = {**r, "prev_hash": prev}
        if row["seq"] == 2:
            row["note"] = "rewritten"
        row["hash"] = entry_hash({**row, "decisions": json.loads(str(row["decisions"]))})
        cols = list(row)
        conn.execute(
            f"INSERT INTO entries ({', '.join(cols)}) VALUES ({', '.join('?' for _ in cols)})",
            [row[c] for c in cols],
        )
        prev = str(row["hash"])
    # put the triggers back word for word, as a careful attacker would
    for name in TRIGGERS:
        conn.execute(str(expected_objects()[("trigger", name)].sql))
    conn.close()
    assert verify(ledger_path).ok  # indistinguishable without an anchor (documented threat)
    result = verify(ledger_path, anchor)
    assert result.problem is not None and result.problem.kind == "anchor-not-found"


def test_an_old_anchor_is_found_after_more_entries(ledger_path: Path) -> None:
    early = verify(ledger_path)
    with open_ledger(ledger_path) as ledger:
        ledger.append(content("later"))
    result = verify(ledger_path, early.head_hash.upper())
    assert result.ok and result.anchor_seq == N and result.head_seq == N + 1


def test_dropped_triggers_alone_fail_verification(ledger_path: Path) -> None:
    tamper(ledger_path)
    result = verify(ledger_path)
    assert not result.ok and result.first_broken is None
    assert [p.kind for p in result.problems] == ["triggers-missing"]
    assert result.verified == N


# --------------------------------------------------------------------------- structure


def test_sql_is_compared_up_to_layout_case_and_comments() -> None:
    sql = str(expected_objects()[("trigger", "entries_no_update")].sql)
    relaid = 'create  trigger "ENTRIES_NO_UPDATE" /* same */ ' + " ".join(sql.split()[3:])
    assert normalise_sql(relaid) == normalise_sql(sql)
    table = str(expected_objects()[("table", "meta")].sql)
    assert normalise_sql(table.replace("TABLE", "TABLE IF NOT EXISTS")) == normalise_sql(table)
    assert normalise_sql(sql.replace("BEFORE UPDATE", "BEFORE UPDATE OF note")) != normalise_sql(
        sql
    )
    assert normalise_sql(sql.replace("append-only", "Append-only")) != normalise_sql(sql)


REPLACED = {
    "no-op": "CREATE TRIGGER entries_no_update BEFORE UPDATE ON entries BEGIN SELECT 1; END",
    "when 0": str(expected_objects()[("trigger", "entries_no_update")].sql).replace(
        "ON entries", "ON entries WHEN 0"
    ),
    "other table": str(expected_objects()[("trigger", "entries_no_update")].sql).replace(
        "ON entries", "ON claims"
    ),
}


@pytest.mark.parametrize("name", list(REPLACED))
def test_a_replaced_trigger_is_reported_and_refuses_writers(ledger_path: Path, name: str) -> None:
    tamper(ledger_path, REPLACED[name])  # drops both triggers, then puts back one, altered
    result = verify(ledger_path)  # readers still open it
    kinds = [p.kind for p in result.problems]
    assert kinds == ["triggers-missing", "trigger-altered"] and result.verified == N
    assert "entries_no_update was replaced" in result.problems[1].message
    before = ledger_path.read_bytes()
    with pytest.raises(DamagedLedger, match="entries_no_update was replaced") as caught:
        open_ledger(ledger_path)  # a writer does not record into it
    assert caught.value.kind == "structure" and ledger_path.read_bytes() == before


def test_an_altered_table_is_refused_to_readers_and_inspected_by_verify(ledger_path: Path) -> None:
    conn = sqlite3.connect(ledger_path, isolation_level=None)
    conn.execute("ALTER TABLE claims RENAME COLUMN reviewer TO who")
    conn.close()
    with pytest.raises(
        DamagedLedger, match=r"table claims was altered: column\(s\) reviewer missing"
    ):
        open_ledger(ledger_path, readonly=True)
    with open_ledger(ledger_path, inspect=True) as ledger:
        result = ledger.verify()
    assert [p.kind for p in result.problems] == ["table-altered"] and result.verified == N


def test_reading_never_creates_the_file(tmp_path: Path) -> None:
    path = tmp_path / "l.sqlite"
    for mode in ({"readonly": True}, {"inspect": True}):
        with pytest.raises(NoLedger):
            open_ledger(path, **mode)
    assert not path.exists() and list(tmp_path.iterdir()) == []
