"""The HTML report's audit sections: the whole population, calibration and error rates on
held-out history, model against final with outcomes, the test families, the figures by period,
and what each section cannot show. Figures are embedded as PNG (no scripts, no fetches)."""

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

from closecall.core.text import safe_text
from closecall.reports.disparity.calibration import GroupCalibration
from closecall.reports.disparity.heldout import RateGap
from closecall.reports.disparity.power import Detectable
from closecall.reports.disparity.rates import FOUR_FIFTHS
from closecall.reports.disparity.report import DisparityReport

MODEL_COLOUR = "#4d6a8a"
FINAL_COLOUR = "#c47f2c"


def text(value: object) -> str:
    """Text for the page: unsafe characters shown as visible escapes, then HTML-escaped."""
    return escape(safe_text(str(value)))


def label(value: object) -> str:
    """A data label for a figure: made safe, ``$`` escaped (no mathtext), no leading ``_``."""
    out = safe_text(str(value)).replace("$", r"\$")
    return " " + out if out.startswith("_") else out


def _ok(*xs: float | None) -> bool:
    return all(x is not None and math.isfinite(x) for x in xs)


def _pct(x: float | None) -> str:
    return f"{100 * x:.1f}%" if x is not None and math.isfinite(x) else "—"


def _num(x: float | None) -> str:
    return f"{x:.2f}" if _ok(x) else "—"


def _ci(lo: float | None, hi: float | None, pct: bool = True) -> str:
    if lo is None or hi is None or (math.isnan(lo) and math.isnan(hi)):
        return ""
    if pct:
        return f" ({_pct(lo)} to {_pct(hi)})"
    return f" ({_num(lo)} to {'∞' if hi == math.inf else _num(hi)})"


def _p(p: float | None) -> str:
    if p is None or not math.isfinite(p):
        return "—"
    return "< 0.001" if p < 0.001 else f"{p:.3f}"


def table(head: Sequence[str], rows: Iterable[Sequence[str]], left: int = 1) -> str:
    """An HTML table; the first ``left`` columns align left. Every cell is escaped here."""
    h = "".join(
        f'<th class="l">{text(c)}</th>' if i < left else f"<th>{text(c)}</th>"
        for i, c in enumerate(head)
    )
    body = "".join(
        "<tr>"
        + "".join(
            f'<td class="l">{text(c)}</td>' if i < left else f"<td>{text(c)}</td>"
            for i, c in enumerate(r)
        )
        + "</tr>"
        for r in rows
    )
    return f"<table><thead><tr>{h}</tr></thead><tbody>{body}</tbody></table>"


def figure(width: float, height: float, rows: int = 1, cols: int = 1) -> tuple[Figure, Any]:
    """A figure on the Agg canvas (no pyplot, no global state) and its axes grid."""
    fig = Figure(figsize=(width, height))
    FigureCanvasAgg(fig)
    return fig, fig.subplots(rows, cols, squeeze=False)


def png(fig: Figure, alt: str) -> str:
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=100, bbox_inches="tight")
    data = base64.b64encode(buf.getvalue()).decode("ascii")
    return f'<img alt="{text(alt)}" src="data:image/png;base64,{data}">'


def _err(v: np.ndarray, lo: np.ndarray, hi: np.ndarray) -> np.ndarray:
    below = np.nan_to_num(v - lo, nan=0.0, posinf=0.0).clip(min=0)
    above = np.nan_to_num(hi - v, nan=0.0, posinf=0.0).clip(min=0)
    return np.vstack([below, above])


def notes(items: Iterable[str]) -> str:
    return "".join(f'<p class="note">{text(n)}</p>' for n in items)


def limits(report: DisparityReport, section: str) -> str:
    """The section's 'what this cannot show' box."""
    lines = report.limits.get(section, ())
    if not lines:
        return ""
    return (
        '<div class="limits"><b>What this cannot show.</b><ul>'
        + "".join(f"<li>{text(x)}</li>" for x in lines)
        + "</ul></div>"
    )


def power(items: Iterable[tuple[str, Detectable]]) -> str:
    rows = [[name, d.text] for name, d in items]
    if not rows:
        return ""
    return "<p><b>Power</b> (what each test could detect)</p>" + table(["test", "detects"], rows, 2)


# --------------------------------------------------------------------------- population


