"""closecall.core.text: the one sanitiser and number formats shared by every view."""

from __future__ import annotations

import math

import pytest

from closecall.core.text import percent, safe_text, share_of, signed, sparkline


@pytest.mark.parametrize(
    ("value", "digits", "shown"),
    [
        (0.0, 2, "0.00"),
        (-0.0, 2, "0.00"),
        (0.004, 2, "0.00"),  # rounds to zero: no sign, it shows no side of the threshold
        (-0.004, 2, "0.00"),
        (-0.0004, 3, "0.000"),
        (0.005001, 2, "+0.01"),
        (-0.4242, 2, "−0.42"),
        (1.5, 1, "+1.5"),
    ],
)
def test_signed_numbers_never_show_a_signed_zero(value: float, digits: int, shown: str) -> None:
    assert signed(value, digits) == shown


def test_signed_handles_missing_values_and_an_ascii_minus() -> None:
    assert signed(math.nan) == signed(math.inf) == signed(None) == "—"
    assert signed(-2.25, 1, minus="-") == "-2.2"  # half to even, as Python's format (from memory)


def test_percentages_and_shares() -> None:
    assert percent(0.4213) == "42%" and percent(0.4213, 1) == "42.1%"
    assert percent(math.nan) == "—"
    assert share_of(21, 50) == "42%" and share_of(1, 400) == "0.2%" and share_of(0, 0) == "—"


def test_sparkline_levels_are_eighths_rounded_up() -> None:
    assert sparkline([0, 1, 2, 4, 8], 8) == " ▁▂▄█"
    assert sparkline([3, 5], 0) == "  "


def test_safe_text_escapes_controls_and_bidi_but_keeps_line_feeds_on_request() -> None:
    assert safe_text("a\x1b[2Jb\u202e") == "a\\x1b[2Jb\\u202e"
    assert safe_text("one\ntwo\r", multiline=True) == "one\ntwo\\r"
