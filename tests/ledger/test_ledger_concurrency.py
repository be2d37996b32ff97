"""Several writer processes at once, and writers killed with SIGKILL mid-stream."""

from __future__ import annotations

import itertools
import os
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import pytest

from closecall.review.ledger import NoLedger, open_ledger

# A writer process: waits for the start signal, then appends `count` entries whose notes say
# who wrote them and carry a body whose length and contents follow from the number, so a torn
# (partial) entry would show.
WRITER = textwrap.dedent(
    """
    import contextlib, os, sys, time
    from closecall.review.ledger import EntryContent, open_ledger

    path, writer, count, go = sys.argv[1], sys.argv[2], int(sys.argv[3]), sys.argv[4]
    spread, reopen = int(sys.argv[5]), sys.argv[6] == "reopen"
    while not os.path.exists(go):
        time.sleep(0.002)
    ledger = None if reopen else open_ledger(path)
    i = 0
    while count < 0 or i < count:
        body = (writer + str(i)) * (1 + (i * 7919) % spread)
        # reopen: a new connection per entry, as separate `closecall record` runs make
        with open_ledger(path) if reopen else contextlib.nullcontext(ledger) as lg:
            lg.append(EntryContent(
                reviewer=writer, case_id=f"C-{i % 17}", snapshot_id="s1",
                current_snapshot_id=None, reference_model="pooled",
                reference_decision="favourable", reference_margin=i / 1000,
                decisions={"pooled": {"decision": "favourable", "margin": i / 1000}},
                action="uphold", reason=None, note=f"{writer}|{i}|{body}",
            ))
        i += 1
    """
)


def _spawn(
    path: Path, writer: str, count: int, go: Path, spread: int, reopen: bool = False
) -> subprocess.Popen[bytes]:
    mode = "reopen" if reopen else "keep"
    return subprocess.Popen(
        [sys.executable, "-c", WRITER, str(path), writer, str(count), str(go), str(spread), mode],
        stderr=subprocess.PIPE,
    )


def _expected_note(writer: str, i: int, spread: int) -> str:
    return f"{writer}|{i}|" + (writer + str(i)) * (1 + (i * 7919) % spread)


@pytest.mark.slow
def test_eight_processes_times_500_entries_make_one_gap_free_chain(tmp_path: Path) -> None:
    path, go = tmp_path / "l.sqlite", tmp_path / "go"
    with open_ledger(path):
        pass  # created beforehand, as a study's first `record` would
    procs = [_spawn(path, f"w{k}", 500, go, spread=40) for k in range(8)]
    time.sleep(0.3)  # let every process start and wait for the signal
    go.touch()
    for p in procs:
        _, err = p.communicate(timeout=300)
        assert p.returncode == 0, err.decode()
    with open_ledger(path, readonly=True) as ledger:
        result = ledger.verify()
        entries = ledger.entries()
    assert result.ok, result.problem
    assert len(entries) == result.entries == 4000
    assert [e.seq for e in entries] == list(range(1, 4001))
    seen = [(e.reviewer, int(e.note.split("|")[1])) for e in entries]
    assert sorted(seen) == sorted((f"w{k}", i) for k in range(8) for i in range(500))
    # each writer's own entries are in its own order; and writers really interleaved
    for k in range(8):
        mine = [i for w, i in seen if w == f"w{k}"]
        assert mine == list(range(500))
    switches = sum(1 for a, b in itertools.pairwise(entries) if a.reviewer != b.reviewer)
    assert switches > 8
    assert all(e.note == _expected_note(e.reviewer, int(e.note.split("|")[1]), 40) for e in entries)


def test_processes_creating_the_ledger_at_once_share_one_file(tmp_path: Path) -> None:
    path, go = tmp_path / "new" / "l.sqlite", tmp_path / "go"
    procs = [_spawn(path, f"w{k}", 25, go, spread=5, reopen=True) for k in range(8)]
    time.sleep(0.3)
    go.touch()  # nobody has created the ledger yet: all eight race to do it
    for p in procs:
        _, err = p.communicate(timeout=120)
        assert p.returncode == 0, err.decode()
    with open_ledger(path, readonly=True) as ledger:
        result = ledger.verify()
        assert result.ok and result.entries == 200
        assert sorted((e.reviewer, e.note.split("|")[1]) for e in ledger.entries()) == sorted(
            (f"w{k}", str(i)) for k in range(8) for i in range(25)
        )
    assert sorted(p.name for p in path.parent.iterdir() if ".new" in p.name) == []


@pytest.mark.slow
def test_writers_killed_mid_stream_leave_a_ledger_that_verifies(tmp_path: Path) -> None:
    path, go = tmp_path / "l.sqlite", tmp_path / "go"
    go.touch()
    spawned: list[subprocess.Popen[bytes]] = []
    try:
        total_before = 0
        for round_no in range(12):
            # two endless writers, killed with SIGKILL after a varying time
            procs = [_spawn(path, f"r{round_no}w{k}", -1, go, spread=3000) for k in range(2)]
            spawned += procs
            deadline = time.monotonic() + 30
            while time.monotonic() < deadline:  # wait until both have really been writing
                try:
                    with open_ledger(path, readonly=True) as ledger:
                        if ledger.count() >= total_before + 20:
                            break
                except NoLedger:  # not created (or not yet initialised) by the writers
                    pass
                time.sleep(0.01)
            time.sleep(0.01 * (round_no % 4))
            for p in procs:
                os.kill(p.pid, signal.SIGKILL)
            for p in procs:
                p.wait(timeout=30)
                assert p.returncode == -signal.SIGKILL
            with open_ledger(path, readonly=True) as ledger:
                result = ledger.verify()
                entries = ledger.entries()
            assert result.ok, (round_no, result.problem)
            assert [e.seq for e in entries] == list(range(1, len(entries) + 1))
            # no partial entry: every note is exactly what its writer meant to write
            assert all(
                e.note == _expected_note(e.reviewer, int(e.note.split("|")[1]), 3000)
                for e in entries
            )
            assert len(entries) > total_before
            total_before = len(entries)
    finally:  # endless writers must never outlive the test, whatever failed
        for p in spawned:
            if p.poll() is None:
                p.kill()
                p.wait(timeout=30)
    # and the ledger takes new entries after all that
    with open_ledger(path) as ledger:
        assert ledger.verify().ok