def population_figure(report: DisparityReport) -> Figure:
    """Favourable rates over every case and adverse impact ratios, every case and reviewed."""
    p = report.population
    assert p is not None
    fig, axes = figure(10, 0.55 * len(p.rows) + 2.6, 1, 2)
    ax, bx = axes[0]
    x = np.arange(len(p.rows))
    for off, name, colour, attr in (
        (-0.18, "model", MODEL_COLOUR, "model"),
        (0.18, "final", FINAL_COLOUR, "final"),
    ):
        v = np.array([getattr(r, f"{attr}_rate") for r in p.rows])
        lo = np.array([getattr(r, f"{attr}_low") for r in p.rows])
        hi = np.array([getattr(r, f"{attr}_high") for r in p.rows])
        ax.bar(x + off, v, width=0.36, color=colour, label=name)
        ax.errorbar(x + off, v, yerr=_err(v, lo, hi), fmt="none", ecolor="#222", capsize=3)
    ax.set_xticks(x, [label(r.group) for r in p.rows])
    ax.set_ylim(0, 1)
    ax.set_title("Favourable rate, every case under review")
    ax.legend(frameon=False)
    reviewed = {r.group: r for r in report.rates.rows}
    y = np.arange(len(p.rows))
    series = [
        (
            "every case: model",
            MODEL_COLOUR,
            "o",
            [(r.model_air, r.model_air_low, r.model_air_high) for r in p.rows],
        ),
        (
            "every case: final",
            FINAL_COLOUR,
            "o",
            [(r.final_air, r.final_air_low, r.final_air_high) for r in p.rows],
        ),
    ]
    rv = [reviewed.get(r.group) for r in p.rows]
    series.append(
        (
            "reviewed: final",
            "#777",
            "s",
            [
                (g.final_air, g.final_air_ratio_low, g.final_air_ratio_high)
                if g is not None
                else (np.nan, np.nan, np.nan)
                for g in rv
            ],
        )
    )
    top = 1.05
    for k, (name, colour, marker, vals) in enumerate(series):
        arr = np.array(vals, dtype=float)
        bx.errorbar(
            arr[:, 0],
            y + 0.2 - 0.2 * k,
            xerr=_err(arr[:, 0], arr[:, 1], arr[:, 2]),
            fmt=marker,
            color=colour,
            capsize=3,
            label=name,
        )
        finite = arr[np.isfinite(arr)]
        if finite.size:
            top = max(top, min(float(finite.max()) + 0.05, 3.0))
    bx.axvline(FOUR_FIFTHS, color="#a4161a", linestyle="--", linewidth=1)
    bx.axvline(1.0, color="#888", linewidth=0.8)
    bx.set_yticks(y, [label(r.group) for r in p.rows])
    bx.set_xlim(0, top)
    bx.set_title("Adverse impact ratio (Katz intervals; dashed: 0.8)")
    bx.legend(frameon=False, fontsize=8, loc="lower right")
    return fig


def population_section(report: DisparityReport) -> str:
    p = report.population
    if p is None:
        return ""
    lvl = f"{100 * p.level:.0f}%"
    parts = [
        "<h2>Every case under review: what review changed</h2>",
        f"<p>All {p.cases:,} cases under review; {p.decided} were decided by a reviewer. "
        "The final decision is the reviewer's where the case was reviewed and decided, the "
        "model's otherwise. The reviewed cases' own figures follow in the next sections.</p>",
        png(population_figure(report), "favourable rates and ratios over every case"),
    ]
    reviewed = {r.group: r for r in report.rates.rows}
    rows = []
    for g in p.rows:
        r = reviewed.get(g.group)
        rows.append(
            [
                g.group,
                f"{g.cases:,}",
                f"{_pct(g.model_rate)}{_ci(g.model_low, g.model_high)}",
                f"{_pct(g.final_rate)}{_ci(g.final_low, g.final_high)}",
                f"{100 * g.change:+.1f} pts ({100 * g.change_low:+.1f} to "
                f"{100 * g.change_high:+.1f})",
                "reference"
                if g.group == p.model_reference
                else f"{_num(g.model_air)}{_ci(g.model_air_low, g.model_air_high, False)}"
                + (" flagged" if g.model_flag else ""),
                "reference"
                if g.group == p.final_reference
                else f"{_num(g.final_air)}{_ci(g.final_air_low, g.final_air_high, False)}"
                + (" flagged" if g.final_flag else ""),
                "—"
                if r is None
                else f"{r.decided}: {_pct(r.model_rate)} → {_pct(r.final_rate)}; ratio "
                f"{_num(r.model_air)} → {_num(r.final_air)}",
            ]
        )
    parts.append(
        table(
            [
                "group",
                "cases",
                "model favourable",
                "final favourable",
                "change",
                "model ratio",
                "final ratio",
                "reviewed only",
            ],
            rows,
        )
    )
    parts.append(
        f'<p class="note">Lowest ratio over every case: {_num(p.lowest_model_air)} under the '
        f"model, {_num(p.lowest_final_air)} after review; change "
        f"{p.lowest_air_change + 0.0:+.3f} ({lvl} bootstrap interval "
        f"{p.lowest_air_change_low:+.3f} to {p.lowest_air_change_high:+.3f}). Ratio intervals: "
        "Katz's log method (Koopman's score method where a count is 0).</p>"
    )
    parts.append(notes(p.notes))
    parts.append(limits(report, "population"))
    return "\n".join(parts)


