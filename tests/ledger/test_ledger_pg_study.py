"""The study commands on a ledger in PostgreSQL (``[review] ledger = "postgresql://…"``), side
by side with the SQLite file, against a real throw-away server (tests/ledger/pg_server.py)."""

from __future__ import annotations

import csv
import dataclasses
import hashlib
import json
import os
import subprocess
import sys
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

import psycopg
import pytest
from ledger_helpers import content
from pg_server import PgServer

from closecall.core.errors import UserError
from closecall.review.ledger import current_login
from closecall.review.ledger.backend import verify_any
from closecall.review.ledger.pg_store import open_pg_ledger, setup
from closecall.review.ledger.store import DamagedLedger
from closecall.suite.opening import OpenedStudy, open_study

REPO = Path(__file__).resolve().parents[2]
NOTE = "Income verified by letter of 3 May."


def _role(admin_url: str, name: str, *groups: str) -> None:
    with psycopg.connect(admin_url, autocommit=True) as conn:
        conn.execute(f'DROP ROLE IF EXISTS "{name}"')
        conn.execute(f'CREATE ROLE "{name}" LOGIN')
        for g in groups:
            conn.execute(f'GRANT {g} TO "{name}"')


@dataclasses.dataclass
class Team:
    admin: str  # the owner's URL
    url: str  # the URL a study config holds: no user, no password (libpq takes PGUSER)
    alice: str
    bob: str
    ann: str  # analyst
    eve: str  # no role at all


@pytest.fixture
def team(pg_server: PgServer, pg_db: str) -> Team:
    """A ledger database set up as docs/ledger.md says, with two reviewers, an analyst and an
    outsider (each a login role of its own)."""
    setup(pg_db)
    db = pg_db.rsplit("/", 1)[1]
    suffix = db.rsplit("_", 1)[-1] + db.split("_")[1]
    names = {k: f"{k}{suffix}" for k in ("alice", "bob", "ann", "eve")}
    _role(pg_db, names["alice"], "closecall_reviewer")
    _role(pg_db, names["bob"], "closecall_reviewer")
    _role(pg_db, names["ann"], "closecall_analyst")
    _role(pg_db, names["eve"])
    return Team(pg_db, f"postgresql://127.0.0.1:{pg_server.port}/{db}", **names)


def _config(demo_config: Path, ledger: str, name: str) -> Path:
    """A config beside the shared demo data (its fit is reused) whose ledger is ``ledger``."""
    text = demo_config.read_text()
    head = text[: text.index("[review]")]
    path = demo_config.parent / f"{name}-{os.getpid()}.toml"
    path.write_text(head + f"[review]\nledger = {json.dumps(ledger)}\n")
    return path


Backend = tuple[Path, str]  # (config, who the ledger records as)


@pytest.fixture(params=["sqlite", "postgresql"])
def study_ledger(
    request: pytest.FixtureRequest,
    demo_config: Path,
    tmp_path: Path,
    monkeypatch: pytest.MonkeyPatch,
) -> Iterator[Backend]:
    """The demo study with its ledger in a file or in PostgreSQL, recording as alice there."""
    if request.param == "sqlite":
        config = _config(demo_config, str(tmp_path / "ledger.sqlite"), f"sq-{tmp_path.name}")
        yield config, current_login()
    else:
        team: Team = request.getfixturevalue("team")
        monkeypatch.setenv("PGUSER", team.alice)
        config = _config(demo_config, team.url, f"pg-{tmp_path.name}")
        yield config, team.alice
    config.unlink()


def _ok(res: Any) -> Any:
    assert res.code == 0, (res.code, res.out, res.err)
    return res


