"""Is a study folder set up for a team? Each problem with the exact command that fixes it.

What docs/team.md asks for: the study folder in the writers' group with group rwx, setgid (new
files keep the group) and sticky (members cannot delete or replace each other's files), nothing
writable by others; every file and folder inside it in that group, files group read/write,
folders group rwx + setgid; the config owned by the folder's owner and writable by its owner
only; every listed reviewer a member of the group, every listed analyst an existing login.

A study with readers (analysts outside the writers' group, docs/team.md "Analysts"): the study
folder lets others enter and read (``o+rx``) and sits in a *gate* folder that others cannot
enter, whose group holds the readers, the reviewers and the supervisor; everything inside is
readable by others (files ``o+r``, folders ``o+rx``) and writable by the writers only. An
analyst who is not in the writers' group and has no such way in is reported.
"""

from __future__ import annotations

import grp
import os
import pwd
import shlex
import stat
from dataclasses import dataclass
from pathlib import Path

from closecall.core.errors import UserError
from closecall.core.shared import has_readers
from closecall.setup.config import StudyConfig


@dataclass(frozen=True)
class TeamProblem:
    """One thing set up wrong: ``path`` (or login), what is wrong, the command that fixes it."""

    where: str
    message: str
    fix: str


def _name(uid: int) -> str:
    try:
        return pwd.getpwuid(uid).pw_name
    except KeyError:
        return str(uid)


def _group(gid: int) -> str:
    try:
        return grp.getgrgid(gid).gr_name
    except KeyError:
        return str(gid)


def group_members(gid: int) -> set[str]:
    """Logins in the group: listed members and those whose primary group it is."""
    try:
        members = set(grp.getgrgid(gid).gr_mem)
    except KeyError:
        members = set()
    members |= {p.pw_name for p in pwd.getpwall() if p.pw_gid == gid}
    return members


def _q(path: Path) -> str:
    return shlex.quote(str(path))


def check_team(config: StudyConfig) -> list[TeamProblem]:
    """Every way the study folder, its files, the config and the login lists differ from the
    team set-up of docs/team.md (empty: the set-up is sound). Reads only."""
    root = config.root
    st = root.stat()
    gid = st.st_gid
    group = _group(gid)
    mode = stat.S_IMODE(st.st_mode)
    members = group_members(gid)
    problems = _study_folder_problems(root, _name(st.st_uid), mode, group, members)
    config_path = config.path
    readers = has_readers(root) or mode & 0o005 == 0o005  # open to others: a gate is needed
    gate = gate_folder(root) if readers else None
    problems += _config_problems(config_path, st.st_uid)
    if readers:
        problems += _config_unreadable(config_path)
    problems += _tree_problems(root, config_path, gid, group, readers)
    problems += _reader_problems(config, root, mode, members, readers, gate)
    problems += _login_problems(config, members, group)
    return problems


def _study_folder_problems(
    root: Path, owner: str, mode: int, group: str, members: set[str]
) -> list[TeamProblem]:
    """The study folder's own group and mode: shared, group rwx, setgid, sticky, not o+w."""
    problems = []
    if members <= {owner}:
        problems.append(
            TeamProblem(
                str(root),
                f"the study folder's group {group} holds no one but its owner: the reviewers "
                "cannot share it",
                f"chgrp -R WRITERS {_q(root)}  (WRITERS: the reviewers' group)",
            )
        )
    wants = (
        (stat.S_IRWXG, "is not group read/write/enter", f"chmod g+rwx {_q(root)}"),
        (
            stat.S_ISGID,
            "has no setgid bit: new files would not keep its group",
            f"chmod g+s {_q(root)}",
        ),
        (
            stat.S_ISVTX,
            "is not sticky: members can delete or replace each other's files",
            f"chmod +t {_q(root)}",
        ),
    )
    for bit, what, fix in wants:
        if mode & bit != bit:
            problems.append(
                TeamProblem(str(root), f"the study folder {what} (mode {mode:04o})", fix)
            )
    if mode & stat.S_IWOTH:
        problems.append(
            TeamProblem(
                str(root),
                f"the study folder is writable by others (mode {mode:04o})",
                f"chmod o-w {_q(root)}",
            )
        )
    return problems


def _config_unreadable(config_path: Path) -> list[TeamProblem]:
    """The config, when the readers (others) cannot read it."""
    if os.stat(config_path).st_mode & stat.S_IROTH:
        return []
    return [
        TeamProblem(
            str(config_path),
            "the config is not readable by others: the readers cannot open the study",
            f"chmod o+r {_q(config_path)}",
        )
    ]