# --------------------------------------------------------------------------- calibration


def calibration_figure(report: DisparityReport) -> Figure:
    """Reliability curves: one panel per model, one line per group, with the diagonal."""
    c = report.calibration
    assert c is not None
    models = list(c.models)
    fig, axes = figure(3.1 * len(models), 3.3, 1, len(models))
    for k, m in enumerate(models):
        ax = axes[0][k]
        ax.plot([0, 1], [0, 1], color="#999", linewidth=0.8)
        for r in c.rows:
            if r.model != m or r.group == "all" or not r.bins:
                continue
            mp = np.array([b.mean_predicted for b in r.bins])
            ob = np.array([b.observed for b in r.bins])
            lo = np.array([b.low for b in r.bins])
            hi = np.array([b.high for b in r.bins])
            ax.errorbar(
                mp,
                ob,
                yerr=_err(ob, lo, hi),
                marker="o",
                markersize=3,
                capsize=2,
                label=f"{label(r.group)} (slope {r.slope:.2f})",
            )
        ax.set_xlim(0, 1)
        ax.set_ylim(0, 1)
        ax.set_title(label(m), fontsize=10)
        ax.set_xlabel("predicted", fontsize=8)
        if k == 0:
            ax.set_ylabel("observed (held out)", fontsize=8)
        ax.legend(frameon=False, fontsize=7, loc="upper left")
    return fig


def calibration_section(report: DisparityReport) -> str:
    """Calibration by model and group: curves, fits, reliability bins, power, notes, limits."""
    c = report.calibration
    if c is None:
        return ""
    parts = [
        "<h2>Calibration of each model by group (held-out history)</h2>",
        f"<p>Source: {text(c.source)}. The threshold assumes calibrated probabilities; a group "
        "whose scores are too extreme (slope below 1) or off on average (intercept away from "
        "0) meets a different effective threshold.</p>",
    ]
    if c.models:
        parts.append(png(calibration_figure(report), "reliability curves by model and group"))
    parts.append(_calibration_table(c.rows))
    parts.append(
        '<p class="note">Intercept: logit P(y) = a₀ + η with η the held-out log-odds as '
        "offset. Slope: logit P(y) = a + b·η. Effective threshold: the model probability p* "
        "with a + b·logit(p*) = logit(t); delta-method intervals. Wald intervals from the "
        "maximum-likelihood fit (Cox 1958).</p>"
    )
    bins = _reliability_bins_table(c.rows)
    if bins:
        parts.append(bins)
    parts.append(
        power(
            (f"{r.model} {r.group} slope", r.slope_detectable)
            for r in c.rows
            if r.group != "all" and r.slope_detectable.upper is not None
        )
    )
    parts.append(notes(c.notes))
    parts.append(limits(report, "calibration"))
    return "\n".join(parts)


def _effective_thresholds(r: GroupCalibration) -> str:
    """What each lens threshold acts as for this group, and what a case at it really is."""
    return "; ".join(
        f"{th.lens}: t {_pct(th.threshold)} acts as {_pct(th.effective)}"
        f"{_ci(th.effective_low, th.effective_high)}; a case at t is really "
        f"{_pct(th.at_threshold)}{_ci(th.at_threshold_low, th.at_threshold_high)}"
        for th in r.thresholds
    )


