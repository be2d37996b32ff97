"""Durable ledger appends per second, SQLite beside PostgreSQL, with 1 and 8 writers.

Not a test: prints a table (and JSON with --json). Run with

    .venv/bin/python -m benchmarks.ledger_append [--entries 400] [--writers 1 8]

It starts a throw-away PostgreSQL server the way the test suite does (tests/ledger/pg_server.py:
Debian's ``postgresql`` package, fsync and synchronous_commit on), sets up a ledger database for
each run, and makes a fresh SQLite ledger file beside it. Each writer is its own process with
one connection, appending ``--entries`` entries through ``Ledger.append``/``PgLedger.append``
(one transaction, one durable commit each); the rate is all entries over the wall time from
the moment every writer has opened its ledger to the last one's end, and every ledger is
verified afterwards. Beside the rate it prints the CPU time per append of the writer
processes and (PostgreSQL) of the server's processes over the same interval (Linux
``/proc``): on a 2-core machine their sum bounds the rate at 2,000 ms/s ÷ (writers + server).
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from tests.ledger.pg_server import PgServer

ROOT = Path(__file__).resolve().parent.parent
WRITER = ROOT / "tests" / "ledger" / "pg_writer.py"
sys.path.insert(0, str(WRITER.parent))


def _ticks(pid: int, children: bool = False) -> int:
    """CPU clock ticks (user + system) of process ``pid``; with ``children``, also of its
    children it has reaped (Linux ``/proc/PID/stat``)."""
    fields = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()
    return sum(int(x) for x in fields[11 : 15 if children else 13])


def _server_cpu(server: PgServer) -> float:
    """CPU seconds used so far by the server: the postmaster, its live processes and the
    backends it has reaped (each writer's backend ends with its connection)."""
    pid = int((server.folder / "data" / "postmaster.pid").read_text().split()[0])
    ticks = _ticks(pid, children=True)
    for entry in Path("/proc").iterdir():
        if entry.name.isdigit():
            try:
                fields = (entry / "stat").read_text().rsplit(")", 1)[1].split()
            except OSError:
                continue
            if int(fields[1]) == pid:
                ticks += int(fields[11]) + int(fields[12])
    return ticks / os.sysconf("SC_CLK_TCK")


def _run(where: str, writers: int, entries: int, server: PgServer) -> dict[str, float]:
    """Appends per second of ``writers`` processes, ``entries`` each, into ``where``, and the
    CPU milliseconds per append of the writers and of the PostgreSQL server meanwhile."""
    procs = [
        subprocess.Popen(
            [sys.executable, str(WRITER), where, str(entries), "one", f"w{k}"],
            stdout=subprocess.PIPE,
            text=True,
        )
        for k in range(writers)
    ]
    for p in procs:  # every writer has imported closecall and opened the ledger
        assert p.stdout is not None and p.stdout.readline().strip() == "ready"
    before = sum(_ticks(p.pid) for p in procs) / os.sysconf("SC_CLK_TCK")
    usage = resource.getrusage(resource.RUSAGE_CHILDREN)
    server_before = _server_cpu(server)
    start = time.perf_counter()
    for p in procs:
        if p.wait() != 0:
            raise RuntimeError(f"a writer failed on {where}")
    wall = time.perf_counter() - start
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    client = after.ru_utime + after.ru_stime - usage.ru_utime - usage.ru_stime - before
    n = writers * entries
    return {
        "appends_per_s": n / wall,
        "client_cpu_ms": 1000 * client / n,
        "server_cpu_ms": 1000 * (_server_cpu(server) - server_before) / n,
    }


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
                    got = _run(where, n, args.entries, server)
                    opener = open_pg_ledger if backend == "postgresql" else open_ledger
                    with opener(where, readonly=True) as ledger:  # type: ignore[operator]
                        result = ledger.verify()
                    assert result.ok and result.verified == n * args.entries
                    results.append({"backend": backend, "writers": n, **got})
                    cpu = f"writers {got['client_cpu_ms']:.2f} ms"
                    if backend == "postgresql":
                        cpu += f" + server {got['server_cpu_ms']:.2f} ms"
                    print(
                        f"{backend:<11} {n} writer(s): {got['appends_per_s']:8.0f} durable "
                        f"appends/s; CPU per append: {cpu}"
                    )
    finally:
        server.stop()
    print(f"load average at end: {' '.join(f'{x:.2f}' for x in os.getloadavg())}")
    if args.json:
        args.json.write_text(json.dumps(results, indent=2))


if __name__ == "__main__":
    main()
