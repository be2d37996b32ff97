"""closecall.api.team and closecall.api.ledger_database: the library gives what `closecall keys`,
`closecall team` and `closecall ledger setup|migrate` print, and refuses what they refuse
(the PostgreSQL side with a server: tests/ledger/test_ledger_pg.py)."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import pytest

from closecall import UserError
from closecall.api.ledger_database import migrate_ledger, set_up_ledger_database
from closecall.api.team import (
    TeamCheck,
    check_team_setup,
    make_signing_key,
    set_up_team,
    signing_key,
)
from closecall.review.ledger.access import current_login


@pytest.fixture
def config(tmp_path: Path) -> Path:
    """A study config whose ledger is a file (nothing fitted: keys and team need none)."""
    path = tmp_path / "study" / "closecall.toml"
    path.parent.mkdir()
    path.write_text(
        '[data]\nhistory = "h.csv"\nid = "id"\noutcome = "y"\nfavourable = 1\ngroup = "g"\n'
        '[review]\nledger = "ledger.sqlite"\n'
    )
    return path


@pytest.fixture
def keys(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> Path:
    folder = tmp_path / "keys"
    monkeypatch.setenv("CLOSECALL_KEYS", str(folder))
    return folder


def test_a_key_is_made_once_and_shown_as_the_command_shows_it(
    config: Path, keys: Path, cli: Any
) -> None:
    with pytest.raises(UserError, match="no signing key in") as err:
        signing_key(config)
    assert err.value.fix == "run 'closecall keys init'"
    made = make_signing_key(config)
    assert made.private_key == keys / "ed25519" and made.private_key.stat().st_mode & 0o777 == 0o600
    assert made.login == current_login() and "ledger is a file" in made.name_is
    shown = signing_key(config)
    assert (shown.login, shown.public_key, shown.private_key) == (made.login, made.public_key, None)
    assert shown.line == f'{made.login} = "{made.public_key}"'
    res = cli("keys", "show", "--json", "--config", str(config))
    assert res.code == 0 and json.loads(res.out) == shown.to_dict()
    assert list(made.to_dict()) == ["login", "name_is", "private_key", "public_key"]
    with pytest.raises(UserError, match="a key already exists"):
        make_signing_key(config)
    assert signing_key(config).public_key == made.public_key  # never overwritten


def test_without_a_config_the_key_is_named_by_the_os_login(
    tmp_path: Path, keys: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.chdir(tmp_path)  # no closecall.toml here
    made = make_signing_key()
    assert made.login == current_login() and "keys show --config STUDY" in made.name_is


def test_the_team_check_is_the_commands(config: Path, cli: Any) -> None:
    check = check_team_setup(config)
    assert isinstance(check, TeamCheck) and not check.ok  # a private tmp folder: no team yet
    res = cli("team", "check", "--json", "--config", str(config))
    assert res.code == 1 and json.loads(res.out) == check.to_dict()
    assert {p.where for p in check.problems} >= {str(config.parent)}


@pytest.mark.parametrize("option", ["group", "readers"])
def test_an_unknown_group_is_refused_by_name(config: Path, cli: Any, option: str) -> None:
    before = config.parent.stat().st_mode
    with pytest.raises(UserError) as err:
        set_up_team(config, **{option: "no-such-group-xq"})
    assert err.value.message == "no group no-such-group-xq on this server"
    res = cli("team", "setup", f"--{option}", "no-such-group-xq", "--config", str(config))
    assert res.code == 2 and "error: no group no-such-group-xq on this server" in res.err
    assert "Traceback" not in res.err and config.parent.stat().st_mode == before


def test_a_ledger_database_must_be_named_by_a_url(tmp_path: Path, cli: Any) -> None:
    with pytest.raises(UserError, match="notaurl: not a PostgreSQL URL"):
        set_up_ledger_database("notaurl")
    with pytest.raises(UserError, match="notaurl: not a PostgreSQL URL"):
        migrate_ledger(tmp_path / "ledger.sqlite", "notaurl")
    res = cli("ledger", "setup", "notaurl")
    assert res.code == 2 and res.err.count("error:") == 1 and "Traceback" not in res.err
    assert "notaurl: not a PostgreSQL URL" in res.err and "postgresql://HOST/DB" in res.err
    res = cli("ledger", "migrate", "--from", str(tmp_path / "ledger.sqlite"), "--to", "notaurl")
    assert res.code == 2 and "--to notaurl: not a PostgreSQL URL" in res.err
