"""Commands: explain, proxies, bands, compare — a thin layer over ``closecall.Study``.

Every view reads at 80 columns; decisions, flips and flags carry words or signs as well as
colour, so nothing is told by colour alone.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import typer
from rich import box
from rich.table import Table
from rich.text import Text

from closecall.analysis.multiplicity import UNCERTAINTY_EPSILON
from closecall.api.study import Study
from closecall.cli.common import ConfigOption, JsonOption, load
from closecall.cli.output import console, emit_json, plain
from closecall.core.errors import UserError
from closecall.core.text import safe_text
from closecall.core.vocabulary import short_model

LensOption = typer.Option(None, "--lens", help="Cost lens name (default: the first one).")
FLAG = "✱"


# --------------------------------------------------------------------------- small helpers


def _txt(text: Any, style: str = "") -> Text:
    return plain(text, style)


def _span(lo: float | None, hi: float | None) -> str:
    """A bootstrap interval as text, or a dash when the snapshot has none."""
    return "—" if lo is None or hi is None else f"{lo:.3f}–{hi:.3f}"


def _signed(x: float, digits: int = 2) -> str:
    return f"{x:+.{digits}f}".replace("-", "−")


def _decision(margin: float) -> Text:
    return _txt("favourable", "green") if margin > 0 else _txt("unfavourable", "red")


def _pct(x: float | None, digits: int = 0) -> str:
    return "—" if x is None else f"{100 * x:.{digits}f} %"


def _eps_pct(eps: float) -> str:
    """A relative ε as a percentage with as many digits as it needs."""
    pct = 100 * eps
    if pct == 0:
        return "0 %"
    if pct < 0.001:
        return "<0.001 %"
    text = f"{pct:.3f}".rstrip("0").rstrip(".") if pct < 10 else f"{pct:.0f}"
    return f"{text} %"


def _bar(value: float, largest: float, width: int = 8) -> Text:
    """A bar of '+' or '−' characters: the sign is in the characters, not only the colour."""
    n = 0 if largest <= 0 else max(1, round(width * abs(value) / largest)) if value else 0
    return _txt(("+" if value > 0 else "−") * n, "green" if value > 0 else "red")


def _say(text: str | Text) -> None:
    """Print a line as plain text (never read as rich markup) or as a styled Text."""
    console.print(text if isinstance(text, Text) else _txt(text))


def _heading(text: str) -> None:
    console.print()
    _say(_txt(text, "bold underline"))


def _grid(*headers: str, right: tuple[int, ...] = ()) -> Table:
    table = Table(box=box.SIMPLE_HEAD, show_edge=False, pad_edge=False, header_style="bold")
    for i, h in enumerate(headers):  # headers may be group levels: plain text, escaped
        table.add_column(_txt(h), justify="right" if i in right else "left", no_wrap=i in right)
    return table


# --------------------------------------------------------------------------- explain


def explain(
    case_id: str = typer.Argument(..., help="The case to explain (its id in the data)."),
    exact: bool = typer.Option(
        False, "--exact", help="Also solve the equally-good band exactly (a convex problem)."
    ),
    lens: str | None = LensOption,
    config: Path = ConfigOption,
    as_json: bool = JsonOption,
) -> None:
    """Why is this case close? Suite decisions, contributions, group dependence,
    counterparts in other groups, bands and similar past cases.

    All margins are log-odds distances from the cost lens's threshold (> 0 favourable) under
    the pooled model, which sees the group attribute, so its dependence on it is visible.

    \b
    Examples:
      closecall explain HR-0002696
      closecall explain HR-0002696 --exact --json
    """
    study = Study(load(config, quiet=as_json))
    data = study.explain(case_id, exact=exact, lens=lens).to_dict()
    if as_json:
        emit_json(data)
        return
    _print_explanation(data, study.same_models())


def _same_note(same: dict[str, str]) -> list[str]:
    """One line per model that is another (named once in the tables above it)."""
    return [
        f"{short_model(m)} = {short_model(o)}: the same weights"
        + (" (no proxy flagged)" if (m, o) == ("proxy_free", "unaware") else "")
        + f"; shown once, as {short_model(o)}"
        for m, o in same.items()
    ]


def _print_explanation(d: dict[str, Any], same: dict[str, str] | None = None) -> None:
    """Every section of one case's explanation, in the order a reviewer reads them."""
    _print_case_head(d)
    _print_suite_decisions(d, same or {})
    _print_contributions(d)
    _print_neutralised(d["dependence"])
    _print_counterparts(d["counterparts"])
    _print_bands(d["bands"])
    _print_neighbours(d)
    if d.get("deployed_card") is not None:
        _print_card(d["deployed_card"])


