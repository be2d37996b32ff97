"""A team on one server, with real OS accounts: two reviewers in a writers' group and an
analyst outside it, each running closecall as themselves (``runuser``).

Runs only as root (CI and this machine are): the session fixture creates the groups and users
with unique names and removes them afterwards. Nothing is installed: the accounts run the
project's own virtual environment (made traversable for the session, modes restored after).
"""

from __future__ import annotations

import grp
import os
import re
import secrets
import shutil
import sqlite3
import stat
import subprocess
import sys
import textwrap
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path

import pytest

ROOT_ONLY = "needs root to create OS accounts and run commands as them (CI runs as root)"
pytestmark = pytest.mark.skipif(
    os.geteuid() != 0 or shutil.which("useradd") is None or shutil.which("runuser") is None,
    reason=ROOT_ONLY,
)

CLOSECALL = Path(sys.executable).parent / "closecall"


@dataclass
class Team:
    base: Path
    writers: str  # the writers' group
    readers: str  # the readers' group (the analyst; the reviewers are members too)
    r1: str
    r2: str
    analyst: str
    study: Path  # a fresh study for each test comes from new_study()

    def run(
        self, user: str, *args: str, umask: str = "022", cwd: Path | None = None
    ) -> subprocess.CompletedProcess[str]:
        """``closecall ARGS`` as ``user`` under the ordinary ``umask``."""
        script = f"umask {umask} && exec {CLOSECALL} " + " ".join(_quote(a) for a in args)
        return subprocess.run(
            ["runuser", "-u", user, "--", "sh", "-c", script],
            capture_output=True,
            text=True,
            timeout=600,
            cwd=cwd or self.base,
            env={**_clean_env(), "HOME": str(self.base / "home" / user)},
        )

    def python(self, user: str, code: str, umask: str = "022") -> subprocess.Popen[str]:
        script = f"umask {umask} && exec {sys.executable} -c {_quote(code)}"
        return subprocess.Popen(
            ["runuser", "-u", user, "--", "sh", "-c", script],
            stdout=subprocess.PIPE,
            stderr=subprocess.PIPE,
            text=True,
            cwd=self.base,
            env={**_clean_env(), "HOME": str(self.base / "home" / user)},
        )


def _quote(s: str) -> str:
    return "'" + s.replace("'", "'\"'\"'") + "'"


def _clean_env() -> dict[str, str]:
    keep = ("PATH", "LANG", "LC_ALL", "TZ")
    env = {k: v for k, v in os.environ.items() if k in keep}
    env.setdefault("LANG", "C.UTF-8")
    return env


def _traversable(path: Path) -> list[tuple[Path, int]]:
    """Add o+x (and o+r on files) along ``path`` where missing; return what to restore."""
    changed = []
    parts = [path, *path.parents]
    for p in parts:
        mode = stat.S_IMODE(p.stat().st_mode)
        need = stat.S_IXOTH if p.is_dir() else stat.S_IROTH
        if not mode & need:
            changed.append((p, mode))
            os.chmod(p, mode | need)
    return changed


