"""Shared pieces of the hostile-input corpus (issue 10).

Every case in tests/hostile/ asserts the same contract for a refusal: exit code 2, one message
that starts with ``error:`` and carries a ``fix:``, no traceback, and every file of the study
byte-identical afterwards. Numbers checks compare with an independent refit (scikit-learn or
statsmodels), named beside the check.
"""

from __future__ import annotations

import hashlib
import shutil
import sqlite3
from collections.abc import Callable
from pathlib import Path
from typing import Any

Digests = dict[str, str]


def _ledger_rows(path: Path) -> str:
    """Digest of every row of every table of a SQLite file (its logical content)."""
    try:
        conn = sqlite3.connect(f"file:{path}?mode=ro", uri=True)
        try:
            dump = "\n".join(conn.iterdump())
        finally:
            conn.close()
    except sqlite3.Error as exc:  # damaged on purpose by some cases: the bytes still count
        dump = f"unreadable: {exc}"
    return hashlib.sha256(dump.encode()).hexdigest()


def study_digests(root: Path) -> Digests:
    """SHA-256 of every file below root (relative path -> digest), the cache included.

    SQLite's own companions (``-wal``, ``-shm``) come and go as a reader opens the ledger, so
    they are left out; the ledger's logical content (every row) is added as ``NAME#rows``.
    """
    out: Digests = {}
    for path in sorted(root.rglob("*")):
        if not path.is_file() or path.is_symlink():
            continue
        rel = str(path.relative_to(root))
        if rel.endswith(("-wal", "-shm")):
            continue
        out[rel] = hashlib.sha256(path.read_bytes()).hexdigest()
        if path.suffix == ".sqlite":
            out[rel + "#rows"] = _ledger_rows(path)
    return out


def assert_unchanged(before: Digests, root: Path, *, allow_new: tuple[str, ...] = ()) -> None:
    """Every file that was there is byte-identical; new files only under ``allow_new`` prefixes."""
    after = study_digests(root)
    changed = [k for k, v in before.items() if after.get(k) != v]
    assert not changed, f"study files changed or vanished: {changed}"
    new = [k for k in after if k not in before and not k.startswith(allow_new)]
    assert not new, f"unexpected new files: {new}"


def assert_refused(res: Any, *needles: str) -> str:
    """Exit 2, one ``error:`` message with a ``fix:``, no traceback, each needle in it."""
    assert res.code == 2, res
    text = res.err
    assert "Traceback" not in text and "Traceback" not in res.out, res
    assert text.startswith("error:"), res
    assert text.count("error:") == 1, res
    assert "fix:" in text, res
    for needle in needles:
        assert needle in text, (needle, text)
    return str(text)


def copy_study(src: Path, dst: Path) -> Path:
    """A private copy of a study folder (config, data, cache and ledger); returns its config."""
    shutil.copytree(src, dst, symlinks=True)
    return dst / "closecall.toml"


Cli = Callable[..., Any]
