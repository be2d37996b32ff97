"""A writer process for the concurrency tests: ``python pg_writer.py LEDGER N MODE [TAG]``.

LEDGER is a PostgreSQL URL or an SQLite file; MODE ``one`` keeps one connection for all N
entries, ``each`` opens a new connection per entry. Prints ``ready`` before the first entry
(in ``one`` mode once the ledger is open, so a benchmark's clock times the appends alone).
"""

from __future__ import annotations

import sys

from closecall.review.ledger import EntryContent
from closecall.review.ledger.pg_store import is_url, open_pg_ledger
from closecall.review.ledger.store import open_ledger


def _open(where: str):  # type: ignore[no-untyped-def]
    return open_pg_ledger(where) if is_url(where) else open_ledger(where)


def _content(tag: str, i: int) -> EntryContent:
    return EntryContent(
        reviewer="writer",
        case_id=f"{tag}-{i}",
        snapshot_id="feedc0ffee000001",
        current_snapshot_id=None,
        reference_model="pooled",
        reference_decision="favourable",
        reference_margin=0.125,
        decisions={"pooled": {"decision": "favourable", "margin": 0.125}},
        action="uphold",
        reason=None,
        note=f"entry {i} of {tag}",
    )


def main() -> None:
    where, n, mode = sys.argv[1], int(sys.argv[2]), sys.argv[3]
    tag = sys.argv[4] if len(sys.argv) > 4 else "w"
    if mode == "one":
        with _open(where) as ledger:  # connected (and its access checked) before "ready"
            print("ready", flush=True)
            for i in range(n):
                ledger.append(_content(tag, i))
    else:
        print("ready", flush=True)
        for i in range(n):
            with _open(where) as ledger:
                ledger.append(_content(tag, i))


if __name__ == "__main__":
    main()
