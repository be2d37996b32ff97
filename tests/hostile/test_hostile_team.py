"""Hostile inputs for a team sharing one study (issue 16): one case per bug that issue's work
found, each on a fresh copy of the corpus study (``study_dir``: 600 cases, two entries).

Without OS accounts (CI runs as root): file modes are read back from what closecall created,
the review screen is driven by Textual's pilot, a colleague's forged entry is written by hand
as any group member could (docs/ledger.md's recipe). The cases with real accounts and SSH are
in tests/team/.
"""

from __future__ import annotations

import asyncio
import base64
import json
import os
import re
import sqlite3
import stat
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest
from hostile_helpers import Cli, assert_refused, assert_unchanged, study_digests

from closecall.review.ledger import current_login


@pytest.fixture
def umask_022() -> Iterator[None]:
    """The ordinary login umask for the test, the test runner's own restored after."""
    before = os.umask(0o022)
    try:
        yield
    finally:
        os.umask(before)


def _config(study_dir: Path) -> Path:
    return study_dir / "closecall.toml"


def _set_review(study_dir: Path, **lists: list[str]) -> None:
    """Replace ``reviewers = […]`` / ``analysts = […]`` in the study's config."""
    path = _config(study_dir)
    text = path.read_text()
    for key, logins in lists.items():
        line = f"{key} = {json.dumps(logins)}"
        text, n = re.subn(rf"^{key} = \[[^\]]*\]", line, text, flags=re.M)
        assert n == 1, key
    path.write_text(text)


def _mode(path: Path) -> int:
    return stat.S_IMODE(path.stat().st_mode)


def _case_ids(study_dir: Path, n: int) -> list[str]:
    from closecall.suite.opening import open_study

    return [str(c) for c in open_study(_config(study_dir)).snapshot.case_ids[-n:]]


class TestSharedFiles:
    """What closecall creates in a team's folder is the group's, whatever the login's umask."""

    def test_a_refit_snapshot_folder_is_group_shared_under_umask_077(
        self, study_dir: Path, cli: Cli
    ) -> None:
        # before: every snapshot folder was made 0700 (mkdtemp), so the second reviewer's
        # first `queue` after anyone's refit died with a PermissionError traceback
        os.chmod(study_dir, 0o2770)  # a team's folder: group rwx, setgid
        cache = study_dir / ".closecall"
        old = {(p, p.stat().st_ino) for p in cache.rglob("*")}  # a refit may reuse a path
        before = os.umask(0o077)
        try:
            res = cli("fit", "--refit", "--config", str(_config(study_dir)))
        finally:
            os.umask(before)
        assert res.code == 0, res
        made = [p for p in cache.rglob("*") if (p, p.stat().st_ino) not in old]
        folders = [p for p in made if p.is_dir()]
        assert folders and any(p.is_file() for p in made)  # the new snapshot and its files
        for folder in folders:
            assert _mode(folder) & 0o070 == 0o070, (folder, oct(_mode(folder)))
            # setgid follows the folder it is made in (the team's group carries on down)
            inherited = bool(_mode(folder.parent) & stat.S_ISGID)
            assert bool(_mode(folder) & stat.S_ISGID) == inherited, folder
        for path in made:
            if path.is_file():
                assert _mode(path) & 0o060 == 0o060, (path, oct(_mode(path)))

    def test_the_library_leaves_its_callers_umask_alone(
        self, study_dir: Path, umask_022: None
    ) -> None:
        # before: the study umask (007) a command sets stayed in the process after an
        # in-process call, and later files (a test's home folder) became untraversable
        from closecall import Study

        study = Study.open(_config(study_dir))
        study.record(_case_ids(study_dir, 1)[0], action="uphold")
        study.queue()
        current = os.umask(0o022)
        assert current == 0o022, oct(current)

    def test_a_library_fit_makes_cache_folders_the_group_can_write(
        self, study_dir: Path, umask_022: None
    ) -> None:
        # before: a notebook (umask 022) fitting a team's study made .closecall and its
        # snapshots folder 2755: the next member's refit could not write a snapshot
        import shutil

        from closecall import Study

        os.chmod(study_dir, 0o2770)  # a team's folder: group rwx, setgid
        shutil.rmtree(study_dir / ".closecall")
        Study.open(_config(study_dir))  # fits: no snapshot left
        folders = [study_dir / ".closecall", study_dir / ".closecall" / "snapshots"]
        for folder in folders:
            assert _mode(folder) & 0o070 == 0o070, (folder, oct(_mode(folder)))
            assert _mode(folder) & stat.S_ISGID, folder
            assert _mode(folder) & 0o007 == 0, folder  # nothing for others in a group study
        assert os.umask(0o022) == 0o022  # the caller's umask untouched


