"""Errors a user can cause. The CLI prints them as one message and exits with code 2.

A :class:`UserError` carries the problem and a fix. The fix is either plain advice or a
structured :class:`Fix` naming the engine's field (a parameter or setting) and what it may be:
each view words it its own way (the CLI as a flag, the review screen as its control), so engine
messages never name a command-line flag.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass


@dataclass(frozen=True)
class Fix:
    """What to change, for any view to word: a field and the values it may take.

    Parameters
    ----------
    field
        The engine's name of the parameter or setting (``n_boot``, ``reason``, ``note``).
    allowed
        The values it may take, when they are few.
    range
        The values it may take in words (``a whole number from 100 to 1000000``).
    example
        One valid value.
    hint
        Further advice that names no control.
    switch
        The field is on or off and the fix is to turn it on (``force``, ``allow_empty``).
    value
        The one value to give it (``supersedes`` ``3``).
    command
        The study step that takes the field, when the fix is to run it again (``fit``).
    config
        The study config that step runs on, when the view needs to name it.
    purpose
        What the change does, worded after it (``to replace it``).
    alternative
        Another way out, worded after this one (``or …``).
    """

    field: str
    allowed: tuple[str, ...] = ()
    range: str | None = None
    example: str | None = None
    hint: str | None = None
    switch: bool = False
    value: str | None = None
    command: str | None = None
    config: str | None = None
    purpose: str | None = None
    alternative: Fix | None = None

    def words(self, name_of: Callable[[str], str] | None = None) -> str:
        """The fix in words, each field named by ``name_of`` (the engine's names by default).

        A view words a step to run again (``command``) its own way; here it is the library call.

        Examples
        --------
        >>> Fix("n_boot", range="a whole number ≥ 100", example="1000").words(lambda f: "--boot")
        'give --boot a whole number ≥ 100, e.g. 1000'
        >>> Fix("force", switch=True, purpose="to replace it").words()
        'pass force=True to replace it'
        >>> Fix("refit", switch=True, command="fit").words()
        'call Study.fit(refit=True)'
        """
        label = name_of(self.field) if name_of else self.field
        if self.command:
            setting = f"{self.field}=True" if self.switch else ""
            study = f"Study.open({self.config!r})" if self.config else "Study"
            text = f"call {study}.{self.command}({setting})"
        elif self.switch:
            text = f"pass {label}" if name_of else f"pass {self.field}=True"
        elif self.value is not None:
            text = f"pass {label} {self.value}" if name_of else f"pass {self.field}={self.value}"
        elif self.allowed:
            text = f"give {label} one of: {', '.join(self.allowed)}"
        elif self.range:
            text = f"give {label} {self.range}"
        else:
            text = f"give {label}"
        return self.finish(text, lambda alt: alt.words(name_of))

    def finish(self, text: str, word_alternative: Callable[[Fix], str]) -> str:
        """``text`` (the change, worded by a view) followed by the example, purpose, hint and
        the alternative (worded by ``word_alternative``)."""
        if self.example:
            text += f", e.g. {self.example}"
        if self.purpose:
            text += f" {self.purpose}"
        if self.alternative is not None:
            text += f"; or {word_alternative(self.alternative)}"
        if self.hint:
            text += f"; {self.hint}"
        return text


class UserError(Exception):
    """A problem with the user's input: file, column, row or option, and how to fix it.

    Parameters
    ----------
    message
        What is wrong, naming the file, column or row.
    fix
        What the user should do about it: plain text, or a :class:`Fix` each view words.
    about
        The field the message is about (named before it: ``n_boot: 2 is out of range``), so
        that a view can name it its own way.
    """

    exit_code = 2

    def __init__(self, message: str, fix: str | Fix | None = None, *, about: str | None = None):
        self.problem = message
        self.about = about
        self.remedy = fix if isinstance(fix, Fix) else None
        self.message = self.worded_message()
        self.fix = fix.words() if isinstance(fix, Fix) else fix
        super().__init__(self.message)

    def worded_message(self, name_of: Callable[[str], str] | None = None) -> str:
        """The message, with the field it is about named by ``name_of`` (engine names)."""
        if self.about is None:
            return self.problem
        return f"{name_of(self.about) if name_of else self.about}: {self.problem}"

    def worded_fix(self, name_of: Callable[[str], str] | None = None) -> str | None:
        """The fix, with its field named by ``name_of`` (engine names by default)."""
        if self.remedy is None:
            return self.fix
        return self.remedy.words(name_of)

    def __str__(self) -> str:
        return self.message if not self.fix else f"{self.message}\n  fix: {self.fix}"


class AccessDenied(UserError):
    """The login is not allowed to do this in this study."""
