"""The disparity report as one self-contained HTML file (figures embedded as PNG)."""

from __future__ import annotations

import base64
import io
import math
from collections.abc import Iterable, Sequence
from html import escape
from typing import Any

import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from closecall import __version__
from closecall.core.cautions import CAUTIONS
from closecall.core.text import safe_text
from closecall.reports.disparity import html_sections as sections
from closecall.reports.disparity.contingency import IndependenceTest
from closecall.reports.disparity.rates import FOUR_FIFTHS
from closecall.reports.disparity.report import DisparityReport

MODEL_COLOUR = "#4d6a8a"
FINAL_COLOUR = "#c47f2c"

_CSS = """
body { font-family: system-ui, sans-serif; max-width: 60rem; margin: 2rem auto; padding: 0 1rem;
       color: #1d1d1d; line-height: 1.45; }
h1 { font-size: 1.6rem; } h2 { font-size: 1.25rem; margin-top: 2.2rem;
     border-bottom: 1px solid #ccc; padding-bottom: .2rem; }
table { border-collapse: collapse; margin: .8rem 0; font-size: .9rem; }
th, td { border: 1px solid #ccc; padding: .25rem .5rem; text-align: right; }
th { background: #f2f2f2; } td.l, th.l { text-align: left; }
.flag { color: #a4161a; font-weight: 600; }
.note { color: #555; font-size: .9rem; }
.box { background: #f7f4ec; border-left: 4px solid #c47f2c; padding: .6rem 1rem; }
img { max-width: 100%; }
.limits { background: #f3f3f6; border-left: 4px solid #4d6a8a; padding: .4rem 1rem;
          font-size: .9rem; margin: .8rem 0; }
details { margin: .6rem 0; }
"""


def _h(text: object) -> str:
    """Text for the HTML page: control, bidi and zero-width characters shown as visible escapes
    (the terminal views' one sanitiser), then HTML-escaped (quotes included)."""
    return escape(safe_text(str(text)))


def _label(text: object) -> str:
    """A data label for a figure: made safe like any text, and ``$`` escaped so that
    matplotlib never reads it as mathtext (a stray ``$\\`` would stop the report)."""
    label = safe_text(str(text)).replace("$", r"\$")
    return " " + label if label.startswith("_") else label  # "_…" would leave the legend


def _pct(x: float | None) -> str:
    return "—" if x is None or not math.isfinite(x) else f"{100 * x:.1f}%"


def _num(x: float | None, digits: int = 2) -> str:
    return "—" if x is None or not math.isfinite(x) else f"{x:.{digits}f}"


def _ci(lo: float | None, hi: float | None, pct: bool = True) -> str:
    f = _pct if pct else _num
    if lo is None or hi is None or not (math.isfinite(lo) and math.isfinite(hi)):
        return ""
    return f" ({f(lo)} to {f(hi)})"


def _pts(lo: float, hi: float) -> str:
    if not (math.isfinite(lo) and math.isfinite(hi)):
        return ""
    return f" ({100 * lo:+.1f} to {100 * hi:+.1f})"


def _air(v: float, lo: float, hi: float, reference: bool) -> str:
    return f"{_num(v)} (reference)" if reference else f"{_num(v)}{_ci(lo, hi, False)}"


def _p(p: float | None) -> str:
    if p is None or not math.isfinite(p):
        return "—"
    return "< 0.001" if p < 0.001 else f"{p:.3f}"


def _table(head: Sequence[str], rows: Iterable[Sequence[str]], left: int = 1) -> str:
    """An HTML table; the first ``left`` columns align left. Cells are escaped here."""
    h = "".join(
        f'<th class="l">{_h(c)}</th>' if i < left else f"<th>{_h(c)}</th>"
        for i, c in enumerate(head)
    )
    body = []
    for r in rows:
        cells = "".join(
            f'<td class="l">{_h(c)}</td>' if i < left else f"<td>{_h(c)}</td>"
            for i, c in enumerate(r)
        )
        body.append(f"<tr>{cells}</tr>")
    return f"<table><thead><tr>{h}</tr></thead><tbody>{''.join(body)}</tbody></table>"


def _figure(width: float, height: float) -> tuple[Figure, Any]:
    """A figure on the Agg canvas (no pyplot, no display, no global state) and its axes."""
    fig = Figure(figsize=(width, height))
    FigureCanvasAgg(fig)
    return fig, fig.subplots()


