"""docs/ledger.md's stand-alone verifier works on real ledgers, and catches tampering."""

from __future__ import annotations

import re
import sqlite3
import subprocess
import sys
from pathlib import Path

from ledger_helpers import content

from closecall.review.ledger import open_ledger

DOC = Path(__file__).resolve().parents[2] / "docs" / "ledger.md"


def _script() -> str:
    text = DOC.read_text(encoding="utf-8")
    marker = text.index("<!-- verifier:")
    match = re.search(r"```python\n(.*?)```", text[marker:], re.S)
    assert match is not None
    return match.group(1)


def _run(path: Path) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        [sys.executable, "-c", _script(), str(path)], capture_output=True, text=True, timeout=60
    )


def test_the_documented_verifier_agrees_with_closecall(tmp_path: Path) -> None:
    path = tmp_path / "l.sqlite"
    notes = ["plain", "ünïcödé ✓", "\x1b[31m\x00'; DROP TABLE entries;--", "x" * 100_000]
    with open_ledger(path) as ledger:
        for k, note in enumerate(notes):
            ledger.append(content(note, case_id=f"C-{k}"))
        head = ledger.verify()
    assert head.ok
    proc = _run(path)
    assert proc.returncode == 0, proc.stderr
    assert proc.stdout.split() == [str(len(notes)), head.head_hash]

    conn = sqlite3.connect(path, isolation_level=None)
    conn.execute("DROP TRIGGER entries_no_update")
    conn.execute("UPDATE entries SET note = 'plain.' WHERE seq = 1")
    conn.close()
    proc = _run(path)
    assert proc.returncode == 1 and "entry 1 was altered" in proc.stderr
