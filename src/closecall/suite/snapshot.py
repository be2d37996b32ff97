"""Snapshots: one fitted suite with every per-case result, stored as JSON + NumPy arrays.

A snapshot lives in ``<study>/.closecall/snapshots/<id>/``: ``meta.json`` plus one ``.npy``
file per array, written into a temporary folder and renamed into place, so a snapshot is either
complete or absent. Arrays are loaded with ``allow_pickle=False`` (never unpickle a user's file)
and memory-mapped, so opening a large snapshot is quick.

The cache is evidence, so it is checked: meta.json carries an integrity table (byte size,
SHA-256, dtype and shape of every array file, and the SHA-256 of meta.json's own content), and
loading refuses a snapshot that is damaged, edited, incomplete, foreign or of another format,
with the fix :data:`REFIT_FIX` (fit again with ``refit``, which rebuilds it without
reading it: ``closecall fit --refit`` on the command line).

The id hashes the data files' bytes, the study config (the parts that change the fit) and the
package version: a changed input gives a new id, an unchanged one reuses the cache.
"""

from __future__ import annotations

import contextlib
import hashlib
import json
import os
import re
import shutil
import tempfile
from collections.abc import Callable
from dataclasses import dataclass, field
from functools import cached_property
from pathlib import Path
from typing import TYPE_CHECKING, Any, NoReturn

import numpy as np

from closecall import __version__
from closecall.core.errors import Fix, UserError
from closecall.core.numbers import logit
from closecall.core.shared import make_shared_dirs, permission_error, share_dir
from closecall.core.vocabulary import decision_word
from closecall.setup.config import CostLens, StudyConfig
from closecall.setup.files import require_file

if TYPE_CHECKING:  # heavy modules, needed only when fitting or encoding (pandas)
    from closecall.setup.encode import Encoder
    from closecall.suite.fit import SuiteResult
    from closecall.suite.proxies import ProxyReport

_FileState = tuple[str, tuple[tuple[str, int, int, int, int], ...]]

_Bad = Callable[[str], NoReturn]  # raises SnapshotDamaged naming the problem

SNAPSHOT_FORMAT = 3
"""Layout version of a snapshot folder; part of every snapshot id (3: with its integrity table)."""

_BLOCK = 1 << 22  # read files in 4 MiB blocks when hashing
_HEX64 = re.compile(r"^[0-9a-f]{64}$")
_MAX_META_BYTES = 64 << 20
REFIT_FIX = Fix(
    "refit",
    switch=True,
    command="fit",
    purpose="to rebuild it from the data (the ledger is not touched)",
)
"""The fix for a damaged snapshot: fit again without reading it (each view words the step)."""


def _sha256_file(path: Path) -> str:
    """SHA-256 of a file read in 4 MiB blocks (OSError passes through)."""
    h = hashlib.sha256()
    buf = bytearray(_BLOCK)
    view = memoryview(buf)
    with path.open("rb", buffering=0) as fh:
        while n := fh.readinto(buf):
            h.update(view[:n])
    return h.hexdigest()


def file_digest(path: Path) -> str:
    """SHA-256 of a file's bytes."""
    require_file(path)
    return _sha256_file(path)


def _stat_key(path: Path, st: os.stat_result) -> str:
    # st_ctime_ns changes on every write and cannot be set by a user (os.utime sets only
    # atime and mtime), so an edit that keeps the size and the modification time is still seen
    return f"{path}|{st.st_size}|{st.st_mtime_ns}|{st.st_ino}|{st.st_ctime_ns}"


def _read_digest_cache(cache: Path) -> dict[str, str]:
    """The digests cache's valid entries; anything unreadable or malformed counts as absent."""
    try:
        known = json.loads(cache.read_bytes())
    except (OSError, ValueError, RecursionError):
        return {}
    if not isinstance(known, dict):
        return {}
    return {k: v for k, v in known.items() if isinstance(v, str) and _HEX64.match(v)}


