"""`closecall reasons`: the reason codes a reviewer may give when recording a decision."""

from __future__ import annotations

from pathlib import Path

import typer

from closecall.cli.common import ConfigOption
from closecall.cli.output import console, emit_json, safe_text
from closecall.setup.config import CONFIG_NAME


def reasons(
    config: Path = ConfigOption,
    as_json: bool = typer.Option(False, "--json", help="Print the codes as JSON data."),
) -> None:
    """List the reason codes `closecall record --reason` and the review screen accept.

    The codes are the study's [review] reasons (docs/config.md); without a study config here,
    the defaults every new study starts with. An override needs one of them.

    \b
    Example:
      closecall reasons --config studies/grants/closecall.toml
    """
    from closecall.api.study import reason_codes, study_config

    default_path = config == Path(CONFIG_NAME) and not config.exists()
    study = None if default_path else study_config(config)
    codes = reason_codes(study)
    source = "defaults (no study config here)" if study is None else str(study.path)
    if as_json:
        emit_json({"config": None if study is None else str(study.path), "reasons": codes})
        return
    console.print(f"reason codes from {safe_text(source)}:", markup=False, highlight=False)
    width = max(len(c["code"]) for c in codes) if codes else 0
    for c in codes:
        meaning = c["meaning"] or "(this study's own code)"
        console.print(
            f"  {safe_text(c['code']):<{width}}  {meaning}",
            markup=False,
            highlight=False,
            soft_wrap=True,
        )


def register(app: typer.Typer) -> None:
    """Add `reasons` to the closecall app."""
    app.command("reasons")(reasons)
