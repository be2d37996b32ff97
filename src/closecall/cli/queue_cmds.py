"""`closecall queue`: the close calls a supervisor should review first, as a table or data."""

from __future__ import annotations

from collections.abc import Mapping
from pathlib import Path
from typing import TYPE_CHECKING, Any

import typer
from rich import box
from rich.table import Table
from rich.text import Text

from closecall.api.results import QueueResult
from closecall.api.study import Study
from closecall.cli.common import ConfigOption, FormatOption, JsonOption, load, resolve_format
from closecall.cli.output import Format, console, emit_rows, format_cell, plain
from closecall.core.text import safe_text, signed
from closecall.core.vocabulary import short_model
from closecall.review.query import QueueQuery
from closecall.review.queue import SORT_KEYS
from closecall.review.triage import TIER_KEYS, TIERS

if TYPE_CHECKING:
    from closecall.analysis.margin_distribution import MarginDistribution


LimitOption = typer.Option(20, "--limit", "-n", help="How many rows to show (0 = all).")
GroupOption = typer.Option(None, "--group", "-g", help="Only this group level.")
FlipsOption = typer.Option(
    None,
    "--flips",
    help="Only flips: 'model' (another model decides otherwise under the first lens), "
    "'lens' (only another cost lens does) or 'any'.",
)
BandOption = typer.Option(None, "--band", help="Review band in log-odds (default: config).")
AllOption = typer.Option(False, "--all", help="List every case, not only close calls.")
ChangedByOption = typer.Option(
    None,
    "--changed-by",
    help="Only the cases whose decision this what-if policy changes, close calls or not "
    "(e.g. 'drop=heritage'; see closecall whatif).",
)
SortOption = typer.Option(
    "triage",
    "--sort",
    help=f"One of: {', '.join(SORT_KEYS)}. triage: rests on the group or its proxies, "
    "then model flips, ambiguous, lens flips, near the threshold.",
)
IdOption = typer.Option(None, "--id", help="Only ids starting with this text.")
AmbiguousOption = typer.Option(
    False,
    "--ambiguous",
    help="Only cases whose equally-good band straddles zero (an equally good model "
    "would decide them the other way).",
)
RestsOnOption = typer.Option(
    None,
    "--rests-on",
    help="Only cases whose decision flips when the 'group' (or the group and its "
    "'proxies') is set to its history average.",
)
UnreviewedOption = typer.Option(
    False,
    "--unreviewed",
    help="Only cases with no decision in the ledger yet (a deferred case is still listed).",
)
ChartOption = typer.Option(
    False,
    "--chart",
    help="Also show where each group's margins sit near the threshold (with --json: the "
    "bin counts).",
)
EpsilonOption = typer.Option(
    None,
    "--epsilon",
    help="Relative loss slack of the equally-good set for --ambiguous and --sort "
    "ambiguity (default: [multiplicity] epsilon).",
)