def _png(fig: Figure) -> str:
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=110, bbox_inches="tight")
    data = base64.b64encode(buf.getvalue()).decode("ascii")
    return f'<img alt="figure" src="data:image/png;base64,{data}">'


def _err(values: np.ndarray, lo: np.ndarray, hi: np.ndarray) -> np.ndarray:
    """Non-negative error-bar lengths (NaN-safe)."""
    below = np.nan_to_num(values - lo, nan=0.0).clip(min=0)
    above = np.nan_to_num(hi - values, nan=0.0).clip(min=0)
    return np.vstack([below, above])


def rates_figure(report: DisparityReport) -> Figure:
    """Favourable rate by group, model against final, with Wilson intervals."""
    rows = report.rates.rows
    x = np.arange(len(rows))
    fig, ax = _figure(7, 3.6)
    for off, label, colour, attr in (
        (-0.18, "model", MODEL_COLOUR, "model"),
        (0.18, "final (after review)", FINAL_COLOUR, "final"),
    ):
        v = np.array([getattr(r, f"{attr}_rate") for r in rows])
        lo = np.array([getattr(r, f"{attr}_low") for r in rows])
        hi = np.array([getattr(r, f"{attr}_high") for r in rows])
        ax.bar(x + off, v, width=0.36, color=colour, label=label)
        ax.errorbar(x + off, v, yerr=_err(v, lo, hi), fmt="none", ecolor="#222", capsize=3)
    ax.set_xticks(x, [_label(r.group) for r in rows])
    ax.set_ylim(0, 1)
    ax.set_ylabel("favourable rate")
    ax.set_title(f"Favourable rate by group ({100 * report.summary.level:.0f}% Wilson intervals)")
    ax.legend(frameon=False)
    return fig


def air_figure(report: DisparityReport) -> Figure:
    """Adverse impact ratio by group, model and final, with bootstrap intervals."""
    rows = report.rates.rows
    y = np.arange(len(rows))
    fig, ax = _figure(7, 0.6 * len(rows) + 1.6)
    top = 1.05
    for off, label, colour, attr in (
        (0.15, "model", MODEL_COLOUR, "model_air"),
        (-0.15, "final (after review)", FINAL_COLOUR, "final_air"),
    ):
        v = np.array([getattr(r, attr) for r in rows], dtype=float)
        lo = np.array([getattr(r, f"{attr}_ratio_low") for r in rows], dtype=float)
        hi = np.array([getattr(r, f"{attr}_ratio_high") for r in rows], dtype=float)
        ax.errorbar(v, y + off, xerr=_err(v, lo, hi), fmt="o", color=colour, capsize=3, label=label)
        top = max(top, min(float(np.nanmax(np.append(hi, v))) + 0.05, 3.0))
    ax.axvline(FOUR_FIFTHS, color="#a4161a", linestyle="--", linewidth=1)
    ax.text(
        FOUR_FIFTHS,
        0.98,
        " four-fifths (0.8)",
        color="#a4161a",
        fontsize=8,
        va="top",
        transform=ax.get_xaxis_transform(),
    )
    ax.axvline(1.0, color="#888", linewidth=0.8)
    ax.set_yticks(y, [_label(r.group) for r in rows])
    ax.set_xlim(0, top)
    ax.set_xlabel("adverse impact ratio (rate / most favoured group's rate)")
    ax.set_title(f"Adverse impact ratio ({100 * report.summary.level:.0f}% Katz intervals)")
    ax.legend(frameon=False, loc="lower left")
    return fig


def margin_figure(report: DisparityReport) -> Figure:
    """Override rate against margin, one line per group."""
    fig, ax = _figure(7, 3.6)
    for k, g in enumerate(report.summary.groups):
        bins = [b for b in report.margin_profile if b.group == g]
        if not bins:
            continue
        mid = np.array([(b.margin_low + b.margin_high) / 2 for b in bins])
        v = np.array([b.rate for b in bins])
        lo = np.array([b.low for b in bins])
        hi = np.array([b.high for b in bins])
        shift = (k - (len(report.summary.groups) - 1) / 2) * 0.01
        ax.errorbar(mid + shift, v, yerr=_err(v, lo, hi), marker="o", capsize=2, label=_label(g))
    ax.axvline(0, color="#888", linewidth=0.8)
    ax.set_xlabel("reference model margin (log-odds; > 0 decided favourably)")
    ax.set_ylabel("override rate")
    ax.set_ylim(0, 1)
    ax.set_title("Override rate against margin, by group")
    ax.legend(frameon=False, title="group")
    return fig