def _tree_problems(
    root: Path, config_path: Path, gid: int, group: str, readers: bool
) -> list[TeamProblem]:
    """Every file and folder under the study folder but the config and symbolic links."""
    problems = []
    for dirpath, dirnames, filenames in os.walk(root):
        for name in [*dirnames, *filenames]:
            path = Path(dirpath) / name
            if path == config_path or path.is_symlink():
                continue
            problems += _file_problems(path, gid, group, readers)
    return problems


def _login_problems(config: StudyConfig, members: set[str], group: str) -> list[TeamProblem]:
    """Listed reviewers outside the study group or unknown here; listed analysts unknown here."""
    problems = []
    config_path = config.path
    for login in config.review.reviewers:
        if login in members:
            continue
        if not _login_exists(login):
            problems.append(
                TeamProblem(
                    login,
                    f"reviewer {login} is not a login on this server",
                    f"correct [review] reviewers in {_q(config_path)}",
                )
            )
            continue
        problems.append(
            TeamProblem(
                login,
                f"reviewer {login} is not in the study group {group}: cannot write the ledger",
                f"usermod -aG {group} {login}",
            )
        )
    problems += [
        TeamProblem(
            login,
            f"analyst {login} is not a login on this server",
            f"correct [review] analysts in {_q(config_path)}",
        )
        for login in config.review.analysts
        if not _login_exists(login)
    ]
    return problems


def gate_folder(root: Path) -> Path | None:
    """The nearest folder above ``root`` that others may not enter (None: every login on the
    server can reach ``root``)."""
    for parent in root.resolve().parents:
        try:
            if not parent.stat().st_mode & stat.S_IXOTH:
                return parent
        except OSError:
            return parent
    return None


def _reader_problems(
    config: StudyConfig,
    root: Path,
    mode: int,
    writers: set[str],
    readers: bool,
    gate: Path | None,
) -> list[TeamProblem]:
    """Who reads the study from outside the writers' group, and what keeps everyone else out."""
    outside = [a for a in config.review.analysts if a not in writers and _login_exists(a)]
    group = _group(root.stat().st_gid)
    owner = _name(root.stat().st_uid)  # the supervisor: owns the folder, writes, anchors
    inside = [
        TeamProblem(
            login,
            f"analyst {login} is in the writers' group {group}: can write the ledger",
            f"gpasswd -d {login} {group}  (analysts read as others: docs/team.md, Analysts)",
        )
        for login in config.review.analysts
        if login in writers and login not in config.review.reviewers and login != owner
    ]
    if not readers:
        shut_out = [
            TeamProblem(
                login,
                f"analyst {login} is not in the study group and the study folder lets no one "
                f"else in (mode {mode:04o}): the analyst cannot read the study",
                "make a gate folder for the readers and run, as root: closecall team setup "
                f"--readers READERS --config {_q(config.path)}  (docs/team.md, Analysts)",
            )
            for login in outside
        ]
        return [*inside, *shut_out]
    if gate is None:
        open_to_all = TeamProblem(
            str(root),
            f"the study folder lets others in (mode {mode:04o}) and no folder above it keeps "
            "anyone out: every login on this server can read the study",
            f"move it into a gate folder (install -d -m 2750 -g READERS /srv/GATE) or "
            f"chmod o-rx {_q(root)}",
        )
        return [*inside, open_to_all]
    out = inside
    gst = gate.stat()
    gmode = stat.S_IMODE(gst.st_mode)
    gname = _group(gst.st_gid)
    if gmode & (stat.S_IRGRP | stat.S_IXGRP) != stat.S_IRGRP | stat.S_IXGRP:
        out.append(
            TeamProblem(
                str(gate),
                f"the gate folder does not let its group {gname} in (mode {gmode:04o})",
                f"chmod g+rx {_q(gate)}",
            )
        )
    admitted = group_members(gst.st_gid)
    for login in [*config.review.reviewers, *config.review.analysts]:
        if login not in admitted and _login_exists(login):
            out.append(
                TeamProblem(
                    login,
                    f"{login} is not in the gate folder {gate}'s group {gname}: cannot reach "
                    "the study",
                    f"usermod -aG {gname} {login}",
                )
            )
    return out


def _login_exists(login: str) -> bool:
    try:
        pwd.getpwnam(login)
    except KeyError:
        return False
    return True


def _config_problems(path: Path, owner: int) -> list[TeamProblem]:
    out = []
    st = path.stat()
    mode = stat.S_IMODE(st.st_mode)
    if st.st_uid != owner:
        out.append(
            TeamProblem(
                str(path),
                f"the config is owned by {_name(st.st_uid)}, not by the "
                f"study folder's owner {_name(owner)}",
                f"chown {_name(owner)} {_q(path)}",
            )
        )
    if mode & (stat.S_IWGRP | stat.S_IWOTH):
        out.append(
            TeamProblem(
                str(path),
                f"the config is writable by others than its owner (mode "
                f"{mode:04o}): anyone who can edit it decides who may record",
                f"chmod go-w {_q(path)}",
            )
        )
    return out


