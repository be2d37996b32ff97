"""Checks on the user's files, before anything reads them (no heavy imports here)."""

from __future__ import annotations

import os
from pathlib import Path

from closecall.core.errors import UserError


def require_file(path: Path) -> None:
    """Refuse a data path that is missing, a folder, or unreadable."""
    from closecall.core.shared import permission_error

    try:
        os.stat(path)
    except PermissionError:  # a folder on the way this login may not pass through
        raise permission_error(path, "read") from None
    except OSError:
        raise UserError(f"{path}: file not found", "check the path in the study config") from None
    if path.is_dir():
        raise UserError(f"{path}: is a folder, not a data file", "name a .csv or .parquet file")
    if not os.access(path, os.R_OK):
        raise permission_error(path, "read")