def _print_case_head(d: dict[str, Any]) -> None:
    """The case, its group and outcome, the margin and decision, and any fit flags."""
    lens = d["lens"]
    head = Text()
    head.append(safe_text(d["case_id"]), "bold")
    head.append(
        f" · group {safe_text(d['group'])} · recorded outcome {safe_text(str(d['outcome']))}"
    )
    head.append(f" · snapshot {d['snapshot']}")
    console.print(head)
    line = Text(
        f"{d['model']} model, lens {safe_text(lens['name'])} (t = {lens['threshold']:.3f}): "
    )
    line.append(f"margin {_signed(d['margin'], 3)} → ")
    line.append_text(_decision(d["margin"]))
    console.print(line)
    _print_fit_flags(d["fit_flags"])


def _print_suite_decisions(d: dict[str, Any], same: dict[str, str]) -> None:
    """Each model's margin and decision, marked where it differs from the case's model."""
    _heading("Decisions across the suite")
    t = _grid("model", "margin", "decision", "", right=(1,))
    own = d["margin"] > 0
    for model, md in d["decisions"].items():
        if model in same:
            continue
        star = "*" if model == d["reference"] else ""
        differs = (md["margin"] > 0) != own
        t.add_row(
            _txt(short_model(model) + star),
            _txt(_signed(md["margin"], 3)),
            _decision(md["margin"]),
            _txt(f"{FLAG} differs from {d['model']}" if differs else "", "bold"),
        )
    console.print(t)
    _say(_txt(f"* reference model ({short_model(d['reference'])})", "dim"))
    for note in _same_note(same):
        _say(_txt(note, "dim"))


def _print_contributions(d: dict[str, Any]) -> None:
    """What the margin is made of: each feature's contribution, then the baseline."""
    dep = d["dependence"]
    _heading("What the margin is made of (log-odds)")
    t = _grid("feature", "value", "role", "contribution", "", right=(3,))
    largest = max((abs(c["contribution"]) for c in dep["contributions"]), default=0.0)
    for c in dep["contributions"]:
        role = c["role"].upper() if c["role"] != "other" else ""
        t.add_row(
            _txt(c["feature"]),
            _txt(_value(c["value"])),
            _txt(role, "bold magenta" if role else ""),
            _txt(_signed(c["contribution"], 3)),
            _bar(c["contribution"], largest),
        )
    t.add_row(_txt("+ baseline"), _txt("average"), "", _signed(dep["baseline"], 3))
    t.add_row(_txt("= margin", "bold"), "", "", _txt(_signed(d["margin"], 3), "bold"))
    console.print(t)
    _say(
        f"group {_signed(dep['group_part'], 3)} · proxies {_signed(dep['proxy_part'], 3)}"
        f" · rest {_signed(dep['rest'], 3)} · {_pct(dep['share'])} of the pull from these two"
    )


def _print_neutralised(dep: dict[str, Any]) -> None:
    """The margin with the group (and its proxies) set to the history average."""
    t = _grid("neutralised", "margin", "decision", "", right=(1,))
    sure: list[str] = []
    for label, key, flag, what, se in (
        ("the group", "margin_group_neutral", "rests_on_group", "rests on the group", "group"),
        (
            "group and proxies",
            "margin_neutral",
            "rests_on_proxies",
            "rests on group/proxies",
            "proxies",
        ),
    ):
        spread = dep.get("group_part_se" if se == "group" else "dependence_se")
        if spread is not None:
            unsure = " — uncertain" if dep.get(f"{flag}_uncertain", False) else ""
            sure.append(f"{label} ±{1.96 * spread:.3f}{unsure}")
        t.add_row(
            _txt(label),
            _signed(dep[key], 3),
            _decision(dep[key]),
            _txt(f"{FLAG} FLIPS: {what}" if dep[flag] else "same decision", "bold"),
        )
    console.print(t)
    if sure:
        _say("95% interval of the neutralised margin: " + "; ".join(sure))
    _say(
        "from the standard error of the part taken out (the uncertainty of its weights); "
        "uncertain = within that interval the neutralised decision could go either way"
    )