@pytest.fixture(scope="session")
def team(tmp_path_factory: pytest.TempPathFactory) -> Iterator[Team]:
    sfx = secrets.token_hex(3)
    base = Path(f"/tmp/cc16-{sfx}")
    base.mkdir(mode=0o755)
    os.chmod(base, 0o755)
    writers, readers = f"ccw{sfx}", f"cca{sfx}"
    r1, r2, analyst = f"ccr1{sfx}", f"ccr2{sfx}", f"ccan{sfx}"
    made_users: list[str] = []
    made_groups: list[str] = []
    restore: list[tuple[Path, int]] = []
    try:
        for g in (writers, readers):
            subprocess.run(["groupadd", g], check=True)
            made_groups.append(g)
        (base / "home").mkdir()
        os.chmod(base / "home", 0o755)  # explicit, whatever the umask
        accounts = ((r1, writers, readers), (r2, writers, readers), (analyst, readers, ""))
        for user, group, more in accounts:
            home = base / "home" / user
            extra = ["-G", more] if more else []  # reviewers pass the readers' gate too
            subprocess.run(
                ["useradd", "-M", "-d", str(home), "-g", group, *extra, "-s", "/bin/sh", user],
                check=True,
            )
            made_users.append(user)
            home.mkdir(mode=0o700)
            shutil.chown(home, user, group)
        real = Path(os.path.realpath(sys.executable))
        restore += _traversable(real)
        restore += _traversable(CLOSECALL)
        import closecall

        restore += _traversable(Path(closecall.__file__).resolve())
        yield Team(base, writers, readers, r1, r2, analyst, base / "study")
    finally:
        for p, mode in reversed(restore):
            os.chmod(p, mode)
        for u in made_users:
            subprocess.run(["userdel", u], check=False)
        for g in made_groups:
            subprocess.run(["groupdel", g], check=False)
        shutil.rmtree(base, ignore_errors=True)


@pytest.fixture(scope="session")
def fitted_demo(team: Team) -> Path:
    """A fitted 3,300-case demo (about 620 pending cases) written by the supervisor (root),
    kept as a template."""
    template = team.base / "template"
    res = subprocess.run(
        [str(CLOSECALL), "demo", "--out", str(template), "--cases", "3300", "--seed", "3"],
        capture_output=True,
        text=True,
        timeout=600,
    )
    assert res.returncode == 0, res.stderr
    return template


def new_study(
    team: Team, template: Path, name: str, *, setup: bool = True, readers: bool = False
) -> Path:
    """A copy of the demo set up as docs/team.md says: folder owned by the supervisor, in the
    writers' group, group rwx + setgid, nothing for others; the config owner-writable.

    With ``readers``: inside a gate folder (group: the readers, mode 2750) and readable by
    others, as ``team setup --readers`` makes it (docs/team.md, Analysts).
    """
    study = team.base / name
    if readers:
        gate = team.base / f"gate-{name}"
        gate.mkdir()
        os.chown(gate, 0, grp.getgrnam(team.readers).gr_gid)
        os.chmod(gate, 0o2750)
        study = gate / name
    shutil.copytree(template, study, symlinks=True)
    config = study / "closecall.toml"
    text = re.sub(
        r"(?m)^reviewers = .*$", f'reviewers = ["{team.r1}", "{team.r2}"]', config.read_text()
    )
    text = re.sub(r"(?m)^analysts = .*$", f'analysts = ["{team.analyst}"]', text)
    config.write_text(text)
    if setup:
        gid = grp.getgrnam(team.writers).gr_gid
        others = 0o005 if readers else 0
        for dirpath, _dirnames, filenames in os.walk(study):
            os.chown(dirpath, 0, gid)
            os.chmod(dirpath, 0o2770 | others)
            for f in filenames:
                p = Path(dirpath) / f
                os.chown(p, 0, gid)
                os.chmod(p, 0o660 | (others & 0o004))
        os.chmod(config, 0o644)
        os.chmod(study, 0o3770 | others)  # sticky too: members cannot delete each other's files
    return study


def _no_traceback(res: subprocess.CompletedProcess[str]) -> None:
    assert "Traceback" not in res.stderr, res.stderr


RECORDER = textwrap.dedent(
    """
    import sys
    from closecall.cli.app import main
    config, start, count = sys.argv[1], int(sys.argv[2]), int(sys.argv[3])
    from closecall.suite.opening import open_study
    ids = [str(c) for c in open_study(config).snapshot.case_ids[start:start + count]]
    assert len(ids) == count, len(ids)
    failures = 0
    for case in ids:
        sys.argv = ["closecall", "record", case, "--action", "uphold", "--note", "ok",
                    "--config", config]
        try:
            main()
        except SystemExit as exc:
            if exc.code not in (0, None):
                failures += 1
    print("FAILURES", failures)
    """
)


