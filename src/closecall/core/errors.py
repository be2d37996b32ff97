"""Errors a user can cause. The CLI prints them as one message and exits with code 2."""

from __future__ import annotations


class UserError(Exception):
    """A problem with the user's input: file, column, row or option, and how to fix it.

    Parameters
    ----------
    message
        What is wrong, naming the file, column or row.
    fix
        What the user should do about it.
    """

    exit_code = 2

    def __init__(self, message: str, fix: str | None = None) -> None:
        super().__init__(message)
        self.message = message
        self.fix = fix

    def __str__(self) -> str:
        return self.message if not self.fix else f"{self.message}\n  fix: {self.fix}"


class AccessDenied(UserError):
    """The login is not allowed to do this in this study."""