def test_record_queue_show_verify_and_export_on_either_backend(
    study_ledger: Backend, cli: Any, tmp_path: Path
) -> None:
    config, who = study_ledger
    snap = open_study(config).snapshot
    cases = [str(snap.case_ids[k]) for k in (3, 4)]
    c = ("--config", str(config))
    _ok(cli("record", cases[0], "--action", "uphold", *c))
    reason = "information-not-in-model"
    rec = _ok(
        cli(
            "record",
            cases[1],
            "--action",
            "override-favourable",
            "--reason",
            reason,
            "--note",
            NOTE,
            "--json",
            *c,
        )
    )
    entry = json.loads(rec.out)
    assert entry["reviewer"] == who  # the database user on PostgreSQL, the login on a file
    assert (entry["seq"], entry["case_id"], entry["note"]) == (2, cases[1], NOTE)

    rows = json.loads(_ok(cli("ledger", "show", "--json", *c)).out)["rows"]
    assert [(r["case_id"], r["action"], r["reviewer"]) for r in rows] == [
        (cases[0], "uphold", who),
        (cases[1], "override-favourable", who),
    ]
    # the same hash rule on both: SHA-256 (FIPS 180-4, via hashlib) over the canonical JSON of
    # the hashed fields (sorted keys, no spaces, UTF-8), as docs/ledger.md states
    fields = {k: v for k, v in rows[1].items() if k != "hash"}
    body = json.dumps(fields, sort_keys=True, separators=(",", ":"), ensure_ascii=False)
    assert hashlib.sha256(body.encode("utf-8")).hexdigest() == rows[1]["hash"] == entry["hash"]

    # review states in the queue come from the ledger
    listed = json.loads(_ok(cli("queue", "--all", "--limit", "0", "--json", *c)).out)
    state = {r["case_id"]: r.get("state") for r in listed["rows"]}
    assert state[cases[0]] == "uphold" and state[cases[1]] == "override-favourable"
    unreviewed = json.loads(
        _ok(cli("queue", "--all", "--unreviewed", "--limit", "0", "--json", *c)).out
    )
    ids = {r["case_id"] for r in unreviewed["rows"]}
    assert not ids & set(cases) and len(ids) == len(listed["rows"]) - 2

    verified = json.loads(_ok(cli("ledger", "verify", "--json", *c)).out)
    assert verified["ok"] and verified["entries"] == 2
    assert (verified["head_seq"], verified["head_hash"]) == (2, entry["hash"])

    out = tmp_path / "reviews.csv"
    _ok(cli("ledger", "export", "--out", str(out), *c))
    with out.open(newline="", encoding="utf-8") as f:
        exported = list(csv.DictReader(f))
    assert sorted(r["case_id"] for r in exported) == sorted(cases)

    anchor = tmp_path / "anchor.txt"
    _ok(cli("ledger", "anchor", "--out", str(anchor), *c))
    assert entry["hash"] in anchor.read_text()


def _disparity_figures(config: Path, cli: Any) -> dict[str, Any]:
    snap = open_study(config).snapshot
    c = ("--config", str(config))
    for k in range(40):  # overrides both ways and upholds over the closest cases
        action = ("uphold", "override-favourable", "override-unfavourable")[k % 3]
        extra = () if action == "uphold" else ("--reason", "data-error", "--note", f"case {k}")
        _ok(cli("record", str(snap.case_ids[k]), "--action", action, *extra, *c))
    res = _ok(cli("disparity", "--json", "--boot", "100", *c))
    report = json.loads(res.out)
    report.get("context", {}).pop("ledger")  # the file's path or the database's URL
    return report


def _strip(value: Any, name: str) -> Any:
    """The report with the reviewer's name (which differs by backend) replaced."""
    import re

    text = json.dumps(value, sort_keys=True, ensure_ascii=False)
    return json.loads(re.sub(rf"(?<![\w-]){re.escape(name)}(?![\w-])", "REVIEWER", text))


def test_disparity_with_overrides_is_the_same_from_either_backend(
    team: Team, demo_config: Path, tmp_path: Path, cli: Any, monkeypatch: pytest.MonkeyPatch
) -> None:
    file_config = _config(demo_config, str(tmp_path / "ledger.sqlite"), f"dq-{tmp_path.name}")
    pg_config = _config(demo_config, team.url, f"dp-{tmp_path.name}")
    monkeypatch.setenv("PGUSER", team.bob)
    try:
        from_file = _disparity_figures(file_config, cli)
        from_db = _disparity_figures(pg_config, cli)
    finally:
        file_config.unlink()
        pg_config.unlink()
    # the report reads the same 40 reviews from either ledger: every figure agrees
    assert "override" in json.dumps(from_db)
    assert _strip(from_db, team.bob) == _strip(from_file, current_login())