class TestSharedFiles:
    def test_two_reviewers_record_300_each_at_once_under_umask_022(
        self, team: Team, fitted_demo: Path
    ) -> None:
        study = new_study(team, fitted_demo, "concurrent")
        config = str(study / "closecall.toml")
        procs = [
            team.python(
                user,
                RECORDER.replace(
                    "sys.argv[1], int(sys.argv[2]), int(sys.argv[3])", f"{config!r}, {start}, 300"
                ),
            )
            for user, start in ((team.r1, 0), (team.r2, 300))
        ]
        outs = [p.communicate(timeout=900) for p in procs]
        for (out, err), p in zip(outs, procs, strict=True):
            assert p.returncode == 0, err[-2000:]
            assert "FAILURES 0" in out, err[-2000:]
            assert "Traceback" not in err
        conn = sqlite3.connect(f"file:{study / 'ledger.sqlite'}?mode=ro", uri=True)
        per_user = dict(conn.execute("SELECT reviewer, COUNT(*) FROM entries GROUP BY reviewer"))
        conn.close()
        assert per_user == {team.r1: 300, team.r2: 300}
        res = team.run(team.r2, "ledger", "verify", "--config", config)
        assert res.returncode == 0 and "600 entries, chain intact" in res.stdout, res.stderr

    def test_every_file_closecall_makes_is_the_groups_whatever_the_umask(
        self, team: Team, fitted_demo: Path
    ) -> None:
        study = new_study(team, fitted_demo, "modes")
        shutil.rmtree(study / ".closecall")
        config = str(study / "closecall.toml")
        res = team.run(team.r1, "fit", "--config", config, umask="077")
        assert res.returncode == 0, res.stderr
        case = _first_case(team, config)
        res = team.run(
            team.r1,
            "record",
            case,
            "--action",
            "uphold",
            "--note",
            "x",
            "--config",
            config,
            umask="077",
        )
        assert res.returncode == 0, res.stderr
        gid = grp.getgrnam(team.writers).gr_gid
        made = [p for p in study.rglob("*") if p.stat().st_uid != 0]
        assert any(p.name == "ledger.sqlite" for p in made)
        assert any(p.is_dir() and p.parent.name == "snapshots" for p in made) or any(
            p.is_dir() for p in made
        )
        for p in made:
            st = p.stat()
            assert st.st_gid == gid, p
            want = 0o2770 if p.is_dir() else 0o660
            assert stat.S_IMODE(st.st_mode) & 0o2770 == want, (p, oct(st.st_mode))
            assert not st.st_mode & 0o007, (p, oct(st.st_mode))

    def test_a_second_user_works_right_after_the_first_users_refit(
        self, team: Team, fitted_demo: Path
    ) -> None:
        study = new_study(team, fitted_demo, "refit")
        config = str(study / "closecall.toml")
        res = team.run(team.r1, "fit", "--refit", "--config", config)
        assert res.returncode == 0, res.stderr
        res = team.run(team.r2, "queue", "--config", config)
        _no_traceback(res)
        assert res.returncode == 0, res.stderr
        case = _first_case(team, config, user=team.r2)
        res = team.run(
            team.r2, "record", case, "--action", "uphold", "--note", "x", "--config", config
        )
        assert res.returncode == 0, res.stderr

    def test_a_permission_problem_is_one_message_naming_the_file(
        self, team: Team, fitted_demo: Path
    ) -> None:
        study = new_study(team, fitted_demo, "denied")
        config = str(study / "closecall.toml")
        os.chmod(study, 0o3771)  # others may pass through to the config, nothing else
        res = team.run(team.analyst, "queue", "--config", config)
        _no_traceback(res)
        assert res.returncode == 2
        assert res.stderr.startswith("error: permission denied"), res.stderr
        assert "owner root" in res.stderr and "fix:" in res.stderr and "chgrp" in res.stderr


