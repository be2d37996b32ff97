"""Shared fixtures: small demo studies built once per test session."""

from __future__ import annotations

from pathlib import Path

import pytest

from closecall.setup.demo import write_demo
from closecall.suite.opening import OpenedStudy, open_study


@pytest.fixture(scope="session")
def demo_config(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A 3,000-case demo study (history + pending), fitted once."""
    config = write_demo(tmp_path_factory.mktemp("demo"), cases=3000, seed=11)
    open_study(config)
    return config


@pytest.fixture(scope="session")
def demo_study(demo_config: Path) -> OpenedStudy:
    return open_study(demo_config)


class CliResult:
    def __init__(self, code: int, out: str, err: str) -> None:
        self.code, self.out, self.err = code, out, err

    def __repr__(self) -> str:
        return f"CliResult(code={self.code}, out={self.out[:300]!r}, err={self.err[:300]!r})"


@pytest.fixture
def cli(capsys: pytest.CaptureFixture[str], monkeypatch: pytest.MonkeyPatch):  # type: ignore[no-untyped-def]
    """Run `closecall ARGS…` in-process; returns exit code, stdout and stderr."""
    import os
    import sys

    from closecall.cli.app import main

    def run(*args: str) -> CliResult:
        capsys.readouterr()
        monkeypatch.setattr(sys, "argv", ["closecall", *args])
        code = 0
        umask = os.umask(0o022)  # the command sets its own (0o007); a process would end there
        os.umask(umask)
        try:
            main()
        except SystemExit as exc:
            code = int(exc.code or 0) if not isinstance(exc.code, str) else 1
        finally:
            os.umask(umask)  # do not leak the command's umask into later tests
        captured = capsys.readouterr()
        return CliResult(code, captured.out, captured.err)

    return run
