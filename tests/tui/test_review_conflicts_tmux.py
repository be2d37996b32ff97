"""End to end: two reviewers' `closecall review` sessions on one case, each in an 80×24 tmux.

The second login is injected by a wrapper that replaces the login lookup before the CLI
starts (tests only): the tool itself takes the login from the process's OS account.
"""

from __future__ import annotations

import shlex
import sys
from pathlib import Path

from test_review_tmux import Tmux, pytestmark  # noqa: F401  (same marks: slow, needs tmux)

AS_LOGIN = (
    "import sys; import closecall.review.ledger as L; import closecall.review.ledger.access as A; "
    "who = sys.argv.pop(1); A.current_login = L.current_login = lambda: who; "
    "from closecall.cli.app import main; main()"
)


def _as(login: str, *args: str) -> str:
    argv = [sys.executable, "-c", AS_LOGIN, login, *args]
    return " ".join(shlex.quote(a) for a in argv) + "; sleep 30"


def test_two_reviewers_on_one_case_see_the_conflict_prompt(tmp_path: Path) -> None:
    alice, bob = Tmux(tmp_path), Tmux(tmp_path)
    alice.start(_as("alice", "review", "--demo"))
    try:
        alice.wait_for(lambda s: "listed of" in s, timeout=180)  # written, fitted, ranked
        bob.start(_as("bob", "review", "--config", "demo-study/closecall.toml"))
        bob.wait_for(lambda s: "listed of" in s, timeout=120)
        # bob opens the decision on the first listed case and starts writing
        bob.keys("d")
        bob.wait_for(lambda s: "Decision on" in s)
        bob.keys("3")
        bob.keys("2")
        bob.keys("Bank statement contradicts the income", literal=True)
        # meanwhile alice upholds the same case
        alice.keys("d")
        alice.wait_for(lambda s: "Decision on" in s)
        alice.keys("1")
        alice.keys("C-r")
        alice.wait_for(lambda s: "recorded entry 1" in s)
        # bob records: told about alice's entry, asked what to do
        bob.keys("C-r")
        screen = bob.wait_for(lambda s: "Another decision on" in s)
        assert "entry 1 · alice" in screen and "upheld the model" in screen
        assert "replace it" in screen and "second opinion" in screen and "cancel" in screen
        bob.keys("2")
        bob.wait_for(lambda s: "recorded entry 2" in s)
        bob.keys("Enter")
        bob.keys("Escape")  # back to the list: the case shows as a conflict
        bob.wait_for(lambda s: "!conflict" in s)
    finally:
        alice.kill()
        bob.kill()
