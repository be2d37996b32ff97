"""Where closecall writes: never onto a study's own files, never over a file without --force.

Every file a command writes (an export, the HTML report, a drafted config, a pseudonymisation
key, the demo study) goes through this module. An output that resolves onto one of the study's
files — its ledger (and SQLite's ``-wal``, ``-shm`` and ``-journal`` companions), its config,
its data files, the key file, or anything in the snapshot folder ``.closecall/`` — is refused,
whether it is named directly, through ``..``, through a symbolic link or as a hard link of the
same file. Any other existing file is replaced only when the caller passes ``force``. Files are
written to a temporary name in the same folder, flushed to disk and renamed into place, so a
crash leaves either the old file or the new one; they are created owner-only (mode 600) unless
the caller asks otherwise.

No heavy imports here: the CLI checks outputs before it loads a study.
"""

from __future__ import annotations

import contextlib
import os
import secrets
import stat
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING

from closecall.core.errors import Fix, UserError

if TYPE_CHECKING:
    from closecall.setup.config import StudyConfig

#: Mode of every export and report (they name reviewers and cases): owner read/write only.
OWNER_ONLY = 0o600
#: SQLite's companions of a database file (write-ahead log, shared memory, rollback journal).
LEDGER_COMPANIONS = ("-wal", "-shm", "-journal")
#: The first 16 bytes of every SQLite database file (https://www.sqlite.org/fileformat.html).
SQLITE_HEADER = b"SQLite format 3\x00"
#: The snapshot and cache folder of every study (see StudyConfig.workdir).
WORKDIR_NAME = ".closecall"
#: What ``closecall demo`` writes into its folder.
DEMO_FILES = (
    "closecall.toml",
    "history.csv",
    "pending.csv",
    "pending_outcomes.csv",
    "scorecard.csv",
)


@dataclass(frozen=True)
class StudyFile:
    """A path an output may never land on.

    Attributes
    ----------
    path
        Absolute, with symbolic links resolved (the file need not exist yet).
    what
        What it is, for the message: ``"the study's ledger"``.
    kind
        ``config``, ``ledger`` (the ledger and its companions), ``data``, ``cache`` (a folder
        whose whole content is protected: the snapshot folder), ``key`` or ``outcomes``.
    """

    path: Path
    what: str
    kind: str  # config, ledger, data, cache, key or outcomes

    @property
    def folder(self) -> bool:
        return self.kind == "cache"


def _real(path: str | Path) -> Path:
    """Absolute path with ``..`` and every symbolic link resolved (missing parts kept)."""
    return Path(os.path.realpath(Path(path).expanduser()))


def study_files(
    config: StudyConfig,
    *,
    key_file: str | Path | None = None,
    outcomes: str | Path | None = None,
) -> tuple[StudyFile, ...]:
    """The files of a study that no output may overwrite.

    Parameters
    ----------
    config
        The study's config.
    key_file
        The pseudonymisation key file of this command, if any.
    outcomes
        A file of known outcomes this command reads, if any.
    """
    ledger = config.review.ledger
    found: list[StudyFile] = [StudyFile(_real(config.path), "the study's config", "config")]
    if isinstance(ledger, Path):  # (a ledger in PostgreSQL has no file here)
        found.append(StudyFile(_real(ledger), "the study's ledger", "ledger"))
        found += [
            StudyFile(
                _real(f"{ledger}{suffix}"),
                f"the ledger's SQLite companion ({suffix[1:]})",
                "ledger",
            )
            for suffix in LEDGER_COMPANIONS
        ]
    found.append(StudyFile(_real(config.data.history), "the study's history data file", "data"))
    if config.data.pending is not None:
        found.append(StudyFile(_real(config.data.pending), "the study's pending data file", "data"))
    found.append(StudyFile(_real(config.workdir), "the study's snapshot folder", "cache"))
    if key_file is not None:
        found.append(StudyFile(_real(key_file), "the pseudonymisation key file", "key"))
    if outcomes is not None:
        found.append(StudyFile(_real(outcomes), "the outcomes file this report reads", "outcomes"))
    return tuple(found)


def _identity(path: Path) -> tuple[int, int] | None:
    try:
        st = path.stat()
    except OSError:
        return None
    return (st.st_dev, st.st_ino) if stat.S_ISREG(st.st_mode) else None