COMMANDS: dict[str, tuple[str, ...]] = {
    "record": ("record", "{case}", "--action", "uphold"),
    "ledger show": ("ledger", "show"),
    "ledger verify": ("ledger", "verify"),
    "ledger export": ("ledger", "export", "--out", "{tmp}/x.csv"),
    "ledger anchor": ("ledger", "anchor", "--out", "{tmp}/anchor.txt"),
    "queue --unreviewed": ("queue", "--unreviewed"),
    "disparity": ("disparity", "--boot", "100"),
    "review": ("review",),
}


@pytest.mark.parametrize("command", sorted(COMMANDS))
def test_a_database_user_without_a_role_is_refused_by_every_command(
    team: Team,
    demo_config: Path,
    tmp_path: Path,
    cli: Any,
    monkeypatch: pytest.MonkeyPatch,
    command: str,
) -> None:
    config = _config(demo_config, team.url, f"eve-{tmp_path.name}")
    case = str(open_study(config).snapshot.case_ids[0])
    monkeypatch.setenv("PGUSER", team.alice)
    _ok(cli("record", case, "--action", "defer", "--config", str(config)))  # one entry there
    monkeypatch.setenv("PGUSER", team.eve)
    args = [a.format(case=case, tmp=tmp_path) for a in COMMANDS[command]]
    try:
        res = cli(*args, "--config", str(config))
    finally:
        config.unlink()
    text = res.out + res.err
    assert res.code == 2, (res.code, text)
    assert "Traceback" not in text and text.count("error:") == 1 and "fix:" in text
    assert team.eve in text
    role = "closecall_reviewer" if command == "record" else "closecall_analyst"
    assert f"GRANT {role}" in text  # names the role to ask for
    with open_pg_ledger(team.admin, inspect=True) as ledger:
        assert ledger.count() == 1  # nothing recorded


def _closecall(*args: str, user: str, cwd: Path) -> subprocess.CompletedProcess[str]:
    env = {**os.environ, "PGUSER": user, "PYTHONPATH": str(REPO / "src")}
    return subprocess.run(
        [sys.executable, "-m", "closecall", *args],
        capture_output=True,
        text=True,
        env=env,
        cwd=cwd,
        timeout=300,
    )


def test_done_when_a_team_records_from_two_shells_and_psql_cannot_alter(
    pg_server: PgServer, demo_config: Path, tmp_path: Path
) -> None:
    """The issue's "done when", by docs/ledger.md's Team deployment steps: the owner runs
    `closecall ledger setup`, grants the reviewer role with psql, the config names the
    database; two shells record as two database users; verify passes; psql as a reviewer
    cannot change an entry."""
    db = f"team_{os.getpid()}"
    admin = pg_server.create_database(db)
    psql = str(pg_server.bindir / "psql")
    setup_run = _closecall("ledger", "setup", admin, user="cc_admin", cwd=tmp_path)
    assert setup_run.returncode == 0, setup_run.stderr
    suffix = str(os.getpid())
    alice, bob = f"alice_t{suffix}", f"bob_t{suffix}"
    for name in (alice, bob):
        done = subprocess.run(
            [psql, admin, "-v", "ON_ERROR_STOP=1", "-c", f"CREATE ROLE {name} LOGIN",
             "-c", f"GRANT closecall_reviewer TO {name}"],
            capture_output=True, text=True, check=False,
        )  # fmt: skip
        assert done.returncode == 0, done.stderr
    config = _config(demo_config, f"postgresql://127.0.0.1:{pg_server.port}/{db}", "team")
    try:
        snap = open_study(config).snapshot
        c = ("--config", str(config))
        one = _closecall("record", str(snap.case_ids[0]), "-a", "uphold", *c, user=alice,
                         cwd=tmp_path)  # fmt: skip
        two = _closecall("record", str(snap.case_ids[1]), "-a", "defer", "--json", *c,
                         user=bob, cwd=tmp_path)  # fmt: skip
        assert one.returncode == 0 and two.returncode == 0, (one.stderr, two.stderr)
        assert f"by {alice}" in one.stdout and json.loads(two.stdout)["reviewer"] == bob
        verified = _closecall("ledger", "verify", *c, user=alice, cwd=tmp_path)
        assert verified.returncode == 0, verified.stdout + verified.stderr
        assert "2 entries, chain intact" in verified.stdout
    finally:
        config.unlink()
    reviewer_url = f"postgresql://{alice}@127.0.0.1:{pg_server.port}/{db}"
    for sql in (
        "UPDATE closecall.entries SET body = body",
        "DELETE FROM closecall.entries",
        "TRUNCATE closecall.entries",
        "ALTER TABLE closecall.entries DISABLE TRIGGER entries_no_change",
    ):
        tried = subprocess.run(
            [psql, reviewer_url, "-v", "ON_ERROR_STOP=1", "-c", sql],
            capture_output=True,
            text=True,
            check=False,
        )
        assert tried.returncode != 0 and "ERROR" in tried.stderr, (sql, tried.stderr)
    assert verify_any(admin).ok and verify_any(admin).entries == 2


