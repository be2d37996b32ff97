"""Commands: init, demo, fit."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import typer
from rich.table import Table
from rich.text import Text

from closecall.api.study import Study
from closecall.cli.common import (
    ConfigOption,
    JsonOption,
    load,
    progress_bar,
)
from closecall.cli.output import (
    console,
    emit_json,
    err_console,
    format_cell,
    plain,
)
from closecall.core.text import safe_text
from closecall.setup.config import CONFIG_NAME
from closecall.suite.fit_flags import PROBLEM_WORDS, fits_text, grouped_flags


def init(
    data: Path = typer.Argument(..., help="The labelled history file (CSV or Parquet)."),
    pending: Path | None = typer.Option(None, "--pending", help="Cases awaiting review."),
    out: Path = typer.Option(Path(CONFIG_NAME), "--out", "-o", help="Where to write the config."),
    force: bool = typer.Option(
        False, "--force", help="Replace an earlier config (never a data file or a ledger)."
    ),
    as_json: bool = JsonOption,
) -> None:
    """Draft a commented study config from a data file, and say what is left to decide.

    Example: closecall init history.csv --pending pending.csv
    """
    from closecall.setup.output_files import StudyFile, check_config_output, write_output

    inputs = [StudyFile(data.resolve(), "the history data file named here", "data")]
    if pending is not None:
        inputs.append(StudyFile(pending.resolve(), "the pending data file named here", "data"))
    check_config_output(out, inputs, force=force)
    from closecall.api.study import draft_config

    inf = draft_config(data, pending, relative_to=out.resolve().parent)
    # the config is read by every reviewer of the study and written by its owner only: the
    # login's own umask applies (not the study umask, docs/team.md)
    from closecall.core.shared import login_umask

    with login_umask():
        write_output(
            out,
            inf.text.encode("utf-8"),
            inputs,
            field="out",
            force=force,
            mode=0o666,
            example=CONFIG_NAME,
            may_replace=("config",),
        )
    if as_json:
        emit_json({"config": str(out), "inferred": inf.inferred, "to_decide": inf.to_decide})
        return
    console.print(plain(f"wrote {out}"))
    for key, value in inf.inferred.items():
        if key != "kinds":
            console.print(plain(f"  inferred {key}: {value}"))
    console.print(f"  inferred kinds for {len(inf.inferred.get('kinds', {}))} features")  # type: ignore[arg-type]
    console.print("still to decide:")
    for item in inf.to_decide:
        console.print(plain(f"  - {item}"))


def demo(
    out: Path = typer.Option(Path("demo-study"), "--out", "-o", help="Folder for the demo study."),
    cases: int = typer.Option(5000, "--cases", "-n", help="How many applications to generate."),
    seed: int = typer.Option(7, "--seed", help="Random seed (same seed, same files)."),
    fit: bool = typer.Option(True, "--fit/--no-fit", help="Fit the suite right away."),
    as_json: bool = JsonOption,
) -> None:
    """Write the fictional demo study (Harbourside Home Retrofit Grants) and fit it.

    Example: closecall demo --out demo-study --cases 5000 && cd demo-study && closecall queue
    """
    from closecall.core.shared import login_umask

    with login_umask():  # config and data: the owner's files (docs/team.md)
        config = Study.write_demo(out, cases=cases, seed=seed)  # refuses a folder with a study
    sid = None
    if fit:
        with progress_bar(not as_json) as update:
            sid = Study.open(config, update).snapshot_id
    if as_json:
        emit_json({"config": str(config), "cases": cases, "seed": seed, "snapshot": sid})
        return
    console.print(plain(f"wrote the demo study to {out}/ ({cases:,} applications, seed {seed})"))
    if sid:
        console.print(f"snapshot {sid}")
    console.print(plain(f"next: cd {out} && closecall queue"))


def fit(
    config: Path = ConfigOption,
    refit: bool = typer.Option(
        False,
        "--refit",
        help="Fit again and replace the cached snapshot whatever its state (repairs a damaged "
        "cache; the old one is not read).",
    ),
    as_json: bool = JsonOption,
) -> None:
    """Fit the model suite and show each model's held-out quality per group.

    Log-loss and AUC are out-of-fold; the error rate is at each cost lens's threshold;
    calibration-in-the-large is observed minus predicted favourable rate.

    Example: closecall fit --config closecall.toml
    """
    study = load(config, quiet=as_json, refit=refit, rehash=True)  # the files' content, afresh
    snap = study.snapshot
    payload: dict[str, Any] = {
        "snapshot": snap.id,
        "fitted_now": study.fitted_now,
        "cross_fitted": snap.cross_fitted,
        "cases_under_review": snap.n_cases,
        "history_cases": snap.meta["n_history"],
        "models": snap.model_names,
        "reference": snap.reference,
        "lenses": [{"name": lens.name, "threshold": lens.threshold} for lens in snap.lenses],
        "proxies": snap.proxies.proxies,
        "group_recoverability_auc": snap.proxies.recoverability,
        "metrics": snap.metrics,
        "notes": snap.meta.get("notes", []),
        "fit_flags": Study(study).fit_flags(),
    }
    if as_json:
        emit_json(payload)
        return
    arrangement = "cross-fitted (one labelled file)" if snap.cross_fitted else "history + pending"
    console.print(
        f"snapshot {snap.id}  {arrangement}  {snap.n_cases:,} cases under review, "
        f"{snap.meta['n_history']:,} history cases  "
        f"({'fitted now' if study.fitted_now else 'from cache'})"
    )
    lens_txt = ", ".join(f"{lens.name} t={lens.threshold:.3f}" for lens in snap.lenses)
    console.print(plain(f"lenses: {lens_txt}   reference model: {snap.reference}"))
    table = Table(title="held-out quality per group", header_style="bold")
    cols = ["model", "group", "cases", "log_loss", "auc", "calibration_in_the_large"]
    cols += [k for k in snap.metrics[0] if k.startswith("error_rate")] if snap.metrics else []
    for c in cols:
        table.add_column(
            c.replace("calibration_in_the_large", "calib.").replace("error_rate", "error")
        )
    for row in snap.metrics:
        table.add_row(*(Text(_metric_cell(row.get(c))) for c in cols))
    console.print(table)
    console.print(
        plain(
            f"proxies: {', '.join(snap.proxies.proxies) or 'none'}   "
            f"group recoverable from the other features: AUC {snap.proxies.recoverability:.3f}"
        )
    )
    _print_fit_flags(snap, Study(study).fit_flags())
    for note in snap.meta.get("notes", []):
        if not str(note).startswith("fit flag:"):  # the fit flags table above shows those
            err_console.print(plain(f"note: {note}"))


def _print_fit_flags(snap: Any, flags: list[dict[str, Any]]) -> None:
    """The fits the checks flagged (separation, one outcome, …), one entry per model, group
    and problem with the first fit's detail; --json lists every fit."""
    if not flags:
        return
    console.print(
        Text(
            f"fit flags: {len(flags)} fit(s) kept with penalty {snap.meta['penalty']:g} "
            "despite a problem; read these models' scores and held-out quality with care "
            "(docs/methods.md, 'Convergence and separation checks')",
            style="bold",
        )
    )
    for entry in grouped_flags(flags):
        who = f"{entry['model']} model"
        if entry["group"] is not None:
            who += f", group '{entry['group']}'"
        problem = PROBLEM_WORDS.get(entry["problem"], entry["problem"])
        console.print(Text(safe_text(f"  ✱ {who}: {problem} in {fits_text(entry['fits'])}")))
        console.print(Text(safe_text(f"    {entry['fits'][0]}: {entry['detail']}"), style="dim"))


def _metric_cell(value: Any) -> str:
    if isinstance(value, float):
        return f"{value:.3f}"
    return format_cell(value)


def register(app: typer.Typer) -> None:
    app.command("init")(init)
    app.command("demo")(demo)
    app.command("fit")(fit)
