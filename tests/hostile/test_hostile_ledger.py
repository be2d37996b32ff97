"""Hostile ledgers (issue 10, items 11 and 12): the ledger's own guarantees.

Each case damages the ledger of a fresh copy of the fitted demo study the way a person with
write access to the file (or a disk, a backup tool, a wrong path) could, then runs one command.

- Tables dropped or altered, files that are not a ledger: every command that touches the
  ledger refuses with one message naming the ledger file (corpus contract: exit 2, ``error:``
  with ``fix:``, no traceback); ``ledger verify`` reports it as a finding (exit 1).
- Triggers missing, replaced by a same-named trigger that does something else, or joined by a
  trigger the schema does not create: ``ledger verify`` names each one (exit 1), ``record``
  refuses to write into the file, reading commands still read it (so it can be inspected).
- A missing, empty (0 bytes) or entry-less ledger is not "0 entries, chain intact": verify
  exits 1 unless ``--allow-empty``; no reading command creates the file.
- A locked or read-only ledger: one message, exit 2.

And in every case every study file is byte-identical afterwards: no command "repairs" a
damaged ledger by writing to it.
"""

from __future__ import annotations

import asyncio
import contextlib
import functools
import json
import os
import sqlite3
import subprocess
import tempfile
from collections.abc import Callable, Iterator
from pathlib import Path

import pytest
from hostile_helpers import Cli, assert_refused, assert_unchanged, study_digests

from closecall.review.ledger import open_ledger, store

LEDGER = "ledger.sqlite"
CASE = "HR-0000010"  # reviewed once in the base study; recording it again is valid


@functools.cache
def _schema_sql(name: str) -> str:
    """The CREATE statement closecall itself writes for table or trigger ``name`` (read back
    from a new ledger's sqlite_master)."""
    with tempfile.TemporaryDirectory() as folder, open_ledger(Path(folder) / "l.sqlite") as new:
        row = new.connection.execute(
            "SELECT sql FROM sqlite_master WHERE name = ?", (name,)
        ).fetchone()
    return str(row[0])


def _body(trigger: str) -> str:
    """The schema's own BEGIN … END of an append-only trigger."""
    sql = _schema_sql(trigger)
    return sql[sql.index("BEGIN") :]


UPDATE_BODY, DELETE_BODY = _body("entries_no_update"), _body("entries_no_delete")

Damage = Callable[[Path], None]


def _sql(*statements: str) -> Damage:
    """A damage made of SQL statements run on the ledger, as by hand with the sqlite3 shell."""

    def damage(ledger: Path) -> None:
        conn = sqlite3.connect(ledger, isolation_level=None)
        try:
            for statement in statements:
                conn.execute(statement)
        finally:
            conn.close()

    return damage


def _entries_without_unique_hash(ledger: Path) -> None:
    """Rebuild entries with the same columns but no UNIQUE on hash (the usual ALTER dance)."""
    sql = _schema_sql("entries").replace("NOT NULL UNIQUE", "NOT NULL")
    _sql(
        "DROP TRIGGER entries_no_update",
        "DROP TRIGGER entries_no_delete",
        "ALTER TABLE entries RENAME TO old_entries",
        sql,
        "INSERT INTO entries SELECT * FROM old_entries",
        "DROP TABLE old_entries",
        "CREATE INDEX entries_case ON entries(case_id, seq)",
        "CREATE INDEX entries_reviewer ON entries(reviewer, seq)",
        _schema_sql("entries_no_update"),
        _schema_sql("entries_no_delete"),
    )(ledger)


def _replace_file(content: bytes) -> Damage:
    def damage(ledger: Path) -> None:
        ledger.write_bytes(content)

    return damage


def _foreign_sqlite(ledger: Path) -> None:
    ledger.unlink()
    _sql("CREATE TABLE songs (title TEXT, year INTEGER)", "INSERT INTO songs VALUES ('x', 1)")(
        ledger
    )


