"""What closecall creates in a study follows the study folder (core/shared.py, docs/team.md):
group only in a private or group-only folder, readable by others only in a team's folder set up
for readers (setgid and o+rx) — never because of the login's ordinary umask."""

from __future__ import annotations

import os
from collections.abc import Iterator
from pathlib import Path

import pytest

from closecall.core import shared


@pytest.fixture
def cli_umask() -> Iterator[None]:
    """As a closecall command runs: the study umask set, the test's own restored after."""
    before = os.umask(0o022)
    os.umask(before)
    shared.use_study_umask()
    try:
        yield
    finally:
        os.umask(before)


@pytest.mark.parametrize(
    ("mode", "readers", "umask"),
    [
        (0o755, False, 0o007),  # a private folder made with the ordinary umask: not shared
        (0o2770, False, 0o007),  # a team's folder closed to others
        (0o3775, True, 0o002),  # a team's folder open to the readers behind a gate
        (0o775, False, 0o007),  # open but not a team's (no setgid): stays group-only
    ],
)
def test_the_folder_decides(
    tmp_path: Path, cli_umask: None, mode: int, readers: bool, umask: int
) -> None:
    folder = tmp_path / "study"
    folder.mkdir()
    os.chmod(folder, mode)
    assert shared.has_readers(folder) is readers
    shared.adopt_study_folder(folder)
    current = os.umask(0)
    os.umask(current)
    assert current == umask
    assert shared.file_mode() == (0o664 if readers else 0o660)
    made = folder / "sub"
    made.mkdir()
    shared.share_dir(made)
    assert made.stat().st_mode & 0o7777 == (0o2775 if readers else 0o2770) & (
        0o7777 if mode & 0o2000 else 0o777
    )


def test_a_callers_own_umask_is_left_alone(tmp_path: Path, cli_umask: None) -> None:
    os.umask(0o022)  # e.g. a test harness restoring its own after a command
    folder = tmp_path / "study"
    folder.mkdir(mode=0o755)
    shared.adopt_study_folder(folder)
    current = os.umask(0o022)
    assert current == 0o022
