"""Commands: init, demo, fit, queue."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import typer
from rich import box
from rich.table import Table
from rich.text import Text

from closecall.analysis.margin_distribution import MarginDistribution, margin_distribution
from closecall.api.results import QueueResult
from closecall.api.study import Study
from closecall.cli.common import (
    ConfigOption,
    FormatOption,
    JsonOption,
    load,
    progress_bar,
    resolve_format,
)
from closecall.cli.output import (
    Format,
    console,
    emit_json,
    emit_rows,
    err_console,
    format_cell,
    plain,
)
from closecall.core.text import safe_text
from closecall.core.vocabulary import short_model
from closecall.review.query import QueueQuery
from closecall.review.queue import SORT_KEYS
from closecall.setup.config import CONFIG_NAME
from closecall.suite.fit_flags import PROBLEM_WORDS, fits_text, grouped_flags, snapshot_flags
from closecall.suite.opening import open_study


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
    from closecall.setup.init import infer_config

    inf = infer_config(data, pending, relative_to=out.resolve().parent)
    # the config is read by every reviewer of the study and written by its owner only: the
    # login's own umask applies (not the study umask, docs/team.md)
    from closecall.core.shared import login_umask

    with login_umask():
        write_output(
            out,
            inf.text.encode("utf-8"),
            inputs,
            option="--out",
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
    from closecall.setup.demo import write_demo

    with login_umask():  # config and data: the owner's files (docs/team.md)
        config = write_demo(out, cases=cases, seed=seed)  # refuses a folder holding a study
    sid = None
    if fit:
        with progress_bar(not as_json) as update:
            sid = open_study(config, update).snapshot.id
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
        "fit_flags": snapshot_flags(snap),
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
    _print_fit_flags(snap)
    for note in snap.meta.get("notes", []):
        if not str(note).startswith("fit flag:"):  # the fit flags table above shows those
            err_console.print(plain(f"note: {note}"))


def _print_fit_flags(snap: Any) -> None:
    """The fits the checks flagged (separation, one outcome, …), one entry per model, group
    and problem with the first fit's detail; --json lists every fit."""
    flags = snapshot_flags(snap)
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


def queue(
    config: Path = ConfigOption,
    limit: int = typer.Option(20, "--limit", "-n", help="How many rows to show (0 = all)."),
    group: str | None = typer.Option(None, "--group", "-g", help="Only this group level."),
    flips: bool = typer.Option(False, "--flips", help="Only cases some model or lens flips."),
    band: float | None = typer.Option(
        None, "--band", help="Review band in log-odds (default: config)."
    ),
    all_cases: bool = typer.Option(False, "--all", help="List every case, not only close calls."),
    sort: str = typer.Option("closeness", "--sort", help=f"One of: {', '.join(SORT_KEYS)}."),
    id_prefix: str | None = typer.Option(None, "--id", help="Only ids starting with this text."),
    ambiguous: bool = typer.Option(
        False,
        "--ambiguous",
        help="Only cases whose equally-good band straddles zero (an equally good model "
        "would decide them the other way).",
    ),
    rests_on_part: str | None = typer.Option(
        None,
        "--rests-on",
        help="Only cases whose decision flips when the 'group' (or the group and its "
        "'proxies') is set to its history average.",
    ),
    unreviewed: bool = typer.Option(
        False,
        "--unreviewed",
        help="Only cases with no decision in the ledger yet (a deferred case is still listed).",
    ),
    chart: bool = typer.Option(
        False,
        "--chart",
        help="Also show where each group's margins sit near the threshold (with --json: the "
        "bin counts).",
    ),
    epsilon: float | None = typer.Option(
        None,
        "--epsilon",
        help="Relative loss slack of the equally-good set for --ambiguous and --sort "
        "ambiguity (default: [multiplicity] epsilon).",
    ),
    fmt: Format = FormatOption,
    as_json: bool = JsonOption,
) -> None:
    """List the close calls: near the threshold, or decided differently by the suite.

    Margins are log-odds distances from the threshold (> 0 favourable) under the reference
    model and the first cost lens; 'differs' names each model@lens that decides otherwise.
    Sorting by ambiguity or dependence, or filtering with --ambiguous / --rests-on, adds
    that measure as a column (docs/methods.md explains both).

    \b
    Examples:
      closecall queue --flips --group Briar --limit 10
      closecall queue --ambiguous --rests-on proxies --sort dependence
    """
    fmt = resolve_format(fmt, as_json)
    query = QueueQuery(
        sort=sort,
        group=group,
        flips=flips,
        ambiguous=ambiguous,
        rests_on=rests_on_part,
        unreviewed=unreviewed,
        band=band,
        epsilon=epsilon,
        limit=None if limit == 0 else limit,
        id_prefix=id_prefix,
        all_cases=all_cases,
    )
    study = Study(load(config, quiet=fmt is not Format.table))
    result = study.queue(query)
    rows = result.to_dict()["rows"]
    snap = study.opened.snapshot
    dist = margin_distribution(snap, result.band, CHART_BINS) if chart else None
    if fmt is Format.table:
        if dist is not None:
            _print_chart(dist)
        _print_queue_table(snap, result, rows)
    elif fmt is Format.csv:
        emit_rows(_flat_queue_rows(snap, result, rows), fmt)
    else:
        emit_rows(rows, fmt, meta=_queue_meta(result, dist))