def cached_file_digest(path: Path, cache_dir: Path, *, fresh: bool = False) -> str:
    """file_digest, remembered in ``cache_dir/digests.json`` per path, size, mtime, inode, ctime.

    Reading 850,000 rows to hash them costs about a second; every command that opens the
    study needs the id, so an unchanged file is not read again. Any write to the file changes
    its ctime (which a user cannot set back), so an edit that keeps size and modification time
    is still rehashed. ``fresh`` rehashes regardless (``fit`` and ``record`` do). A damaged
    cache file is ignored and rewritten.
    """
    require_file(path)
    resolved = path.resolve()
    st = resolved.stat()
    key = _stat_key(resolved, st)
    cache = cache_dir / "digests.json"
    known = _read_digest_cache(cache)
    if not fresh and key in known:
        return known[key]
    try:
        digest = _sha256_file(resolved)
    except OSError as exc:
        raise UserError(
            f"{path}: cannot be read ({exc.strerror or exc})",
            "make the file readable for your login",
        ) from None
    if _stat_key(resolved, resolved.stat()) != key:  # written to while being read: don't keep
        return digest
    prefix = f"{resolved}|"
    fresh_table = {k: v for k, v in known.items() if not k.startswith(prefix)}
    fresh_table[key] = digest
    tmp = cache.with_name(f".digests.{os.getpid()}.tmp")
    try:
        make_shared_dirs(cache_dir)
        tmp.write_text(json.dumps(fresh_table))
        os.replace(tmp, cache)
    except OSError:  # a read-only study folder, or something odd in the cache's place
        with contextlib.suppress(OSError):
            tmp.unlink()
    return digest


def data_digests(config: StudyConfig, *, fresh: bool = False) -> dict[str, str | None]:
    """SHA-256 of the history and pending files' bytes (pending None when there is none)."""
    cache_dir = config.workdir
    pending = config.data.pending
    return {
        "history": cached_file_digest(config.data.history, cache_dir, fresh=fresh),
        "pending": cached_file_digest(pending, cache_dir, fresh=fresh) if pending else None,
    }


def id_from_digests(
    digests: dict[str, str | None], config_digest: str, version: str = __version__
) -> str:
    """The snapshot id: a hash of the data files' digests, the config digest and the version."""
    h = hashlib.sha256()
    for part in ("history", "pending"):
        d = digests.get(part)
        h.update(d.encode() if d is not None else b"-")
    h.update(config_digest.encode())
    h.update(f"closecall {version} format {SNAPSHOT_FORMAT}".encode())
    return h.hexdigest()[:16]


def snapshot_id(config: StudyConfig, *, fresh: bool = False) -> str:
    """Hash of data (the files' content) + config + package version.

    With ``fresh`` the data files are read and hashed again rather than taken from the
    digests cache.
    """
    return id_from_digests(data_digests(config, fresh=fresh), config.digest())


@dataclass
class Snapshot:
    """A fitted suite and its per-case results (read-only)."""

    id: str
    meta: dict[str, Any]
    arrays: dict[str, np.ndarray] = field(repr=False)
    folder: Path | None = field(default=None, repr=False)  # where it was loaded from
    file_state: _FileState | None = field(default=None, repr=False)  # its files when loaded

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
        from closecall.setup.encode import Encoder  # imports pandas: not at start-up

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
        from closecall.suite.proxies import ProxyReport

        return ProxyReport.from_json(self.meta["proxies"])

    @property
    def metrics(self) -> list[dict[str, Any]]:
        return list(self.meta["metrics"])


def build_snapshot(
    sid: str,
    config: StudyConfig,
    suite: SuiteResult,
    digests: dict[str, str | None] | None = None,
) -> Snapshot:
    """Gather a fitted suite into a Snapshot (not yet saved).

    ``digests`` are the data files' SHA-256 the id was made from (hashed afresh when None);
    meta.json records them so that the id can be checked against them.
    """
    if digests is None:
        digests = data_digests(config, fresh=True)
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
    arrays.update(suite.card_arrays)  # the deployed scorecard (closecall.suite.scorecard_study)
    reference = config.model.reference
    meta: dict[str, Any] = {
        "id": sid,
        "format": SNAPSHOT_FORMAT,
        "version": __version__,
        "study": config.name,
        "config_digest": config.digest(),
        "data_digests": dict(digests),
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
        "fit_flags": suite.fit_flags,  # closecall.suite.fit.FitFlags (issue 10, item 4)
    }
    if suite.card_meta is not None:
        meta["deployed_card"] = suite.card_meta
    return Snapshot(sid, meta, arrays)