def _print_counterparts(counterparts: list[dict[str, Any]]) -> None:
    """The case carried into each other group: the group alone, then with its proxies."""
    _heading("Counterparts: the case carried into another group")
    t = _grid("as group", "what changes", "margin", "decision", "", right=(2,))
    for cp in counterparts:
        moved = "; ".join(
            f"{c['feature']} {_value(c['from'])}→{_value(c['to'])}" for c in cp["carried"]
        )
        for label, mkey, fkey in (
            ("group only", "margin_group_swapped", "flips_group_swapped"),
            (
                f"group; {moved}" if moved else "group (no proxies)",
                "margin_carried",
                "flips_carried",
            ),
        ):
            t.add_row(
                _txt(cp["group"]),
                _txt(label),
                _signed(cp[mkey], 3),
                _decision(cp[mkey]),
                _txt(f"{FLAG} FLIPS" if cp[fkey] else "same", "bold"),
            )
    console.print(t)


def _print_bands(b: dict[str, Any]) -> None:
    """Where the margin could be under other models: uncertainty and equally-good bands."""
    _heading("Bands: where the margin could be under other models")
    t = _grid("band", "low", "high", "", right=(1, 2))
    unc, eg = b["uncertainty"], b["equally_good"]
    rows = [
        (f"uncertainty, 95 % (ε = {UNCERTAINTY_EPSILON:.2f})", unc),
        (f"equally good (ε = {_eps_pct(eg['epsilon'])} of the loss)", eg),
    ]
    for label, band in rows:
        t.add_row(
            _txt(label),
            _signed(band["low"], 3),
            _signed(band["high"], 3),
            _txt(f"{FLAG} straddles zero" if band["straddles_zero"] else "one side", "bold"),
        )
    if b["exact"] is not None:
        ex = b["exact"]
        t.add_row(
            _txt("equally good, solved exactly"),
            "−∞" if ex["low"] is None else _signed(ex["low"], 3),
            "+∞" if ex["high"] is None else _signed(ex["high"], 3),
            _txt("unbounded (separation)" if ex["unbounded"] else ""),
        )
    console.print(t)
    _say(
        f"a model within {_eps_pct(b['flip_epsilon'])} of the best loss (ε) can decide "
        "it the other way"
    )


def _print_neighbours(d: dict[str, Any]) -> None:
    """The nearest past cases, their outcomes and reviews, and the flagged proxies."""
    nb = d["neighbours"]
    _heading(f"Similar past cases ({nb['k']} nearest, non-group features)")
    t = _grid("case", "group", "recorded outcome", "distance", "review", right=(3,))
    for n in nb["neighbours"]:
        t.add_row(
            _txt(n["case_id"]),
            _txt(n["group"]),
            _txt(n["outcome"], "green" if n["outcome"] == "favourable" else "red"),
            f"{n['distance']:.2f}",
            _txt(n["review"]["action"] if n.get("review") else "—"),
        )
    console.print(t)
    per_group = ", ".join(
        f"{safe_text(g['group'])} {_pct(g['favourable_share'])}" for g in nb["by_group"]
    )
    _say(f"favourable among them: {_pct(nb['favourable_share'])}")
    _say(f"favourable among the {nb['k']} nearest of each group: {per_group}")
    _say(_txt(f"proxies flagged: {', '.join(d['proxies']['flagged']) or 'none'}", "dim"))


def _pts(x: float) -> str:
    """Signed points, with the same minus sign as the log-odds."""
    return f"{x:+.4g}".replace("-", "−")


def _print_card(c: dict[str, Any]) -> None:
    """The deployed scorecard's own reasons (docs/scorecard.md explains every figure)."""
    _print_card_head(c)
    _print_card_points(c)
    _print_card_neutralised(c)
    _print_card_counterparts(c)
    _print_card_notes(c)