def _calibration_table(rows: Sequence[GroupCalibration]) -> str:
    """One row per model and group: predicted against observed, intercept, slope, verdict."""
    cells = [
        [
            r.model,
            r.group,
            f"{r.cases:,}",
            f"{_pct(r.mean_predicted)} / {_pct(r.observed)}",
            f"{r.intercept:+.2f}{_ci(r.intercept_low, r.intercept_high, False)}"
            if _ok(r.intercept)
            else "—",
            f"{_num(r.slope)}{_ci(r.slope_low, r.slope_high, False)}",
            _effective_thresholds(r) or "—",
            r.verdict + (f"; {r.note}" if r.note else ""),
        ]
        for r in rows
    ]
    head = [
        "model",
        "group",
        "cases",
        "mean predicted / observed",
        "intercept a₀",
        "slope b",
        "effective threshold",
        "verdict",
    ]
    return table(head, cells, 2)


def _reliability_bins_table(rows: Sequence[GroupCalibration]) -> str:
    """Every model and group's reliability bins, folded away ("" when there are none)."""
    bins = [
        [
            r.model,
            r.group,
            str(i + 1),
            f"{_pct(b.p_low)} to {_pct(b.p_high)}",
            str(b.cases),
            _pct(b.mean_predicted),
            f"{_pct(b.observed)}{_ci(b.low, b.high)}",
        ]
        for r in rows
        for i, b in enumerate(r.bins)
    ]
    if not bins:
        return ""
    return (
        "<details><summary>Reliability bins (every model and group)</summary>"
        + table(
            ["model", "group", "bin", "predicted range", "cases", "mean predicted", "observed"],
            bins,
            2,
        )
        + "</details>"
    )


# --------------------------------------------------------------------------- held-out errors


def heldout_figure(report: DisparityReport) -> Figure:
    """False-favourable and false-unfavourable rates by group, one panel per model (first
    lens)."""
    e = report.heldout_errors
    assert e is not None
    lens = e.rows[0].lens
    models = list(dict.fromkeys(r.model for r in e.rows))
    fig, axes = figure(3.1 * len(models), 3.2, 1, len(models))
    for k, m in enumerate(models):
        ax = axes[0][k]
        rows = [r for r in e.rows if r.model == m and r.lens == lens]
        x = np.arange(len(rows))
        for off, name, colour, attr in (
            (-0.18, "false favourable", MODEL_COLOUR, "false_favourable"),
            (0.18, "false unfavourable", FINAL_COLOUR, "false_unfavourable"),
        ):
            v = np.array([getattr(r, attr).rate for r in rows])
            lo = np.array([getattr(r, attr).low for r in rows])
            hi = np.array([getattr(r, attr).high for r in rows])
            ax.bar(x + off, v, width=0.36, color=colour, label=name)
            ax.errorbar(x + off, v, yerr=_err(v, lo, hi), fmt="none", ecolor="#222", capsize=3)
        ax.set_xticks(x, [label(r.group) for r in rows])
        ax.set_ylim(0, 1)
        ax.set_title(f"{label(m)} ({label(lens)})", fontsize=10)
        if k == 0:
            ax.legend(frameon=False, fontsize=7)
    return fig


def _gap(g: RateGap | None) -> str:
    if g is None:
        return "reference"
    return (
        f"{100 * g.difference:+.1f} pts ({100 * g.difference_low:+.1f} to "
        f"{100 * g.difference_high:+.1f}); ×{_num(g.ratio)}{_ci(g.ratio_low, g.ratio_high, False)}"
        f"; p {_p(g.p_value)}"
    )


