"""Who may do what with a study's ledger: the login of the process against [review] lists.

For a ledger file, the login is the OS account the process runs as, never something typed.
``reviewers`` limits who may record (and keep drafts and claims); ``analysts`` limits who may
read and export, and reviewers may always read. An empty list leaves that permission open to
every login. The file's own permissions (owner and group only) are the barrier underneath.

For a ledger in PostgreSQL the database decides: the login is the database session user, and
the config's lists do not apply (anyone can edit a copy of a config). Recording needs the
reviewer group role, reading the reviewer or analyst role; a user without it is refused with the
role to ask for (:meth:`.pg_store.PgLedger.check_access`).
"""

from __future__ import annotations

import os
import pwd

from closecall.core.errors import AccessDenied
from closecall.setup.config import ReviewConfig


def current_login() -> str:
    """The login name of this process's effective user (``uid:N`` if it has no name)."""
    uid = os.geteuid()
    try:
        return pwd.getpwuid(uid).pw_name
    except KeyError:
        return f"uid:{uid}"


def _database(review: ReviewConfig) -> str | None:
    """The ledger's PostgreSQL URL or conninfo, or None for a ledger file."""
    from closecall.review.ledger.backend import is_database

    return str(review.ledger) if is_database(review.ledger) else None


def _database_access(url: str, login: str | None = None) -> tuple[str, bool, bool]:
    """(session user, may record, may read) as the database says, for ``login`` if given."""
    from closecall.review.ledger.pg_store import open_pg_ledger

    with open_pg_ledger(url, inspect=True) as ledger:
        return ledger.access(login)


def ledger_login(review: ReviewConfig) -> str:
    """Who records: the database session user for a PostgreSQL ledger, else the OS login."""
    url = _database(review)
    return current_login() if url is None else _database_access(url)[0]


def may_record(review: ReviewConfig, login: str) -> bool:
    url = _database(review)
    if url is not None:
        return _database_access(url, login)[1]
    return not review.reviewers or login in review.reviewers


def may_read(review: ReviewConfig, login: str) -> bool:
    url = _database(review)
    if url is not None:
        return _database_access(url, login)[2]
    return not review.analysts or login in review.analysts or login in review.reviewers


def record_refusal(review: ReviewConfig, login: str, config_path: object) -> str:
    """Why ``login`` may not record, and whom to ask (the role for a database ledger)."""
    url = _database(review)
    if url is None:
        return (
            f"login '{login}' may not record reviews in this study (not in [review] reviewers "
            f"of {config_path}): reading only. Ask the study owner to add it to reviewers"
        )
    from closecall.review.ledger.pg_store import open_pg_ledger

    with open_pg_ledger(url, inspect=True) as ledger:
        role = ledger.role_name("reviewer_role")
        where = ledger.path
    return (
        f"database user '{login}' may not record reviews in {where} (not a member of the role "
        f"{role}): reading only. Ask the ledger database's owner to run: GRANT {role} TO "
        f'"{login}";'
    )


def require_record(review: ReviewConfig, config_path: object = "closecall.toml") -> str:
    """The login, if it may record; AccessDenied otherwise (for a database, naming the role)."""
    url = _database(review)
    if url is not None:
        from closecall.review.ledger.pg_store import open_pg_ledger

        with open_pg_ledger(url) as ledger:  # checks the reviewer role
            return ledger.session_user()
    login = current_login()
    if not may_record(review, login):
        raise AccessDenied(
            f"login '{login}' may not record reviews in this study "
            f"(not in [review] reviewers of {config_path})",
            f'ask the study owner to add "{login}" to [review] reviewers',
        )
    return login


def require_read(review: ReviewConfig, config_path: object = "closecall.toml") -> str:
    """The login, if it may read the ledger; AccessDenied otherwise (for a database, naming
    the roles)."""
    url = _database(review)
    if url is not None:
        from closecall.review.ledger.pg_store import open_pg_ledger

        with open_pg_ledger(url, readonly=True) as ledger:  # checks the reviewer/analyst role
            return ledger.session_user()
    login = current_login()
    if not may_read(review, login):
        raise AccessDenied(
            f"login '{login}' may not read this study's ledger "
            f"(not in [review] analysts or reviewers of {config_path})",
            f'ask the study owner to add "{login}" to [review] analysts',
        )
    return login