def _queue_meta(result: QueueResult, dist: MarginDistribution | None) -> dict[str, Any]:
    """The --json header of a queue: snapshot, reference, band, sort, counts, filters."""
    query = result.query
    meta: dict[str, Any] = {
        "snapshot": result.snapshot_id,
        "reference": result.reference,
        "lens": result.lens,
        "band": result.band,
        "sort": result.sort,
        "counts": dict(result.counts),
        "filters": {
            "ambiguous": query.ambiguous,
            "rests_on": query.rests_on,
            "epsilon": query.epsilon,
            "unreviewed": query.unreviewed,
        },
    }
    if dist is not None:
        meta["distribution"] = dist.to_json()
    return meta


def _flat_queue_rows(snap: Any, q: QueueResult, rows: list[dict[str, Any]]) -> list[dict[str, Any]]:
    """Queue rows with one column per value (CSV)."""
    return [
        {
            "rank": r["rank"],
            "case_id": r["case_id"],
            "group": r["group"],
            "margin": r["margin"],
            "decision": r["decision"],
            "flip": r["flip"],
            "differs": ";".join(r["differs"]),
            "state": r.get("state"),
            **{f"margin_{m}": r["margins"][m] for m in snap.model_names},
            **{name: r[name] for name in q.measures},
        }
        for r in rows
    ]


CHART_BINS = 48


def _print_chart(dist: MarginDistribution) -> None:
    """One line of block characters per group (each scaled to its tallest bin), then an axis."""
    from closecall.core.text import sparkline

    labels = [_short_label(g) for g in dist.levels]
    width = max(len(g) for g in labels) + 1
    bins = dist.counts.shape[1]
    for g, level in enumerate(labels):
        line = sparkline(dist.counts[g].tolist(), float(dist.counts[g].max()))
        within, total = int(dist.within_band[g]), int(dist.totals[g])
        share = f"{within / total:.0%}" if total else "—"
        console.print(
            Text(
                f"{level:<{width}}{line[: bins // 2]}│{line[bins // 2 :]} "
                f"{within:,} within ±{dist.band:g} ({share})"
            )
        )
    left, right = f"−{dist.span:g}", f"+{dist.span:g}"
    gap = bins // 2 - len(left)
    axis = left + " " * gap + "0" + " " * (bins - bins // 2 - len(right)) + right
    console.print(Text(" " * width + axis + "  margin, log-odds"))
    console.print(Text("each group's line is scaled to its own tallest bin", style="dim"))


CHART_LABEL = 24  # a longer group label is cut (with …) so the chart keeps its shape
TABLE_LABEL = 10  # and in the queue table at 80 columns (more on a wider one; --json: whole)


def _short_label(level: str, width: int = CHART_LABEL) -> str:
    text = safe_text(level)
    return text if len(text) <= width else text[: width - 1] + "…"


def _print_queue_table(snap: Any, q: QueueResult, rows: list[dict[str, Any]]) -> None:
    """A compact table that fits 80 columns: margins per model, how many pairs flip."""
    table = Table(
        title=f"close calls — snapshot {snap.id}",
        header_style="bold",
        box=box.SIMPLE_HEAD,
        show_edge=False,
        pad_edge=False,
        padding=(0, 0) if q.measures else (0, 1),  # measure columns: one space between
        caption=plain(
            f"{q.counts['listed']:,} listed of {q.counts['cases']:,} cases; "
            f"{q.counts['within_band']:,} within ±{q.band:g} of the threshold, "
            f"{q.counts['flips']:,} flips. Margins in log-odds under lens "
            f"'{snap.lenses[0].name}', > 0 favourable; * marks the reference model; "
            f"'flips' counts the model × lens pairs that decide otherwise "
            f"(--json lists them)."
            + "".join(MEASURE_NOTES[name] for name in q.measures if name in MEASURE_NOTES)
        ),
    )
    label_width = max(TABLE_LABEL, console.width - 80)
    table.add_column("#", justify="right", no_wrap=True)
    table.add_column("case", no_wrap=True)
    table.add_column("group", no_wrap=True)
    for m in snap.model_names:
        star = "*" if m == snap.reference else ""
        table.add_column(short_model(m) + star, justify="right", no_wrap=True)
    table.add_column("flips", justify="right", no_wrap=True)
    for name in q.measures:
        table.add_column(MEASURE_HEADERS.get(name, name), justify="right", no_wrap=True)
    for r in rows:
        table.add_row(
            str(r["rank"]),
            Text(format_cell(r["case_id"])),
            Text(_short_label(str(r["group"]), label_width)),
            *(f"{r['margins'][m]:+.2f}" for m in snap.model_names),
            str(len(r["differs"])) if r["differs"] else "—",
            *(f"{r[name]:.2f}" for name in q.measures),
        )
    console.print(table)


MEASURE_HEADERS = {"ambiguity": "amb.", "dependence": "dep."}
MEASURE_NOTES = {
    "ambiguity": " 'amb.' is the reach of the equally-good band (above 0.50: an equally good "
    "model decides the other way).",
    "dependence": " 'dep.' is the share of the pooled margin's pull that comes from the group "
    "and its proxies.",
}


def register(app: typer.Typer) -> None:
    app.command("init")(init)
    app.command("demo")(demo)
    app.command("fit")(fit)
    app.command("queue")(queue)
