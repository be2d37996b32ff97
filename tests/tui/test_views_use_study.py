"""The review screen explains and records through ``closecall.Study``, as the library does.

Checked two ways: no review-screen module imports the engine's ``explain_case`` or
``record_review`` itself, and the screen's explain and record calls pass through
:class:`closecall.api.study.Study` (observed by wrapping its methods) with the same results.
"""

from __future__ import annotations

import ast
from pathlib import Path
from typing import Any, ClassVar

import pytest

from closecall.api.study import Study
from closecall.review import decisions
from closecall.review.ledger import access
from closecall.suite.opening import OpenedStudy
from closecall.tui import analysis_bridge

TUI = Path(__file__).resolve().parents[2] / "src" / "closecall" / "tui"


def test_no_review_screen_module_calls_the_engine_directly() -> None:
    found = []
    for path in sorted(TUI.glob("*.py")):
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.ImportFrom):
                names = {a.name for a in node.names}
                if names & {"explain_case", "record_review"}:
                    found.append(f"{path.name}: from {node.module} import {sorted(names)}")
    assert found == []


def test_the_case_screen_explains_through_study(
    study: OpenedStudy, monkeypatch: pytest.MonkeyPatch
) -> None:
    calls: list[str] = []
    explain = Study.explain

    def spy(self: Study, case_id: str, **kw: Any) -> Any:
        calls.append(case_id)
        return explain(self, case_id, **kw)

    monkeypatch.setattr(Study, "explain", spy)
    case = str(study.snapshot.case_ids[0])
    shown = analysis_bridge.explain(study, case)
    assert calls == [case]
    assert shown == dict(explain(Study(study), case).details)
    assert shown is not None and shown["case_id"] == case


def test_the_decision_dialog_records_through_study(
    study: OpenedStudy, monkeypatch: pytest.MonkeyPatch
) -> None:
    """The dialog's worker calls Study.record with the seen sequence number (pilot-free: the
    worker's body is called directly with a stand-in for the screen's plumbing)."""
    from closecall.tui.decision_dialog import DecisionDialog
    from closecall.tui.draft_keeper import DraftValue

    monkeypatch.setattr(access, "current_login", lambda: "alice")
    seen: list[dict[str, Any]] = []
    record = Study.record

    def spy(self: Study, case_id: str, action: str, **kw: Any) -> Any:
        seen.append({"case_id": case_id, "action": action, **kw})
        return record(self, case_id, action, **kw)

    monkeypatch.setattr(Study, "record", spy)
    case = str(study.snapshot.case_ids[1])

    class Plumbing:
        session = type("S", (), {"study": study})()
        case_id = case
        seen_seq = 0
        done: ClassVar[list[Any]] = []

        class app:  # stands in for the Textual app
            @staticmethod
            def call_from_thread(f: Any, *args: Any) -> None:
                Plumbing.done.append((f.__name__, args))

        def _recorded(self, entry: Any) -> None: ...
        def _refused(self, exc: Any) -> None: ...
        def _conflict(self, exc: Any, value: Any) -> None: ...

    body = DecisionDialog._record.__wrapped__  # type: ignore[attr-defined]
    body(Plumbing(), DraftValue(note="checked", action="defer", reason=None))
    assert seen == [
        {
            "case_id": case,
            "action": "defer",
            "reason": None,
            "note": "checked",
            "supersedes": None,
            "second_opinion": False,
            "seen_seq": 0,
        }
    ]
    assert [e.case_id for e in decisions.ledger_entries(study.config)] == [case]
    assert Plumbing.done[0][0] == "_recorded"


@pytest.mark.parametrize(
    ("args", "owner", "method"),
    [
        (["proxies", "--json"], "Study", "proxies"),
        (["bands", "--json"], "Study", "bands"),
        (["compare", "--boot", "100", "--json"], "Study", "compare"),
        (["explain", "{case}", "--json"], "Study", "explain"),
        (["queue", "--chart", "--json"], "Study", "margin_distribution"),
        (["model", "--json"], "Study", "model"),
        (["ledger", "show", "--json"], "Ledger", "show"),
        (["ledger", "verify", "--allow-empty", "--json"], "Ledger", "verify"),
        (["demo-reviews", "30", "--json"], "Study", "demo_reviews"),
    ],
)
def test_the_commands_get_their_results_from_study(
    study: OpenedStudy,
    cli: Any,
    monkeypatch: pytest.MonkeyPatch,
    args: list[str],
    owner: str,
    method: str,
) -> None:
    """Each command's figures come from the Study (or Ledger) method of the same question
    (observed by wrapping the method); the command succeeds as before."""
    from closecall.api import study as api

    cls = getattr(api, owner)
    real = getattr(cls, method)
    calls: list[str] = []

    def spy(self: Any, *a: Any, **kw: Any) -> Any:
        calls.append(method)
        return real(self, *a, **kw)

    monkeypatch.setattr(cls, method, spy)
    case = str(study.snapshot.case_ids[0])
    res = cli(*[a.replace("{case}", case) for a in args], "--config", str(study.config.path))
    assert res.code == 0, res
    assert calls, f"closecall {' '.join(args)} did not ask {owner}.{method}"


def test_disparity_asks_study(
    study: OpenedStudy, cli: Any, monkeypatch: pytest.MonkeyPatch
) -> None:
    """`closecall disparity` (text and HTML) is drawn from Study.disparity's report."""
    config = str(study.config.path)
    assert cli("demo-reviews", "60", "--config", config).code == 0
    calls: list[int] = []
    real = Study.disparity

    def spy(self: Study, **kw: Any) -> Any:
        calls.append(kw["n_boot"])
        return real(self, **kw)

    monkeypatch.setattr(Study, "disparity", spy)
    html = study.config.path.parent.parent / "report.html"
    res = cli("disparity", "--boot", "200", "--html", str(html), "--config", config)
    assert res.code == 0, res
    assert calls == [200]
    assert "adverse impact" in res.out.lower() and html.read_text(encoding="utf-8")