def snapshot_dir(config: StudyConfig, sid: str) -> Path:
    return config.workdir / "snapshots" / sid


# --------------------------------------------------------------------------- writing


def _meta_digest(meta: dict[str, Any]) -> str:
    """SHA-256 of meta.json's content apart from its integrity table (canonical JSON)."""
    body = {k: v for k, v in meta.items() if k != "integrity"}
    text = json.dumps(body, sort_keys=True, separators=(",", ":"), ensure_ascii=True)
    return hashlib.sha256(text.encode()).hexdigest()


def _remove_aside(path: Path) -> None:
    """Move whatever is at ``path`` (folder, file, link) out of the way, then delete it."""
    if not os.path.lexists(path):
        return
    aside = path.with_name(f".{path.name}-old-{os.getpid()}-{os.urandom(4).hex()}")
    os.rename(path, aside)
    if aside.is_dir() and not aside.is_symlink():
        shutil.rmtree(aside, ignore_errors=True)
    else:
        with contextlib.suppress(OSError):
            aside.unlink()


def save_snapshot(config: StudyConfig, snap: Snapshot, *, replace: bool = False) -> Path:
    """Write atomically: a temporary folder renamed into place.

    meta.json gets an integrity table: the byte size, SHA-256, dtype and shape of every
    array file, and the SHA-256 of meta.json's own content apart from that table. With
    ``replace`` whatever is at the snapshot's place (a damaged snapshot, a file) is moved
    aside and deleted, never read; without it an existing snapshot is kept as it is.
    """
    final = snapshot_dir(config, snap.id)
    try:
        make_shared_dirs(final.parent)
        tmp = Path(tempfile.mkdtemp(prefix=f".{snap.id}-", dir=final.parent))
        share_dir(tmp)  # mkdtemp makes 0700: the team's other members must read it
    except PermissionError as exc:
        raise permission_error(exc.filename or final.parent, "write a snapshot in") from None
    except OSError as exc:
        raise UserError(
            f"cannot write the snapshot under {final.parent}: {exc.strerror or exc}",
            f"make {config.workdir} a folder you can write to (it holds closecall's cache only)",
        ) from None
    try:
        table: dict[str, dict[str, Any]] = {}
        for name, arr in snap.arrays.items():
            data = np.ascontiguousarray(arr)
            if data.dtype.hasobject:  # an internal error: never write a pickle
                raise ValueError(f"array {name} has Python objects; a snapshot holds none")
            path = tmp / f"{name}.npy"
            np.save(path, data, allow_pickle=False)
            table[name] = {
                "bytes": path.stat().st_size,
                "sha256": _sha256_file(path),
                "dtype": data.dtype.str,
                "shape": list(data.shape),
            }
        meta = {k: v for k, v in snap.meta.items() if k != "integrity"}
        meta.update(id=snap.id, format=SNAPSHOT_FORMAT)
        meta = json.loads(json.dumps(meta, default=_json_default))  # exactly what is read back
        meta["integrity"] = {"meta_sha256": _meta_digest(meta), "arrays": table}
        (tmp / "meta.json").write_text(json.dumps(meta, indent=1))
        if replace:
            _remove_aside(final)
        if os.path.lexists(final):  # another process wrote it first: keep theirs
            shutil.rmtree(tmp)
        else:
            os.replace(tmp, final)
            _VERIFIED.add(_folder_state(final))  # digests just taken from these files
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


# --------------------------------------------------------------------------- reading and checking

# Snapshot folders whose files were checked in this process, as (folder, per-file stat) keys:
# a file that is written to gets a new modification and change time, so a key never matches a
# changed folder and its files are hashed again.
_VERIFIED: set[_FileState] = set()


