"""`closecall review`: the review screens (Textual) over a study or the bundled demo."""

from __future__ import annotations

from pathlib import Path

import typer

from closecall.setup.config import CONFIG_NAME

DEMO_DIR = Path("demo-study")


def review(
    config: Path = typer.Option(
        Path(CONFIG_NAME), "--config", "-c", help="The study config file (or its folder)."
    ),
    demo: bool = typer.Option(
        False,
        "--demo",
        help=f"Open the bundled demo study (written into ./{DEMO_DIR} first if absent).",
    ),
    plain_ascii: bool | None = typer.Option(
        None,
        "--ascii/--no-ascii",
        help="Draw only ASCII characters, for consoles whose font lacks block, box and arrow "
        "glyphs (default: on when TERM=linux).",
    ),
) -> None:
    """Triage the close calls, read each case, record decisions — all from the keyboard.

    Fits the study first when its data or config changed (with a progress bar). Keys: ? for
    help, ctrl+p for every command by name, ctrl+q to quit. Notes are kept as drafts while you
    type, so a dropped connection loses nothing.

    \b
    Example:
      closecall review --config studies/grants/closecall.toml
      closecall review --demo
      closecall review --ascii      # a console without box and arrow glyphs
    """
    from closecall.tui.app import ReviewApp

    if demo:
        target = DEMO_DIR / CONFIG_NAME
        write = None if target.exists() else DEMO_DIR
        app = ReviewApp(target, write_demo_to=write, plain_ascii=plain_ascii)
    else:
        from closecall.api.study import Ledger

        # a bad config or an unusable ledger is one message and exit 2, before the screen opens
        Ledger.open(config).check()
        app = ReviewApp(config, plain_ascii=plain_ascii)
    app.run()
    if app.return_code:
        raise typer.Exit(app.return_code)


def register(app: typer.Typer) -> None:
    """Add `review` to the closecall app."""
    app.command("review")(review)