def heldout_section(report: DisparityReport) -> str:
    e = report.heldout_errors
    if e is None:
        return ""
    parts = [
        "<h2>Error rates of each model by group (held-out history)</h2>",
        f"<p>Source: {text(e.source)}. Gaps are against the reference group "
        f"{text(e.reference_group)}: difference (Newcombe's hybrid score interval), ratio "
        "(Katz's log interval), Fisher's exact p.</p>",
    ]
    if e.rows:
        parts.append(png(heldout_figure(report), "held-out error rates by model and group"))
    rows = [
        [
            r.model,
            r.lens,
            r.group,
            f"{r.false_favourable.errors}/{r.false_favourable.cases}: "
            f"{_pct(r.false_favourable.rate)}"
            f"{_ci(r.false_favourable.low, r.false_favourable.high)}",
            _gap(r.ff_gap),
            f"{r.false_unfavourable.errors}/{r.false_unfavourable.cases}: "
            f"{_pct(r.false_unfavourable.rate)}"
            f"{_ci(r.false_unfavourable.low, r.false_unfavourable.high)}",
            _gap(r.fu_gap),
        ]
        for r in e.rows
    ]
    parts.append(
        table(
            ["model", "lens", "group", "false favourable", "gap", "false unfavourable", "gap"],
            rows,
            3,
        )
    )
    parts.append(
        power(
            (f"{r.model} {r.lens} {r.group} {kind}", gap.detectable)
            for r in e.rows
            for kind, gap in (("false favourable", r.ff_gap), ("false unfavourable", r.fu_gap))
            if gap is not None
        )
    )
    parts.append(notes(e.notes))
    parts.append(limits(report, "heldout_errors"))
    return "\n".join(parts)


# --------------------------------------------------------------------------- outcomes


def outcome_tests_section(report: DisparityReport) -> str:
    e = report.errors
    if e is None:
        return ""
    rows = [
        [
            r.group,
            _gap(r.model_ff_gap),
            _gap(r.final_ff_gap),
            _gap(r.model_fu_gap),
            _gap(r.final_fu_gap),
            f"model only right {r.mcnemar.model_only}, final only right "
            f"{r.mcnemar.final_only}; exact p {_p(r.mcnemar.p_value)}",
        ]
        for r in e.rows
    ]
    parts = [
        f"<p><b>Gaps against {text(e.reference_group or '—')}, and model against final on the "
        "same cases (McNemar's exact test)</b></p>",
        table(
            [
                "group",
                "false fav.: model",
                "final",
                "false unfav.: model",
                "final",
                "model vs final (McNemar)",
            ],
            rows,
        ),
    ]
    if e.mcnemar_all is not None:
        m = e.mcnemar_all
        parts.append(
            f'<p class="note">Every group together: model only right {m.model_only}, final '
            f"only right {m.final_only}, both right {m.both_right}, both wrong "
            f"{m.both_wrong}; exact p {_p(m.p_value)}.</p>"
        )
    items = [(f"McNemar {r.group}", r.mcnemar.detectable) for r in e.rows]
    if e.mcnemar_all is not None:
        items.append(("McNemar, every group", e.mcnemar_all.detectable))
    parts.append(power(items))
    parts.append(limits(report, "outcomes"))
    return "\n".join(parts)


# --------------------------------------------------------------------------- conditional extras


def conditional_extras(report: DisparityReport) -> str:
    parts = []
    for fit in report.conditional:
        if not fit.fitted:
            continue
        what = fit.direction.replace("_", " ")
        parts.append(
            f'<p class="note">Overridden {text(what)}: {text(fit.estimation)}; standard errors '
            f"{text(fit.standard_errors)}.</p>"
        )
        alt = [
            [
                r.group,
                f"{_num(r.model_based_low)} to {_num(r.model_based_high)}, p {_p(r.model_based_p)}",
                f"{_num(r.cluster_low)} to {_num(r.cluster_high)}, p {_p(r.cluster_p)}"
                if r.cluster_low is not None
                else "—",
            ]
            for r in fit.rows
            if r.model_based_low is not None
        ]
        if alt:
            parts.append(
                table(["group", "model-based interval", "cluster-robust by reviewer"], alt)
            )
        parts.append(power((f"{what}, {r.group}", r.detectable) for r in fit.rows if r.detectable))
    parts.append(limits(report, "conditional"))
    return "\n".join(parts)


# --------------------------------------------------------------------------- families


