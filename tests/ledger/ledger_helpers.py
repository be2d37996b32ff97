"""Shared pieces for the ledger tests: a small hand-made study, entry contents, digests."""

from __future__ import annotations

import hashlib
import sqlite3
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from closecall.core.errors import UserError
from closecall.review.ledger import EntryContent
from closecall.setup.config import StudyConfig, parse_config

CASES = ("A-1", "A-2", "A-3", "B-1", "B-2")


@dataclass
class FakeSnapshot:
    """Just the snapshot surface the review engine reads."""

    id: str = "feedc0ffee000001"
    reference: str = "pooled"

    @property
    def model_names(self) -> list[str]:
        return ["pooled", "unaware", "split"]

    def case_index(self, case_id: str) -> int:
        if case_id not in CASES:
            raise UserError(f"case '{case_id}' is not among the {len(CASES)} cases")
        return CASES.index(case_id)

    def decisions_for(self, i: int) -> dict[str, dict[str, Any]]:
        m = 0.25 * (i - 2)
        margins = {"pooled": m, "unaware": m + 0.1, "split": -m}
        return {
            k: {"margin": v, "decision": "favourable" if v > 0 else "unfavourable"}
            for k, v in margins.items()
        }


@dataclass
class FakeStudy:
    config: StudyConfig
    snapshot: FakeSnapshot


def make_config(folder: Path, **review: Any) -> StudyConfig:
    """A StudyConfig whose ledger is folder/ledger.sqlite; ``review`` overrides [review] keys."""
    raw = {
        "data": {
            "history": "history.csv",
            "id": "id",
            "outcome": "y",
            "favourable": 1,
            "group": "g",
        },
        "review": {"ledger": "ledger.sqlite", **review},
    }
    return parse_config(raw, folder / "closecall.toml")


def make_study(folder: Path, **review: Any) -> FakeStudy:
    return FakeStudy(make_config(folder, **review), FakeSnapshot())


def content(note: str = "checked", *, case_id: str = "A-1", action: str = "uphold") -> EntryContent:
    return EntryContent(
        reviewer="tester",
        case_id=case_id,
        snapshot_id="feedc0ffee000001",
        current_snapshot_id=None,
        reference_model="pooled",
        reference_decision="favourable",
        reference_margin=0.125,
        decisions={"pooled": {"decision": "favourable", "margin": 0.125}},
        action=action,
        reason=None,
        note=note,
    )


def entries_digest(path: Path) -> str:
    """SHA-256 over every stored row of the entries table (or a marker if there is no file).

    Reads through SQLite so committed WAL content counts, without writing to the file.
    """
    if not path.exists():
        return "no-file"
    conn = sqlite3.connect(f"file:{path}?mode=ro", uri=True)
    try:
        h = hashlib.sha256()
        for row in conn.execute("SELECT * FROM entries ORDER BY seq"):
            h.update(repr(row).encode("utf-8", "surrogateescape"))
        drafts = conn.execute("SELECT COUNT(*) FROM drafts").fetchone()[0]
        h.update(f"drafts={drafts}".encode())
        return h.hexdigest()
    finally:
        conn.close()