def _print_card_head(c: dict[str, Any]) -> None:
    """The card's points, cut-off, margin and decision, and its probability."""
    lo = c["margin"] is not None
    _heading(f"The deployed scorecard's own reasons ({safe_text(c['card'])})")
    line = Text(
        f"{c['points']:.4g} points, cut-off {c['cutoff']:.4g}: margin {_pts(c['margin_points'])} "
        "points"
    )
    if lo:
        line.append(f" = {_signed(c['margin'], 3)} log-odds")
    line.append(" → ")
    line.append_text(_decision(1.0 if c["decision"] == "favourable" else -1.0))
    console.print(line)
    if c["probability"] is not None:
        _say(
            _txt(
                f"P(favourable) {c['probability']:.3f} on the card's "
                + ("own scale" if c["scaling"] in ("card", "log-odds") else "recalibrated scale"),
                "dim",
            )
        )


def _print_card_points(c: dict[str, Any]) -> None:
    """Each feature's points against the history average, then the baseline."""
    lo = c["margin"] is not None
    t = _grid("feature", "value", "role", "points", "average", "contribution", right=(3, 4, 5))
    for row in c["contributions"]:
        role = row["role"].upper() if row["role"] != "other" else ""
        t.add_row(
            _txt(row["feature"]),
            _txt(_value(row["value"])),
            _txt(role, "bold magenta" if role else ""),
            _pts(row["points"]),
            f"{row['mean_points']:.3g}",
            _pts(row["contribution_points"])
            + (f" ({_signed(row['contribution'], 3)})" if lo else ""),
        )
    t.add_row(
        _txt("+ baseline"),
        "",
        "",
        "",
        "",
        _pts(c["baseline_points"]) + (f" ({_signed(c['baseline'], 3)})" if lo else ""),
    )
    console.print(t)
    _say(
        f"group {_pts(c['group_part_points'])} · proxies {_pts(c['proxy_part_points'])} · "
        f"rest {_pts(c['rest_points'])} points (contribution = points − the history average)"
    )


def _print_card_neutralised(c: dict[str, Any]) -> None:
    """The card's margin with the group (and its proxies) neutralised."""
    t = _grid("neutralised", "margin (points)", "decision", "", right=(1,))
    for label, key, flag, what in (
        ("the group", "margin_group_neutral_points", "rests_on_group", "rests on the group"),
        (
            "group and proxies",
            "margin_neutral_points",
            "rests_on_proxies",
            "rests on group/proxies",
        ),
    ):
        t.add_row(
            _txt(label),
            _pts(c[key]),
            _decision(1.0 if c[key] >= 0 else -1.0),
            _txt(f"{FLAG} FLIPS: {what}" if c[flag] else "same decision", "bold"),
        )
    console.print(t)


def _print_card_counterparts(c: dict[str, Any]) -> None:
    """The card's margin with the case carried into each other group."""
    t = _grid("as group", "what changes", "margin (points)", "decision", "", right=(2,))
    for cp in c["counterparts"]:
        for label, mkey, fkey in (
            ("group only", "margin_group_swapped", "flips_group_swapped"),
            ("group; proxies carried", "margin_carried", "flips_carried"),
        ):
            if cp[mkey] is None:
                continue
            t.add_row(
                _txt(cp["group"]),
                _txt(label),
                _pts(cp[mkey]),
                _decision(1.0 if cp[mkey] >= 0 else -1.0),
                _txt(f"{FLAG} FLIPS" if cp[fkey] else "same", "bold"),
            )
    console.print(t)


def _print_card_notes(c: dict[str, Any]) -> None:
    """The similar cases on the card, what cannot be computed, and how the card decides."""
    if c["similar_cases"]:
        cases = ", ".join(
            f"{safe_text(n['case_id'])} {n['points']:.4g} ({n['decision']})"
            for n in c["similar_cases"]
        )
        _say(f"the similar past cases on the card: {cases}")
    for text in c["cannot"]:
        _say(_txt(f"cannot be computed: {text}", "bold"))
    for text in c["notes"]:
        _say(_txt(text, "dim"))
    _say(
        _txt(
            "the card decides favourable at or above its cut-off; under a cost lens the suite "
            "compares its probability with the lens threshold (docs/scorecard.md)",
            "dim",
        )
    )