# ---------------------------------------------------------------------------- verify's guards


CHANGES: dict[str, tuple[str, str, str]] = {
    # name: (SQL run by the owner, the finding's kind, text in its message)
    "update granted": (
        "GRANT UPDATE ON closecall.entries TO closecall_reviewer",
        "privilege-granted",
        "closecall_reviewer was granted UPDATE on closecall.entries",
    ),
    "delete to public": (
        "GRANT DELETE ON closecall.entries TO PUBLIC",
        "privilege-granted",
        "PUBLIC was granted DELETE",
    ),
    "truncate granted": (
        "GRANT TRUNCATE ON closecall.entries TO closecall_analyst",
        "privilege-granted",
        "TRUNCATE on closecall.entries",
    ),
    "insert revoked": (
        "REVOKE INSERT ON closecall.entries FROM closecall_reviewer",
        "privilege-missing",
        "INSERT on closecall.entries to closecall_reviewer was revoked",
    ),
    "drafts open": (
        "ALTER TABLE closecall.drafts DISABLE ROW LEVEL SECURITY",
        "row-security-off",
        "closecall.drafts",
    ),
    "policy dropped": (
        "DROP POLICY own_drafts ON closecall.drafts",
        "policy-missing",
        "own_drafts",
    ),
    "policy widened": (
        "ALTER POLICY own_claims ON closecall.claims USING (true)",
        "policy-altered",
        "own_claims",
    ),
    "trigger dropped": (
        "DROP TRIGGER entries_no_change ON closecall.entries",
        "triggers-missing",
        "entries_no_change",
    ),
}


@pytest.mark.parametrize("change", sorted(CHANGES))
def test_verify_names_a_changed_grant_policy_or_guard_and_setup_restores_it(
    team: Team, change: str
) -> None:
    alice_url = team.url.replace("://", f"://{team.alice}@")
    with open_pg_ledger(alice_url) as ledger:
        ledger.append(_content())
    assert verify_any(team.admin).ok
    sql, kind, text = CHANGES[change]
    with psycopg.connect(team.admin, autocommit=True) as conn:
        conn.execute(sql.encode())
    result = verify_any(team.admin)
    assert not result.ok
    found = [p for p in result.problems if p.kind == kind]
    assert found and text in found[0].message, result.problems
    # a writer refuses the ledger as it is, naming the change and the fix
    with pytest.raises(DamagedLedger) as refused:
        open_pg_ledger(alice_url)
    assert text in refused.value.message and "ledger setup" in refused.value.fix
    setup(team.admin)  # the owner restores the guards
    assert verify_any(team.admin).ok


def _content() -> Any:
    from ledger_helpers import content

    return content("a decision")


# ---------------------------------------------------------------------------- the config