def _file_problems(path: Path, gid: int, group: str, readers: bool = False) -> list[TeamProblem]:
    st = path.lstat()
    mode = stat.S_IMODE(st.st_mode)
    out = []
    if st.st_gid != gid:
        out.append(
            TeamProblem(
                str(path),
                f"in group {_group(st.st_gid)}, not the study's {group} "
                f"(owner {_name(st.st_uid)}, mode {mode:04o})",
                f"chgrp {group} {_q(path)}",
            )
        )
    if stat.S_ISDIR(st.st_mode):
        need, fix = stat.S_IRWXG | stat.S_ISGID, f"chmod g+rwxs {_q(path)}"
    else:
        need, fix = stat.S_IRGRP | stat.S_IWGRP, f"chmod g+rw {_q(path)}"
    if mode & need != need:
        out.append(
            TeamProblem(
                str(path),
                f"mode {mode:04o} does not give the group what it needs (owner {_name(st.st_uid)})",
                fix,
            )
        )
    if mode & stat.S_IWOTH:
        out.append(
            TeamProblem(str(path), f"writable by others (mode {mode:04o})", f"chmod o-w {_q(path)}")
        )
    if readers:
        is_dir = stat.S_ISDIR(st.st_mode)
        bits, letters = (0o005, "rx") if is_dir else (stat.S_IROTH, "r")
        if mode & bits != bits:
            out.append(
                TeamProblem(
                    str(path),
                    f"mode {mode:04o}: the readers cannot read it (owner {_name(st.st_uid)})",
                    f"chmod o+{letters} {_q(path)}",
                )
            )
    return out


def _gid(group: str) -> int:
    """The id of the group named ``group``; UserError when the server has no such group."""
    try:
        return grp.getgrnam(group).gr_gid
    except KeyError:
        raise UserError(f"no group {group} on this server", "sudo groupadd NAME first") from None


def _require_gate(root: Path, readers: str) -> None:
    """The study folder's parent must already be the readers' gate: in their group, entered by
    the group, closed to others. Never changed here: it may be someone's home folder."""
    readers_gid = _gid(readers)
    gate = root.resolve().parent
    gst = gate.stat()
    gmode = stat.S_IMODE(gst.st_mode)
    if gst.st_gid != readers_gid or gmode & 0o050 != 0o050 or gmode & 0o007:
        raise UserError(
            f"{gate} (group {_group(gst.st_gid)}, mode {gmode:04o}) is not a gate for the "
            f"readers: opening {root} to others needs a folder above it that only the "
            f"group {readers} may enter",
            f"make one and move the study into it: install -d -m 2750 -g {readers} /srv/GATE "
            f"&& mv {_q(root)} /srv/GATE/  (docs/team.md, Analysts)",
        )


def setup_team(
    config: StudyConfig, group: str | None = None, readers: str | None = None
) -> list[str]:
    """Make the study folder as :func:`check_team` wants it (run by its owner or root);
    returns what was done. The config becomes writable by its owner only.

    With ``readers`` (a group), logins outside the writers' group may read: the study folder
    and everything in it become readable by others. Its parent folder must already be the
    readers' gate (in that group, closed to others); it is never changed here.

    Raises
    ------
    PermissionError
        The login may not change a file's group or mode (the CLI names the file).
    UserError
        ``group`` or ``readers`` is not a group on this server, or the study folder's parent
        is not the readers' gate.
    """
    root = config.root
    gid = _gid(group) if group else root.stat().st_gid
    name = _group(gid)
    done = []
    if readers is not None:
        _require_gate(root, readers)
    for dirpath, dirnames, filenames in os.walk(root):
        for entry in [dirpath, *(os.path.join(dirpath, n) for n in [*dirnames, *filenames])]:
            path = Path(entry)
            if path.is_symlink():
                continue
            st = path.lstat()
            if st.st_gid != gid:
                os.chown(path, -1, gid)
                done.append(f"chgrp {name} {_q(path)}")
            mode = stat.S_IMODE(st.st_mode)
            if path == config.path:
                want = (mode | stat.S_IRGRP) & ~(stat.S_IWGRP | stat.S_IWOTH)
                extra = stat.S_IROTH if readers is not None else 0
            elif path.is_dir():
                want = (mode | stat.S_IRWXG | stat.S_ISGID) & ~stat.S_IWOTH
                if path == root:
                    want |= stat.S_ISVTX
                extra = 0o005 if readers is not None else 0
            else:
                want = (mode | stat.S_IRGRP | stat.S_IWGRP) & ~stat.S_IWOTH
                extra = stat.S_IROTH if readers is not None else 0
            want |= extra
            if want != mode:
                os.chmod(path, want)
                done.append(f"chmod {want:04o} {_q(path)}")
    return done
