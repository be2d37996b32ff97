"""Checks on the user's files, before anything reads them (no heavy imports here)."""

from __future__ import annotations

import os
from pathlib import Path

from closecall.core.errors import UserError


def require_file(path: Path) -> None:
    """Refuse a data path that is missing, a folder, or unreadable."""
    if not path.exists():
        raise UserError(f"{path}: file not found", "check the path in the study config")
    if path.is_dir():
        raise UserError(f"{path}: is a folder, not a data file", "name a .csv or .parquet file")
    if not os.access(path, os.R_OK):
        raise UserError(f"{path}: permission denied", "make the file readable for your login")
