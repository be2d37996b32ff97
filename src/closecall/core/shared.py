"""Files a team shares: the study umask, folder modes and permission messages (docs/team.md).

The policy: every file and folder closecall creates inside a study is readable and writable by
the study folder's group — files 0660, folders 02770 (setgid, so what is made inside keeps the
folder's group) — and gives nothing to others, whatever the login's umask. closecall's commands
run under the process umask :data:`STUDY_UMASK` (007), so SQLite's ``-wal`` and ``-shm``
companions, snapshot files, the digests cache and drafts never exist, even for an instant,
with a narrower mode than the one another member needs to open them. Files meant for one
person (exports outside the study, key files) are created with explicit owner-only modes, which
the umask does not widen; a config or data file ``init`` and ``demo`` write keeps the login's
own umask (:func:`login_umask`).

A study with readers (docs/team.md, "Analysts"): when the study folder is a team's (setgid)
and lets others in (``o+rx``, set by ``closecall team setup --readers GROUP``, behind a gate
folder only that group may enter), what closecall creates there is readable by others too —
files 0664, folders 02775, umask :data:`READERS_UMASK` — so an analyst outside the writers'
group reads the ledger, the snapshots and the config, and writes nothing
(:func:`adopt_study_folder`). A private study folder (``0755``, no setgid) keeps 0660.
"""

from __future__ import annotations

import contextlib
import grp
import os
import pwd
import stat
from collections.abc import Iterator
from pathlib import Path

from closecall.core.errors import UserError

#: Process umask while closecall works in a study: group read/write, nothing for others.
STUDY_UMASK = 0o007
#: The same in a study whose folder lets readers in: others may read, never write.
READERS_UMASK = 0o002
#: Mode of a file closecall creates in a study, and of a folder (setgid added where the
#: parent has it); others' read bits are added in a study with readers.
FILE_MODE = 0o660
DIR_MODE = 0o770
READ_BITS = 0o004
READ_DIR_BITS = 0o005

_original: int | None = None
_readers = False


def use_study_umask() -> int:
    """Set the process umask to :data:`STUDY_UMASK`; the login's umask is remembered."""
    global _original, _readers
    old = os.umask(STUDY_UMASK)
    if _original is None:
        _original = old
    _readers = False
    return old


def has_readers(folder: Path) -> bool:
    """Whether a study folder is set up for readers outside its group: shared by a group
    (setgid) and open to others (they may enter and list it), as ``team setup --readers``
    makes it. A private study folder (``0755`` by the ordinary umask, no setgid) is not."""
    try:
        mode = folder.stat().st_mode
    except OSError:
        return False
    return mode & READ_DIR_BITS == READ_DIR_BITS and bool(mode & stat.S_ISGID)


def adopt_study_folder(folder: Path) -> None:
    """Follow the study folder's policy for what this process creates in it: readable by
    others when the folder lets readers in (:func:`has_readers`), else by the group only.

    Changes nothing unless :func:`use_study_umask` was called (the command line and review
    screen do; a library caller keeps its own umask) and the umask is still the one it set.
    """
    global _readers
    if _original is None or _current_umask() not in (None, STUDY_UMASK, READERS_UMASK):
        return  # the umask is no longer closecall's (a caller set its own since): leave it
    _readers = has_readers(folder)
    os.umask(READERS_UMASK if _readers else STUDY_UMASK)


def _current_umask() -> int | None:
    """The process umask, read without changing it (Linux ``/proc``); None where unknown."""
    try:
        with open("/proc/self/status", encoding="ascii") as status:
            for line in status:
                if line.startswith("Umask:"):
                    return int(line.split()[1], 8)
    except (OSError, ValueError):
        pass
    return None


def file_mode() -> int:
    """Mode for a file closecall creates in the study it works in (0660, or 0664 with
    readers)."""
    return FILE_MODE | (READ_BITS if _readers else 0)


@contextlib.contextmanager
def login_umask() -> Iterator[None]:
    """Create files with the login's own umask (a config or data file meant for its owner)."""
    if _original is None:
        yield
        return
    current = os.umask(_original)
    try:
        yield
    finally:
        os.umask(current)


def shared_dir_mode(folder: Path) -> int:
    """The mode a folder closecall made under ``folder``'s parent should have: 0770 (0775 in a
    study with readers, or under a folder set up for them, :func:`has_readers`, as a library
    caller's process, whose umask closecall leaves alone, sees it), plus the setgid bit when
    the parent has it (so the group carries on down)."""
    try:
        parent = folder.parent.stat().st_mode
    except OSError:
        parent = 0
    readers = _readers or (parent & READ_DIR_BITS == READ_DIR_BITS and bool(parent & stat.S_ISGID))
    return DIR_MODE | (READ_DIR_BITS if readers else 0) | (parent & stat.S_ISGID)


def share_dir(folder: Path) -> None:
    """Give a folder closecall just made (``mkdtemp`` makes 0700) the shared folder mode."""
    os.chmod(folder, shared_dir_mode(folder))


def make_shared_dirs(folder: Path) -> None:
    """Create ``folder`` and any missing parents, each new one with the shared folder mode
    (:func:`shared_dir_mode`) whatever the process umask: a library caller keeps its own
    umask (022 makes 0755 folders the group cannot write), yet the cache it creates in a
    team's study must let the next member refit; under a folder set up for readers others may
    read them too. Folders that already exist are left as they are."""
    missing = []
    current = Path(folder)
    while not current.exists():
        missing.append(current)
        if current.parent == current:
            break
        current = current.parent
    for new in reversed(missing):
        try:
            new.mkdir()
        except FileExistsError:  # made meanwhile by another process: theirs stands
            continue
        share_dir(new)


def describe(path: Path) -> str:
    """``path (owner alice, group reviewers, mode 0640)`` for the path or, when it does not
    exist, for its nearest existing parent."""
    target = Path(path)
    why = "does not exist"
    while True:
        try:
            st = target.lstat()
            break
        except OSError as exc:
            if isinstance(exc, PermissionError):
                why = "cannot be reached by this login"
            if target.parent == target:
                return str(path)
            target = target.parent
    try:
        owner = pwd.getpwuid(st.st_uid).pw_name
    except KeyError:
        owner = str(st.st_uid)
    try:
        group = grp.getgrgid(st.st_gid).gr_name
    except KeyError:
        group = str(st.st_gid)
    what = "" if target == Path(path) else f"{path} {why}; its folder "
    return f"{what}{target} (owner {owner}, group {group}, mode {stat.S_IMODE(st.st_mode):04o})"


def _group_of(path: Path) -> str:
    target = Path(path)
    while not target.exists() and target.parent != target:
        target = target.parent
    try:
        return grp.getgrgid(target.stat().st_gid).gr_name
    except (KeyError, OSError):
        return "GROUP"


def permission_error(path: object, action: str = "use") -> UserError:
    """One message for a file or folder this login may not use: the file, its owner, group
    and mode, and the command that fixes it (run by its owner or an administrator)."""
    p = Path(str(path)) if path else Path(".")
    target = p
    while not target.exists() and target.parent != target:
        target = target.parent
    group = _group_of(p)
    if target.is_dir():
        fix = f"chgrp -R {group} {target} && chmod -R g+rwX {target} && chmod g+s {target}"
    else:
        fix = f"chgrp {group} {target} && chmod g+rw {target}"
    return UserError(
        f"permission denied: cannot {action} {describe(p)}",
        f"ask its owner or an administrator to run: {fix}; 'closecall team check' lists "
        "every such problem in the study",
    )