def _is_sqlite(path: Path) -> bool:
    try:
        with open(path, "rb") as fh:
            return fh.read(len(SQLITE_HEADER)) == SQLITE_HEADER
    except OSError:
        return False


def _how(path: Path, real: Path) -> str:
    """How the user's path reaches ``real``: '' when named directly, else an explanation."""
    given = Path(os.path.abspath(path.expanduser()))
    return "" if given == real else f" (it leads to {real})"


def _neighbour_files(real: Path) -> tuple[StudyFile, ...]:
    """The files of another study whose config sits in the output's folder, if any."""
    from closecall.setup.config import CONFIG_NAME, load_config  # light: tomllib and dataclasses

    candidate = real.parent / CONFIG_NAME
    if not candidate.is_file():
        return ()
    try:
        return study_files(load_config(candidate))
    except Exception:  # not a study we can read: only the generic checks apply
        return ()


def _snapshot_folder_above(real: Path) -> Path | None:
    """The nearest ``.closecall`` folder holding ``real`` that belongs to a study, if any.

    A ``.closecall`` folder is a study's when it holds snapshots or the digest cache, or sits
    beside a ``closecall.toml``; another folder of that name (a user's own) does not count.
    """
    from closecall.setup.config import CONFIG_NAME

    for folder in (real, *real.parents):
        if folder.name == WORKDIR_NAME and (
            (folder / "snapshots").is_dir()
            or (folder / "digests.json").is_file()
            or (folder.parent / CONFIG_NAME).is_file()
        ):
            return folder
    return None


def protected_reason(
    path: str | Path, protected: Iterable[StudyFile], *, may_replace: tuple[str, ...] = ()
) -> str | None:
    """Why ``path`` may not be written (None when it may).

    Besides ``protected``, the files of a study whose config sits in the output's own folder
    count too (an export aimed at another study's ledger), and so does any path inside a
    ``.closecall`` folder and any existing SQLite database. Study files of a kind listed in
    ``may_replace`` are allowed (``init --force`` replaces an earlier config).
    """
    path = Path(path)
    real = _real(path)
    files = [f for f in (*protected, *_neighbour_files(real)) if f.kind not in may_replace]
    ident = _identity(real)
    for f in files:
        if f.folder:
            if real == f.path or real.is_relative_to(f.path):
                return f"is inside {f.what} ({f.path}){_how(path, real)}"
            continue
        if real == f.path:
            return f"is {f.what}{_how(path, real)}"
        if ident is not None and ident == _identity(f.path):
            return f"is the same file as {f.what} ({f.path}, a hard link)"
    workdir = _snapshot_folder_above(real)
    if workdir is not None:
        return f"is inside a study's snapshot folder ({workdir}){_how(path, real)}"
    if _is_sqlite(real):
        return f"is a SQLite database (a ledger?){_how(path, real)}"
    return None


def check_output(
    path: str | Path,
    protected: Sequence[StudyFile],
    *,
    field: str,
    force: bool = False,
    example: str = "reviews.csv",
    may_replace: tuple[str, ...] = (),
) -> Path:
    """Refuse an output path that would overwrite a study file, a folder, or (without
    ``force``) any existing file; return the real path to write.

    ``field`` is the engine's name of the output (``out``, ``html``): each view words it.

    Raises
    ------
    UserError
        Naming the path, what it is, and the fix.
    """
    path = Path(path)
    reason = protected_reason(path, protected, may_replace=may_replace)
    if reason is not None:
        raise UserError(
            f"{path}: {reason}; writing there would destroy it",
            Fix(field, range="a new file", example=example),
            about=field,
        )
    real = _real(path)
    if real.is_dir():
        raise UserError(f"{path}: is a folder", Fix(field, range="a file"), about=field)
    if real.exists() and not force:
        raise UserError(f"{path}: already exists", _replace_fix(field), about=field)
    if not real.parent.is_dir():
        raise UserError(
            f"{path}: the folder {real.parent} does not exist",
            "create the folder first, or name a file in an existing folder",
            about=field,
        )
    return real


def _replace_fix(field: str) -> Fix:
    """The fix for an output file that exists: replace it, or name another."""
    return Fix(
        "force", switch=True, purpose="to replace it", alternative=Fix(field, range="a new file")
    )