class TestClaims:
    def test_a_frozen_old_screen_leaves_the_live_screens_claim(self, study_dir: Path) -> None:
        # before: a review screen that finally exited deleted the claim that a newer screen
        # of the same login held on the same case (claims carry no screen id)
        from closecall.review.decisions import active_claims, claim_case, release_claim
        from closecall.suite.opening import open_study

        study = open_study(_config(study_dir))
        case = _case_ids(study_dir, 1)[0]
        claim_case(study, case, "old-frozen-screen")
        claim_case(study, case, "live-screen")  # the reviewer opened the case again
        release_claim(study, case, "old-frozen-screen")  # the frozen one exits at last
        claims = active_claims(study).get(case, [])
        assert [c.instance for c in claims] == ["live-screen"]
        release_claim(study, case, "live-screen")
        assert case not in active_claims(study)


class TestAccess:
    def test_an_analyst_pressing_d_gets_a_message_not_a_crash(self, study_dir: Path) -> None:
        # before: the decision dialog opened and its recording raised a traceback
        from closecall.review.decisions import ledger_entries
        from closecall.suite.opening import open_study
        from closecall.tui.app import ReviewApp
        from closecall.tui.decision_dialog import DecisionDialog
        from closecall.tui.queue_screen import QueueScreen

        _set_review(study_dir, reviewers=["someone-else"], analysts=[current_login()])
        study = open_study(_config(study_dir))
        before = len(ledger_entries(study.config))
        seen: list[str] = []

        async def run() -> None:
            app = ReviewApp(study=study, login="analyst")
            async with app.run_test(size=(80, 24)) as pilot:
                for _ in range(400):
                    if isinstance(app.screen, QueueScreen):
                        break
                    await pilot.pause(0.05)
                await pilot.pause(0.3)
                await pilot.press("d")
                await pilot.pause(0.5)
                seen.append(type(app.screen).__name__)
                seen.append(str(app.screen.query_one("#status").render()))
                assert app.is_running

        asyncio.run(run())
        assert seen[0] != DecisionDialog.__name__
        assert "may not record" in seen[1], seen
        assert len(ledger_entries(study.config)) == before

    def test_an_analyst_recording_on_the_command_line_is_refused(
        self, study_dir: Path, cli: Cli
    ) -> None:
        _set_review(study_dir, reviewers=["someone-else"], analysts=[current_login()])
        assert cli("queue", "--config", str(_config(study_dir))).code == 0  # cache the digests
        digests = study_digests(study_dir)
        case = _case_ids(study_dir, 1)[0]
        res = cli("record", case, "--action", "uphold", "--config", str(_config(study_dir)))
        assert_refused(res, current_login())
        assert_unchanged(digests, study_dir, allow_new=(".closecall",))


def _anchor(study_dir: Path, cli: Cli) -> Path:
    """Anchor the ledger's head in a file the config names ([team] anchor)."""
    anchor = study_dir.parent / "anchors" / "head"
    anchor.parent.mkdir()
    with _config(study_dir).open("a") as f:
        f.write(f'\n[team]\nanchor = "{anchor}"\n')
    res = cli("ledger", "anchor", "--config", str(_config(study_dir)))
    assert res.code == 0, res
    assert anchor.read_text().startswith("closecall-anchor 2 ")
    return anchor


def _verify(study_dir: Path, cli: Cli, *extra: str) -> Any:
    return cli("ledger", "verify", "--config", str(_config(study_dir)), *extra)


class TestLosingTheLedger:
    """With a head anchor kept apart, a lost ledger fails verify, even with --allow-empty."""

    def _companions_gone(self, study_dir: Path) -> None:
        for name in ("ledger.sqlite-wal", "ledger.sqlite-shm"):
            (study_dir / name).unlink(missing_ok=True)

    def test_a_deleted_ledger(self, study_dir: Path, cli: Cli) -> None:
        # before: "0 entries, chain intact", and the next record started over at entry 1
        _anchor(study_dir, cli)
        (study_dir / "ledger.sqlite").unlink()
        self._companions_gone(study_dir)
        for extra in ((), ("--allow-empty",)):
            res = _verify(study_dir, cli, *extra)
            assert res.code == 1, res
            assert "anchor" in (res.out + res.err)

    def test_an_emptied_ledger(self, study_dir: Path, cli: Cli) -> None:
        _anchor(study_dir, cli)
        self._companions_gone(study_dir)
        (study_dir / "ledger.sqlite").write_bytes(b"")
        res = _verify(study_dir, cli, "--allow-empty")
        assert res.code == 1, res

    def test_a_ledger_replaced_by_a_fresh_one(self, study_dir: Path, cli: Cli) -> None:
        _anchor(study_dir, cli)
        (study_dir / "ledger.sqlite").unlink()
        self._companions_gone(study_dir)
        case = _case_ids(study_dir, 1)[0]
        # a new chain of its own: intact by itself, but it does not hold the anchored head
        from closecall.review.decisions import record_review
        from closecall.suite.opening import open_study

        study = open_study(_config(study_dir))
        for note in ("one", "two", "three"):
            record_review(study, case, action="defer", reason=None, note=note)
        res = _verify(study_dir, cli)
        assert res.code == 1, res


