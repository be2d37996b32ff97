"""Terminal tables for the disparity report's audit sections: the whole population, calibration
and error rates on held-out history, model against final with outcomes, the corrected test
families, the figures by period and each section's limits."""

from __future__ import annotations

import math
from collections.abc import Iterable

from rich.console import Console
from rich.markup import escape
from rich.table import Table

from closecall.core.text import safe_text
from closecall.reports.disparity.heldout import RateGap
from closecall.reports.disparity.power import Detectable
from closecall.reports.disparity.report import DisparityReport


def _t(text: object) -> str:
    """Data text made safe for a rich cell: unsafe characters and markup escaped."""
    return escape(safe_text(str(text)))


def _ok(*xs: float | None) -> bool:
    return all(x is not None and math.isfinite(x) for x in xs)


def _pct(x: float | None) -> str:
    return f"{100 * x:.1f}%" if x is not None and math.isfinite(x) else "—"


def _num(x: float | None, digits: int = 2) -> str:
    return f"{x:.{digits}f}" if x is not None and math.isfinite(x) else "—"


def _ci(lo: float | None, hi: float | None, pct: bool = True, signed: bool = False) -> str:
    """An interval on a dim second line of a cell (empty when undefined)."""
    if lo is None or hi is None or (math.isnan(lo) and math.isnan(hi)):
        return ""
    if pct:
        if signed:
            return f"\n[dim]{100 * lo:+.1f} to {100 * hi:+.1f}[/]"
        a = f"{100 * lo:.1f}" if math.isfinite(lo) else "—"
        b = f"{100 * hi:.1f}" if math.isfinite(hi) else "—"
        return f"\n[dim]{a}–{b}%[/]"
    a = f"{lo:.2f}" if math.isfinite(lo) else "—"
    b = f"{hi:.2f}" if math.isfinite(hi) else "∞"
    return f"\n[dim]{a}–{b}[/]"


def _p(p: float | None) -> str:
    if p is None or not math.isfinite(p):
        return "—"
    return "<0.001" if p < 0.001 else f"{p:.3f}"


def print_limits(console: Console, report: DisparityReport, section: str) -> None:
    for line in report.limits.get(section, ()):
        console.print(f"  [dim]cannot show:[/] {_t(line)}")


def print_power(console: Console, items: Iterable[tuple[str, Detectable]]) -> None:
    for name, d in items:
        console.print(f"  [dim]power:[/] {_t(name)}: {_t(d.text)}")


def _lvl(report: DisparityReport) -> str:
    return f"{100 * report.summary.level:.0f}%"