def _first_case(team: Team, config: str, user: str | None = None) -> str:
    res = team.run(user or team.r1, "queue", "--config", config, "--json")
    assert res.returncode == 0, res.stderr
    import json

    data = json.loads(res.stdout)
    rows = data["rows"] if isinstance(data, dict) else data
    return str(rows[0].get("case_id") or rows[0].get("id"))


class TestTeamCheck:
    def test_a_mis_set_folder_lists_each_problem_with_its_fix(
        self, team: Team, fitted_demo: Path
    ) -> None:
        study = new_study(team, fitted_demo, "misset", setup=False)
        os.chmod(study, 0o755)
        (study / "closecall.toml").chmod(0o664)
        res = team.run(team.r1, "team", "check", "--config", str(study / "closecall.toml"))
        _no_traceback(res)
        assert res.returncode == 1, res.stdout + res.stderr
        out = res.stdout
        for fix in (
            f"chmod g+rwx {study}",
            f"chmod g+s {study}",
            f"chmod +t {study}",
            f"chmod go-w {study / 'closecall.toml'}",
            f"usermod -aG root {team.r1}",
            f"usermod -aG root {team.r2}",
        ):
            assert f"fix: {fix}" in out, (fix, out)

    def test_a_correct_folder_gives_nothing(self, team: Team, fitted_demo: Path) -> None:
        study = new_study(team, fitted_demo, "sound", readers=True)
        res = team.run(team.r2, "team", "check", "--config", str(study / "closecall.toml"))
        assert res.returncode == 0, res.stdout + res.stderr
        assert res.stdout.strip() == "team set-up: sound (nothing to fix)"

    def test_setup_makes_a_mis_set_folder_sound(self, team: Team, fitted_demo: Path) -> None:
        home = team.base / "home-like"
        home.mkdir(mode=0o700)  # closed to others, but not the readers' gate: refused, as is
        study = new_study(team, fitted_demo, "tosetup", setup=False).rename(home / "tosetup")
        config = str(study / "closecall.toml")
        res = subprocess.run(
            [
                str(CLOSECALL),
                "team",
                "setup",
                "--group",
                team.writers,
                "--readers",
                team.readers,
                "--config",
                config,
            ],
            capture_output=True,
            text=True,
            timeout=300,
        )
        assert res.returncode == 2, res.stdout + res.stderr
        assert "is not a gate for the readers" in res.stderr and "fix: make one" in res.stderr
        assert stat.S_IMODE(home.stat().st_mode) == 0o700 and home.stat().st_gid == 0
        gate = team.base / "gate-tosetup"  # made as docs/team.md says
        gate.mkdir()
        os.chown(gate, 0, grp.getgrnam(team.readers).gr_gid)
        os.chmod(gate, 0o2750)
        study = study.rename(gate / "tosetup")
        config = str(study / "closecall.toml")
        res = subprocess.run(
            [
                str(CLOSECALL),
                "team",
                "setup",
                "--group",
                team.writers,
                "--readers",
                team.readers,
                "--config",
                config,
            ],
            capture_output=True,
            text=True,
            timeout=300,
        )
        assert res.returncode == 0, res.stdout + res.stderr
        mode = stat.S_IMODE(study.stat().st_mode)
        assert mode & (stat.S_ISVTX | stat.S_ISGID) == stat.S_ISVTX | stat.S_ISGID
        assert not (study / "closecall.toml").stat().st_mode & (stat.S_IWGRP | stat.S_IWOTH)
        res = team.run(team.r1, "team", "check", "--config", config)
        assert res.returncode == 0, res.stdout

    def test_an_analyst_without_a_way_in_is_reported(self, team: Team, fitted_demo: Path) -> None:
        study = new_study(team, fitted_demo, "noway")  # sound for the writers, no readers
        config = str(study / "closecall.toml")
        res = team.run(team.r1, "team", "check", "--config", config)
        assert res.returncode == 1, res.stdout
        assert f"analyst {team.analyst} is not in the study group" in res.stdout
        assert "--readers READERS" in res.stdout
        open_all = new_study(team, fitted_demo, "openall")
        os.chmod(open_all, 0o3775)  # others let in, and no gate above it (base is 0755)
        res = team.run(team.r1, "team", "check", "--config", str(open_all / "closecall.toml"))
        assert res.returncode == 1, res.stdout
        assert "every login on this server can read the study" in res.stdout