def _print_fit_flags(ff: dict[str, Any]) -> None:
    """The flags of the fits that scored this case, right under the headline."""
    from closecall.suite.fit_flags import flag_label

    for flag in ff["this_case"]:
        _say(_txt(f"{FLAG} fit flag: {flag_label(flag)} — {flag['detail']}", "bold"))
    if ff["this_case"]:
        _say(
            _txt(
                "kept with a penalty despite the problem: read these models' margins with care "
                "(closecall fit lists every flagged fit)",
                "dim",
            )
        )
    elif ff["in_snapshot"]:
        _say(
            _txt(
                f"{ff['in_snapshot']} fit(s) of this snapshot are flagged, none that scored this "
                "case (closecall fit lists them)",
                "dim",
            )
        )


def _value(v: Any) -> str:
    if v is None:
        return "(missing)"
    if isinstance(v, float):
        return f"{v:.4g}"
    return safe_text(str(v))


# --------------------------------------------------------------------------- proxies


def proxies(config: Path = ConfigOption, as_json: bool = JsonOption) -> None:
    """Which features stand in for the group attribute, and how much the margins rest on
    the group and its proxies, per group.

    A feature is a proxy when its association with the group is shown (its bootstrap interval
    lies at or above [proxies] association) and its influence in the group-unaware model
    cannot be ruled out (its interval reaches [proxies] influence); 'uncertain' flags and
    'possible' proxies are marked. Group recoverability is the held-out AUC of predicting the
    group from all non-group features together; the proxy-set search takes out, one by one,
    the features that lower it most.

    Example: closecall proxies --json
    """
    report = Study(load(config, quiet=as_json)).proxies()
    data = dict(report.data)
    if as_json:
        emit_json({"snapshot": report.snapshot_id, **data})
        return
    _print_proxy_table(data)
    _print_proxy_sets(data["proxy_sets"])
    _print_dependence(data["dependence_by_group"])
    _print_counterpart_rates(data["counterparts"])


def _print_proxy_table(data: dict[str, Any]) -> None:
    """The proxy report: one row per feature, proxies first, then how to read it."""
    _heading("Proxies: associated with the group and influential without it")
    t = _grid(
        "feature",
        "kind",
        "assoc.",
        "interval",
        "infl.",
        "interval",
        "peeled",
        "proxy",
        right=(2, 3, 4, 5, 6),
    )
    rows = sorted(
        data["features"], key=lambda x: (not x["proxy"], not x["possible"], -x["association"])
    )
    for pr in rows:
        peeled = pr["influence"] if pr["influence_peeled"] is None else pr["influence_peeled"]
        mark = f"{FLAG} PROXY" + (f" (round {pr['round']})" if pr["round"] > 1 else "")
        mark += " uncertain" if pr["uncertain"] else ""
        t.add_row(
            _txt(pr["feature"]),
            _txt("cat." if pr["kind"] == "categorical" else "num."),
            f"{pr['association']:.3f}",
            _span(pr["association_low"], pr["association_high"]),
            f"{pr['influence']:.3f}",
            _span(pr["influence_low"], pr["influence_high"]),
            f"{peeled:.3f}",
            _txt(
                mark if pr["proxy"] else "possible" if pr["possible"] else "no",
                "bold magenta" if pr["proxy"] else "magenta" if pr["possible"] else "",
            ),
        )
    console.print(t)
    level = (
        f"{100 * data['level']:.0f}% bootstrap intervals ({data['n_boot']} replicates)"
        if data["level"] is not None
        else "point values: no intervals in this snapshot"
    )
    _say(
        f"proxy when the association interval lies at or above "
        f"{data['association_threshold']:g} and the influence interval reaches "
        f"{data['influence_threshold']:g} ([proxies] in the config; "
        + level
        + "). uncertain = the influence interval also reaches below its threshold; possible "
        "= the association interval straddles its threshold (add it to [proxies] extra to "
        "treat it as a proxy). infl. = share of the unaware model's margin variance; peeled "
        "= the largest share once the proxies found so far are taken out (round 2 and on). "
        "assoc. = 2|AUC − 0.5| for numeric features, Cramér's V with Bergsma's bias "
        "correction for categorical ones"
    )
    _say(
        f"group recoverable from all non-group features: held-out AUC "
        f"{data['recoverability_auc']:.3f} (0.5 = not at all, 1 = perfectly)"
    )


