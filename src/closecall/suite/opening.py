"""A study: its config and its current snapshot (fitted now, or loaded from the cache)."""

from __future__ import annotations

import os
from dataclasses import dataclass, replace
from pathlib import Path

from closecall.core.errors import Fix
from closecall.core.progress import Progress, quiet
from closecall.setup.config import StudyConfig, load_config
from closecall.suite.snapshot import (
    REFIT_FIX,
    Snapshot,
    build_snapshot,
    data_digests,
    id_from_digests,
    load_snapshot,
    save_snapshot,
    snapshot_dir,
)


@dataclass
class OpenedStudy:
    """One configured data set, its fitted suite and (through config) its ledger."""

    config: StudyConfig
    snapshot: Snapshot
    fitted_now: bool = False


def refit_fix(config: StudyConfig) -> Fix:
    """The fix for a damaged snapshot of this study: fit it again, with its config."""
    return replace(REFIT_FIX, config=str(config.path))


def fit_study(
    config: StudyConfig,
    progress: Progress = quiet,
    *,
    refit: bool = False,
    rehash: bool = False,
) -> OpenedStudy:
    """Load the cached snapshot for this data + config, or fit the suite and cache it.

    Parameters
    ----------
    config
        The study config.
    progress
        Called with (label, done, total) as the work goes on.
    refit
        Fit again and replace the cached snapshot whatever state it is in (it is not read).
    rehash
        Hash the data files' bytes again instead of trusting the digests cache (``fit`` does;
        a fit always does before it names the snapshot it writes).

    Raises
    ------
    UserError
        A damaged, edited or foreign cached snapshot (the fix: fit again with ``refit``),
        and every data and config problem.
    """
    progress("hashing data", 0, 1)
    fresh = refit or rehash
    digests = data_digests(config, fresh=fresh)
    sid = id_from_digests(digests, config.digest())
    fix = refit_fix(config)
    if not refit and os.path.lexists(snapshot_dir(config, sid)):
        return OpenedStudy(config, load_snapshot(snapshot_dir(config, sid), fix=fix))
    if not fresh:  # about to fit: name the snapshot by the files' content, not the cache
        digests = data_digests(config, fresh=True)
        sid = id_from_digests(digests, config.digest())
        if os.path.lexists(snapshot_dir(config, sid)):
            return OpenedStudy(config, load_snapshot(snapshot_dir(config, sid), fix=fix))
    from closecall.setup.load import load_study_data  # fitting needs pandas and the solvers
    from closecall.suite.fit import fit_suite

    progress("reading data", 0, 1)
    data = load_study_data(config)
    suite = fit_suite(config, data, progress)
    snap = build_snapshot(sid, config, suite, digests)
    folder = save_snapshot(config, snap, replace=refit)
    progress("saving snapshot", 1, 1)
    return OpenedStudy(config, load_snapshot(folder, fix=fix), fitted_now=True)


def open_study(
    config_path: str | Path = "closecall.toml",
    progress: Progress = quiet,
    *,
    refit: bool = False,
    rehash: bool = False,
) -> OpenedStudy:
    """Read the config and return the study with its current snapshot (see fit_study)."""
    return fit_study(load_config(config_path), progress, refit=refit, rehash=rehash)