def queue(
    config: Path = ConfigOption,
    limit: int = LimitOption,
    group: str | None = GroupOption,
    flips: str | None = FlipsOption,
    band: float | None = BandOption,
    all_cases: bool = AllOption,
    changed_by: str | None = ChangedByOption,
    sort: str = SortOption,
    id_prefix: str | None = IdOption,
    ambiguous: bool = AmbiguousOption,
    rests_on_part: str | None = RestsOnOption,
    unreviewed: bool = UnreviewedOption,
    chart: bool = ChartOption,
    epsilon: float | None = EpsilonOption,
    fmt: Format = FormatOption,
    as_json: bool = JsonOption,
) -> None:
    """List the close calls, the ones a supervisor should review first at the top.

    Triage order (the default): decisions that rest on the group or its proxies, then model
    flips (another model decides otherwise), ambiguous cases, lens flips (only another cost
    lens does), then the rest near the threshold. Each row says why in words, how far the
    case is from the threshold (on the line, just above or below…) and which models or lenses
    decide otherwise. Every count below the table is of the cases the filters keep. The tool
    supports human review and decides nothing.

    \b
    Examples:
      closecall queue --flips model --group Briar --limit 10
      closecall queue --rests-on proxies --sort dependence
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
        changed_by=changed_by,
    )
    study = Study(load(config, quiet=fmt is not Format.table))
    _show_queue(study, study.queue(query), fmt, chart)


def _show_queue(study: Study, result: QueueResult, fmt: Format, chart: bool) -> None:
    """The queue as a table (with the chart above it), CSV, or JSON rows under a header."""
    rows = result.to_dict()["rows"]
    snap = study.opened.snapshot
    dist = study.margin_distribution(result.band, CHART_BINS, result.query) if chart else None
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
        "group_attribute": result.group_attribute,
        "same_as": dict(result.same_as),
        "filters": {
            "group": query.group,
            "flips": query.flips,
            "ambiguous": query.ambiguous,
            "rests_on": query.rests_on,
            "epsilon": query.epsilon,
            "unreviewed": query.unreviewed,
            "changed_by": query.changed_by,
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
        if dist.filtered and not total:
            continue  # a group the filters leave out
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
    if dist.filtered:  # the list's filters, not only its close calls
        kept = f"{int(dist.totals.sum()):,}"
        console.print(Text(f"counted: the {kept} cases the filters keep, at any distance"))
    console.print(Text("each group's line is scaled to its own tallest bin", style="dim"))


CHART_LABEL = 24  # a longer group label is cut (with …) so the chart keeps its shape
TABLE_LABEL = 10  # and in the queue table at 80 columns (more on a wider one; --json: whole)


def _short_label(level: str, width: int = CHART_LABEL) -> str:
    text = safe_text(level)
    return text if len(text) <= width else text[: width - 1] + "…"


def _print_queue_table(snap: Any, q: QueueResult, rows: list[dict[str, Any]]) -> None:
    """A table that fits 80 columns: why each case is listed, how close, who differs.

    Wider terminals also get the margin in log-odds and every model's margin.
    """
    table = Table(
        title=f"close calls — snapshot {snap.id} — in {SORT_TITLES.get(q.sort, q.sort)} order",
        header_style="bold",
        box=box.SIMPLE_HEAD,
        show_edge=False,
        pad_edge=False,
        padding=(0, 0),
    )
    attribute = q.group_attribute
    label_width = max(TABLE_LABEL, len(attribute), console.width - 80)
    table.add_column("#", justify="right", no_wrap=True)
    table.add_column("case", no_wrap=True)
    table.add_column(_short_label(attribute, label_width), no_wrap=True)
    table.add_column("distance", no_wrap=True)
    table.add_column("why first", no_wrap=True)
    table.add_column("decided otherwise by", min_width=16, ratio=1, overflow="fold")
    has_state = any("state" in r for r in rows)
    # every model's margin when the terminal has room beside the words and the state
    labels = max([len(attribute), *(len(safe_text(str(r["group"]))) for r in rows)])
    used = len(f"{len(rows):,}") + max([10, *(len(r["case_id"]) for r in rows)])
    used += min(label_width, labels) + 11 + 16 + 20 + 7 * len(q.measures) + 7
    used += 10 if has_state else 0
    shown_models = []
    for m in (m for m in snap.model_names if m not in q.same_as):
        width = max(6, len(short_model(m)) + 1) + 1
        if used + width > console.width:
            break
        shown_models.append(m)
        used += width
    for m in shown_models:
        star = "*" if m == snap.reference else ""
        table.add_column(short_model(m) + star, justify="right", no_wrap=True)
    for name in q.measures:
        table.add_column(MEASURE_HEADERS.get(name, name), justify="right", no_wrap=True)
    if has_state:
        table.add_column("state", no_wrap=True)
    for r in rows:
        cells: list[Any] = [
            str(r["rank"]),
            Text(format_cell(r["case_id"])),
            Text(_short_label(str(r["group"]), label_width)),
            r["closeness"],
            r["why"],
            Text(safe_text(", ".join(r["others_differ"]) or "—")),
        ]
        cells += [signed(r["margins"][m]) for m in shown_models]
        cells += [f"{r[name]:.2f}" for name in q.measures]
        if has_state:
            cells.append(r.get("state", ""))
        table.add_row(*cells)
    console.print(table)
    footer = _footer(snap, q, q.same_as, len(rows))
    if shown_models:
        footer.append(
            f"{', '.join(short_model(m) for m in shown_models)}: each model's margin in "
            f"log-odds (* the reference), > 0 favourable."
        )
    for line in footer:
        console.print(plain(line))


SORT_TITLES = {"triage": "triage", "closeness": "flips-first", "margin": "|margin|"}


def _footer(snap: Any, q: QueueResult, same_as: Mapping[str, str], shown: int) -> list[str]:
    """What the counts are of (the filters in force), then how to read the columns."""
    c = q.counts
    b = q.band
    filters = q.query.describe()
    lines = [
        f"{c['listed']:,} listed ({filters}) of {c['cases']:,} cases in the study"
        + (f"; showing the first {shown:,}" if shown < c["listed"] else "")
        + ".",
        f"Of the listed: {c['within_band']:,} within ±{b:g} of the threshold; "
        f"{c['flips']:,} flip ({c['model_flips']:,} by another model, "
        f"{c['lens_flips']:,} by another cost lens only)"
        + (f"; {c['reviewed']:,} decided, {c['deferred']:,} deferred" if "reviewed" in c else "")
        + ".",
        "By triage: "
        + " · ".join(f"{c[f'tier_{k}']:,} {name}" for k, name in zip(TIER_KEYS, TIERS, strict=True))
        + ".",
        f"distance: the {short_model(snap.reference)} model's margin under lens "
        f"'{snap.lenses[0].name}' in words — on the line within ±{b / 4:g} log-odds (a quarter "
        f"of the band), just above/below within ±{b:g}, above/below within ±{2 * b:g}, well "
        f"above/below beyond; above = favourable.",
    ]
    lines += [
        f"{short_model(m)} = {short_model(o)}: the same weights"
        + (" (no proxy flagged)" if m == "proxy_free" and o == "unaware" else "")
        + f"; named once, as {short_model(o)}."
        for m, o in same_as.items()
    ]
    lines += [MEASURE_NOTES[name].strip() for name in q.measures if name in MEASURE_NOTES]
    return lines


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
