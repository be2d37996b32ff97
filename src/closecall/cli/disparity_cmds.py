"""`closecall disparity` and `closecall demo-reviews`: thin layers over the disparity report."""

from __future__ import annotations

import math
from pathlib import Path

import typer
from rich.table import Table

from closecall.api.study import Study, study_config
from closecall.cli import disparity_sections as sections
from closecall.cli.common import ConfigOption, JsonOption, load
from closecall.cli.output import console, emit_json, err_console, safe_markup
from closecall.core.errors import UserError
from closecall.reports.disparity.contingency import IndependenceTest
from closecall.reports.disparity.periods import check_period
from closecall.reports.disparity.report import DisparityReport
from closecall.setup.output_files import check_key_file, check_output, study_files, write_output

BAR_WIDTH = 10


def _t(text: object) -> str:
    """Data text made safe for a rich cell: control characters and markup escaped."""
    return safe_markup(text)


def _pct(x: float | None) -> str:
    return "—" if x is None or not math.isfinite(x) else f"{100 * x:.1f}%"


def _num(x: float | None) -> str:
    return "—" if x is None or not math.isfinite(x) else f"{x:.2f}"


def _ci(lo: float | None, hi: float | None, pct: bool = True) -> str:
    """An interval on its own dim second line of a cell (empty when undefined)."""
    if lo is None or hi is None or not (math.isfinite(lo) and math.isfinite(hi)):
        return ""
    if pct:
        return f"\n[dim]{100 * lo:.1f}–{100 * hi:.1f}%[/]"
    return f"\n[dim]{lo:.2f}–{hi:.2f}[/]"


def _p(p: float | None) -> str:
    if p is None or not math.isfinite(p):
        return "—"
    return "<0.001" if p < 0.001 else f"{p:.3f}"


def bar(rate: float, width: int = BAR_WIDTH) -> str:
    """A text bar for a rate in [0, 1]."""
    if not math.isfinite(rate):
        return " " * width
    full = round(max(0.0, min(1.0, rate)) * width)
    return "█" * full + "·" * (width - full)


def _rates_table(report: DisparityReport) -> Table:
    lvl = f"{100 * report.summary.level:.0f}%"
    t = Table(title=f"Favourable rate, model → final (decided reviews; {lvl} intervals)")
    for c in ("group", "decided", "model", "final", "change"):
        t.add_column(c, justify="left" if c == "group" else "right")
    for g in report.rates.rows:
        t.add_row(
            _t(g.group),
            str(g.decided),
            f"[#4d6a8a]{bar(g.model_rate)}[/] {_pct(g.model_rate)}{_ci(g.model_low, g.model_high)}",
            f"[#c47f2c]{bar(g.final_rate)}[/] {_pct(g.final_rate)}{_ci(g.final_low, g.final_high)}",
            f"{100 * g.change:+.1f} pts"
            + (
                f"\n[dim]{100 * g.change_low:+.1f} to {100 * g.change_high:+.1f}[/]"
                if math.isfinite(g.change_low) and math.isfinite(g.change_high)
                else ""
            ),
        )
    return t


def _air_table(report: DisparityReport) -> Table:
    r = report.rates
    t = Table(
        title="Adverse impact ratio against the most favoured group (four-fifths rule; "
        "Katz log interval)"
    )
    for c in ("group", "model ratio", "", "final ratio", ""):
        t.add_column(c, justify="left" if c == "group" else "right")
    for g in r.rows:
        t.add_row(
            _t(g.group),
            _num(g.model_air)
            + ("\n[dim]reference[/]" if g.group == r.model_reference else "")
            + _ci(g.model_air_ratio_low, g.model_air_ratio_high, False),
            "[bold red]< 0.8[/]" if g.model_flag else "",
            _num(g.final_air)
            + ("\n[dim]reference[/]" if g.group == r.final_reference else "")
            + _ci(g.final_air_ratio_low, g.final_air_ratio_high, False),
            "[bold red]< 0.8[/]" if g.final_flag else "",
        )
    t.caption = (
        f"most favoured: model {_t(r.model_reference)}, final {_t(r.final_reference)} "
        "(29 CFR 1607.4(D)); bootstrap intervals in --json"
    )
    return t


def _override_table(report: DisparityReport) -> Table:
    t = Table(title="Overrides by group")
    for c in ("group", "decided", "overridden", "to unfavourable", "to favourable", "deferred"):
        t.add_column(c, justify="left" if c == "group" else "right")
    for g in report.overrides.rows:
        t.add_row(
            _t(g.group),
            str(g.decided),
            f"{g.overridden} {_pct(g.override_rate)}{_ci(g.override_low, g.override_high)}",
            f"{g.to_unfavourable}/{g.model_favourable} {_pct(g.to_unfavourable_rate)}"
            f"{_ci(g.to_unfavourable_low, g.to_unfavourable_high)}",
            f"{g.to_favourable}/{g.model_unfavourable} {_pct(g.to_favourable_rate)}"
            f"{_ci(g.to_favourable_low, g.to_favourable_high)}",
            str(g.deferred),
        )
    return t


