"""`closecall whatif`: what a policy change would do to the cases under review (a thin view
over :meth:`closecall.api.study.Study.whatif`; docs/whatif.md explains every figure)."""

from __future__ import annotations

import math
from pathlib import Path
from typing import TYPE_CHECKING, Any

import typer
from rich import box
from rich.table import Table

from closecall.cli.common import ConfigOption, load
from closecall.cli.output import console, emit_json, safe_text
from closecall.core.errors import Fix, UserError
from closecall.core.text import signed

if TYPE_CHECKING:
    from closecall.api.results import WhatIfResult


def _pct(x: float | None) -> str:
    return "—" if x is None or not math.isfinite(x) else f"{100 * x:.1f}%"


def _ratio(x: float | None) -> str:
    return "—" if x is None or not math.isfinite(x) else f"{x:.2f}"


def _between(lo: float | None, hi: float | None, fmt: Any) -> str:
    if lo is None or hi is None:
        return ""
    return f"{fmt(lo)}–{fmt(hi)}"


def _say(text: str) -> None:
    console.print(safe_text(text), markup=False, highlight=False, soft_wrap=True)


#: Fields this command names otherwise than the shared table (cli/errors.py) does.
FLAGS = {"policy": "--against", "model": "--model", "lens": "--lens", "level": "--level"}


def _worded(exc: UserError) -> UserError:
    """The engine's error with its fields named as this command's options."""
    from closecall.cli.errors import flag

    def name(field: str) -> str:
        return FLAGS.get(field, flag(field))

    return UserError(exc.worded_message(name), exc.worded_fix(name))


def _changes_table(data: dict[str, Any]) -> Table:
    pct = f"{data['level']:.0%}"
    table = Table(
        title="Decisions that change (cases under review)",
        box=box.SIMPLE,
        title_justify="left",
        pad_edge=False,
    )
    for head in ("group", "cases", "changed", "→ fav", "→ unfav", "share", f"{pct} interval"):
        table.add_column(head, justify="left" if head == "group" else "right")
    for c in [*data["changes"], data["total"]]:
        table.add_row(
            safe_text(c["group"]),
            f"{c['cases']:,}",
            f"{c['changed']:,}",
            f"{c['to_favourable']:,}",
            f"{c['to_unfavourable']:,}",
            _pct(c["share"]),
            _between(c["share_low"], c["share_high"], _pct),
        )
    return table


def _rates_table(data: dict[str, Any]) -> Table:
    pct = f"{data['level']:.0%}"
    table = Table(
        title=f"Favourable rate and adverse impact ratio (AIR), {pct} intervals",
        box=box.SIMPLE,
        title_justify="left",
        pad_edge=False,
    )
    for head in ("group", "side", "favourable", "interval", "AIR", "AIR interval"):
        table.add_column(head, justify="left" if head in ("group", "side") else "right")
    for side in ("baseline", "policy"):
        for r in data[side]["rates"]:
            most = r["group"] == data[side]["most_favoured"]
            table.add_row(
                safe_text(r["group"]),
                side,
                _pct(r["rate"]),
                _between(r["low"], r["high"], _pct),
                _ratio(r["air"]) + (" <4/5" if r["below_four_fifths"] else ""),
                "most favoured" if most else _between(r["air_low"], r["air_high"], _ratio),
            )
    return table


def _errors_table(data: dict[str, Any]) -> Table | None:
    base, new = data["baseline"]["errors"], data["policy"]["errors"]
    if not base and not new:
        return None
    pct = f"{data['level']:.0%}"
    table = Table(
        title=f"Held-out error rates on the history, {pct} intervals",
        box=box.SIMPLE,
        title_justify="left",
        pad_edge=False,
    )
    table.add_column("group")
    table.add_column("side")
    table.add_column("false-favourable", justify="right")
    table.add_column("false-unfavourable", justify="right")
    for side, rows in (("baseline", base), ("policy", new)):
        for r in rows:
            table.add_row(
                safe_text(r["group"]),
                side,
                f"{_pct(r['false_favourable_rate'])} "
                f"({_between(r['false_favourable_low'], r['false_favourable_high'], _pct)})",
                f"{_pct(r['false_unfavourable_rate'])} "
                f"({_between(r['false_unfavourable_low'], r['false_unfavourable_high'], _pct)})",
            )
    return table


