"""Fixtures for the review-screen tests: the bundled demo study, fitted once per session.

Each test gets its own study folder (own ledger) whose snapshot folder links to the one fitted
copy, so no test fits again and no test sees another's reviews.
"""

from __future__ import annotations

import dataclasses
import re
import shutil
from pathlib import Path

import pytest

from closecall.suite.opening import OpenedStudy, open_study

FIXTURE = Path(__file__).resolve().parents[2] / "fixtures" / "demo"
FIXED_SNAPSHOT_ID = "5eed0000c0ffee00"  # shown in snapshot frames instead of the path-dependent id


def _config_text(data_dir: Path) -> str:
    """The demo config with its data files named by absolute path (so every copy shares a fit)."""
    text = (FIXTURE / "closecall.toml").read_text()
    for key in ("history", "pending", "scorecard"):
        text = re.sub(
            rf'^{key} = "([^"]+)"',
            lambda m, k=key: f'{k} = "{data_dir / m.group(1)}"',
            text,
            flags=re.M,
        )
    return text


@pytest.fixture(scope="session")
def tui_template(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """The demo data and its fitted snapshot, shared by every test of this folder."""
    root = tmp_path_factory.mktemp("tui-template")
    for name in ("history.csv", "pending.csv", "scorecard.csv"):
        shutil.copy(FIXTURE / name, root / name)
    (root / "closecall.toml").write_text(_config_text(root))
    open_study(root / "closecall.toml")
    return root


@pytest.fixture
def study_config(tui_template: Path, tmp_path: Path) -> Path:
    """A fresh study folder (empty ledger) over the shared fit; returns its config path."""
    folder = tmp_path / "study"
    folder.mkdir()
    (folder / "closecall.toml").write_text(_config_text(tui_template))
    (folder / ".closecall").symlink_to(tui_template / ".closecall", target_is_directory=True)
    return folder / "closecall.toml"


@pytest.fixture
def study(study_config: Path) -> OpenedStudy:
    opened = open_study(study_config)
    assert not opened.fitted_now, "the shared fit should have been reused"
    return opened


@pytest.fixture
def frozen_study(study: OpenedStudy) -> OpenedStudy:
    """The study with a fixed snapshot id, for frames that must not depend on the tmp path."""
    return OpenedStudy(study.config, dataclasses.replace(study.snapshot, id=FIXED_SNAPSHOT_ID))