def _digest(folder: Path) -> dict[str, bytes]:
    return {
        str(p.relative_to(folder)): p.read_bytes() for p in sorted(folder.rglob("*")) if p.is_file()
    }


HOLDER = textwrap.dedent(
    """
    import sqlite3, sys, time
    conn = sqlite3.connect(sys.argv[1])
    conn.execute("SELECT COUNT(*) FROM entries").fetchone()  # a reader: -wal and -shm exist
    print("open", flush=True)
    time.sleep(float(sys.argv[2]))
    """
)


class TestAnalysts:
    """docs/team.md, Analysts: a login outside the writers' group reads (verify, export,
    report) through the gate and writes nothing."""

    def _recorded(self, team: Team, fitted_demo: Path, name: str, n: int = 6) -> Path:
        study = new_study(team, fitted_demo, name, readers=True)
        config = str(study / "closecall.toml")
        res = team.run(team.r1, "queue", "--config", config, "--json", "--limit", "80")
        assert res.returncode == 0, res.stderr
        import json

        by_group: dict[str, list[str]] = {}
        for row in json.loads(res.stdout)["rows"]:
            by_group.setdefault(row["group"], []).append(row["case_id"])
        assert len(by_group) >= 2  # the report compares groups
        firsts, seconds = list(by_group.values())[:2]
        picked = [c for pair in zip(firsts, seconds, strict=False) for c in pair][:n]
        for i, case in enumerate(picked):
            who = team.r1 if i % 2 else team.r2
            action = "override-favourable" if i % 3 == 0 else "uphold"
            extra = ["--reason", "other"] if action.startswith("override") else []
            res = team.run(
                who,
                "record",
                case,
                "--action",
                action,
                *extra,
                "--note",
                f"n{i}",
                "--config",
                config,
            )
            assert res.returncode == 0, res.stderr
        return study

    def test_the_analyst_verifies_exports_and_reports_at_rest(
        self, team: Team, fitted_demo: Path
    ) -> None:
        study = self._recorded(team, fitted_demo, "analyst-rest")
        config = str(study / "closecall.toml")
        assert not (study / "ledger.sqlite-wal").exists()  # at rest: no writer has it open
        assert team.analyst not in grp.getgrnam(team.writers).gr_mem
        before = _digest(study)
        res = team.run(team.analyst, "ledger", "verify", "--config", config)
        _no_traceback(res)
        assert res.returncode == 0 and "6 entries, chain intact" in res.stdout, res.stderr
        out = team.base / "home" / team.analyst / "reviews.csv"
        res = team.run(team.analyst, "ledger", "export", "--out", str(out), "--config", config)
        _no_traceback(res)
        assert res.returncode == 0, res.stderr
        assert len(out.read_text().strip().splitlines()) == 1 + 6  # header + one row per case
        res = team.run(team.analyst, "disparity", "--boot", "200", "--config", config)
        _no_traceback(res)
        assert res.returncode == 0, res.stderr
        assert _digest(study) == before  # the analyst changed nothing

    def test_the_analyst_reads_while_writers_have_it_open_and_record(
        self, team: Team, fitted_demo: Path
    ) -> None:
        study = self._recorded(team, fitted_demo, "analyst-live")
        conn = sqlite3.connect(f"file:{study / 'ledger.sqlite'}?mode=ro", uri=True)
        decided = {str(r[0]) for r in conn.execute("SELECT case_id FROM entries")}
        conn.close()
        config = str(study / "closecall.toml")
        ledger = str(study / "ledger.sqlite")
        holder = team.python(
            team.r2, HOLDER.replace("sys.argv[1]", repr(ledger)).replace("float(sys.argv[2])", "60")
        )
        try:
            assert holder.stdout is not None and holder.stdout.readline().strip() == "open"
            assert (study / "ledger.sqlite-shm").exists()
            res = team.run(team.analyst, "ledger", "verify", "--config", config)
            assert res.returncode == 0 and "6 entries, chain intact" in res.stdout, res.stderr
            # a writer records 120 entries while the analyst verifies again and again
            recorder = team.python(
                team.r1,
                RECORDER.replace(
                    "sys.argv[1], int(sys.argv[2]), int(sys.argv[3])", f"{config!r}, 0, 126"
                ).replace(  # the cases not decided yet
                    "assert len(ids) == count, len(ids)",
                    f"ids = [c for c in ids if c not in {decided!r}][:120]",
                ),
            )
            seen = []
            while recorder.poll() is None:
                res = team.run(team.analyst, "ledger", "verify", "--json", "--config", config)
                _no_traceback(res)
                assert res.returncode == 0, res.stdout + res.stderr
                import json

                seen.append(json.loads(res.stdout)["entries"])
            out, err = recorder.communicate(timeout=600)
            assert "FAILURES 0" in out, err[-2000:]
            assert seen == sorted(seen) and all(6 <= n <= 126 for n in seen), seen
        finally:
            holder.kill()
            holder.communicate()
        res = team.run(team.analyst, "ledger", "verify", "--config", config)
        assert res.returncode == 0 and "126 entries, chain intact" in res.stdout, res.stderr

    def test_the_analyst_cannot_write(self, team: Team, fitted_demo: Path) -> None:
        study = self._recorded(team, fitted_demo, "analyst-write", n=2)
        config = str(study / "closecall.toml")
        case = _first_case(team, config)
        before = _digest(study)
        res = team.run(
            team.analyst, "record", case, "--action", "uphold", "--note", "x", "--config", config
        )
        _no_traceback(res)
        assert res.returncode == 2, res.stdout + res.stderr
        assert res.stderr.startswith("error: ") and "fix:" in res.stderr
        assert res.stderr.count("error:") == 1
        # around closecall, the OS refuses: the ledger, its folder, a new file
        probe = team.python(
            team.analyst,
            textwrap.dedent(
                f"""
                import sqlite3
                results = []
                try:
                    open({str(study / "ledger.sqlite")!r}, "ab")
                except PermissionError:
                    results.append("file")
                try:
                    open({str(study / "mine.txt")!r}, "w")
                except PermissionError:
                    results.append("folder")
                try:
                    c = sqlite3.connect({str(study / "ledger.sqlite")!r})
                    c.execute("INSERT INTO drafts VALUES ('a','b',NULL,NULL,'n','t')")
                    c.commit()
                except sqlite3.Error:
                    results.append("sqlite")
                print(" ".join(results))
                """
            ),
        )
        out, err = probe.communicate(timeout=60)
        assert out.split() == ["file", "folder", "sqlite"], err
        assert _digest(study) == before