def _tests_table(tests: tuple[IndependenceTest, ...]) -> Table:
    t = Table(title="Is overriding independent of group?")
    for c in ("test", "method", "statistic", "p", "note"):
        t.add_column(c, overflow="fold")
    for x in tests:
        stat = (
            f"{x.statistic_name} {_num(x.statistic)}" + (f", df {x.dof}" if x.dof else "")
            if x.statistic is not None
            else "—"
        )
        t.add_row(_t(x.name), _t(x.method), _t(stat), _p(x.p_value), _t(x.note or ""))
    return t


def _conditional_tables(report: DisparityReport) -> list[Table | str]:
    out: list[Table | str] = []
    lvl = f"{100 * report.summary.level:.0f}%"
    for fit in report.conditional:
        what = fit.direction.replace("_", " ")
        t = Table(title=f"Overridden {what}, at equal margin (logistic regression)")
        for c in ("group", "events / at risk", f"odds ratio ({lvl})", "p", "note"):
            t.add_column(c, justify="left" if c in ("group", "note") else "right")
        for g in fit.rows:
            t.add_row(
                _t(g.group),
                f"{g.events} / {g.at_risk}",
                f"{_num(g.odds_ratio)}{_ci(g.low, g.high, False)}",
                _p(g.p_value),
                _t(g.note or ""),
            )
        t.caption = f"among {fit.risk_set}"
        if fit.fitted:
            t.caption += (
                f"; per unit of margin: odds ratio {_num(fit.margin_odds_ratio)} "
                f"({_num(fit.margin_low)}–{_num(fit.margin_high)})"
            )
        out.append(t)
        out.extend(f"  [dim]note:[/] {_t(n)}" for n in fit.notes)
    return out


def _reviewer_table(report: DisparityReport) -> Table:
    t = Table(title="By reviewer")
    t.add_column("reviewer", min_width=14, max_width=16, overflow="ellipsis", no_wrap=True)
    for c in ("group", "decided", "override rate", "to unfav.", "to fav.", "p"):
        t.add_column(c, justify="left" if c == "group" else "right")
    for r in report.reviewers:
        for i, g in enumerate(r.rows):
            t.add_row(
                _t(r.reviewer if i == 0 else ""),
                _t(g.group),
                str(g.decided),
                f"{_pct(g.override_rate)}{_ci(g.override_low, g.override_high)}",
                f"{g.to_unfavourable}/{g.model_favourable}",
                f"{g.to_favourable}/{g.model_unfavourable}",
                _p(r.test.p_value) if i == 0 else "",
            )
    warned = [w for r in report.reviewers for w in (f"{r.reviewer}: {x}" for x in r.warnings)]
    if warned:
        t.caption = "\n".join(_t(w) for w in warned[:8]) + (
            f"\n… {len(warned) - 8} more (--json)" if len(warned) > 8 else ""
        )
    return t


def _errors_table(report: DisparityReport) -> Table | None:
    if report.errors is None:
        return None
    t = Table(title="Errors once outcomes are known")
    for c in (
        "group",
        "known",
        "false fav. model",
        "final",
        "false unfav. model",
        "final",
    ):
        t.add_column(c, justify="left" if c == "group" else "right")
    for g in report.errors.rows:
        cells = [
            f"{x.errors}/{x.cases} {_pct(x.rate)}{_ci(x.low, x.high)}"
            for x in (
                g.model_false_favourable,
                g.final_false_favourable,
                g.model_false_unfavourable,
                g.final_false_unfavourable,
            )
        ]
        t.add_row(_t(g.group), str(g.with_outcome), *cells)
    t.caption = (
        "false favourable: outcome unfavourable but decided favourably; "
        "false unfavourable: outcome favourable but decided unfavourably"
    )
    return t


def print_report(report: DisparityReport, headline: str) -> None:
    """The report on the terminal: rich tables with text bars."""
    s, ctx = report.summary, report.context
    console.print(
        f"[bold]{_t(ctx.get('study', 'study'))}[/]: {s.reviews} effective reviews "
        f"({s.decided} decided, {s.deferred} deferred) by {s.reviewers} reviewer(s); "
        f"reference model {_t(ctx.get('reference_model', '—'))}, snapshot "
        f"{_t(str(ctx.get('snapshot_id', '—'))[:12])}"
    )
    r = report.rates
    console.print(_t(headline))
    sections.print_population(console, report)
    console.print(_rates_table(report))
    console.print(_air_table(report))
    for n in r.notes:
        console.print(f"  [dim]note:[/] {_t(n)}")
    sections.print_limits(console, report, "reviewed")
    console.print(_override_table(report))
    console.print(_tests_table(report.overrides.tests))
    sections.print_power(console, report.test_power)
    sections.print_limits(console, report, "overrides")
    for item in _conditional_tables(report):
        console.print(item)
    sections.print_conditional_extras(console, report)
    console.print(_reviewer_table(report))
    sections.print_limits(console, report, "reviewers")
    errors = _errors_table(report)
    if errors is not None:
        console.print(errors)
        for n in report.errors.notes if report.errors else ():
            console.print(f"  [dim]note:[/] {_t(n)}")
        sections.print_outcome_tests(console, report)
    sections.print_calibration(console, report)
    sections.print_heldout_errors(console, report)
    sections.print_periods(console, report)
    sections.print_families(console, report)
    console.print("[bold]Warnings and limits[/]")
    for w in report.warnings:
        console.print(f"  - {_t(w)}")
    sections.print_limits(console, report, "power")
    console.print("[dim]Every figure is explained in docs/disparity.md.[/]")