def _folder(ledger: Path) -> None:
    ledger.unlink()
    ledger.mkdir()
    (ledger / "README").write_text("someone made a folder here\n")


def _truncated(ledger: Path) -> None:
    data = ledger.read_bytes()
    ledger.write_bytes(data[: len(data) // 2])


#: Tables dropped or altered, and files that are not a ledger: (damage, words every message
#: must carry). Every command refuses them; verify reports them.
BROKEN: dict[str, tuple[Damage, tuple[str, ...]]] = {
    "entries table dropped": (_sql("DROP TABLE entries"), ("table entries was removed",)),
    "entries column dropped": (
        _sql("ALTER TABLE entries DROP COLUMN note"),
        ("table entries was altered", "note missing"),
    ),
    "entries column renamed": (
        _sql("ALTER TABLE entries RENAME COLUMN note TO notes"),
        ("table entries was altered", "note missing", "notes not in the schema"),
    ),
    "entries column added": (
        _sql("ALTER TABLE entries ADD COLUMN approved_by TEXT"),
        ("table entries was altered", "approved_by not in the schema"),
    ),
    "entries constraint dropped": (
        _entries_without_unique_hash,
        ("table entries was altered", "types or constraints changed"),
    ),
    "entries replaced by a view": (
        _sql(
            "DROP TABLE entries",
            "CREATE VIEW entries AS SELECT 1 AS seq, 'forged' AS note",
        ),
        ("table entries was altered", "now a view"),
    ),
    "drafts table dropped": (_sql("DROP TABLE drafts"), ("table drafts was removed",)),
    "drafts column renamed": (
        _sql("ALTER TABLE drafts RENAME COLUMN note TO text"),
        ("table drafts was altered", "note missing"),
    ),
    "claims table dropped": (_sql("DROP TABLE claims"), ("table claims was removed",)),
    "meta table dropped": (_sql("DROP TABLE meta"), ("table meta was removed",)),
    "marker row deleted": (
        _sql("DELETE FROM meta WHERE key = 'application'"),
        ("meta lost closecall's marker row",),
    ),
    "schema_version dropped": (
        _sql("DROP TABLE schema_version"),
        ("table schema_version was removed",),
    ),
    "schema_version emptied": (
        _sql("DELETE FROM schema_version"),
        ("schema_version holds no valid version",),
    ),
    "not SQLite at all": (
        _replace_file(b"case,note\nHR-1,looks like a ledger\n" * 400),
        ("not a closecall ledger",),
    ),
    "SQLite file of something else": (_foreign_sqlite, ("not a closecall ledger",)),
    "folder at the ledger path": (_folder, ("a folder, not a ledger file",)),
    "second half cut off": (_truncated, ("ledger file is damaged", "malformed")),
}

#: Trigger tampering: verify names it (exit 1), record refuses, readers still read.
TRIGGERS: dict[str, tuple[Damage, tuple[str, ...]]] = {
    "no-op trigger of the same name": (
        _sql(
            "DROP TRIGGER entries_no_update",
            "CREATE TRIGGER entries_no_update BEFORE UPDATE ON entries BEGIN SELECT 1; END",
        ),
        ("trigger entries_no_update was replaced",),
    ),
    "same trigger WHEN 0": (
        _sql(
            "DROP TRIGGER entries_no_delete",
            f"CREATE TRIGGER entries_no_delete BEFORE DELETE ON entries WHEN 0 {DELETE_BODY}",
        ),
        ("trigger entries_no_delete was replaced", "WHEN 0"),
    ),
    "same trigger on another table": (
        _sql(
            "DROP TRIGGER entries_no_update",
            f"CREATE TRIGGER entries_no_update BEFORE UPDATE ON drafts {UPDATE_BODY}",
        ),
        ("trigger entries_no_update was replaced", "ON drafts"),
    ),
    "guards one column only": (
        _sql(
            "DROP TRIGGER entries_no_update",
            f"CREATE TRIGGER entries_no_update BEFORE UPDATE OF note ON entries {UPDATE_BODY}",
        ),
        ("trigger entries_no_update was replaced", "UPDATE OF note"),
    ),
    "other abort message": (
        _sql(
            "DROP TRIGGER entries_no_delete",
            "CREATE TRIGGER entries_no_delete BEFORE DELETE ON entries "
            "BEGIN SELECT RAISE(ABORT, 'no'); END",
        ),
        ("trigger entries_no_delete was replaced",),
    ),
    "trigger dropped": (
        _sql("DROP TRIGGER entries_no_delete"),
        ("append-only triggers entries_no_delete were removed",),
    ),
    "both triggers dropped": (
        _sql("DROP TRIGGER entries_no_delete", "DROP TRIGGER entries_no_update"),
        ("entries_no_update, entries_no_delete were removed",),
    ),
    "extra trigger": (
        _sql("CREATE TRIGGER audit_copy AFTER INSERT ON entries BEGIN DELETE FROM claims; END"),
        ("trigger audit_copy", "closecall does not create"),
    ),
    "index dropped": (_sql("DROP INDEX entries_case"), ("index entries_case was removed",)),
}

#: Every command that touches the ledger, as arguments before --config.
COMMANDS: dict[str, tuple[str, ...]] = {
    "record": ("record", CASE, "--action", "uphold", "--note", "checked again"),
    "ledger show": ("ledger", "show"),
    "ledger export": ("ledger", "export", "--format", "jsonl"),
    "queue": ("queue",),
    "explain": ("explain", CASE),
    "disparity": ("disparity", "--boot", "100", "--json"),
    "review": ("review",),
}
READERS = ("ledger show", "ledger export", "queue", "explain")


#: The data files' digest cache: rewritten by any command that hashes the data afresh (record
#: does, before it opens the ledger); a cache of the data files, not part of the ledger.
DIGEST_CACHE = ".closecall/digests.json"


def _unchanged(before: dict[str, str], root: Path) -> None:
    """assert_unchanged, the data digest cache aside; new files only in the cache folder."""
    kept = {k: v for k, v in before.items() if k != DIGEST_CACHE}
    assert_unchanged(kept, root, allow_new=(".closecall/",))


def _run(cli: Cli, study_dir: Path, *args: str) -> object:
    return cli(*args, "--config", str(study_dir / "closecall.toml"))


@pytest.fixture(autouse=True)
def _no_screen(monkeypatch: pytest.MonkeyPatch) -> None:
    """`closecall review` must refuse before its screen opens: fail (not hang) if it opens."""
    from closecall.tui.app import ReviewApp

    def opened(self: object, *args: object, **kwargs: object) -> None:
        raise AssertionError("the review screen opened on this ledger")

    monkeypatch.setattr(ReviewApp, "run", opened)


def _damage(study_dir: Path, damage: Damage) -> dict[str, str]:
    """Damage the study's ledger; the digests of every study file afterwards."""
    damage(study_dir / LEDGER)
    for name in (f"{LEDGER}-wal", f"{LEDGER}-shm"):  # a clean state: companions gone
        (study_dir / name).unlink(missing_ok=True)
    return study_digests(study_dir)


# --------------------------------------------------------------------------- tables and files


@pytest.mark.parametrize("command", list(COMMANDS))
@pytest.mark.parametrize("name", list(BROKEN))
def test_a_broken_ledger_is_refused_by_every_command(
    study_dir: Path, cli: Cli, name: str, command: str
) -> None:
    damage, words = BROKEN[name]
    before = _damage(study_dir, damage)
    res = _run(cli, study_dir, *COMMANDS[command])
    text = assert_refused(res, str(study_dir / LEDGER), *words)
    assert "restore" in text  # the fix points at the backup, never at a repair by closecall
    _unchanged(before, study_dir)


@pytest.mark.parametrize("name", list(BROKEN) + list(TRIGGERS))
def test_verify_reports_every_damage_by_name(study_dir: Path, cli: Cli, name: str) -> None:
    damage, words = {**BROKEN, **TRIGGERS}[name]
    before = _damage(study_dir, damage)
    res = _run(cli, study_dir, "ledger", "verify")
    assert res.code == 1, res  # a finding, not a usage error
    assert "Traceback" not in res.out + res.err and not res.err, res
    assert "chain intact" not in res.out
    flat = " ".join(res.out.split())
    for word in words:
        assert word in flat, (word, res.out)
    res = _run(cli, study_dir, "ledger", "verify", "--json", "--allow-empty")
    assert res.code == 1, res  # --allow-empty excuses no entries, never damage
    result = json.loads(res.out)
    assert result["ok"] is False and result["problems"]
    _unchanged(before, study_dir)


# --------------------------------------------------------------------------- triggers


@pytest.mark.parametrize("name", list(TRIGGERS))
def test_record_refuses_a_ledger_whose_triggers_were_tampered_with(
    study_dir: Path, cli: Cli, name: str
) -> None:
    damage, words = TRIGGERS[name]
    before = _damage(study_dir, damage)
    res = _run(cli, study_dir, *COMMANDS["record"])
    assert_refused(res, str(study_dir / LEDGER), "changed outside closecall", *words)
    _unchanged(before, study_dir)


@pytest.mark.parametrize("command", READERS)
@pytest.mark.parametrize("name", ["no-op trigger of the same name", "extra trigger"])
def test_tampered_triggers_are_found_yet_the_ledger_stays_readable(
    study_dir: Path, cli: Cli, name: str, command: str
) -> None:
    """Reading commands still read it (the supervisor must be able to inspect and export
    it); verify is what reports it."""
    damage, words = TRIGGERS[name]
    before = _damage(study_dir, damage)
    res = _run(cli, study_dir, *COMMANDS[command])
    assert res.code == 0 and "Traceback" not in res.out + res.err, res
    res = _run(cli, study_dir, "ledger", "verify")
    assert res.code == 1 and words[0] in " ".join(res.out.split()), res
    _unchanged(before, study_dir)


def test_triggers_are_compared_by_definition_not_by_layout(study_dir: Path, cli: Cli) -> None:
    """The schema's own triggers put back with other white space and letter case are the same
    triggers (the file verifies); with another abort message they are not."""
    drop = ["DROP TRIGGER entries_no_update", "DROP TRIGGER entries_no_delete"]
    same = [
        " ".join(_schema_sql(name).split()).replace("BEGIN SELECT", "begin\n  select")
        for name in ("entries_no_update", "entries_no_delete")
    ]
    _damage(study_dir, _sql(*drop, *same))
    res = _run(cli, study_dir, "ledger", "verify")
    assert res.code == 0 and "2 entries, chain intact" in res.out, res
    other = [sql.replace("entries cannot be changed", "entries cannot be changed!") for sql in same]
    _damage(study_dir, _sql(*drop, *other))
    res = _run(cli, study_dir, "ledger", "verify")
    assert res.code == 1 and "trigger entries_no_update was replaced" in res.out, res


def _unreadable_decisions(ledger: Path) -> None:
    """Entry 2's decisions made invalid JSON, the triggers put back word for word after."""
    _sql(
        "DROP TRIGGER entries_no_update",
        'UPDATE entries SET decisions = \'{"pooled": {"margin": 0.1\' WHERE seq = 2',
        _schema_sql("entries_no_update"),
    )(ledger)


@pytest.mark.parametrize("command", ["ledger show", "ledger export", "disparity"])
def test_an_entry_that_cannot_be_read_back_is_one_message(
    study_dir: Path, cli: Cli, command: str
) -> None:
    before = _damage(study_dir, _unreadable_decisions)
    res = _run(cli, study_dir, *COMMANDS[command])
    assert_refused(res, str(study_dir / LEDGER), "entry 2", "cannot be read back", "restore")
    res = _run(cli, study_dir, "ledger", "verify", "--json")
    result = json.loads(res.out)
    assert res.code == 1 and result["problem"]["kind"] == "malformed", res
    assert result["first_broken"] == 2 and result["verified"] == 1
    _unchanged(before, study_dir)


# --------------------------------------------------------------------------- missing and empty


def _no_entries(ledger: Path) -> None:
    ledger.unlink()
    with open_ledger(ledger):  # a complete ledger with no entries (as a first claim leaves)
        pass


EMPTY: dict[str, tuple[Damage, str, str]] = {
    "missing file": (lambda p: p.unlink(), "no-ledger", "no ledger file at"),
    "zero bytes": (_replace_file(b""), "empty-ledger", "is empty (0 bytes"),
    "no entries": (_no_entries, "no-entries", "holds no entries"),
}


@pytest.mark.parametrize("name", list(EMPTY))
def test_a_missing_or_empty_ledger_fails_verify_unless_allowed(
    study_dir: Path, cli: Cli, name: str
) -> None:
    """And no command that reads the ledger creates or fills it on the way."""
    damage, kind, words = EMPTY[name]
    before = _damage(study_dir, damage)
    for command in READERS:
        res = _run(cli, study_dir, *COMMANDS[command])
        assert "Traceback" not in res.out + res.err, (command, res)
    res = _run(cli, study_dir, "ledger", "verify")
    assert res.code == 1 and "NOT VERIFIED" in res.out and not res.err, res
    assert words in " ".join(res.out.split()) and "--allow-empty" in res.out
    assert "chain intact" not in res.out
    res = _run(cli, study_dir, "ledger", "verify", "--json")
    assert res.code == 1 and json.loads(res.out)["problem"]["kind"] == kind, res
    res = _run(cli, study_dir, "ledger", "verify", "--allow-empty")
    assert res.code == 0 and "0 entries, chain intact" in res.out, res
    _unchanged(before, study_dir)
    assert (study_dir / LEDGER).exists() == (name != "missing file")


def test_record_refuses_a_zero_byte_ledger(study_dir: Path, cli: Cli) -> None:
    """closecall creates a ledger complete in one step: an empty file was emptied or made by
    hand, and starting a new chain in it would hide the reviews it held."""
    before = _damage(study_dir, _replace_file(b""))
    res = _run(cli, study_dir, *COMMANDS["record"])
    assert_refused(res, str(study_dir / LEDGER), "holds no tables", "restore")
    _unchanged(before, study_dir)
    assert (study_dir / LEDGER).stat().st_size == 0


# --------------------------------------------------------------------------- locked, read-only


@contextlib.contextmanager
def _locked(ledger: Path, monkeypatch: pytest.MonkeyPatch) -> Iterator[None]:
    """The ledger held under an exclusive lock by another connection (as an sqlite3 shell
    inside ``BEGIN EXCLUSIVE`` would); closecall's wait shortened to 0.2 s."""
    monkeypatch.setattr(store, "BUSY_TIMEOUT_SECONDS", 0.2)
    holder = sqlite3.connect(ledger, isolation_level=None)
    holder.execute("PRAGMA locking_mode = EXCLUSIVE")
    holder.execute("BEGIN EXCLUSIVE")
    try:
        yield
    finally:
        holder.execute("ROLLBACK")
        holder.close()


@pytest.mark.parametrize("command", [*COMMANDS, "ledger verify"])
def test_a_locked_ledger_is_one_message(
    study_dir: Path, cli: Cli, monkeypatch: pytest.MonkeyPatch, command: str
) -> None:
    before = study_digests(study_dir)  # (the digests read the ledger: not while it is locked)
    args = ("ledger", "verify") if command == "ledger verify" else COMMANDS[command]
    with _locked(study_dir / LEDGER, monkeypatch):
        res = _run(cli, study_dir, *args)
    assert_refused(
        res, str(study_dir / LEDGER), "locked by another program", "run the command again"
    )
    _unchanged(before, study_dir)


@contextlib.contextmanager
def _read_only(path: Path) -> Iterator[None]:
    """Make ``path`` unwritable for this process: immutable for root, mode 444 otherwise."""
    if os.geteuid() == 0:
        done = subprocess.run(["chattr", "+i", str(path)], capture_output=True, check=False)
        if done.returncode != 0:
            pytest.skip("cannot make a file read-only for root here (no chattr)")
        try:
            yield
        finally:
            subprocess.run(["chattr", "-i", str(path)], check=True)
    else:
        mode = path.stat().st_mode
        path.chmod(0o444)
        try:
            yield
        finally:
            path.chmod(mode)


def test_a_read_only_ledger_refuses_recording_and_still_reads(study_dir: Path, cli: Cli) -> None:
    before = study_digests(study_dir)
    with _read_only(study_dir / LEDGER):
        res = _run(cli, study_dir, *COMMANDS["record"])
        assert_refused(res, str(study_dir / LEDGER), "cannot be written with your login")
        res = _run(cli, study_dir, "ledger", "verify")
        assert res.code == 0 and "2 entries, chain intact" in res.out, res
        res = _run(cli, study_dir, "ledger", "show", "--json")
        assert res.code == 0 and json.loads(res.out)["count"] == 2, res
    _unchanged(before, study_dir)


# --------------------------------------------------------------------------- the review screen


@pytest.mark.parametrize("name", ["entries table dropped", "entries column renamed"])
def test_the_review_screen_shows_the_message_instead_of_crashing(
    study_dir: Path, name: str
) -> None:
    """Opened without the command's own check (``review --demo``, or damage while opening):
    the loading screen says what is wrong and the app keeps running until the user quits."""
    from textual.widgets import Static

    from closecall.tui.app import ReviewApp

    before = _damage(study_dir, BROKEN[name][0])

    async def body() -> str:
        app = ReviewApp(study_dir / "closecall.toml")
        async with app.run_test(size=(100, 30)) as pilot:
            for _ in range(400):
                text = str(app.screen.query_one("#loading-error", Static).render())
                if text:
                    break
                await pilot.pause(0.05)
            await pilot.press("q")
        return text

    text = asyncio.run(body())
    assert "Could not open the study" in text and str(study_dir / LEDGER) in text
    _unchanged(before, study_dir)


def test_a_ledger_tampered_with_during_a_session_is_a_message_in_the_decision_dialog(
    study_dir: Path,
) -> None:
    """The screen opened on a sound ledger; its triggers are replaced meanwhile: opening the
    decision dialog (which claims the case, a write) says why instead of crashing."""
    from textual.widgets import Static

    from closecall.tui.app import ReviewApp
    from closecall.tui.decision_dialog import DecisionDialog
    from closecall.tui.queue_screen import QueueScreen

    async def body() -> tuple[str, bool]:
        app = ReviewApp(study_dir / "closecall.toml")
        async with app.run_test(size=(100, 30)) as pilot:
            for _ in range(600):
                if isinstance(app.screen, QueueScreen):
                    break
                await pilot.pause(0.05)
            assert app.session is not None, "the review list did not open"
            before = _damage(study_dir, TRIGGERS["no-op trigger of the same name"][0])
            app.push_screen(DecisionDialog(app.session, CASE))
            text = ""
            for _ in range(400):
                await pilot.pause(0.05)
                if isinstance(app.screen, DecisionDialog):
                    text = str(app.screen.query_one("#dialog-status", Static).render())
                    if "changed outside closecall" in text:
                        break
            running = app.is_running
            await pilot.press("escape")
        _unchanged(before, study_dir)
        return text, running

    text, running = asyncio.run(body())
    assert "trigger entries_no_update was replaced" in text and running
