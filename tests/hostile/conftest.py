"""Fixtures of the hostile-input corpus: a small fitted demo study with two reviews, copied
fresh for every test so that a case can damage it freely."""

from __future__ import annotations

import sys
from pathlib import Path

import pytest

sys.path.insert(0, str(Path(__file__).parent))

from hostile_helpers import copy_study

from closecall.setup.demo import write_demo
from closecall.suite.opening import open_study


@pytest.fixture(scope="session")
def hostile_base(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A 600-case demo study, fitted, with two reviews in its ledger (built once)."""
    from closecall.review.decisions import record_review

    folder = tmp_path_factory.mktemp("hostile-base") / "study"
    config = write_demo(folder, cases=600, seed=5)
    study = open_study(config)
    ids = [str(x) for x in study.snapshot.case_ids[:2]]
    record_review(study, ids[0], action="uphold", reason=None, note="first look")
    record_review(study, ids[1], action="defer", reason=None, note="needs the file")
    return folder


@pytest.fixture
def study_dir(hostile_base: Path, tmp_path: Path) -> Path:
    """A fresh copy of the base study for one test; returns the folder."""
    copy_study(hostile_base, tmp_path / "study")
    return tmp_path / "study"