def _test_rows(tests: Sequence[IndependenceTest]) -> list[list[str]]:
    out = []
    for t in tests:
        stat = (
            f"{t.statistic_name} {_num(t.statistic)}"
            + (f", df {t.dof}" if t.dof is not None else "")
            if t.statistic is not None
            else "—"
        )
        out.append([t.name, t.method, stat, _p(t.p_value), t.note or ""])
    return out


def render_html(report: DisparityReport) -> str:
    """The whole report as one HTML document (no external files, scripts or fonts)."""
    title = f"Human-versus-model disparity: {report.context.get('study', 'study')}"
    parts = [
        *_header_part(report),
        *_rates_part(report),
        *_air_part(report),
        *_overrides_part(report),
        *_conditional_part(report),
        *_reviewers_part(report),
        *_errors_part(report),
        *_closing_part(report),
    ]
    body = "\n".join(parts)
    return (
        '<!DOCTYPE html>\n<html lang="en"><head><meta charset="utf-8">'
        f"<title>{_h(title)}</title><style>{_CSS}</style></head>"
        f"<body>\n{body}\n</body></html>\n"
    )


def _header_part(report: DisparityReport) -> list[str]:
    """Title, facts of the study, headline and cautions."""
    s, ctx = report.summary, report.context
    lvl = f"{100 * report.summary.level:.0f}%"
    parts: list[str] = []
    title = f"Human-versus-model disparity: {ctx.get('study', 'study')}"
    parts.append(f"<h1>{_h(title)}</h1>")
    facts = [
        ("snapshot", str(ctx.get("snapshot_id", "—"))),
        ("reference model", str(ctx.get("reference_model", "—"))),
        ("effective reviews", f"{s.reviews} ({s.decided} decided, {s.deferred} deferred)"),
        ("groups", ", ".join(s.groups)),
        (
            "reviewers",
            f"{s.reviewers}" + (" (pseudonymised)" if ctx.get("reviewers_pseudonymised") else ""),
        ),
        ("margins reviewed", f"{s.margin_min:+.2f} to {s.margin_max:+.2f} log-odds"),
        ("intervals", f"{lvl}; bootstrap {s.n_boot} replicates, seed {s.seed}"),
        ("outcomes", str(ctx.get("outcomes_file") or "not joined")),
        ("written by", f"closecall {__version__}"),
    ]
    parts.append(_table(["", ""], facts, left=2))
    parts.append(f'<div class="box">{_h(report_headline(report))}</div>')
    parts.append('<ul class="note">' + "".join(f"<li>{_h(c)}</li>" for c in CAUTIONS) + "</ul>")
    parts.append(sections.population_section(report))
    return parts


def _rates_part(report: DisparityReport) -> list[str]:
    """Section 1: favourable rates, model and final, by group."""
    r = report.rates
    parts: list[str] = []
    parts.append("<h2>1. Favourable rates, model and final</h2>")
    parts.append(_png(rates_figure(report)))
    parts.append(
        _table(
            ["group", "decided", "model favourable", "final favourable", "change (final − model)"],
            [
                [
                    g.group,
                    str(g.decided),
                    f"{_pct(g.model_rate)}{_ci(g.model_low, g.model_high)}",
                    f"{_pct(g.final_rate)}{_ci(g.final_low, g.final_high)}",
                    f"{100 * g.change:+.1f} pts{_pts(g.change_low, g.change_high)}",
                ]
                for g in r.rows
            ],
        )
    )
    return parts