def _print_proxy_sets(sets: dict[str, Any]) -> None:
    """The greedy proxy-set search, one step a row."""
    _heading("Proxy sets: features that carry the group together")
    t = _grid("step", "taken out", "recoverability left", "drop", right=(0, 2, 3))
    t.add_row("0", _txt("(none)"), f"{sets['start_auc']:.3f}", "")
    for k, st in enumerate(sets["steps"], 1):
        t.add_row(str(k), _txt(st["removed"]), f"{st['auc_after']:.3f}", f"{st['drop']:.3f}")
    console.print(t)
    _say(
        "greedy: each step takes out the feature whose removal lowers the held-out AUC of "
        f"recovering the group most ({sets['method']} scores on {sets['rows']:,} rows), until "
        "it is 0.6 or less or five are out"
    )


def _print_dependence(dep: list[dict[str, Any]]) -> None:
    """How much the pooled margins rest on the group and its proxies, per group."""
    _heading("How much the pooled margins rest on the group and its proxies")
    t = _grid(
        "group",
        "cases",
        "group part",
        "proxy part",
        "share",
        "rests: group",
        "+proxies",
        right=(1, 2, 3, 4, 5, 6),
    )
    for r in dep:
        t.add_row(
            _txt(r["group"]),
            f"{r['cases']:,}",
            _signed(r["mean_group_part"], 3),
            _signed(r["mean_proxy_part"], 3),
            _pct(r["mean_share"]),
            f"{_pct(r['rests_on_group'], 1)} ({_pct(r['rests_on_group_uncertain'], 1)})",
            f"{_pct(r['rests_on_proxies'], 1)} ({_pct(r['rests_on_proxies_uncertain'], 1)})",
        )
    console.print(t)
    _say(
        "parts are means in log-odds (negative = pulled towards unfavourable); 'rests' = "
        "share of cases whose decision flips when the group (and its proxies) is neutralised; "
        "in brackets the share that rests on it but whose verdict could flip within the 95% "
        "interval of the weights taken out (uncertain)"
    )


def _print_counterpart_rates(flips: list[dict[str, Any]]) -> None:
    """Per group: how often a decision changes when the case is carried into another group."""
    _heading("Counterparts: decisions that change in another group")
    t = _grid(
        "group",
        "as group",
        "group swapped",
        "proxies carried",
        "→ fav.",
        "→ unfav.",
        right=(2, 3, 4, 5),
    )
    for r in flips:
        t.add_row(
            _txt(r["group"]),
            _txt(r["as_group"]),
            _pct(r["flips_group_swapped"], 1),
            _pct(r["flips_carried"], 1),
            _pct(r["to_favourable_carried"], 1),
            _pct(r["to_unfavourable_carried"], 1),
        )
    console.print(t)


# --------------------------------------------------------------------------- bands


def bands_cmd(
    epsilon: float | None = typer.Option(
        None, "--epsilon", help="Relative loss slack of the equally-good set (default: config)."
    ),
    lens: str | None = LensOption,
    config: Path = ConfigOption,
    as_json: bool = JsonOption,
) -> None:
    """How many decisions could flip: the uncertainty band (95 %) and the equally-good band,
    with ambiguity and discrepancy per group and how ambiguity grows with ε.

    Ambiguity: share of cases some equally-good model decides otherwise. Discrepancy: the
    largest share one such model decides otherwise (a lower bound from a direction search).

    \b
    Examples:
      closecall bands
      closecall bands --epsilon 0.002 --json
    """
    study = Study(load(config, quiet=as_json))
    eps = float(study.opened.config.multiplicity.epsilon if epsilon is None else epsilon)
    if eps <= 0:
        raise UserError(f"--epsilon must be positive, got {eps}", "pass e.g. --epsilon 0.002")
    report = study.bands(eps, lens)
    data = dict(report.data)
    if as_json:
        emit_json({"snapshot": report.snapshot_id, **data})
        return
    per_group, curve = data["groups"], data["epsilon_curve"]
    _heading(f"Bands of the pooled model (lens {data['lens']}, ε = {_eps_pct(eps)})")
    t = _grid(
        "group",
        "cases",
        "uncertain",
        "ambiguous",
        "discrep. ≥",
        "half-width 95%/eq.",
        right=(1, 2, 3, 4, 5),
    )
    for r in per_group:
        t.add_row(
            _txt(r["group"]),
            f"{r['cases']:,}",
            _pct(r["uncertain"], 1),
            _pct(r["ambiguity"], 1),
            _pct(r["discrepancy_at_least"], 1),
            f"{r['median_uncertainty_half_width']:.2f} / {r['median_equally_good_half_width']:.2f}",
        )
    console.print(t)
    _say(
        "uncertain: the 95 % band straddles zero; ambiguous: the equally-good band does; "
        "half-widths are medians in log-odds"
    )
    _heading("Ambiguity as the equally-good set widens")
    levels = study.opened.snapshot.group_levels
    t = _grid("ε (share of loss)", "all", *levels, "", right=tuple(range(1, len(levels) + 2)))
    for r in curve:
        mark = "◀ in use" if abs(r["epsilon"] - eps) < 1e-12 else ""
        t.add_row(
            _eps_pct(r["epsilon"]),
            _pct(r["all"], 1),
            *(_pct(r[lv], 1) for lv in levels),
            _txt(mark, "bold"),
        )
    console.print(t)
    _say(
        "ε is the loss slack as a share of the best total log-loss; a case ambiguous at one ε "
        "is ambiguous at every larger one"
    )


