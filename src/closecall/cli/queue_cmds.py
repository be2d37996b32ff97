"""`closecall queue`: the close calls a supervisor should review first, as a table or data."""

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
from closecall.cli.common import ConfigOption, FormatOption, JsonOption, load, resolve_format
from closecall.cli.output import Format, console, emit_rows, format_cell, plain
from closecall.core.text import safe_text
from closecall.core.vocabulary import short_model
from closecall.review.query import QueueQuery
from closecall.review.queue import SORT_KEYS


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
    """Add `queue` to the closecall app."""
    app.command("queue")(queue)