def disparity(
    as_json: bool = JsonOption,
    html: Path | None = typer.Option(
        None,
        "--html",
        help="Also write the report as one self-contained HTML file (readable by you only; "
        "never one of the study's files; an existing file needs --force).",
    ),
    force: bool = typer.Option(False, "--force", help="Replace an existing --html file."),
    outcomes: Path | None = typer.Option(
        None,
        "--outcomes",
        help="CSV/Parquet of known outcomes (the study's id and outcome columns): adds error "
        "rates by group.",
    ),
    seed: int = typer.Option(0, "--seed", help="Seed of the bootstrap (same seed, same report)."),
    n_boot: int = typer.Option(2000, "--boot", help="Bootstrap replicates."),
    level: float = typer.Option(0.95, "--level", help="Confidence level of every interval."),
    period: str = typer.Option(
        "month", "--period", help="Figures over time by 'month' or 'quarter' of the review."
    ),
    key_file: Path | None = typer.Option(
        None, "--pseudonymise", help="Show reviewers by keyed pseudonym (key file as in export)."
    ),
    config: Path = ConfigOption,
) -> None:
    """Did reviewers' overrides narrow or widen the gaps between groups?

    Compares the model's decisions with the final ones: over every case under review and over
    the reviewed ones, favourable rates and adverse impact ratios by group (four-fifths rule);
    override rates and directions with exact or chi-square tests; odds ratios at equal margin
    (cluster-robust by reviewer, Firth's method for separated groups); the same per reviewer
    and per month or quarter; each model's calibration and error rates by group on held-out
    history; with --outcomes the error rates of model and final decisions and McNemar's test.
    Every figure carries an interval, every test a power line, and the tests are corrected
    for multiplicity (Holm, Benjamini–Hochberg) in stated families.

    \b
    Example:
      closecall disparity --html disparity.html
      closecall disparity --outcomes pending_outcomes.csv --json
    """
    if not 0.5 <= level < 1.0:
        raise UserError(f"--level {level}: must be at least 0.5 and below 1", "e.g. --level 0.95")
    if n_boot < 100:
        raise UserError(f"--boot {n_boot}: use at least 100 replicates", "e.g. --boot 2000")
    check_period(period)
    cfg = study_config(config)
    protected = study_files(cfg, key_file=key_file, outcomes=outcomes)
    if key_file is not None:  # before anything is fitted or created
        check_key_file(key_file, study_files(cfg, outcomes=outcomes))
    if html is not None:
        check_output(html, protected, field="html", force=force, example="disparity.html")
    result = Study(load(config, quiet=as_json)).disparity(
        outcomes=outcomes,
        key_file=key_file,
        level=level,
        n_boot=n_boot,
        seed=seed,
        period=period,
    )
    if html is not None:
        write_output(
            html,
            result.html().encode("utf-8"),
            protected,
            field="html",
            force=force,
            example="disparity.html",
        )
    if as_json:
        emit_json(dict(result.data))
        return
    print_report(result.report, result.headline())
    if html is not None:
        console.print(f"wrote {_t(html)}")


def demo_reviews(
    n: int = typer.Argument(..., help="How many simulated reviews to record."),
    seed: int = typer.Option(7, "--seed", help="Random seed (same seed, same reviews)."),
    bias: float = typer.Option(
        2.0,
        "--bias",
        help="Odds ratio of overriding the least favoured group to unfavourable, at equal "
        "margin (1 = no bias).",
    ),
    biased_group: str | None = typer.Option(None, "--biased-group", help="Group to bias."),
    reviewers: int = typer.Option(4, "--reviewers", help="How many simulated reviewers."),
    as_json: bool = JsonOption,
    config: Path = ConfigOption,
) -> None:
    """Record N simulated reviews of close calls in a demo study's ledger.

    The entries are real ledger entries by reviewers named sim-reviewer-1, -2, …, with a note
    saying they are simulated; a ledger holding real reviews is refused.

    \b
    Example:
      closecall demo --out demo-study && cd demo-study
      closecall demo-reviews 300 --bias 2 && closecall disparity --html disparity.html
    """
    study = Study(load(config, quiet=as_json))
    count = study.demo_reviews(n, seed, bias=bias, biased_group=biased_group, reviewers=reviewers)
    if as_json:
        emit_json({"recorded": count, "seed": seed, "bias": bias})
        return
    console.print(f"recorded {count} simulated reviews (seed {seed}, bias {bias:g})")
    if count < n:
        err_console.print(f"note: only {count} unreviewed cases were left", markup=False)


def register(app: typer.Typer) -> None:
    """Add `disparity` and `demo-reviews` to the closecall app."""
    app.command("disparity")(disparity)
    app.command("demo-reviews")(demo_reviews)
