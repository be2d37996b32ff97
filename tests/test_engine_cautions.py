"""The cautions travel with the tool: --help and the README carry every one of them."""

from __future__ import annotations

import re
from pathlib import Path

import pytest

from closecall.core.cautions import CAUTIONS

README = Path(__file__).resolve().parent.parent / "README.md"


def _flat(text: str) -> str:
    """Whitespace folded, and words a terminal wrapped at a hyphen joined again."""
    return re.sub(r"-\s+", "-", re.sub(r"\s+", " ", text))


@pytest.mark.parametrize("caution", CAUTIONS)
def test_help_and_readme_carry_the_cautions(cli, caution: str) -> None:  # type: ignore[no-untyped-def]
    res = cli("--help")
    assert res.code == 0
    assert _flat(caution) in _flat(res.out)
    assert _flat(caution) in _flat(README.read_text())