def check_key_file(
    path: str | Path, protected: Sequence[StudyFile], *, field: str = "key_file"
) -> Path:
    """Refuse a key file path that is one of the study's files (an existing key is fine)."""
    path = Path(path)
    reason = protected_reason(path, protected)
    if reason is not None:
        raise UserError(
            f"{path}: {reason}; it cannot hold the pseudonymisation key",
            Fix(field, range="a key file outside the study's files", example="~/.closecall-key"),
            about=field,
        )
    return _real(path)


def write_output(
    path: str | Path,
    data: bytes,
    protected: Sequence[StudyFile],
    *,
    field: str,
    force: bool = False,
    mode: int = OWNER_ONLY,
    example: str = "reviews.csv",
    may_replace: tuple[str, ...] = (),
) -> Path:
    """Write ``data`` to ``path`` safely; return the real path written.

    The path is checked as in :func:`check_output`. The bytes go to a new temporary file in the
    same folder, created with ``mode`` (owner-only by default; the umask can only narrow it),
    flushed to disk, then linked into place (a new file: an existing one is never replaced
    without ``force``) or renamed over the old file (``force``). A symbolic link is followed:
    the file it points to is replaced.

    Raises
    ------
    UserError
        The path is refused, or the file system refuses the write.
    """
    real = check_output(
        path, protected, field=field, force=force, example=example, may_replace=may_replace
    )
    tmp = real.with_name(f".{real.name}.{secrets.token_hex(6)}.tmp")
    try:
        fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL, mode)
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
        if force:
            os.replace(tmp, real)
        else:
            _link_new(tmp, real, field, path)
        _sync_folder(real.parent)
    except OSError as exc:
        raise UserError(
            f"{path}: cannot write the file ({exc.strerror})",
            "check the folder exists and you may write there, or name another file",
            about=field,
        ) from None
    finally:
        with contextlib.suppress(FileNotFoundError):
            tmp.unlink()
    return real


def _link_new(tmp: Path, real: Path, field: str, path: str | Path) -> None:
    """Put ``tmp`` in place at ``real`` only if nothing is there (atomic where links exist)."""
    try:
        os.link(tmp, real)
    except FileExistsError:
        raise UserError(f"{path}: already exists", _replace_fix(field), about=field) from None
    except OSError:  # no hard links on this file system: rename if still absent
        if real.exists():
            raise UserError(f"{path}: already exists", _replace_fix(field), about=field) from None
        os.rename(tmp, real)


def _sync_folder(folder: Path) -> None:
    """Make a new name in ``folder`` durable (best effort where folders cannot be opened)."""
    try:
        fd = os.open(folder, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


def check_config_output(path: str | Path, inputs: Sequence[StudyFile], *, force: bool) -> Path:
    """Where ``closecall init`` may write its draft: a new file, or with ``force`` an earlier
    config (a file that reads as TOML) — never a data file, a ledger or a snapshot."""
    real = check_output(
        path, inputs, field="out", force=force, example=CONFIG_EXAMPLE, may_replace=("config",)
    )
    if real.exists():
        import tomllib

        try:
            tomllib.loads(real.read_text(encoding="utf-8"))
        except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError):
            raise UserError(
                f"{path}: is not a study config (it does not read as TOML); only an earlier "
                "config may be replaced",
                Fix("out", range="a new file", example=CONFIG_EXAMPLE),
                about="out",
            ) from None
    return real


CONFIG_EXAMPLE = "closecall.toml"


def check_demo_folder(folder: str | Path) -> Path:
    """Refuse a demo folder that already holds a study (or is a file, or a snapshot folder).

    A new or empty folder is fine, and so is a folder of unrelated files; one holding a study
    config, a file the demo writes, a ledger or a snapshot folder is refused.
    """
    folder = Path(folder)
    real = _real(folder)
    fix = Fix("out", range="a new or empty folder", example="demo-study-2")
    if real.exists() and not real.is_dir():
        raise UserError(f"{folder}: is a file, not a folder", fix, about="out")
    reason = protected_reason(real, ())
    if reason is not None:  # a folder named like a file of the study next to it
        raise UserError(f"{folder}: {reason}", fix, about="out")
    if not real.is_dir():
        return real
    held = [n for n in (*DEMO_FILES, WORKDIR_NAME) if (real / n).exists()]
    held += sorted(p.name for p in real.glob("*.sqlite") if p.is_file())
    if held:
        raise UserError(
            f"{folder}: already holds a study ({', '.join(held)}); "
            "writing the demo there would replace its files",
            fix,
            about="out",
        )
    return real