def _folder_state(folder: Path) -> _FileState:
    """(folder, sorted (name, size, mtime, inode, ctime) of meta.json and every .npy)."""
    rows = []
    with os.scandir(folder) as it:
        for entry in it:
            if entry.name == "meta.json" or entry.name.endswith(".npy"):
                st = entry.stat()
                rows.append((entry.name, st.st_size, st.st_mtime_ns, st.st_ino, st.st_ctime_ns))
    return str(folder.resolve()), tuple(sorted(rows))


class SnapshotDamaged(UserError):
    """A snapshot folder that is damaged, edited, incomplete or not this version's."""


def _is_int(v: Any) -> bool:
    return isinstance(v, int) and not isinstance(v, bool)


def _is_num(v: Any) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool)


def _list_of(kind: type | tuple[type, ...]) -> Any:
    return lambda v: isinstance(v, list) and all(isinstance(x, kind) for x in v)


def _is_digest_or_none(v: Any) -> bool:
    return v is None or (isinstance(v, str) and bool(_HEX64.match(v)))


def _is_lens(v: Any) -> bool:
    return (
        isinstance(v, dict)
        and set(v) == {"name", "cost_false_favourable", "cost_false_unfavourable"}
        and isinstance(v["name"], str)
        and _is_num(v["cost_false_favourable"])
        and _is_num(v["cost_false_unfavourable"])
    )


# key -> (what it should be, check); the keys every reader of a snapshot relies on
_META_SCHEMA: dict[str, tuple[str, Any]] = {
    "version": ("text", lambda v: isinstance(v, str)),
    "config_digest": ("a SHA-256 in hex", lambda v: isinstance(v, str) and _HEX64.match(v)),
    "data_digests": (
        "{'history': SHA-256, 'pending': SHA-256 or null}",
        lambda v: (
            isinstance(v, dict)
            and set(v) == {"history", "pending"}
            and isinstance(v["history"], str)
            and all(_is_digest_or_none(x) for x in v.values())
        ),
    ),
    "cross_fitted": ("true or false", lambda v: isinstance(v, bool)),
    "n_cases": ("a whole number", lambda v: _is_int(v) and v >= 0),
    "n_history": ("a whole number", lambda v: _is_int(v) and v >= 0),
    "models": ("a non-empty list of text", lambda v: bool(v) and _list_of(str)(v)),
    "reference": ("text", lambda v: isinstance(v, str)),
    "lenses": (
        "a non-empty list of {name, cost_false_favourable, cost_false_unfavourable}",
        lambda v: isinstance(v, list) and bool(v) and all(_is_lens(x) for x in v),
    ),
    "group_levels": ("a list of text", _list_of(str)),
    "columns": ("a list of text", _list_of(str)),
    "column_source": ("a list of text", _list_of(str)),
    "encoder": ("a list of objects", _list_of(dict)),
    "masks": ("an object", lambda v: isinstance(v, dict)),
    "proxies": (
        "an object with 'features' and 'proxies' lists",
        lambda v: (
            isinstance(v, dict)
            and _list_of(dict)(v.get("features"))
            and _list_of(str)(v.get("proxies"))
        ),
    ),
    "metrics": ("a list of objects", _list_of(dict)),
    "notes": ("a list of text", _list_of(str)),
}


def _required_arrays(meta: dict[str, Any]) -> set[str]:
    """The arrays every reader of this snapshot needs."""
    names = {"case_ids", "group_codes", "outcome", "X", "hist_y", "fold"}
    if not meta["cross_fitted"]:
        names |= {"hist_X", "hist_group_codes", "hist_ids"}
    for m in meta["models"]:
        names |= {f"{k}__{m}" for k in ("logit", "quad", "W", "row", "objective", "oof")}
    return names