SSHD = Path("/usr/sbin/sshd")


def _sshd_available() -> bool:
    """sshd is here, or can be installed from the system's registry (not under CI, whose
    .ci/run installs it)."""
    if SSHD.exists():
        return True
    if os.environ.get("CI") == "true" or shutil.which("apt-get") is None:
        return False
    subprocess.run(
        ["apt-get", "install", "-y", "-qq", "openssh-server"],
        capture_output=True,
        timeout=600,
        check=False,
    )
    return SSHD.exists()


@dataclass
class Ssh:
    port: int
    key: Path
    known: Path

    def run(self, user: str, command: str) -> subprocess.CompletedProcess[str]:
        """``command`` as ``user`` through a real SSH login (key authentication)."""
        return subprocess.run(
            [
                "ssh",
                "-i",
                str(self.key),
                "-p",
                str(self.port),
                "-o",
                "BatchMode=yes",
                "-o",
                "StrictHostKeyChecking=no",
                "-o",
                f"UserKnownHostsFile={self.known}",
                "-o",
                "LogLevel=ERROR",
                f"{user}@127.0.0.1",
                f"export PATH={CLOSECALL.parent}:$PATH LANG=C.UTF-8; {command}",
            ],
            capture_output=True,
            text=True,
            timeout=900,
        )