def print_population(console: Console, report: DisparityReport) -> None:
    """Every case under review beside the reviewed ones: rates and adverse impact ratios."""
    p = report.population
    if p is None:
        return
    t = Table(
        title=f"Every case under review beside the reviewed ones, model → final "
        f"({_lvl(report)} intervals)"
    )
    for c in ("group", "cases", "model", "final", "change", "ratio: model", "final"):
        t.add_column(c, justify="left" if c == "group" else "right")
    reviewed = {r.group: r for r in report.rates.rows}
    for g in p.rows:
        t.add_row(
            f"{_t(g.group)}\n[dim]all cases[/]",
            f"{g.cases:,}",
            f"{_pct(g.model_rate)}{_ci(g.model_low, g.model_high)}",
            f"{_pct(g.final_rate)}{_ci(g.final_low, g.final_high)}",
            f"{100 * g.change:+.1f} pts{_ci(g.change_low, g.change_high, signed=True)}",
            _air(g.model_air, g.model_air_low, g.model_air_high, g.group == p.model_reference)
            + (" [bold red]<0.8[/]" if g.model_flag else ""),
            _air(g.final_air, g.final_air_low, g.final_air_high, g.group == p.final_reference)
            + (" [bold red]<0.8[/]" if g.final_flag else ""),
        )
        r = reviewed.get(g.group)
        if r is not None:
            rr = report.rates
            t.add_row(
                "[dim]reviewed[/]",
                f"[dim]{r.decided}[/]",
                f"[dim]{_pct(r.model_rate)}[/]",
                f"[dim]{_pct(r.final_rate)}[/]",
                f"[dim]{100 * r.change:+.1f} pts[/]",
                f"[dim]{_num(r.model_air)}[/]"
                + (
                    ""
                    if r.group == rr.model_reference
                    else _ci(r.model_air_ratio_low, r.model_air_ratio_high, pct=False)
                ),
                f"[dim]{_num(r.final_air)}[/]"
                + (
                    ""
                    if r.group == rr.final_reference
                    else _ci(r.final_air_ratio_low, r.final_air_ratio_high, pct=False)
                ),
                end_section=True,
            )
    t.caption = (
        f"{p.cases:,} cases, {p.decided} decided by review. final = the reviewer's decision "
        "where reviewed and decided, the model's otherwise; ratio = rate ÷ the most favoured "
        "group's (Katz log interval; Koopman score where a count is 0)"
    )
    console.print(t)
    change = p.lowest_air_change + 0.0
    console.print(
        f"  lowest ratio over every case: {_num(p.lowest_model_air)} under the model, "
        f"{_num(p.lowest_final_air)} after review (change {change:+.3f}, "
        f"{_lvl(report)} interval {p.lowest_air_change_low:+.3f} to "
        f"{p.lowest_air_change_high:+.3f}, bootstrap)"
    )
    for n in p.notes:
        console.print(f"  [dim]note:[/] {_t(n)}")
    print_limits(console, report, "population")


def _air(v: float, lo: float, hi: float, reference: bool) -> str:
    if reference:
        return f"{_num(v)}\n[dim]reference[/]"
    return f"{_num(v)}{_ci(lo, hi, pct=False)}"


def print_calibration(console: Console, report: DisparityReport) -> None:
    """Calibration intercept, slope and effective thresholds per model and group."""
    c = report.calibration
    if c is None:
        return
    t = Table(title=f"Calibration by group on held-out history ({_lvl(report)} intervals)")
    for col in ("model", "group", "cases", "intercept", "slope", "threshold acts as", "shown"):
        t.add_column(col, justify="left" if col in ("model", "group", "shown") else "right")
    for r in c.rows:
        th = r.thresholds[0] if r.thresholds else None
        t.add_row(
            _t(r.model),
            _t(r.group),
            f"{r.cases:,}",
            f"{r.intercept:+.2f}{_ci(r.intercept_low, r.intercept_high, pct=False)}"
            if _ok(r.intercept)
            else "—",
            f"{r.slope:.2f}{_ci(r.slope_low, r.slope_high, pct=False)}" if _ok(r.slope) else "—",
            (
                f"{_pct(th.effective)} (t {_pct(th.threshold)})"
                f"{_ci(th.effective_low, th.effective_high)}"
                if th is not None
                else "—"
            ),
            _t(
                (", ".join(r.problems) or ("none shown" if _ok(r.slope) else r.verdict))
                + (f"; {r.note}" if r.note else "")
            ),
        )
    first = c.rows[0].thresholds[0].lens if c.rows and c.rows[0].thresholds else "—"
    t.caption = (
        f"{_t(c.source)}. intercept: logit P(y) = a₀ + η (0 = right on average); slope: "
        f"logit P(y) = a + b·η (1 = neither too extreme nor too timid); threshold acts as: "
        f"the model probability whose recalibrated probability is the '{_t(first)}' lens's t "
        "(every lens in --json)"
    )
    console.print(t)
    ref = report.context.get("reference_model")
    bins = [r for r in c.rows if r.model == ref and r.group != "all" and r.bins]
    if bins:
        rel = Table(title=f"Reliability of the {_t(ref)} model: predicted → observed (cases)")
        rel.add_column("bin", justify="right")
        for r in bins:
            rel.add_column(_t(r.group), justify="right")
        for i in range(max(len(r.bins) for r in bins)):
            cells = []
            for r in bins:
                if i < len(r.bins):
                    b = r.bins[i]
                    cells.append(
                        f"{_pct(b.mean_predicted)} → {_pct(b.observed)} ({b.cases})"
                        f"{_ci(b.low, b.high)}"
                    )
                else:
                    cells.append("")
            rel.add_row(str(i + 1), *cells)
        rel.caption = "equal-count bins of the predicted probability; observed with Wilson interval"
        console.print(rel)
    print_power(
        console,
        (
            (f"{r.model} {r.group} slope", r.slope_detectable)
            for r in c.rows
            if r.group != "all" and r.slope_detectable.upper is not None
        ),
    )
    for n in c.notes:
        console.print(f"  [dim]note:[/] {_t(n)}")
    print_limits(console, report, "calibration")


