"""Snapshots: one fitted suite with every per-case result, stored as JSON + NumPy arrays.

A snapshot lives in ``<study>/.closecall/snapshots/<id>/``: ``meta.json`` plus one ``.npy``
file per array, written into a temporary folder and renamed into place, so a snapshot is either
complete or absent. Arrays are loaded with ``allow_pickle=False`` (never unpickle a user's file)
and memory-mapped, so opening a large snapshot is quick.

The id hashes the data files' bytes, the study config (the parts that change the fit) and the
package version: a changed input gives a new id, an unchanged one reuses the cache.
"""

from __future__ import annotations

import hashlib
import json
import os
import shutil
import tempfile
from dataclasses import dataclass, field
from functools import cached_property
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
from scipy.special import logit

from closecall import __version__
from closecall.config import CostLens, StudyConfig
from closecall.encode import Encoder
from closecall.errors import UserError
from closecall.files import require_file

if TYPE_CHECKING:  # heavy modules, needed only when fitting
    from closecall.analysis.proxies import ProxyReport
    from closecall.suite import SuiteResult

SNAPSHOT_FORMAT = 2


def file_digest(path: Path) -> str:
    """SHA-256 of a file's bytes."""
    require_file(path)
    h = hashlib.sha256()
    with path.open("rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 22), b""):
            h.update(chunk)
    return h.hexdigest()


def cached_file_digest(path: Path, cache_dir: Path) -> str:
    """file_digest, remembered per (path, size, modification time) in cache_dir.

    Reading 850,000 rows to hash them costs about a second; every command that opens the
    study needs the id, so an unchanged file is not read again. Editing a file changes its
    modification time and so its digest is recomputed.
    """
    require_file(path)
    st = path.stat()
    key = f"{path.resolve()}|{st.st_size}|{st.st_mtime_ns}"
    cache = cache_dir / "digests.json"
    try:
        known = json.loads(cache.read_text())
    except (OSError, ValueError):
        known = {}
    if isinstance(known, dict) and isinstance(known.get(key), str):
        return str(known[key])
    digest = file_digest(path)
    try:
        cache_dir.mkdir(parents=True, exist_ok=True)
        fresh = {k: v for k, v in known.items() if not k.startswith(f"{path.resolve()}|")}
        fresh[key] = digest
        tmp = cache.with_suffix(f".{os.getpid()}.tmp")
        tmp.write_text(json.dumps(fresh))
        os.replace(tmp, cache)
    except OSError:  # a read-only study folder: just don't cache
        pass
    return digest


def snapshot_id(config: StudyConfig) -> str:
    """Hash of data + config + package version."""
    h = hashlib.sha256()
    for p in (config.data.history, config.data.pending):
        h.update(cached_file_digest(p, config.workdir).encode() if p is not None else b"-")
    h.update(config.digest().encode())
    h.update(f"closecall {__version__} format {SNAPSHOT_FORMAT}".encode())
    return h.hexdigest()[:16]


@dataclass
class Snapshot:
    """A fitted suite and its per-case results (read-only)."""

    id: str
    meta: dict[str, Any]
    arrays: dict[str, np.ndarray] = field(repr=False)

    # ---- identity and cases
    @property
    def case_ids(self) -> np.ndarray:
        return self.arrays["case_ids"]

    @property
    def n_cases(self) -> int:
        return len(self.case_ids)

    @property
    def group_levels(self) -> list[str]:
        return list(self.meta["group_levels"])

    @property
    def group_codes(self) -> np.ndarray:
        return self.arrays["group_codes"]

    @cached_property
    def group_labels(self) -> np.ndarray:
        return np.array(self.group_levels)[self.group_codes]

    @property
    def outcome(self) -> np.ndarray:
        """1 favourable, 0 unfavourable, -1 unknown (pending)."""
        return self.arrays["outcome"]

    @cached_property
    def _id_index(self) -> tuple[np.ndarray, np.ndarray]:
        """(sorted ids, rows in that order): one sort serves every id look-up."""
        ids = np.asarray(self.case_ids)
        order = np.argsort(ids, kind="stable")
        return ids[order], order

    def rows_of(self, case_ids: list[str] | np.ndarray) -> np.ndarray:
        """Rows of many case ids at once (−1 for ids this snapshot does not hold)."""
        sorted_ids, order = self._id_index
        if len(case_ids) == 0 or len(sorted_ids) == 0:
            return np.full(len(case_ids), -1, dtype=np.int64)
        wanted = np.asarray(case_ids, dtype=sorted_ids.dtype)
        at = np.minimum(np.searchsorted(sorted_ids, wanted), len(sorted_ids) - 1)
        return np.where(sorted_ids[at] == wanted, order[at], -1)

    def rows_with_prefix(self, prefix: str) -> np.ndarray:
        """Rows whose id starts with ``prefix`` (binary search on the sorted ids)."""
        sorted_ids, order = self._id_index
        lo = int(np.searchsorted(sorted_ids, prefix, side="left"))
        hi = int(np.searchsorted(sorted_ids, prefix + "\U0010ffff", side="left"))
        return np.asarray(order[lo:hi])

    def case_index(self, case_id: str) -> int:
        """Row of a case id; UserError if the snapshot has no such case."""
        row = int(self.rows_of([str(case_id)])[0])
        if row >= 0:
            return row
        raise UserError(
            f"case '{case_id}' is not among the {self.n_cases:,} cases of snapshot {self.id}",
            "check the id; 'closecall queue' lists the cases under review",
        )

    # ---- models and lenses
    @property
    def model_names(self) -> list[str]:
        return list(self.meta["models"])

    @property
    def reference(self) -> str:
        return str(self.meta["reference"])

    @property
    def lenses(self) -> list[CostLens]:
        return [CostLens(**d) for d in self.meta["lenses"]]

    def lens(self, name: str | None = None) -> CostLens:
        """A lens by name; the first (operative) lens when name is None."""
        lenses = self.lenses
        if name is None:
            return lenses[0]
        for lens in lenses:
            if lens.name == name:
                return lens
        raise UserError(
            f"no cost lens named '{name}'", f"choose one of: {', '.join(x.name for x in lenses)}"
        )

    def _model(self, model: str) -> None:
        if model not in self.meta["models"]:
            raise UserError(
                f"no model named '{model}' in snapshot {self.id}",
                f"choose one of: {', '.join(self.model_names)}",
            )

    def logit(self, model: str) -> np.ndarray:
        """Log-odds of the favourable outcome for every case under a model."""
        self._model(model)
        return self.arrays[f"logit__{model}"]

    def margins(self, model: str, lens: str | None = None) -> np.ndarray:
        """logit(p) − logit(t) for every case: > 0 means the favourable decision."""
        return self.logit(model) - float(logit(self.lens(lens).threshold))

    def decisions_for(self, i: int, lens: str | None = None) -> dict[str, dict[str, Any]]:
        """Each model's margin and decision for case row i under a lens."""
        t = float(logit(self.lens(lens).threshold))
        out: dict[str, dict[str, Any]] = {}
        for m in self.model_names:
            margin = float(self.arrays[f"logit__{m}"][i]) - t
            out[m] = {"margin": margin, "decision": decision_word(margin > 0)}
        return out

    def quad(self, model: str) -> np.ndarray:
        """x̃ᵀH⁻¹x̃ per case under the model row that scored it (NaN for imported scores)."""
        self._model(model)
        return self.arrays[f"quad__{model}"]

    def weights(self, model: str) -> tuple[np.ndarray, np.ndarray]:
        """(W, row_of_case): fitted rows [intercept, coef…] and which row scored each case."""
        self._model(model)
        return self.arrays[f"W__{model}"], self.arrays[f"row__{model}"]

    def objective(self, model: str) -> np.ndarray:
        """Penalised total negative log-likelihood of each fitted row of a model."""
        return self.arrays[f"objective__{model}"]

    # ---- design and history
    @cached_property
    def encoder(self) -> Encoder:
        return Encoder.from_json(self.meta["encoder"])

    @property
    def columns(self) -> list[str]:
        return list(self.meta["columns"])

    @property
    def X(self) -> np.ndarray:
        return self.arrays["X"]

    @property
    def hist_X(self) -> np.ndarray:
        return self.arrays.get("hist_X", self.arrays["X"])

    @property
    def hist_y(self) -> np.ndarray:
        return self.arrays["hist_y"]

    @property
    def hist_group_codes(self) -> np.ndarray:
        return self.arrays.get("hist_group_codes", self.arrays["group_codes"])

    @property
    def hist_ids(self) -> np.ndarray:
        return self.arrays.get("hist_ids", self.arrays["case_ids"])

    @property
    def cross_fitted(self) -> bool:
        return bool(self.meta["cross_fitted"])

    @cached_property
    def proxies(self) -> ProxyReport:
        from closecall.analysis.proxies import ProxyReport

        return ProxyReport.from_json(self.meta["proxies"])

    @property
    def metrics(self) -> list[dict[str, Any]]:
        return list(self.meta["metrics"])


def decision_word(favourable: bool) -> str:
    return "favourable" if favourable else "unfavourable"


def build_snapshot(sid: str, config: StudyConfig, suite: SuiteResult) -> Snapshot:
    """Gather a fitted suite into a Snapshot (not yet saved)."""
    arrays: dict[str, np.ndarray] = {
        "case_ids": suite.case_ids.astype(str),
        "group_codes": suite.group_codes.astype(np.int32),
        "outcome": suite.outcome.astype(np.int8),
        "X": suite.X,
        "hist_y": suite.hist_y.astype(np.int8),
        "fold": suite.fold,
    }
    if not config.cross_fitted:
        arrays["hist_X"] = suite.hist_X
        arrays["hist_group_codes"] = suite.hist_group_codes
        arrays["hist_ids"] = suite.hist_ids.astype(str)
    for name, ms in suite.models.items():
        arrays[f"logit__{name}"] = ms.logit
        arrays[f"quad__{name}"] = ms.quad
        arrays[f"W__{name}"] = ms.W
        arrays[f"row__{name}"] = ms.row_of_case
        arrays[f"objective__{name}"] = ms.objective
        arrays[f"ntrain__{name}"] = ms.n_train
        arrays[f"oof__{name}"] = ms.oof_logit
        arrays[f"fullW__{name}"] = ms.full_W
    reference = config.model.reference
    meta: dict[str, Any] = {
        "id": sid,
        "format": SNAPSHOT_FORMAT,
        "version": __version__,
        "study": config.name,
        "config_digest": config.digest(),
        "cross_fitted": config.cross_fitted,
        "history_file": str(config.data.history),
        "pending_file": str(config.data.pending) if config.data.pending else None,
        "n_cases": len(suite.case_ids),
        "n_history": len(suite.hist_y),
        "models": list(suite.models),
        "reference": reference,
        "lenses": [
            {
                "name": lens.name,
                "cost_false_favourable": lens.cost_false_favourable,
                "cost_false_unfavourable": lens.cost_false_unfavourable,
            }
            for lens in config.lenses
        ],
        "group_columns": list(config.data.group),
        "group_levels": suite.group_levels,
        "columns": suite.encoder.columns,
        "column_source": suite.encoder.column_source,
        "encoder": suite.encoder.to_json(),
        "masks": suite.masks,
        "proxies": suite.proxies.to_json(),
        "metrics": suite.metrics,
        "penalty": config.model.penalty,
        "folds": config.model.folds,
        "seed": config.seed,
        "notes": suite.notes,
        "fit_flags": suite.fit_flags,  # closecall.suite.FitFlags (issue 10, item 4)
    }
    return Snapshot(sid, meta, arrays)


def snapshot_dir(config: StudyConfig, sid: str) -> Path:
    return config.workdir / "snapshots" / sid


def save_snapshot(config: StudyConfig, snap: Snapshot) -> Path:
    """Write atomically: a temporary folder renamed into place."""
    final = snapshot_dir(config, snap.id)
    final.parent.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=f".{snap.id}-", dir=final.parent))
    try:
        for name, arr in snap.arrays.items():
            np.save(tmp / f"{name}.npy", np.ascontiguousarray(arr), allow_pickle=False)
        (tmp / "meta.json").write_text(json.dumps(snap.meta, indent=1, default=_json_default))
        if final.exists():
            shutil.rmtree(tmp)
        else:
            os.replace(tmp, final)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return final


def _json_default(obj: Any) -> Any:
    if isinstance(obj, np.generic):
        return obj.item()
    if isinstance(obj, np.ndarray):
        return obj.tolist()
    return str(obj)


def load_snapshot(folder: Path) -> Snapshot:
    """Load a snapshot folder; arrays are memory-mapped read-only, never unpickled."""
    meta_path = folder / "meta.json"
    if not meta_path.exists():
        raise UserError(f"{folder}: not a complete snapshot", "run 'closecall fit' again")
    meta = json.loads(meta_path.read_text())
    if meta.get("format") != SNAPSHOT_FORMAT:
        raise UserError(f"{folder}: snapshot format {meta.get('format')} is not supported")
    arrays: dict[str, np.ndarray] = {}
    for f in folder.glob("*.npy"):
        arrays[f.stem] = np.load(f, mmap_mode="r", allow_pickle=False)
    return Snapshot(meta["id"], meta, arrays)
