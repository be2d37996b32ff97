"""A study: its config and its current snapshot (fitted now, or loaded from the cache)."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from closecall.config import StudyConfig, load_config
from closecall.progress import Progress, quiet
from closecall.snapshot import (
    Snapshot,
    build_snapshot,
    load_snapshot,
    save_snapshot,
    snapshot_dir,
    snapshot_id,
)


@dataclass
class Study:
    """One configured data set, its fitted suite and (through config) its ledger."""

    config: StudyConfig
    snapshot: Snapshot
    fitted_now: bool = False


def fit_study(config: StudyConfig, progress: Progress = quiet, *, refit: bool = False) -> Study:
    """Load the cached snapshot for this data + config, or fit the suite and cache it."""
    progress("hashing data", 0, 1)
    sid = snapshot_id(config)
    folder = snapshot_dir(config, sid)
    if folder.exists() and not refit:
        return Study(config, load_snapshot(folder))
    from closecall.data import load_study_data  # fitting needs pandas and the solvers
    from closecall.suite import fit_suite

    progress("reading data", 0, 1)
    data = load_study_data(config)
    suite = fit_suite(config, data, progress)
    snap = build_snapshot(sid, config, suite)
    save_snapshot(config, snap)
    progress("saving snapshot", 1, 1)
    return Study(config, load_snapshot(folder), fitted_now=True)


def open_study(
    config_path: str | Path = "closecall.toml",
    progress: Progress = quiet,
    *,
    refit: bool = False,
) -> Study:
    """Read the config and return the study with its current snapshot."""
    return fit_study(load_config(config_path), progress, refit=refit)