def _forge(path: Path, reviewer: str, key: Any) -> int:
    """Append by hand an entry in ``reviewer``'s name with a correct hash, signed with ``key``
    (what any group member with write access to the file can do, following docs/ledger.md)."""
    from closecall.review.ledger import entry_hash
    from closecall.review.ledger.entry import canonical_json, signed_message

    conn = sqlite3.connect(path, isolation_level=None)
    conn.row_factory = sqlite3.Row
    last = dict(conn.execute("SELECT * FROM entries ORDER BY seq DESC LIMIT 1").fetchone())
    fields: dict[str, Any] = {
        name: last[name]
        for name in ("format", "case_id", "snapshot_id", "current_snapshot_id",
                     "reference_model", "reference_decision", "reference_margin")
    }  # fmt: skip
    fields.update(
        seq=last["seq"] + 1,
        time="2026-12-03T10:00:00.000000Z",
        reviewer=reviewer,
        decisions=json.loads(last["decisions"]),
        action="override-unfavourable",
        reason="other",
        note="forged",
        supersedes=None,
        prev_hash=last["hash"],
    )
    fields = {k: fields[k] for k in (*last,) if k in fields}  # the file's column order
    fields["signature"] = base64.b64encode(key.sign(signed_message(fields))).decode()
    fields["hash"] = entry_hash(fields)
    row = {**fields, "decisions": canonical_json(fields["decisions"]).decode()}
    cols = list(row)
    conn.execute(
        f"INSERT INTO entries ({', '.join(cols)}) VALUES ({', '.join('?' for _ in cols)})",
        [row[c] for c in cols],
    )
    conn.close()
    return int(fields["seq"])


class TestForgery:
    def test_a_chain_valid_entry_in_a_colleagues_name_fails_verify(
        self, study_dir: Path, cli: Cli, monkeypatch: pytest.MonkeyPatch
    ) -> None:
        # before: any group member could append a correctly hashed entry in a colleague's
        # name and `ledger verify` reported "chain intact"
        from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey

        from closecall.review.ledger.signing import public_text

        monkeypatch.setenv("CLOSECALL_KEYS", str(study_dir.parent / "my-keys"))
        mine = cli("keys", "init", "--json")
        assert mine.code == 0, mine
        colleague = Ed25519PrivateKey.generate()
        keys = {current_login(): json.loads(mine.out)["public_key"],
                "colleague": public_text(colleague.public_key())}  # fmt: skip
        with _config(study_dir).open("a") as f:
            f.write("\n[team.keys]\n" + "".join(f'"{k}" = "{v}"\n' for k, v in keys.items()))
        case = _case_ids(study_dir, 1)[0]
        res = cli("record", case, "--action", "uphold", "--config", str(_config(study_dir)))
        assert res.code == 0, res
        assert _verify(study_dir, cli).code == 0  # signed by its author: it verifies
        seq = _forge(study_dir / "ledger.sqlite", "colleague", Ed25519PrivateKey.generate())
        res = _verify(study_dir, cli)
        assert res.code == 1, res
        assert f"entry {seq} claims reviewer colleague" in res.out, res


class TestTeamSetup:
    def test_readers_on_a_folder_above_that_is_not_a_gate(
        self, study_dir: Path, cli: Cli, tmp_path: Path
    ) -> None:
        # before: setup gave the folder above the study (it could be someone's home) to the
        # readers' group and opened it to them
        import grp

        home = tmp_path / "home-of-someone"
        home.mkdir(mode=0o700)
        study = home / "study"
        study_dir.rename(study)
        readers = grp.getgrgid(os.getgid()).gr_name
        before = (home.stat().st_mode, home.stat().st_gid)
        digests = study_digests(study)
        res = cli("team", "setup", "--readers", readers, "--config", str(study / "closecall.toml"))
        assert_refused(res, str(home), "is not a gate for the readers")
        assert (home.stat().st_mode, home.stat().st_gid) == before
        assert_unchanged(digests, study)