# --------------------------------------------------------------------------- compare


def compare(
    lens: str | None = LensOption,
    boot: int = typer.Option(1000, "--boot", help="Bootstrap replicates."),
    seed: int | None = typer.Option(None, "--seed", help="Bootstrap seed (default: study seed)."),
    config: Path = ConfigOption,
    as_json: bool = JsonOption,
) -> None:
    """Which model errs less for whom: pooled vs unaware vs proxy-free vs split, per group,
    on held-out (cross-fitted) history scores, with bootstrap intervals of the difference.

    Δ is the model's mean loss minus the pooled model's on the same cases (negative = errs
    less); error is at the lens's threshold. A trade-off is a model that errs less for one
    group and more for another.

    Example: closecall compare --boot 2000 --json
    """
    if boot < 100:
        raise UserError(f"--boot {boot} is too few", "use at least 100 replicates")
    study = Study(load(config, quiet=as_json))
    report = study.compare(lens=lens, n_boot=boot, seed=seed)
    res = dict(report.data)
    if as_json:
        emit_json({"snapshot": report.snapshot_id, **res})
        return
    _heading(f"Models against {res['baseline']}, per group (held-out, lens {res['lens']})")
    t = _grid("group", "model", "metric", "value", "Δ", "95 % interval", "verdict", right=(3, 4))
    verdict_style = {"errs less": "green", "errs more": "red"}
    marks = {"errs less": "▼ errs less", "errs more": "▲ errs more"}
    last = None
    same = study.same_models()
    for r in res["rows"]:
        if r["model"] in same:
            continue
        t.add_row(
            _txt(r["group"] if r["group"] != last else ""),
            _txt(short_model(r["model"])),
            _txt(r["metric"].replace("_", "-")),
            f"{r['value']:.3f}",
            _signed(r["difference"], 3),
            f"[{_signed(r['low'], 3)}, {_signed(r['high'], 3)}]",
            _txt(marks.get(r["verdict"], "unclear"), verdict_style.get(r["verdict"], "")),
        )
        last = r["group"]
    console.print(t)
    _say("▼ interval wholly below zero; ▲ wholly above; unclear: it holds zero")
    for note in _same_note(same):
        _say(note)
    for b in res["best"]:
        _say(
            f"{safe_text(b['group'])}: lowest {b['metric'].replace('_', '-')} "
            f"with {b['model']} ({b['value']:.3f})"
        )
    if res["tradeoffs"]:
        for tr in res["tradeoffs"]:
            _say(
                _txt(
                    f"{FLAG} {tr['model']} ({tr['metric']}) helps {', '.join(tr['helps'])} "
                    f"but hurts {', '.join(tr['hurts'])}",
                    "bold",
                )
            )
    else:
        _say("no model helps one group while clearly hurting another")


def register(app: typer.Typer) -> None:
    app.command("explain")(explain)
    app.command("proxies")(proxies)
    app.command("bands")(bands_cmd)
    app.command("compare")(compare)