def _air_part(report: DisparityReport) -> list[str]:
    """Section 2: adverse impact ratios and the four-fifths rule."""
    r = report.rates
    parts: list[str] = []
    parts.append("<h2>2. Adverse impact ratio and the four-fifths rule</h2>")
    parts.append(_png(air_figure(report)))
    parts.append(
        _table(
            ["group", "model ratio", "model < 0.8", "final ratio", "final < 0.8"],
            [
                [
                    g.group,
                    _air(
                        g.model_air,
                        g.model_air_ratio_low,
                        g.model_air_ratio_high,
                        g.group == r.model_reference,
                    ),
                    "flagged" if g.model_flag else "no",
                    _air(
                        g.final_air,
                        g.final_air_ratio_low,
                        g.final_air_ratio_high,
                        g.group == r.final_reference,
                    ),
                    "flagged" if g.final_flag else "no",
                ]
                for g in r.rows
            ],
        )
    )
    parts.append(
        f'<p class="note">Most favoured group: {_h(r.model_reference)} under the model, '
        f"{_h(r.final_reference)} after review. Ratios compare each group's favourable rate "
        "with that group's (29 CFR 1607.4(D)). Intervals: Katz's log method for a ratio of "
        "two independent proportions (Koopman's score method where a count is 0); the "
        "bootstrap intervals are in the JSON report.</p>"
    )
    parts.extend(f'<p class="note">{_h(n)}</p>' for n in r.notes)
    parts.append(sections.limits(report, "reviewed"))
    return parts


def _overrides_part(report: DisparityReport) -> list[str]:
    """Section 3: overrides by group, with their tests."""
    parts: list[str] = []
    o = report.overrides
    parts.append("<h2>3. Overrides by group</h2>")
    parts.append(_png(margin_figure(report)))
    parts.append(
        _table(
            ["group", "decided", "overridden", "to unfavourable", "to favourable", "deferred"],
            [
                [
                    g.group,
                    str(g.decided),
                    f"{g.overridden}: {_pct(g.override_rate)}"
                    f"{_ci(g.override_low, g.override_high)}",
                    f"{g.to_unfavourable}/{g.model_favourable}: {_pct(g.to_unfavourable_rate)}"
                    f"{_ci(g.to_unfavourable_low, g.to_unfavourable_high)}",
                    f"{g.to_favourable}/{g.model_unfavourable}: {_pct(g.to_favourable_rate)}"
                    f"{_ci(g.to_favourable_low, g.to_favourable_high)}",
                    str(g.deferred),
                ]
                for g in o.rows
            ],
        )
    )
    parts.append(_table(["test", "method", "statistic", "p", "note"], _test_rows(o.tests), 2))
    parts.append(sections.power(report.test_power))
    parts.append(sections.limits(report, "overrides"))
    return parts


def _conditional_part(report: DisparityReport) -> list[str]:
    """Section 4: overrides at equal margin (logistic regression)."""
    lvl = f"{100 * report.summary.level:.0f}%"
    parts: list[str] = []
    parts.append("<h2>4. Overrides at equal margin (logistic regression)</h2>")
    for fit in report.conditional:
        what = fit.direction.replace("_", " ")
        parts.append(
            f"<p><b>Overridden {_h(what)}</b>, among {_h(fit.risk_set)} "
            f"({fit.events} of {fit.at_risk}); reference group "
            f"{_h(fit.reference_group or '—')}.</p>"
        )
        if fit.fitted:
            parts.append(
                _table(
                    ["group", "events / at risk", f"odds ratio ({lvl} interval)", "p", "note"],
                    [
                        [
                            g.group,
                            f"{g.events} / {g.at_risk}",
                            f"{_num(g.odds_ratio)}{_ci(g.low, g.high, False)}",
                            _p(g.p_value),
                            g.note or "",
                        ]
                        for g in fit.rows
                    ],
                )
            )
            parts.append(
                f'<p class="note">Per unit of margin: odds ratio {_num(fit.margin_odds_ratio)}'
                f"{_ci(fit.margin_low, fit.margin_high, False)}.</p>"
            )
        parts.extend(f'<p class="note">{_h(n)}</p>' for n in fit.notes)
    parts.append(sections.conditional_extras(report))
    return parts