def _read_meta(folder: Path, bad: _Bad) -> dict[str, Any]:
    """meta.json as a dict with a well-formed integrity table, or a refusal through ``bad``."""
    path = folder / "meta.json"
    if not path.is_file():
        bad("meta.json is missing (an incomplete or foreign snapshot)")
    try:
        size = path.stat().st_size
        if size > _MAX_META_BYTES:
            bad(f"meta.json is {size:,} bytes, far more than a snapshot's")
        meta = json.loads(path.read_bytes().decode("utf-8"))
    except OSError as exc:
        bad(f"meta.json cannot be read ({exc.strerror or exc})")
    except UnicodeDecodeError:
        bad("meta.json is not UTF-8 text")
    except (ValueError, RecursionError) as exc:
        bad(f"meta.json is not valid JSON ({str(exc)[:120]})")
    if not isinstance(meta, dict):
        bad(f"meta.json holds a JSON {type(meta).__name__}, not an object")
    fmt = meta.get("format")
    if not _is_int(fmt) or fmt != SNAPSHOT_FORMAT:
        bad(
            f"meta.json says snapshot format {fmt!r}; this closecall ({__version__}) reads "
            f"format {SNAPSHOT_FORMAT}"
        )
    sid = meta.get("id")
    if sid != folder.name:
        bad(f"meta.json names snapshot {sid!r}, not {folder.name} (it belongs elsewhere)")
    integrity = meta.get("integrity")
    if not (
        isinstance(integrity, dict)
        and isinstance(integrity.get("meta_sha256"), str)
        and isinstance(integrity.get("arrays"), dict)
        and all(
            isinstance(row, dict)
            and _is_int(row.get("bytes"))
            and isinstance(row.get("sha256"), str)
            and isinstance(row.get("dtype"), str)
            and _list_of(int)(row.get("shape"))
            and re.fullmatch(r"[A-Za-z0-9_]+", name)
            for name, row in integrity["arrays"].items()
        )
    ):
        bad("meta.json has no valid integrity table (array sizes and digests)")
    if _meta_digest(meta) != integrity["meta_sha256"]:
        bad("meta.json was edited after it was written (its content no longer matches its digest)")
    for key, (what, ok) in _META_SCHEMA.items():
        if key not in meta:
            bad(f"meta.json has no '{key}'")
        if not ok(meta[key]):
            bad(f"meta.json: '{key}' should be {what}, not {json.dumps(meta[key])[:60]}")
    if meta["reference"] not in meta["models"]:
        bad(f"meta.json: the reference model '{meta['reference']}' is not among its models")
    # the id is the hash of the digests recorded beside it: the snapshot names its own inputs
    if id_from_digests(meta["data_digests"], meta["config_digest"], meta["version"]) != sid:
        bad("meta.json's id does not match the data and config digests recorded in it")
    return meta


def _check_arrays(folder: Path, table: dict[str, dict[str, Any]], bad: _Bad) -> None:
    """Every array file listed, none other; each one's header, size and SHA-256 as recorded."""
    on_disk = {p.name[:-4] for p in folder.iterdir() if p.name.endswith(".npy")}
    missing = sorted(set(table) - on_disk)
    extra = sorted(on_disk - set(table))
    if missing:
        bad(f"array file(s) missing: {', '.join(n + '.npy' for n in missing[:5])}")
    if extra:
        bad(f"array file(s) not written with it: {', '.join(n + '.npy' for n in extra[:5])}")
    for name, row in table.items():
        path = folder / f"{name}.npy"
        if not path.is_file():
            bad(f"{name}.npy is not a file")
        try:
            with path.open("rb") as fh:
                version = np.lib.format.read_magic(fh)
                if version == (1, 0):
                    shape, fortran, dtype = np.lib.format.read_array_header_1_0(fh)
                elif version == (2, 0):
                    shape, fortran, dtype = np.lib.format.read_array_header_2_0(fh)
                else:
                    bad(f"{name}.npy is in .npy version {version}, which a snapshot never uses")
            size = path.stat().st_size
        except OSError as exc:
            bad(f"{name}.npy cannot be read ({exc.strerror or exc})")
        except (ValueError, SyntaxError, EOFError):
            bad(f"{name}.npy is not a NumPy array file (its header is damaged)")
        if dtype.hasobject:
            bad(f"{name}.npy holds Python objects (a pickle); it is refused, never loaded")
        if dtype.str != row["dtype"] or list(shape) != row["shape"] or fortran:
            bad(
                f"{name}.npy holds a {dtype.str} array of shape {tuple(shape)}; "
                f"a {row['dtype']} array of shape {tuple(row['shape'])} was written"
            )
        if size != row["bytes"]:
            bad(f"{name}.npy is {size:,} bytes; {row['bytes']:,} were written (cut or extended)")
        try:
            digest = _sha256_file(path)
        except OSError as exc:
            bad(f"{name}.npy cannot be read ({exc.strerror or exc})")
        if digest != row["sha256"]:
            bad(f"{name}.npy does not match the SHA-256 recorded when it was written (damaged)")


