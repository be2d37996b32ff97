"""End to end: the real `closecall review --demo` in an 80×24 tmux session, keys only.

Writes and fits the demo study in a fresh folder, records one override through the screens,
checks the hash shown against `closecall ledger show` and `ledger verify`, then drops the
terminal mid-note (tmux kill-session sends SIGHUP) and checks the draft was kept.
"""

from __future__ import annotations

import json
import os
import re
import shutil
import subprocess
import sys
import time
import uuid
from collections.abc import Callable
from pathlib import Path

import pytest

CLOSECALL = Path(sys.executable).with_name("closecall")

pytestmark = [
    pytest.mark.e2e,
    pytest.mark.slow,
    pytest.mark.skipif(shutil.which("tmux") is None, reason="tmux is not installed"),
    pytest.mark.skipif(not CLOSECALL.exists(), reason="the closecall command is not installed"),
]


class Tmux:
    def __init__(self, cwd: Path) -> None:
        self.name = f"cc-{uuid.uuid4().hex[:8]}"
        self.cwd = cwd

    def start(self, command: str) -> None:
        env = {**os.environ, "TERM": "xterm-256color"}
        env.pop("NO_COLOR", None)
        subprocess.run(
            [
                "tmux",
                "new-session",
                "-d",
                "-s",
                self.name,
                "-x",
                "80",
                "-y",
                "24",
                "-c",
                str(self.cwd),
                command,
            ],
            check=True,
            env=env,
        )

    def screen(self) -> str:
        out = subprocess.run(
            ["tmux", "capture-pane", "-p", "-t", self.name], capture_output=True, text=True
        )
        return out.stdout

    def keys(self, *keys: str, literal: bool = False) -> None:
        args = ["tmux", "send-keys", "-t", self.name, *(["-l"] if literal else []), *keys]
        subprocess.run(args, check=True)
        time.sleep(0.15)

    def wait_for(self, test: Callable[[str], bool], timeout: float = 90.0) -> str:
        end = time.monotonic() + timeout
        while time.monotonic() < end:
            text = self.screen()
            if test(text):
                return text
            time.sleep(0.2)
        raise AssertionError(f"timed out; the screen shows:\n{self.screen()}")

    def alive(self) -> bool:
        return subprocess.run(["tmux", "has-session", "-t", self.name]).returncode == 0

    def kill(self) -> None:
        subprocess.run(["tmux", "kill-session", "-t", self.name], capture_output=True)


def test_review_demo_in_tmux(tmp_path: Path) -> None:
    tmux = Tmux(tmp_path)
    tmux.start(f"{CLOSECALL} review --demo; sleep 30")
    try:
        tmux.wait_for(lambda s: "listed of" in s, timeout=180)  # written, fitted, ranked
        tmux.keys("f")
        tmux.wait_for(lambda s: "f flips: any" in s)
        tmux.keys("j", "j", "Enter")
        screen = tmux.wait_for(lambda s: "Case HR-" in s and "What moves" in s)
        case_id = re.search(r"Case (HR-\d+)", screen).group(1)  # type: ignore[union-attr]
        tmux.keys("d")
        tmux.wait_for(lambda s: "Decision on" in s)
        tmux.keys("2")
        tmux.keys("2")
        tmux.keys("Letter from employer confirms income", literal=True)
        tmux.keys("C-r")
        screen = tmux.wait_for(lambda s: "recorded entry 1" in s)
        shown_hash = re.search(r"hash ([0-9a-f]{64})", screen).group(1)  # type: ignore[union-attr]
        tmux.keys("Enter")
        tmux.wait_for(lambda s: "This case in the ledger" in s or "recorded entry 1" in s)

        # the next case: start a note and drop the terminal before the pause that saves it
        tmux.keys("n")
        screen = tmux.wait_for(lambda s: "Case HR-" in s and case_id not in s.splitlines()[0])
        other = re.search(r"Case (HR-\d+)", screen).group(1)  # type: ignore[union-attr]
        tmux.keys("d")
        tmux.wait_for(lambda s: "Decision on" in s)
        tmux.keys("Tab", "Tab")
        tmux.keys("half a thought", literal=True)
    finally:
        tmux.kill()
    config = tmp_path / "demo-study" / "closecall.toml"
    shown = subprocess.run(
        [CLOSECALL, "ledger", "show", "--json", "--config", str(config)],
        capture_output=True,
        text=True,
        check=True,
    )
    rows = json.loads(shown.stdout)["rows"]
    assert [(r["case_id"], r["action"], r["hash"]) for r in rows] == [
        (case_id, "override-favourable", shown_hash)
    ]
    verified = subprocess.run(
        [CLOSECALL, "ledger", "verify", "--config", str(config)], capture_output=True, text=True
    )
    assert verified.returncode == 0 and "chain intact" in verified.stdout, verified

    from closecall.review.decisions import load_draft
    from closecall.suite.opening import open_study

    deadline = time.monotonic() + 10
    draft = None
    while time.monotonic() < deadline and draft is None:  # the app may still be exiting
        draft = load_draft(open_study(config), other)
        time.sleep(0.2)
    assert draft is not None and draft.note == "half a thought"