def _gap(g: RateGap | None) -> str:
    if g is None:
        return "[dim]reference[/]"
    return (
        f"{100 * g.difference:+.1f} pts{_ci(g.difference_low, g.difference_high, signed=True)}"
        f"\n×{_num(g.ratio)}{_ci(g.ratio_low, g.ratio_high, pct=False)}"
        f"\n[dim]p {_p(g.p_value)}[/]"
    )


def print_heldout_errors(console: Console, report: DisparityReport) -> None:
    """False-favourable and false-unfavourable rates per model, lens and group."""
    e = report.heldout_errors
    if e is None:
        return
    t = Table(title=f"Error rates by group on held-out history ({_lvl(report)} intervals)")
    for col in (
        "model",
        "lens",
        "group",
        "false fav.",
        f"vs {e.reference_group}",
        "false unfav.",
        f"vs {e.reference_group} ",
    ):
        t.add_column(_t(col), justify="left" if col in ("model", "lens", "group") else "right")
    for r in e.rows:
        ff, fu = r.false_favourable, r.false_unfavourable
        t.add_row(
            _t(r.model),
            _t(r.lens),
            _t(r.group),
            f"{ff.errors}/{ff.cases} {_pct(ff.rate)}{_ci(ff.low, ff.high)}",
            _gap(r.ff_gap),
            f"{fu.errors}/{fu.cases} {_pct(fu.rate)}{_ci(fu.low, fu.high)}",
            _gap(r.fu_gap),
        )
    t.caption = (
        "false favourable: decided favourably, outcome unfavourable; false unfavourable: the "
        "reverse. Gaps: difference (Newcombe) and ratio (Katz) against the reference group, "
        "Fisher's exact p"
    )
    console.print(t)
    print_power(
        console,
        (
            (f"{r.model} {r.lens} {r.group} {kind}", gap.detectable)
            for r in e.rows
            if r.lens == e.rows[0].lens
            for kind, gap in (("false fav.", r.ff_gap), ("false unfav.", r.fu_gap))
            if gap is not None
        ),
    )
    for n in e.notes:
        console.print(f"  [dim]note:[/] {_t(n)}")
    print_limits(console, report, "heldout_errors")


