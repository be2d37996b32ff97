"""Plain ASCII mode: every cell the screens draw is rewritten to ASCII just before output.

For consoles whose fonts lack the block, box and arrow glyphs (the Linux virtual console,
serial lines): ``closecall review --ascii``, or automatic when ``TERM=linux``. The glyph table
is :data:`closecall.core.text.ASCII_GLYPHS` (one character for one, so columns stay put);
the filter runs on every line of every widget, Textual's own borders and scroll bars included,
so nothing non-ASCII reaches the terminal.
"""

from __future__ import annotations

import os
from collections.abc import Mapping
from functools import lru_cache

from rich.segment import Segment
from textual.color import Color
from textual.filter import LineFilter

from closecall.core.text import to_ascii

#: Terminals whose console font has no block, box or arrow glyphs (ASCII mode by default).
ASCII_TERMS = ("linux",)


def ascii_wanted(asked: bool | None, environ: Mapping[str, str] | None = None) -> bool:
    """ASCII mode when asked for, else when ``TERM`` names a glyph-poor console.

    Examples
    --------
    >>> ascii_wanted(None, {"TERM": "linux"}), ascii_wanted(None, {"TERM": "xterm-256color"})
    (True, False)
    >>> ascii_wanted(False, {"TERM": "linux"})
    False
    """
    if asked is not None:
        return asked
    env = os.environ if environ is None else environ
    return env.get("TERM", "") in ASCII_TERMS


#: ``±`` where the screens lay out their text: ASCII mode's glyph table keeps one cell per
#: glyph and would make it ``~`` (as ``≈``, ambiguous), so the screens write ``+/-`` themselves.
PLUS_MINUS = {False: "±", True: "+/-"}


def plus_minus(app: object) -> str:
    """``±``, or ``+/-`` when ``app`` draws plain ASCII (``ReviewApp.plain_ascii``)."""
    return PLUS_MINUS[bool(getattr(app, "plain_ascii", False))]


@lru_cache(4096)
def _plain(text: str) -> str:
    return to_ascii(text)


class AsciiFilter(LineFilter):
    """A line filter that leaves only ASCII characters (styles and cell widths unchanged)."""

    def apply(self, segments: list[Segment], background: Color) -> list[Segment]:
        return [
            seg if seg.control or seg.text.isascii() else Segment(_plain(seg.text), seg.style)
            for seg in segments
        ]