def test_a_database_url_in_the_config_is_kept_and_a_password_refused_unechoed(
    tmp_path: Path,
) -> None:
    from ledger_helpers import make_config

    cfg = make_config(tmp_path, ledger="postgresql://db.example:5433/reviews")
    assert cfg.review.ledger == "postgresql://db.example:5433/reviews"
    conninfo = make_config(tmp_path, ledger="host=db.example dbname=reviews")
    assert conninfo.review.ledger == "host=db.example dbname=reviews"
    for url in ("postgres://u:s3cret@db/x", "host=db dbname=x password=s3cret"):
        with pytest.raises(UserError) as info:
            make_config(tmp_path, ledger=url)
        assert "password" in info.value.message and "s3cret" not in info.value.message
        assert ".pgpass" in str(info.value.fix)
    assert not any(tmp_path.iterdir())  # no folder or file made from the URL


def test_a_server_that_is_down_is_one_message_naming_the_url(
    demo_config: Path, tmp_path: Path, cli: Any
) -> None:
    import socket

    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    url = f"postgresql://127.0.0.1:{port}/reviews"
    config = _config(demo_config, url, f"down-{tmp_path.name}")
    try:
        for args in (("ledger", "show"), ("ledger", "verify"), ("queue", "--unreviewed")):
            res = cli(*args, "--config", str(config))
            text = res.out + res.err
            assert res.code == 2 and url in text and "Traceback" not in text, text
            assert text.count("error:") == 1
    finally:
        config.unlink()


# ---------------------------------------------------------------------------- the review screen


def _study_on(study: OpenedStudy, ledger: str | Path) -> OpenedStudy:
    review = dataclasses.replace(study.config.review, ledger=ledger)
    return OpenedStudy(dataclasses.replace(study.config, review=review), study.snapshot)


@pytest.fixture(params=["sqlite", "postgresql"])
def screen_study(
    request: pytest.FixtureRequest,
    demo_study: OpenedStudy,
    tmp_path: Path,
    monkeypatch: pytest.MonkeyPatch,
) -> tuple[OpenedStudy, str]:
    if request.param == "sqlite":
        return _study_on(demo_study, tmp_path / "ledger.sqlite"), current_login()
    team: Team = request.getfixturevalue("team")
    monkeypatch.setenv("PGUSER", team.alice)
    return _study_on(demo_study, team.url), team.alice


def test_the_review_screen_records_drafts_and_claims_on_either_backend(
    screen_study: tuple[OpenedStudy, str],
) -> None:
    import asyncio

    from closecall.review.decisions import active_claims, ledger_entries, load_draft
    from closecall.tui.app import ReviewApp
    from closecall.tui.case_screen import CaseScreen
    from closecall.tui.decision_dialog import DecisionDialog
    from closecall.tui.queue_screen import QueueScreen

    study, who = screen_study

    async def until(pilot: Any, condition: Callable[[], bool]) -> None:
        for _ in range(400):
            if condition():
                await pilot.pause()
                return
            await pilot.pause(0.05)
        raise AssertionError(f"timed out waiting for {condition}")

    async def run() -> tuple[str, Any]:
        app = ReviewApp(study=study, login="reviewer")
        async with app.run_test(size=(120, 40)) as pilot:
            await until(pilot, lambda: isinstance(app.screen, QueueScreen))
            session = app.session
            assert session is not None and session.login == who
            await pilot.press("enter")
            await until(pilot, lambda: isinstance(app.screen, CaseScreen))
            case_id = app.screen.case_id  # type: ignore[attr-defined]
            await until(pilot, lambda: case_id in active_claims(study))
            claim = active_claims(study)[case_id]
            assert [c.reviewer for c in claim] == [who]  # claimed as the database user
            await pilot.press("d")
            await until(pilot, lambda: isinstance(app.screen, DecisionDialog))
            await pilot.press("2", "2", *NOTE)
            await until(pilot, lambda: (d := load_draft(study, case_id)) is not None
                        and d.note == NOTE)  # fmt: skip
            await pilot.press("ctrl+r")
            dialog = app.screen
            assert isinstance(dialog, DecisionDialog)
            await until(pilot, lambda: dialog.entry is not None)
            return case_id, dialog.entry

    case_id, entry = asyncio.run(run())
    assert entry.reviewer == who and entry.note == NOTE
    assert [(e.case_id, e.action, e.reviewer) for e in ledger_entries(study.config)] == [
        (case_id, "override-favourable", who)
    ]
    assert load_draft(study, case_id) is None  # recording removed the draft