def whatif(
    config: Path = ConfigOption,
    drop_weight: list[str] = typer.Option(
        [],
        "--drop-weight",
        help="Set this feature's weight in the deployed scorecard to zero (repeatable).",
    ),
    model: str | None = typer.Option(
        None,
        "--model",
        help="Decide with this model of the suite (pooled, unaware, proxy_free, split, deployed).",
    ),
    lens: str | None = typer.Option(None, "--lens", help="Decide under this cost lens."),
    group_threshold: list[str] = typer.Option(
        [],
        "--group-threshold",
        help="LEVEL=P: this group's probability threshold "
        "(repeatable; other groups keep the lens's).",
    ),
    against: str | None = typer.Option(
        None,
        "--against",
        help="Compare with this policy instead of the decision in force, "
        "e.g. 'model=unaware;lens=cautious'.",
    ),
    cases: bool = typer.Option(False, "--cases", help="Also list every changed case."),
    level: float = typer.Option(0.95, "--level", help="Confidence level of the intervals."),
    as_json: bool = typer.Option(False, "--json", help="Print every figure as JSON data."),
) -> None:
    """Weigh a policy change: how many decisions under review it would change, for each group
    and in which direction; favourable rates and adverse impact ratios per group; held-out
    error rates per group; each with intervals, beside the decision in force.

    The policy is the decision in force with what the options change: a weight of the deployed
    scorecard set to zero, another model, another cost lens, a threshold for one group. The
    figures are evidence for review, not a decision: the tool decides nothing.

    \b
    Examples:
      closecall whatif --drop-weight heritage
      closecall whatif --model unaware --against 'model=split'
      closecall whatif --group-threshold Briar=0.45 --cases
    List the changed cases in the queue: closecall queue --changed-by 'drop=heritage'
    """
    try:
        result = _run(config, drop_weight, model, lens, group_threshold, against, level, as_json)
    except UserError as exc:
        raise _worded(exc) from None
    data = result.to_dict()
    if as_json:
        emit_json(data)
        return
    _print_result(result, data, cases)


def _print_result(result: WhatIfResult, data: dict[str, Any], cases: bool) -> None:
    """The what-if's figures as text: the counts, the three tables, notes, changed cases."""
    _say(f"baseline: {result.baseline}")
    _say(f"policy:   {result.policy}")
    _say(
        f"{result.changed:,} of {data['total']['cases']:,} decisions under review change: "
        f"{result.to_favourable:,} to favourable, {result.to_unfavourable:,} to unfavourable"
    )
    console.print(_changes_table(data))
    console.print(_rates_table(data))
    errors = _errors_table(data)
    if errors is not None:
        console.print(errors)
    for side in ("baseline", "policy"):
        for note in data[side]["notes"]:
            _say(f"note ({side}): {note}")
    for note in data["notes"]:
        _say(f"note: {note}")
    if cases and data["changed_cases"]:
        console.print(_changed_cases_table(data["changed_cases"]))
    _say(
        "Intervals read these cases as a sample of the cases the policy would meet; the "
        "counts are exact for them. Evidence for review, not a finding (docs/whatif.md)."
    )


def _changed_cases_table(rows: list[dict[str, Any]]) -> Table:
    """Every changed case: its group, the direction and both margins."""
    table = Table(title="Changed cases", box=box.SIMPLE, title_justify="left", pad_edge=False)
    for head in ("case", "group", "direction", "baseline margin", "policy margin"):
        table.add_column(head, justify="right" if "margin" in head else "left")
    for r in rows:
        table.add_row(
            safe_text(r["case_id"]),
            safe_text(r["group"]),
            r["direction"],
            signed(r["baseline_margin"]),
            signed(r["policy_margin"]),
        )
    return table


def _run(
    config: Path,
    drop_weight: list[str],
    model: str | None,
    lens: str | None,
    group_threshold: list[str],
    against: str | None,
    level: float,
    quiet: bool,
) -> WhatIfResult:
    from closecall.analysis.whatif import parse_group_threshold
    from closecall.api.study import Study

    pairs = [parse_group_threshold(t) for t in group_threshold]
    levels = [lv for lv, _ in pairs]
    twice = sorted({lv for lv in levels if levels.count(lv) > 1})
    if twice:
        raise UserError(
            f"group level '{twice[0]}' is given two thresholds",
            Fix("group_threshold", hint="give each group level one threshold"),
            about="group_threshold",
        )
    study = Study(load(config, quiet=quiet))
    return study.whatif(
        model=model,
        lens=lens,
        drop=drop_weight,
        group_thresholds=dict(pairs),
        against=against,
        level=level,
    )


def register(app: typer.Typer) -> None:
    """Add `whatif` to the closecall app."""
    app.command("whatif")(whatif)