def print_outcome_tests(console: Console, report: DisparityReport) -> None:
    """With outcomes joined: gaps between groups and McNemar's test of model against final."""
    e = report.errors
    if e is None:
        return
    ref = e.reference_group or "—"
    t = Table(title=f"Error gaps against {_t(ref)} and model vs final (McNemar, exact)")
    for col in ("group", "false fav. model", "final", "false unfav. model", "final", "McNemar"):
        t.add_column(col, justify="left" if col == "group" else "right")
    for r in e.rows:
        m = r.mcnemar
        t.add_row(
            _t(r.group),
            _gap(r.model_ff_gap),
            _gap(r.final_ff_gap),
            _gap(r.model_fu_gap),
            _gap(r.final_fu_gap),
            f"model only right {m.model_only}, final only {m.final_only}"
            f"\n[dim]p {_p(m.p_value)}[/]",
        )
    if e.mcnemar_all is not None:
        m = e.mcnemar_all
        t.caption = (
            f"every group: model only right {m.model_only}, final only right {m.final_only}, "
            f"exact p {_p(m.p_value)}"
        )
    console.print(t)
    print_power(console, ((f"McNemar {r.group}", r.mcnemar.detectable) for r in e.rows))
    if e.mcnemar_all is not None:
        print_power(console, [("McNemar, every group", e.mcnemar_all.detectable)])
    print_limits(console, report, "outcomes")


def print_conditional_extras(console: Console, report: DisparityReport) -> None:
    """How the equal-margin fits were estimated, and what they could have detected."""
    for fit in report.conditional:
        if not fit.fitted:
            continue
        what = fit.direction.replace("_", " ")
        console.print(
            f"  [dim]{_t(what)}:[/] {_t(fit.estimation)}; standard errors {_t(fit.standard_errors)}"
        )
        print_power(
            console,
            ((f"{what}, {r.group}", r.detectable) for r in fit.rows if r.detectable is not None),
        )
    print_limits(console, report, "conditional")


def print_families(console: Console, report: DisparityReport) -> None:
    """Every test family with Holm and Benjamini–Hochberg adjusted p-values."""
    for f in report.families:
        t = Table(title=f"Tests corrected together: the '{_t(f.name)}' family ({len(f.tests)})")
        for col in ("section", "test", "p", "Holm", "BH", ""):
            t.add_column(col, justify="left" if col in ("section", "test") else "right")
        for x in f.tests:
            t.add_row(
                _t(x.section),
                _t(x.name),
                _p(x.p_value),
                _p(x.holm),
                _p(x.bh),
                "[bold red]flagged[/]" if x.flagged else "",
            )
        t.caption = (
            f"family: {_t(f.holds)}. {f.raw_below_alpha} below {f.alpha:g} before correction, "
            f"{f.flagged} after Holm (family-wise), {f.flagged_bh} after Benjamini–Hochberg "
            "(false discovery rate)"
        )
        console.print(t)
    print_limits(console, report, "multiplicity")


def print_periods(console: Console, report: DisparityReport) -> None:
    """Rates, ratios and overrides per period and group."""
    pr = report.periods
    if pr is None:
        return
    t = Table(title=f"By {pr.unit} of the review's entry time ({_lvl(report)} intervals)")
    for col in (
        "period",
        "group",
        "decided",
        "model",
        "final",
        "ratio model",
        "final",
        "overridden",
        "to unfav.",
        "to fav.",
        "p",
    ):
        t.add_column(col, justify="left" if col in ("period", "group") else "right")
    for p in pr.periods:
        for i, g in enumerate(p.rows):
            o = g.overrides
            t.add_row(
                _t(p.period) if i == 0 else "",
                _t(g.group),
                str(g.decided),
                f"{_pct(g.model_rate)}{_ci(g.model_low, g.model_high)}",
                f"{_pct(g.final_rate)}{_ci(g.final_low, g.final_high)}",
                f"{_num(g.model_air)}{_ci(g.model_air_low, g.model_air_high, pct=False)}",
                f"{_num(g.final_air)}{_ci(g.final_air_low, g.final_air_high, pct=False)}",
                f"{_pct(o.override_rate)}{_ci(o.override_low, o.override_high)}",
                f"{o.to_unfavourable}/{o.model_favourable}",
                f"{o.to_favourable}/{o.model_unfavourable}",
                _p(p.test.p_value) if i == 0 else "",
            )
    console.print(t)
    for n in pr.notes:
        console.print(f"  [dim]note:[/] {_t(n)}")
    print_limits(console, report, "periods")