@pytest.fixture(scope="session")
def ssh(team: Team) -> Iterator[Ssh]:
    """sshd on a spare port of 127.0.0.1 with its own config, keys for the team's logins."""
    if not _sshd_available():
        pytest.skip("no sshd and it cannot be installed here")
    import socket

    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    d = team.base / "sshd"
    (d / "keys").mkdir(parents=True)
    os.chmod(d, 0o755)
    Path("/run/sshd").mkdir(exist_ok=True)  # privilege separation folder
    for name in ("host", "client"):
        subprocess.run(["ssh-keygen", "-q", "-t", "ed25519", "-N", "", "-f", str(d / name)])
    for user in (team.r1, team.r2, team.analyst):
        subprocess.run(["usermod", "-p", "*", user], check=True)  # not locked, no password
        shutil.copy(d / "client.pub", d / "keys" / user)
        os.chmod(d / "keys" / user, 0o644)
    (d / "sshd_config").write_text(
        f"Port {port}\nListenAddress 127.0.0.1\nHostKey {d / 'host'}\nPidFile {d / 'pid'}\n"
        f"AuthorizedKeysFile {d / 'keys'}/%u\nPasswordAuthentication no\n"
        "KbdInteractiveAuthentication no\nUsePAM no\nStrictModes no\nPermitRootLogin no\n"
    )
    proc = subprocess.Popen([str(SSHD), "-D", "-e", "-f", str(d / "sshd_config")])
    try:
        link = Ssh(port, d / "client", d / "known")
        for _ in range(100):
            if link.run(team.r1, "true").returncode == 0:
                break
            import time

            time.sleep(0.1)
        else:
            pytest.fail("sshd did not accept the test key")
        yield link
    finally:
        proc.terminate()
        proc.wait(timeout=30)


FORGE = textwrap.dedent(
    """
    import json, sqlite3, sys
    from closecall.review.ledger.entry import canonical_json, entry_hash
    c = sqlite3.connect(sys.argv[1]); c.row_factory = sqlite3.Row
    last = dict(c.execute("SELECT * FROM entries ORDER BY seq DESC LIMIT 1").fetchone())
    new = dict(last, seq=last["seq"] + 1, reviewer=sys.argv[2], note="forged", signature=None)
    new["prev_hash"] = last["hash"]
    new["decisions"] = json.loads(last["decisions"])
    new["hash"] = entry_hash(new)  # the recipe of docs/ledger.md: a correct hash
    new["decisions"] = canonical_json(new["decisions"]).decode()
    cols = ",".join(new)
    c.execute(f"INSERT INTO entries ({cols}) VALUES ({','.join('?' * len(new))})",
              list(new.values()))
    c.commit()
    print("appended", new["seq"])
    """
)