def _reviewers_part(report: DisparityReport) -> list[str]:
    """Section 5: each reviewer's overrides and test."""
    parts: list[str] = []
    parts.append("<h2>5. By reviewer</h2>")
    rows = []
    for t in report.reviewers:
        for g in t.rows:
            rows.append(
                [
                    t.reviewer,
                    g.group,
                    str(g.decided),
                    f"{_pct(g.override_rate)}{_ci(g.override_low, g.override_high)}",
                    f"{g.to_unfavourable}/{g.model_favourable}",
                    f"{g.to_favourable}/{g.model_unfavourable}",
                ]
            )
    parts.append(
        _table(["reviewer", "group", "decided", "override rate", "to unfav.", "to fav."], rows, 2)
    )
    parts.append(
        _table(
            ["reviewer", "test", "method", "p", "warnings"],
            [
                [
                    t.reviewer,
                    t.test.name,
                    t.test.method,
                    _p(t.test.p_value),
                    "; ".join([*t.warnings, *([t.test.note] if t.test.note else [])]),
                ]
                for t in report.reviewers
            ],
            3,
        )
    )
    parts.append(
        '<p class="note">Each reviewer\'s p-value is corrected with the others in the '
        "'review' family below (Holm, Benjamini–Hochberg).</p>"
    )
    parts.append(sections.limits(report, "reviewers"))
    return parts


def _errors_part(report: DisparityReport) -> list[str]:
    """Section 6 (with outcomes): error rates, model and final."""
    parts: list[str] = []
    if report.errors is not None:
        e = report.errors
        parts.append("<h2>6. Errors once outcomes are known</h2>")
        parts.append(
            _table(
                [
                    "group",
                    "with outcome",
                    "false favourable: model",
                    "final",
                    "false unfavourable: model",
                    "final",
                ],
                [
                    [
                        g.group,
                        str(g.with_outcome),
                        *(
                            f"{x.errors}/{x.cases}: {_pct(x.rate)}{_ci(x.low, x.high)}"
                            for x in (
                                g.model_false_favourable,
                                g.final_false_favourable,
                                g.model_false_unfavourable,
                                g.final_false_unfavourable,
                            )
                        ),
                    ]
                    for g in e.rows
                ],
            )
        )
        parts.append(
            '<p class="note">False favourable: share of cases whose outcome was unfavourable '
            "that were decided favourably. False unfavourable: share of cases whose outcome was "
            "favourable that were decided unfavourably.</p>"
        )
        parts.extend(f'<p class="note">{_h(n)}</p>' for n in e.notes)
        parts.append(sections.outcome_tests_section(report))
    return parts


def _closing_part(report: DisparityReport) -> list[str]:
    """Calibration, held-out, periods, test families, warnings and limits."""
    parts: list[str] = []
    parts.append(sections.calibration_section(report))
    parts.append(sections.heldout_section(report))
    parts.append(sections.periods_section(report))
    parts.append(sections.families_section(report))
    parts.append("<h2>Warnings and limits</h2>")
    parts.append("<ul>" + "".join(f"<li>{_h(w)}</li>" for w in report.warnings) + "</ul>")
    parts.append(sections.limits(report, "power"))
    parts.append(
        '<p class="note">How each figure is computed, and what it cannot tell you: '
        "docs/disparity.md in the closecall distribution.</p>"
    )
    return parts


def report_headline(report: DisparityReport) -> str:
    """One sentence: did review narrow or widen the largest gap?"""
    r = report.rates
    lvl = f"{100 * report.summary.level:.0f}%"
    return headline_text(
        r.lowest_model_air,
        r.lowest_final_air,
        r.lowest_air_change,
        r.lowest_air_change_low,
        r.lowest_air_change_high,
        lvl,
    )


def headline_text(
    model_air: float, final_air: float, change: float, low: float, high: float, lvl: str
) -> str:
    """Plain-words verdict on the change of the lowest adverse impact ratio."""
    if not (math.isfinite(model_air) and math.isfinite(final_air)):
        return "The adverse impact ratio is undefined (no favourable decisions in some view)."
    if math.isfinite(low) and low > 0:
        verdict = "review narrowed the largest gap between groups"
    elif math.isfinite(high) and high < 0:
        verdict = "review widened the largest gap between groups"
    else:
        verdict = "the data do not show whether review narrowed or widened the largest gap"
    change = round(change, 2) + 0.0  # no "-0.00"
    return (
        f"Lowest adverse impact ratio: {model_air:.2f} under the model, {final_air:.2f} after "
        f"review (change {change:+.2f}, {lvl} interval {low:+.2f} to {high:+.2f}): {verdict}."
    )