def test_an_analyst_on_the_review_screen_is_told_the_role_to_ask_for(
    team: Team, demo_study: OpenedStudy, monkeypatch: pytest.MonkeyPatch
) -> None:
    import asyncio

    from closecall.review.decisions import ledger_entries
    from closecall.tui.app import ReviewApp
    from closecall.tui.decision_dialog import DecisionDialog
    from closecall.tui.queue_screen import QueueScreen

    monkeypatch.setenv("PGUSER", team.ann)
    study = _study_on(demo_study, team.url)
    notices: list[str] = []

    async def run() -> None:
        app = ReviewApp(study=study, login="analyst")
        async with app.run_test(size=(120, 40)) as pilot:
            for _ in range(400):
                if isinstance(app.screen, QueueScreen):
                    break
                await pilot.pause(0.05)
            assert app.session is not None and app.session.login == team.ann
            original = app.screen.notify

            def capture(message: str, **kw: Any) -> None:
                notices.append(message)
                original(message, **kw)

            app.screen.notify = capture  # type: ignore[method-assign]
            await pilot.press("d")
            for _ in range(100):
                if notices:
                    break
                await pilot.pause(0.05)
            assert not isinstance(app.screen, DecisionDialog)

    asyncio.run(run())
    assert notices and team.ann in notices[0]
    assert "GRANT closecall_reviewer" in notices[0] and "[review] reviewers" not in notices[0]
    assert ledger_entries(study.config) == []