class TestOverSsh:
    """The done-when of issue 16, over real SSH logins with the ordinary umask: two reviewers
    record at once, the analyst reads and cannot write, a forged or deleted ledger is caught,
    and team check says the set-up is sound (docs/team.md followed)."""

    def test_three_accounts_work_one_study(self, team: Team, fitted_demo: Path, ssh: Ssh) -> None:
        study = new_study(team, fitted_demo, "over-ssh", readers=True)
        config = study / "closecall.toml"
        cfg = _quote(str(config))
        assert ssh.run(team.r1, "umask").stdout.strip() == "0022"  # the ordinary umask
        keys = []
        for user in (team.r1, team.r2):
            res = ssh.run(user, "closecall keys init --json")
            assert res.returncode == 0, res.stderr
            import json

            keys.append(f'{user} = "{json.loads(res.stdout)["public_key"]}"')
        config.write_text(config.read_text() + "\n[team.keys]\n" + "\n".join(keys) + "\n")
        res = ssh.run(team.r2, f"closecall team check --config {cfg}")
        assert res.returncode == 0, res.stdout + res.stderr
        assert "team set-up: sound" in res.stdout
        res = ssh.run(team.r1, f"closecall queue --json --limit 80 --config {cfg}")
        assert res.returncode == 0, res.stderr
        cases = [r["case_id"] for r in json.loads(res.stdout)["rows"]]
        loops = []
        for user, mine in ((team.r1, cases[:15]), (team.r2, cases[15:30])):
            script = (
                "f=0; for c in " + " ".join(mine) + "; do closecall record $c --action uphold "
                f"--note seen --config {cfg} >/dev/null 2>>~/ssh-err.txt || f=$((f+1)); done; "
                "echo FAILURES $f; cat ~/ssh-err.txt 2>/dev/null | head -3"
            )
            loops.append(
                subprocess.Popen(
                    [
                        "ssh",
                        "-i",
                        str(ssh.key),
                        "-p",
                        str(ssh.port),
                        "-o",
                        "BatchMode=yes",
                        "-o",
                        "StrictHostKeyChecking=no",
                        "-o",
                        f"UserKnownHostsFile={ssh.known}",
                        "-o",
                        "LogLevel=ERROR",
                        f"{user}@127.0.0.1",
                        f"export PATH={CLOSECALL.parent}:$PATH; {script}",
                    ],
                    stdout=subprocess.PIPE,
                    stderr=subprocess.PIPE,
                    text=True,
                )
            )
        for loop in loops:
            out, err = loop.communicate(timeout=1800)
            assert "FAILURES 0" in out, out + err
            assert "Traceback" not in out + err
        res = ssh.run(team.analyst, f"closecall ledger verify --json --config {cfg}")
        assert res.returncode == 0, res.stdout + res.stderr
        head = json.loads(res.stdout)
        assert head["entries"] == 30
        res = ssh.run(team.analyst, f"closecall ledger export --out ~/r.csv --config {cfg}")
        assert res.returncode == 0, res.stderr
        res = ssh.run(
            team.analyst, f"closecall record {cases[70]} --action uphold --note x --config {cfg}"
        )
        assert res.returncode == 2 and res.stderr.count("error:") == 1, res.stderr
        assert "Traceback" not in res.stderr
        # a member forges a correctly hashed entry in a colleague's name
        forge = team.base / "forge.py"
        forge.write_text(FORGE)
        os.chmod(forge, 0o644)
        ledger = _quote(str(study / "ledger.sqlite"))
        res = ssh.run(team.r2, f"{sys.executable} {_quote(str(forge))} {ledger} {team.r1}")
        assert res.returncode == 0 and "appended 31" in res.stdout, res.stderr
        res = ssh.run(team.analyst, f"closecall ledger verify --config {cfg}")
        assert res.returncode == 1, res.stdout
        assert "entry 31" in res.stdout and team.r1 in res.stdout, res.stdout
        # its creator deletes the ledger: verify against the head kept elsewhere fails
        owner = pwd_name(study / "ledger.sqlite")
        other = team.r1 if owner == team.r2 else team.r2
        res = ssh.run(other, f"rm -f {ledger}")  # the sticky folder: not another's file
        assert res.returncode != 0 and (study / "ledger.sqlite").exists()
        res = ssh.run(owner, f"rm -f {ledger} {ledger}-wal {ledger}-shm")
        assert res.returncode == 0 and not (study / "ledger.sqlite").exists()
        res = ssh.run(
            team.analyst,
            f"closecall ledger verify --allow-empty --anchor {head['head_hash']} --config {cfg}",
        )
        assert res.returncode == 1, res.stdout + res.stderr
        assert "Traceback" not in res.stderr


def pwd_name(path: Path) -> str:
    import pwd

    return pwd.getpwuid(path.stat().st_uid).pw_name