def _bad(folder: Path, fix: Fix) -> _Bad:
    def bad(problem: str) -> NoReturn:
        raise SnapshotDamaged(f"snapshot {folder}: {problem}", fix)

    return bad


def load_snapshot(folder: Path, *, fix: Fix = REFIT_FIX) -> Snapshot:
    """Load a snapshot folder after checking it; arrays memory-mapped read-only, never unpickled.

    Checked: meta.json is JSON of this format with the expected keys and types, names this
    folder, and matches its own digest; the array files are exactly those listed, each with
    the recorded header, byte size and SHA-256 (hashed once per process while the files'
    size, modification time, inode and change time stay the same).

    Raises
    ------
    SnapshotDamaged
        (a UserError) naming the folder and what is wrong, with ``fix``.
    """
    bad = _bad(folder, fix)
    if not folder.is_dir():
        bad("is not a folder (a file or a broken link is in its place)")
    try:
        before = _folder_state(folder)
        meta = _read_meta(folder, bad)
        table: dict[str, dict[str, Any]] = meta["integrity"]["arrays"]
        absent = sorted(_required_arrays(meta) - set(table))
        if absent:
            bad(f"meta.json lists no {', '.join(absent[:5])} (not a complete snapshot)")
        if before not in _VERIFIED:
            _check_arrays(folder, table, bad)
        arrays: dict[str, np.ndarray] = {}
        for name, row in table.items():
            if row["bytes"] and np.prod(row["shape"]) > 0:
                arrays[name] = np.load(folder / f"{name}.npy", mmap_mode="r", allow_pickle=False)
            else:  # an empty array cannot be memory-mapped
                arrays[name] = np.load(folder / f"{name}.npy", allow_pickle=False)
        after = _folder_state(folder)
    except OSError as exc:
        bad(f"cannot be read ({exc.strerror or exc})")
    except ValueError as exc:
        bad(f"an array cannot be loaded ({str(exc)[:120]})")
    if after != before:
        raise SnapshotDamaged(
            f"snapshot {folder}: its files changed while they were being read",
            "run the command again (another closecall may be rebuilding it)",
        )
    if len(arrays["case_ids"]) != meta["n_cases"]:
        bad(f"holds {len(arrays['case_ids']):,} cases; meta.json says {meta['n_cases']:,}")
    _VERIFIED.add(before)
    return Snapshot(str(meta["id"]), meta, arrays, folder=folder, file_state=before)


def recheck_snapshot(snap: Snapshot, *, fix: Fix = REFIT_FIX) -> None:
    """Refuse a snapshot whose files changed on disk since it was loaded (before recording).

    Its arrays are memory-mapped, so bytes written to them after loading would reach the
    numbers a review records. Unchanged files (same size, modification time, inode and change
    time) cost one ``stat`` each; changed ones are hashed against the recorded digests.
    """
    folder = snap.folder
    if folder is None:  # built in memory, never loaded from disk
        return
    bad = _bad(folder, fix)
    try:
        if snap.file_state is not None and _folder_state(folder) == snap.file_state:
            return
        meta = _read_meta(folder, bad)
    except OSError as exc:
        bad(f"changed after the study was opened and cannot be read ({exc.strerror or exc})")
    if meta != snap.meta:
        bad("meta.json changed after the study was opened")
    _check_arrays(folder, meta["integrity"]["arrays"], bad)