def test_the_python_study_records_and_reads_a_database_ledger(
    team: Team, demo_config: Path, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    from closecall.api.study import Study

    monkeypatch.setenv("PGUSER", team.bob)
    config = _config(demo_config, team.url, f"api-{tmp_path.name}")
    try:
        study = Study.open(config)
        case = str(study.opened.snapshot.case_ids[7])
        entry = study.record(case, "defer", note="waiting for the file")
        shown = study.ledger.show()
        verified = study.ledger.verify()
    finally:
        config.unlink()
    assert entry.reviewer == team.bob and [e.hash for e in shown.entries] == [entry.hash]
    assert verified.ok and (verified.head_seq, verified.head_hash) == (1, entry.hash)


def test_a_database_user_without_a_role_lists_the_queue_without_review_states(
    team: Team, demo_config: Path, tmp_path: Path, cli: Any, monkeypatch: pytest.MonkeyPatch
) -> None:
    """``queue`` without --unreviewed reads the study, not the ledger: like a login outside
    [review] lists with a ledger file, a database user with no role gets the list without
    the review-state column (nothing from the ledger shows), and nothing is recorded."""
    config = _config(demo_config, team.url, f"eve-q-{tmp_path.name}")
    try:
        case = str(open_study(config).snapshot.case_ids[0])
        monkeypatch.setenv("PGUSER", team.alice)
        _ok(cli("record", case, "--action", "defer", "--config", str(config)))
        mine = json.loads(_ok(cli("queue", "--json", "--config", str(config))).out)
        monkeypatch.setenv("PGUSER", team.eve)
        res = _ok(cli("queue", "--json", "--config", str(config)))
    finally:
        config.unlink()
    theirs = json.loads(res.out)
    assert "Traceback" not in res.err and "error:" not in res.err
    rows = theirs["rows"] if isinstance(theirs, dict) else theirs
    alice_rows = mine["rows"] if isinstance(mine, dict) else mine
    assert [r["case_id"] for r in rows] == [r["case_id"] for r in alice_rows]  # the same list
    assert any(r.get("state") for r in alice_rows)  # alice sees review states
    assert not any(r.get("state") for r in rows)  # eve sees none of the ledger
    with open_pg_ledger(team.admin, inspect=True) as ledger:
        assert ledger.count() == 1


def test_keys_name_the_database_user_when_the_ledger_is_in_postgresql(
    team: Team, demo_config: Path, tmp_path: Path, cli: Any, monkeypatch: pytest.MonkeyPatch
) -> None:
    """An entry in a PostgreSQL ledger names the session user, so the key is registered
    under that name: the line ``keys init``/``keys show`` print lets the author record."""
    monkeypatch.setenv("CLOSECALL_KEYS", str(tmp_path / "keys"))
    monkeypatch.setenv("PGUSER", team.alice)
    config = _config(demo_config, team.url, f"keys-{tmp_path.name}")
    plain = _config(demo_config, str(tmp_path / "ledger.sqlite"), f"keys-sq-{tmp_path.name}")
    try:
        made = json.loads(_ok(cli("keys", "init", "--json", "--config", str(config))).out)
        assert made["login"] == team.alice != current_login()
        shown = _ok(cli("keys", "show", "--config", str(config))).out
        line = f'{team.alice} = "{made["public_key"]}"'
        assert line in shown and "database user" in shown
        # a study with its ledger in a file still registers the OS login
        assert f'{current_login()} = "' in _ok(cli("keys", "show", "--config", str(plain))).out
        # the owner registers the printed line; alice's recording is then signed and checks
        config.write_text(config.read_text() + f"\n[team.keys]\n{line}\n")
        case = str(open_study(config).snapshot.case_ids[0])
        _ok(cli("record", case, "--action", "uphold", "--config", str(config)))
        _ok(cli("ledger", "verify", "--config", str(config)))
    finally:
        config.unlink()
        plain.unlink()
    with open_pg_ledger(team.admin, inspect=True) as ledger:
        (entry,) = ledger.entries()
        assert entry.reviewer == team.alice and entry.signature is not None
        assert ledger.verify(keys={team.alice: made["public_key"]}).ok


def test_keys_refuse_before_making_a_key_when_the_database_is_down(
    demo_config: Path, tmp_path: Path, cli: Any, monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.setenv("CLOSECALL_KEYS", str(tmp_path / "keys"))
    config = _config(demo_config, "postgresql://127.0.0.1:1/reviews", f"keys-down-{tmp_path.name}")
    try:
        res = cli("keys", "init", "--config", str(config))
    finally:
        config.unlink()
    assert res.code == 2 and res.err.count("error:") == 1 and "127.0.0.1:1/reviews" in res.err
    assert "Traceback" not in res.err + res.out
    assert not (tmp_path / "keys").exists()  # nothing made: the name to register is unknown


def _neighbours(data: Any) -> list[dict[str, Any]]:
    """The similar past cases anywhere in ``explain --json``'s answer."""
    if isinstance(data, dict):
        if isinstance(data.get("neighbours"), list):
            return list(data["neighbours"])
        return [n for v in data.values() for n in _neighbours(v)]
    if isinstance(data, list):
        return [n for v in data for n in _neighbours(v)]
    return []


def test_a_database_user_without_a_role_explains_without_the_reviews_of_similar_cases(
    team: Team, demo_config: Path, tmp_path: Path, cli: Any, monkeypatch: pytest.MonkeyPatch
) -> None:
    """``explain`` reads the study; only its similar cases' reviews come from the ledger, and
    a database user with no role gets none of them (and no error), while a reviewer does."""
    config = _config(demo_config, team.url, f"eve-x-{tmp_path.name}")
    try:
        case = str(open_study(config).snapshot.case_ids[0])
        monkeypatch.setenv("PGUSER", team.alice)
        args = ("explain", case, "--json", "--config", str(config))
        near = _neighbours(json.loads(_ok(cli(*args)).out))
        assert near, "explain --json lists similar cases"
        with open_pg_ledger(team.url) as ledger:  # a review of a past case, as alice
            ledger.append(content("as a past case", case_id=near[0]["case_id"], action="defer"))
        seen = _neighbours(json.loads(_ok(cli(*args)).out))
        monkeypatch.setenv("PGUSER", team.eve)
        res = _ok(cli(*args))
    finally:
        config.unlink()
    assert seen[0]["review"]["action"] == "defer"  # alice sees the review
    assert "error:" not in res.err and "Traceback" not in res.err
    hidden = _neighbours(json.loads(res.out))
    assert [n["case_id"] for n in hidden] == [n["case_id"] for n in seen]
    assert all(n["review"] is None for n in hidden)  # eve sees none of the ledger
