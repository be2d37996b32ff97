"""Structured errors: the engine names its own fields, each view words them its own way.

The same refusal reaches the library (engine names, no command-line flags), the command line
(flags) and the review screens (their controls); the engine checks parameters itself, so the
library refuses what the command line refuses.
"""

from __future__ import annotations

import ast
import re
from pathlib import Path
from typing import Any

import pytest
from hostile_helpers import assert_refused, assert_unchanged, study_digests

from closecall.analysis.comparison import compare_models
from closecall.core.errors import Fix, UserError
from closecall.reports.disparity.from_study import study_report
from closecall.review.decisions import check_note, check_reason
from closecall.review.queue import build_queue
from closecall.suite.opening import open_study
from closecall.tui.errors import fix_text

FLAG = re.compile(r"(?<![\w-])--[a-z][a-z-]+")
ENGINE = Path(__file__).resolve().parents[2] / "src" / "closecall"


def _no_flag(exc: UserError) -> None:
    assert not FLAG.search(exc.message), exc.message
    assert not FLAG.search(exc.fix or ""), exc.fix


class TestTheLibraryRefusesWhatTheCommandLineRefuses:
    @pytest.mark.parametrize("n_boot", [2, 0, -5, 99, 2.5])
    def test_compare_with_too_few_resamples(self, study_dir: Path, n_boot: Any) -> None:
        snap = open_study(study_dir / "closecall.toml").snapshot
        with pytest.raises(UserError) as caught:
            compare_models(snap, n_boot=n_boot)
        _no_flag(caught.value)
        assert caught.value.remedy is not None and caught.value.remedy.field == "n_boot"
        assert caught.value.message.startswith("n_boot: ")

    def test_disparity_with_too_few_resamples(self, study_dir: Path) -> None:
        study = open_study(study_dir / "closecall.toml")
        with pytest.raises(UserError) as caught:
            study_report(study, n_boot=2)
        _no_flag(caught.value)

    def test_a_queue_band_that_is_not_finite(self, study_dir: Path) -> None:
        snap = open_study(study_dir / "closecall.toml").snapshot
        with pytest.raises(UserError) as caught:
            build_queue(snap, band=float("nan"))
        _no_flag(caught.value)
        assert caught.value.remedy is not None and caught.value.remedy.field == "band"


class TestEachViewWordsTheFix:
    def test_the_command_line_names_the_flag(self, cli: Any, study_dir: Path) -> None:
        digests = study_digests(study_dir)
        res = cli("compare", "--config", str(study_dir / "closecall.toml"), "--boot", "2")
        text = assert_refused(res, "--boot")
        assert "n_boot" not in text
        assert_unchanged(digests, study_dir)

    def test_the_review_screens_name_their_controls(self, study_dir: Path) -> None:
        config = open_study(study_dir / "closecall.toml").config
        with pytest.raises(UserError) as reason:
            check_reason(config, "override-favourable", None)
        with pytest.raises(UserError) as note:
            check_note("override-favourable", "  ")
        for caught in (reason, note):
            _no_flag(caught.value)
        assert fix_text(reason.value) == (f"choose a reason: {', '.join(config.review.reasons)}")
        assert fix_text(note.value) == "write a note below (it is stored exactly as typed)"

    def test_plain_fixes_still_work(self) -> None:
        exc = UserError("data.csv: row 3: no case id", "fill in the case id")
        assert exc.fix == "fill in the case id" and exc.remedy is None
        assert fix_text(exc) == "fill in the case id"
        assert str(exc) == "data.csv: row 3: no case id\n  fix: fill in the case id"

    def test_a_structured_fix_reads_in_engine_words_by_default(self) -> None:
        exc = UserError(
            "2 is too few", Fix("n_boot", range="≥ 100", example="1000"), about="n_boot"
        )
        assert exc.message == "n_boot: 2 is too few"
        assert exc.fix == "give n_boot ≥ 100, e.g. 1000"
        assert exc.worded_fix(lambda f: "--boot") == "give --boot ≥ 100, e.g. 1000"


def test_the_review_screens_no_longer_rewrite_engine_text() -> None:
    """The dialog used to turn '--reason' advice into its own words by string replacement."""
    for path in (ENGINE / "tui").rglob("*.py"):
        assert "--reason" not in path.read_text(encoding="utf-8"), path
        assert "--note" not in path.read_text(encoding="utf-8"), path


#: Engine modules whose messages still name a flag or a command with options, left for later
#: (each names a file or a command to run, not a parameter; see the issue-13 report).
PENDING = {
    "setup/output_files.py",
    "setup/config.py",
    "suite/snapshot.py",
    "suite/opening.py",
    "review/conflicts.py",
    "review/ledger/verify.py",
    "review/ledger/pg_store.py",
    "reports/export.py",
    "reports/disparity/periods.py",
    "reports/disparity/errors_by_group.py",
    "reports/disparity/conditional.py",
}


def _message_strings(path: Path) -> list[tuple[int, str]]:
    tree = ast.parse(path.read_text(encoding="utf-8"))
    docstrings = {
        id(node.body[0].value)
        for node in ast.walk(tree)
        if isinstance(node, (ast.Module, ast.FunctionDef, ast.ClassDef, ast.AsyncFunctionDef))
        and node.body
        and isinstance(node.body[0], ast.Expr)
        and isinstance(node.body[0].value, ast.Constant)
    }
    return [
        (node.lineno, node.value)
        for node in ast.walk(tree)
        if isinstance(node, ast.Constant)
        and isinstance(node.value, str)
        and id(node) not in docstrings
    ]


def test_engine_messages_name_no_flags() -> None:
    found = []
    for package in ("core", "setup", "suite", "analysis", "review", "reports"):
        for path in sorted((ENGINE / package).rglob("*.py")):
            rel = str(path.relative_to(ENGINE))
            if rel in PENDING:
                continue
            for line, text in _message_strings(path):
                if FLAG.search(text):
                    found.append(f"{rel}:{line}: {text[:60]!r}")
    assert found == []
