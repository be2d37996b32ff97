"""A throw-away PostgreSQL server for the ledger tests (Debian's ``postgresql`` package).

``initdb`` + ``pg_ctl`` in a temporary folder, listening on a free port on 127.0.0.1 and on a
unix socket inside that folder, run as an unprivileged system user (PostgreSQL refuses to run
as root). fsync and synchronous_commit stay on, as in production, so the durability tests test
something. Authentication is ``trust`` on loopback only: a test connects as whichever role it
plays, and the server still enforces that role's privileges.
"""

from __future__ import annotations

import contextlib
import glob
import os
import pwd
import shutil
import socket
import subprocess
import tempfile
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path

#: The unprivileged system user that runs the test server when the tests run as root.
SERVER_USER = "closecall-pg"
#: The cluster's superuser role.
SUPERUSER = "cc_admin"


class NoServer(RuntimeError):
    """PostgreSQL's server binaries are not installed."""


def find_bindir() -> Path:
    """The newest ``/usr/lib/postgresql/N/bin`` holding initdb and pg_ctl."""
    found = sorted(
        glob.glob("/usr/lib/postgresql/*/bin/initdb"),
        key=lambda p: (
            int(Path(p).parent.parent.name) if Path(p).parent.parent.name.isdigit() else 0
        ),
    )
    if not found:
        raise NoServer(
            "PostgreSQL server binaries not found (/usr/lib/postgresql/*/bin/initdb); "
            "install them with: apt-get install -y postgresql"
        )
    return Path(found[-1]).parent


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def _ensure_user() -> None:
    try:
        pwd.getpwnam(SERVER_USER)
    except KeyError:
        subprocess.run(
            [
                "useradd",
                "--system",
                "--no-create-home",
                "--shell",
                "/usr/sbin/nologin",
                SERVER_USER,
            ],
            check=True,
        )


@dataclass
class PgServer:
    """A running test server; :meth:`url` gives a libpq URL for a role and database."""

    folder: Path
    port: int
    bindir: Path
    #: extra ``name=value`` server settings (the benchmark tries group-commit settings)
    settings: tuple[str, ...] = ()

    @property
    def socket_dir(self) -> Path:
        return self.folder / "sock"

    def url(self, user: str = SUPERUSER, db: str = "postgres") -> str:
        return f"postgresql://{user}@127.0.0.1:{self.port}/{db}"

    def create_database(self, name: str) -> str:
        """A new empty database (owned by the superuser); its URL."""
        import psycopg

        with psycopg.connect(self.url(), autocommit=True) as conn:
            conn.execute(f'CREATE DATABASE "{name}"')
        return self.url(db=name)

    def _run(self, *args: str) -> subprocess.CompletedProcess[str]:
        cmd = [str(self.bindir / args[0]), *args[1:]]
        if os.geteuid() == 0:
            cmd = ["runuser", "-u", SERVER_USER, "--", *cmd]
        return subprocess.run(cmd, check=True, capture_output=True, text=True)

    def start(self) -> None:
        data = self.folder / "data"
        self._run(
            "initdb",
            "-D",
            str(data),
            "-U",
            SUPERUSER,
            "--auth=trust",
            "-E",
            "UTF8",
            "--locale=C.UTF-8",
        )
        self._pg_ctl_start()

    def _pg_ctl_start(self) -> None:
        data = self.folder / "data"
        opts = (
            f"-c listen_addresses=127.0.0.1 -c port={self.port} "
            f"-c unix_socket_directories={self.socket_dir} -c fsync=on "
            "-c synchronous_commit=on -c max_connections=100 -c shared_buffers=32MB"
        ) + "".join(f" -c {setting}" for setting in self.settings)
        self._run(
            "pg_ctl",
            "-D",
            str(data),
            "-l",
            str(self.folder / "server.log"),
            "-w",
            "-t",
            "60",
            "-o",
            opts,
            "start",
        )

    def crash_and_restart(self) -> None:
        """Stop the server as a crash would (``pg_ctl stop -m immediate``: every process quits
        at once, nothing in shared memory is written out) and start it again on the same data
        folder; on start it replays the WAL that reached the disk."""
        self._run("pg_ctl", "-D", str(self.folder / "data"), "-m", "immediate", "-w", "stop")
        self._pg_ctl_start()

    def stop(self) -> None:
        """Stop the server; its folder (every test database, a few hundred MB after a full
        run) is removed by a detached ``rm`` so the run does not wait for the disk."""
        with contextlib.suppress(subprocess.CalledProcessError):
            self._run("pg_ctl", "-D", str(self.folder / "data"), "-m", "immediate", "-w", "stop")
        try:
            subprocess.Popen(
                ["rm", "-rf", "--", str(self.folder)],
                start_new_session=True,
                stdout=subprocess.DEVNULL,
                stderr=subprocess.DEVNULL,
            )
        except OSError:
            shutil.rmtree(self.folder, ignore_errors=True)


def running_server(settings: tuple[str, ...] = ()) -> Iterator[PgServer]:
    """For a pytest fixture: a server started with ``settings``, stopped after; in CI
    (CI=true) a missing server fails the test, never skips it."""
    import pytest

    try:
        server = start_server(settings)
    except NoServer as exc:
        if os.environ.get("CI", "").lower() == "true":
            pytest.fail(str(exc))
        pytest.skip(str(exc))
    try:
        yield server
    finally:
        server.stop()


def start_server(settings: tuple[str, ...] = ()) -> PgServer:
    """Start a fresh server in a new temporary folder (the caller stops it); ``settings``
    are extra ``name=value`` server settings."""
    bindir = find_bindir()
    folder = Path(tempfile.mkdtemp(prefix="closecall-pg-"))
    (folder / "sock").mkdir()
    if os.geteuid() == 0:
        _ensure_user()
        entry = pwd.getpwnam(SERVER_USER)
        for p in (folder, folder / "sock"):
            os.chown(p, entry.pw_uid, entry.pw_gid)
    os.chmod(folder, 0o755)
    server = PgServer(folder, _free_port(), bindir, tuple(settings))
    try:
        server.start()
    except BaseException:
        log = folder / "server.log"
        if log.exists():
            print(log.read_text())
        shutil.rmtree(folder, ignore_errors=True)
        raise
    return server
