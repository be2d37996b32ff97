"""Ledger anchors: the head (sequence number and hash) written where reviewers cannot write.

``closecall ledger anchor`` verifies the ledger and writes ``closecall-anchor SEQ HASH`` to the
file ``[team] anchor`` names (put it in a folder only the supervisor can write, docs/team.md).
``closecall ledger verify`` then checks, by default, that the chain still holds that entry: a
deleted, emptied or replaced ledger, or entries cut from the end, fail verify.
"""

from __future__ import annotations

import os
import re
import tempfile
from pathlib import Path

from closecall.core.errors import UserError
from closecall.setup.config import StudyConfig

_LINE = re.compile(r"closecall-anchor (\d+) ([0-9a-f]{64})\s*")


def anchor_path(config: StudyConfig, out: Path | None = None) -> Path:
    """Where the anchor goes: ``out`` or ``[team] anchor``."""
    path = out or config.team.anchor
    if path is None:
        raise UserError(
            f"{config.path}: no anchor file named under [team] anchor",
            'add anchor = "/srv/anchors/STUDY.anchor" under [team] (a folder only the '
            "supervisor can write), or name the anchor file to write",
        )
    return Path(path)


def read_anchor(path: Path) -> tuple[int, str] | None:
    """(seq, hash) from an anchor file; None when there is none.

    Raises
    ------
    UserError
        The file is there but does not hold an anchor.
    """
    try:
        text = path.read_text(encoding="ascii", errors="replace")
    except FileNotFoundError:
        return None
    except PermissionError:
        from closecall.core.shared import permission_error

        raise permission_error(path, "read") from None
    match = _LINE.fullmatch(text)
    if match is None:
        raise UserError(
            f"{path}: not a closecall anchor file (expected 'closecall-anchor SEQ HASH')",
            "restore it from the supervisor's copy, or write a new one with "
            "'closecall ledger anchor' after checking the ledger",
        )
    return int(match.group(1)), match.group(2)


def write_anchor(path: Path, seq: int, head: str) -> None:
    """Write the anchor atomically (temporary file, then rename), readable by everyone."""
    folder = path.parent
    try:
        fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", dir=folder)
        try:
            os.fchmod(fd, 0o644)
            os.write(fd, f"closecall-anchor {seq} {head}\n".encode("ascii"))
            os.fsync(fd)
        finally:
            os.close(fd)
        os.replace(tmp, path)
    except PermissionError:
        from closecall.core.shared import permission_error

        raise permission_error(folder, "write the anchor in") from None
    except FileNotFoundError:
        raise UserError(
            f"{folder}: no such folder for the anchor file",
            "make it first, writable by the supervisor only: "
            f"sudo install -d -m 755 -o SUPERVISOR {folder}",
        ) from None
    except OSError as exc:
        raise UserError(
            f"{folder}: cannot write the anchor file there ({exc.strerror})",
            "name an anchor file in a folder the supervisor can write",
        ) from None