def families_section(report: DisparityReport) -> str:
    if not report.families:
        return ""
    parts = ["<h2>Many tests, corrected together</h2>"]
    for f in report.families:
        parts.append(
            f"<p><b>The '{text(f.name)}' family</b> ({len(f.tests)} tests): {text(f.holds)}. "
            f"{f.raw_below_alpha} below {f.alpha:g} before correction; {f.flagged} after Holm "
            f"(family-wise error); {f.flagged_bh} after Benjamini–Hochberg (false discovery "
            "rate).</p>"
        )
        parts.append(
            table(
                ["section", "test", "p", "Holm", "Benjamini–Hochberg", "flagged (Holm)"],
                [
                    [
                        x.section,
                        x.name,
                        _p(x.p_value),
                        _p(x.holm),
                        _p(x.bh),
                        "flagged" if x.flagged else "",
                    ]
                    for x in f.tests
                ],
                2,
            )
        )
    parts.append(limits(report, "multiplicity"))
    return "\n".join(parts)


# --------------------------------------------------------------------------- periods


def periods_figure(report: DisparityReport) -> Figure:
    """Small multiples over periods: model and final favourable rates, the final ratio and
    the override rate, one line per group with intervals."""
    pr = report.periods
    assert pr is not None
    names = [p.period for p in pr.periods]
    x = np.arange(len(names))
    groups = list(report.summary.groups)
    panels = (
        ("model favourable rate", "model_rate", "model_low", "model_high"),
        ("final favourable rate", "final_rate", "final_low", "final_high"),
        ("final adverse impact ratio", "final_air", "final_air_low", "final_air_high"),
        ("override rate", None, None, None),
    )
    fig, axes = figure(11, 2.9, 1, len(panels))
    for k, (title, v_attr, lo_attr, hi_attr) in enumerate(panels):
        ax = axes[0][k]
        for j, g in enumerate(groups):
            vals = []
            for p in pr.periods:
                row = next((r for r in p.rows if r.group == g), None)
                if row is None:
                    vals.append((np.nan, np.nan, np.nan))
                elif v_attr is None:
                    o = row.overrides
                    vals.append((o.override_rate, o.override_low, o.override_high))
                else:
                    assert lo_attr is not None and hi_attr is not None
                    vals.append(
                        (getattr(row, v_attr), getattr(row, lo_attr), getattr(row, hi_attr))
                    )
            arr = np.array(vals, dtype=float)
            shift = (j - (len(groups) - 1) / 2) * 0.06
            ax.errorbar(
                x + shift,
                arr[:, 0],
                yerr=_err(arr[:, 0], arr[:, 1], arr[:, 2]),
                marker="o",
                markersize=3,
                capsize=2,
                label=label(g),
            )
        if v_attr == "final_air":
            ax.axhline(FOUR_FIFTHS, color="#a4161a", linestyle="--", linewidth=1)
            ax.set_ylim(0, 1.5)
        else:
            ax.set_ylim(0, 1)
        ax.set_xticks(x, [label(n) for n in names], rotation=45, fontsize=7)
        ax.set_xlim(-0.5, len(names) - 0.5)
        ax.set_title(title, fontsize=9)
        if k == 0:
            ax.legend(frameon=False, fontsize=7)
    return fig


def periods_section(report: DisparityReport) -> str:
    pr = report.periods
    if pr is None:
        return ""
    parts = [f"<h2>Over time: by {text(pr.unit)} of the review</h2>"]
    if pr.periods:
        parts.append(png(periods_figure(report), f"rates and overrides by {pr.unit}"))
    rows = []
    for p in pr.periods:
        for g in p.rows:
            o = g.overrides
            rows.append(
                [
                    p.period,
                    g.group,
                    str(g.decided),
                    f"{_pct(g.model_rate)}{_ci(g.model_low, g.model_high)}",
                    f"{_pct(g.final_rate)}{_ci(g.final_low, g.final_high)}",
                    f"{_num(g.model_air)}{_ci(g.model_air_low, g.model_air_high, False)}",
                    f"{_num(g.final_air)}{_ci(g.final_air_low, g.final_air_high, False)}",
                    f"{_pct(o.override_rate)}{_ci(o.override_low, o.override_high)}",
                    f"{o.to_unfavourable}/{o.model_favourable}",
                    f"{o.to_favourable}/{o.model_unfavourable}",
                    _p(p.test.p_value),
                ]
            )
    parts.append(
        table(
            [
                "period",
                "group",
                "decided",
                "model favourable",
                "final favourable",
                "model ratio",
                "final ratio",
                "overridden",
                "to unfav.",
                "to fav.",
                "override × group p",
            ],
            rows,
            2,
        )
    )
    parts.append(notes(pr.notes))
    parts.append(limits(report, "periods"))
    return "\n".join(parts)
