"""Durable ledger appends per second, SQLite beside PostgreSQL, with 1 and 8 writers.

Not a test: prints a table (and JSON with --json). Run with

    .venv/bin/python -m benchmarks.ledger_append [--entries 400] [--writers 1 8]

It starts a throw-away PostgreSQL server the way the test suite does (tests/ledger/pg_server.py:
Debian's ``postgresql`` package, fsync and synchronous_commit on), sets up a ledger database for
each run, and makes a fresh SQLite ledger file beside it. Each writer is its own process with
one connection, appending ``--entries`` entries through ``Ledger.append``/``PgLedger.append``
(one transaction, one durable commit each); the rate is all entries over the wall time from
the first writer's start to the last one's end, and every ledger is verified afterwards.
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
WRITER = ROOT / "tests" / "ledger" / "pg_writer.py"
sys.path.insert(0, str(WRITER.parent))


def _run(where: str, writers: int, entries: int) -> float:
    """Appends per second of ``writers`` processes, ``entries`` each, into ``where``."""
    procs = [
        subprocess.Popen(
            [sys.executable, str(WRITER), where, str(entries), "one", f"w{k}"],
            stdout=subprocess.PIPE,
            text=True,
        )
        for k in range(writers)
    ]
    for p in procs:  # every writer has imported closecall before the clock starts
        assert p.stdout is not None and p.stdout.readline().strip() == "ready"
    start = time.perf_counter()
    for p in procs:
        if p.wait() != 0:
            raise RuntimeError(f"a writer failed on {where}")
    return writers * entries / (time.perf_counter() - start)


def main() -> None:
    from pg_server import start_server

    from closecall.review.ledger.pg_store import open_pg_ledger, setup
    from closecall.review.ledger.store import open_ledger

    parser = argparse.ArgumentParser()
    parser.add_argument("--entries", type=int, default=400, help="entries per writer")
    parser.add_argument("--writers", type=int, nargs="+", default=[1, 8])
    parser.add_argument("--json", type=Path)
    parser.add_argument(
        "--server-setting",
        action="append",
        default=[],
        metavar="NAME=VALUE",
        help="an extra PostgreSQL server setting, e.g. commit_delay=1000 (repeatable)",
    )
    args = parser.parse_args()

    import os

    print(f"load average at start: {' '.join(f'{x:.2f}' for x in os.getloadavg())}")
    server = start_server(tuple(args.server_setting))
    if args.server_setting:
        print(f"server settings: {' '.join(args.server_setting)}")
    results: list[dict[str, object]] = []
    try:
        with tempfile.TemporaryDirectory() as tmp:
            for n in args.writers:
                path = str(Path(tmp) / f"ledger-{n}.sqlite")
                url = server.create_database(f"bench_{n}")
                setup(url)
                for backend, where in (("sqlite", path), ("postgresql", url)):
                    rate = _run(where, n, args.entries)
                    opener = open_pg_ledger if backend == "postgresql" else open_ledger
                    with opener(where, readonly=True) as ledger:  # type: ignore[operator]
                        result = ledger.verify()
                    assert result.ok and result.verified == n * args.entries
                    results.append({"backend": backend, "writers": n, "appends_per_s": rate})
                    print(f"{backend:<11} {n} writer(s): {rate:8.0f} durable appends/s")
    finally:
        server.stop()
    print(f"load average at end: {' '.join(f'{x:.2f}' for x in os.getloadavg())}")
    if args.json:
        args.json.write_text(json.dumps(results, indent=2))


if __name__ == "__main__":
    main()
