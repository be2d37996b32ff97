"""A study's team from Python: an author's signing key and the study folder's team set-up.

``closecall keys`` and ``closecall team`` are thin views over these functions (docs/team.md).
Each result is frozen, with ``to_dict()`` for JSON.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

from closecall.core.errors import UserError

if TYPE_CHECKING:
    from closecall.review.team import TeamProblem


@dataclass(frozen=True)
class KeyRegistration:
    """This account's public signing key, as the study owner registers it under
    ``[team.keys]`` of the study config.

    Attributes
    ----------
    login
        The name the key is registered under: the name the study's ledger knows the author by.
    name_is
        Why that name, in words (the OS login for a ledger file, the database user for a
        ledger in PostgreSQL).
    public_key
        Base64 of the Ed25519 public key.
    private_key
        Where the private key was written, when it was made just now (None otherwise).
    """

    login: str
    name_is: str
    public_key: str
    private_key: Path | None = None

    @property
    def line(self) -> str:
        """The line to add under ``[team.keys]``: ``login = "public key"``.

        Examples
        --------
        >>> KeyRegistration("alice", "your OS login", "qZ4x…=").line
        'alice = "qZ4x…="'
        """
        return f'{self.login} = "{self.public_key}"'

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready: ``login``, ``name_is``, ``private_key`` (when just made), ``public_key``.

        Examples
        --------
        >>> sorted(KeyRegistration("alice", "your OS login", "qZ4x…=").to_dict())
        ['login', 'name_is', 'public_key']
        """
        made = {} if self.private_key is None else {"private_key": str(self.private_key)}
        return {"login": self.login, "name_is": self.name_is, **made, "public_key": self.public_key}


@dataclass(frozen=True)
class TeamCheck:
    """What is wrong with a study folder's team set-up (docs/team.md), each with its fix.

    Attributes
    ----------
    problems
        Each ``where`` (a path or a login), ``message`` and ``fix`` (the command that fixes
        it); empty when the set-up is sound.
    """

    problems: tuple[TeamProblem, ...]

    @property
    def ok(self) -> bool:
        """True when nothing is wrong.

        Examples
        --------
        >>> TeamCheck(()).ok
        True
        """
        return not self.problems

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready: ``ok`` and the ``problems`` (as ``closecall team check --json``).

        Examples
        --------
        >>> TeamCheck(()).to_dict()
        {'ok': True, 'problems': []}
        """
        return {"ok": self.ok, "problems": [asdict(p) for p in self.problems]}


@dataclass(frozen=True)
class TeamSetUp:
    """What setting a study folder up for a team changed, and the check run after it.

    Attributes
    ----------
    changes
        Each change made, as the command that makes it (``chgrp reviewers /srv/grants``).
    check
        The team check of the folder afterwards.
    """

    changes: tuple[str, ...]
    check: TeamCheck

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready: ``changes``, then the check's ``ok`` and ``problems``.

        Examples
        --------
        >>> TeamSetUp(("chmod 2770 /srv/grants",), TeamCheck(())).to_dict()["changes"]
        ['chmod 2770 /srv/grants']
        """
        return {"changes": list(self.changes), **self.check.to_dict()}


def _key_name(config_path: str | Path) -> tuple[str, str]:
    """The name an author's key is registered under, and why that name (a short note).

    A study whose ledger is in PostgreSQL records as the database session user, so its key is
    registered under that name (connecting once to ask the server); a ledger file records as
    the OS login, which is also the answer when the default config is not here at all.
    """
    from closecall.review.ledger.access import current_login, ledger_login
    from closecall.review.ledger.backend import is_database
    from closecall.setup.config import CONFIG_NAME, load_config

    config = Path(config_path)
    found = config / CONFIG_NAME if config.is_dir() else config
    if not found.exists() and config == Path(CONFIG_NAME):
        return current_login(), (
            "your OS login; for a study whose ledger is in PostgreSQL the key is registered "
            "under your database user instead: run 'closecall keys show --config STUDY'"
        )
    review = load_config(config).review
    if is_database(review.ledger):
        return ledger_login(review), (
            "your database user: the study's ledger is in PostgreSQL, whose entries name the "
            "database session user"
        )
    return current_login(), "your OS login: the study's ledger is a file"


def make_signing_key(config_path: str | Path = "closecall.toml") -> KeyRegistration:
    """Make this account's Ed25519 key pair (once: an existing key is never overwritten) and
    return the line to register.

    The private key is written readable by the account only (mode 0600) under
    ``~/.config/closecall/keys/`` (or the folder ``CLOSECALL_KEYS`` names). The name is the one
    the study's ledger knows the author by (the server is asked for a ledger in PostgreSQL);
    with no config at the default ``closecall.toml``, the OS login. The name is settled before
    the key is made, so a config that cannot say it leaves nothing behind.

    Examples
    --------
    >>> made = make_signing_key("demo-study/closecall.toml")  # doctest: +SKIP
    >>> made.private_key, made.line  # doctest: +SKIP
    """
    from closecall.review.ledger.signing import create_key

    login, why = _key_name(config_path)
    private, public = create_key()
    return KeyRegistration(login, why, public, private)


def signing_key(config_path: str | Path = "closecall.toml") -> KeyRegistration:
    """This account's public signing key, as the line to register under ``[team.keys]``.

    Raises ``UserError`` when the account has no key yet (make one with
    :func:`make_signing_key`). The name is settled as :func:`make_signing_key` does.

    Examples
    --------
    >>> print(signing_key("demo-study/closecall.toml").line)  # doctest: +SKIP
    """
    from closecall.review.ledger.signing import key_folder, load_private, public_text

    key = load_private()
    if key is None:
        raise UserError(
            f"no signing key in {key_folder()} for this account", "run 'closecall keys init'"
        )
    public = public_text(key.public_key())
    login, why = _key_name(config_path)
    return KeyRegistration(login, why, public)


def check_team_setup(config_path: str | Path = "closecall.toml") -> TeamCheck:
    """Everything wrong with the study folder's group and modes, its files, the config's owner
    and mode and the reviewer/analyst lists (docs/team.md), each with the command that fixes
    it. Reads only.

    Examples
    --------
    >>> check_team_setup("/srv/grants/closecall.toml").ok  # doctest: +SKIP
    True
    """
    from closecall.review.team import check_team
    from closecall.setup.config import load_config

    return TeamCheck(tuple(check_team(load_config(Path(config_path)))))


def set_up_team(
    config_path: str | Path = "closecall.toml",
    *,
    group: str | None = None,
    readers: str | None = None,
) -> TeamSetUp:
    """Set the study folder up for a team (as its owner or root): everything in the writers'
    group with group read/write, folders setgid, the study folder sticky, the config writable
    by its owner only; then check it.

    Parameters
    ----------
    group
        The writers' group (None: the study folder's group).
    readers
        A group of logins that read without writing (analysts): the study becomes readable by
        others, and must already sit in a gate folder of this group (docs/team.md, Analysts).

    Examples
    --------
    >>> done = set_up_team("/srv/grants/closecall.toml", group="reviewers")  # doctest: +SKIP
    >>> done.changes[:2], done.check.ok  # doctest: +SKIP
    """
    from closecall.review.team import check_team, setup_team
    from closecall.setup.config import load_config

    config = load_config(Path(config_path))
    changes = setup_team(config, group, readers)
    return TeamSetUp(tuple(changes), TeamCheck(tuple(check_team(config))))
