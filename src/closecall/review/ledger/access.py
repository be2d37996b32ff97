"""Who may do what with a study's ledger: the login of the process against [review] lists.

The login is the OS account the process runs as, never something typed. ``reviewers`` limits
who may record (and keep drafts and claims); ``analysts`` limits who may read and export, and
reviewers may always read. An empty list leaves that permission open to every login. The file's
own permissions (owner and group only) are the barrier underneath.
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


def may_record(review: ReviewConfig, login: str) -> bool:
    return not review.reviewers or login in review.reviewers


def may_read(review: ReviewConfig, login: str) -> bool:
    return not review.analysts or login in review.analysts or login in review.reviewers


def require_record(review: ReviewConfig, config_path: object = "closecall.toml") -> str:
    """The login, if it may record; AccessDenied otherwise."""
    login = current_login()
    if not may_record(review, login):
        raise AccessDenied(
            f"login '{login}' may not record reviews in this study "
            f"(not in [review] reviewers of {config_path})",
            f'ask the study owner to add "{login}" to [review] reviewers',
        )
    return login


def require_read(review: ReviewConfig, config_path: object = "closecall.toml") -> str:
    """The login, if it may read the ledger; AccessDenied otherwise."""
    login = current_login()
    if not may_read(review, login):
        raise AccessDenied(
            f"login '{login}' may not read this study's ledger "
            f"(not in [review] analysts or reviewers of {config_path})",
            f'ask the study owner to add "{login}" to [review] analysts',
        )
    return login
