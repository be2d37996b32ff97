"""Options and helpers shared by the commands."""

from __future__ import annotations

import sys
import time
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import TYPE_CHECKING

import typer
from rich.progress import BarColumn, Progress, TextColumn, TimeElapsedColumn

from closecall.cli.output import Format, err_console

if TYPE_CHECKING:
    from closecall.core.progress import Progress as ProgressFn
    from closecall.suite.opening import OpenedStudy

ConfigOption = typer.Option(
    Path("closecall.toml"), "--config", "-c", help="The study config file (or its folder)."
)
JsonOption = typer.Option(False, "--json", help="Print the result as JSON data.")
FormatOption = typer.Option(
    Format.table, "--format", "-f", help="Output as a table, JSON or CSV.", case_sensitive=False
)


def resolve_format(fmt: Format, as_json: bool) -> Format:
    return Format.json if as_json else fmt


@contextmanager
def progress_bar(enabled: bool) -> Iterator[ProgressFn]:
    """A rich progress bar on stderr for steps longer than a second; silent when disabled."""
    if not enabled or not sys.stderr.isatty():
        yield lambda label, done, total: None
        return
    start = time.monotonic()
    with Progress(
        TextColumn("{task.description}"),
        BarColumn(),
        TimeElapsedColumn(),
        console=err_console,
        transient=True,
    ) as bar:
        task = bar.add_task("starting", total=1)
        shown = False

        def update(label: str, done: int, total: int) -> None:
            nonlocal shown
            if not shown and time.monotonic() - start < 1.0:
                bar.update(task, visible=False)
            shown = True
            bar.update(task, description=label, completed=done, total=max(total, 1), visible=True)

        yield update


def load(config: Path, *, quiet: bool, refit: bool = False, rehash: bool = False) -> OpenedStudy:
    """Open the study, fitting (with a progress bar unless quiet) when the cache is stale.

    ``rehash`` hashes the data files afresh instead of trusting the digests cache.
    """
    from closecall.api.study import Study

    with progress_bar(not quiet) as update:
        return Study.open(config, update, refit=refit, rehash=rehash).opened
