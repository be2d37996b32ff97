"""The case screen's sections as text, drawn from ``explain_case`` data and ledger entries.

Plain functions from data to rich Text (no widgets), so the wording can be tested directly.
Every direction has a sign or a word: ``▸``/``+`` towards favourable, ``◂``/``−`` towards
unfavourable; a decision that would change is called out with ``⇄ flips``.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

from rich.text import Text

from closecall.core.text import percent, safe_text, signed
from closecall.review.ledger import Draft, Entry
from closecall.tui.marks import ACTION_WORD, block_bar

FLIPS = "⇄ flips"
SAME = "= same"
TOP_CONTRIBUTIONS = 6


def _value(v: Any) -> str:
    if v is None:
        return "missing"
    if isinstance(v, float):
        return f"{v:.3g}" if abs(v) < 1000 else f"{v:,.0f}"
    return safe_text(str(v))


def _decision(margin: float) -> str:
    return "fav" if margin > 0 else "unfav"


def fit_label(name: str, tag: str, width: int) -> str:
    """``name`` + ``tag`` in ``width`` cells: a long name is cut (with ``…``), never the tag.

    Examples
    --------
    >>> fit_label("neighbourhood_income_band", " (proxy)", 22)
    'neighbourhood… (proxy)'
    """
    if len(name) + len(tag) <= width:
        return name + tag
    room = max(1, width - len(tag) - 1)
    return name[:room] + "…" + tag


def contributions(d: dict[str, Any], width: int, top: int = TOP_CONTRIBUTIONS) -> Text:
    """The features that move the margin most, each with a signed bar."""
    dep = d["dependence"]
    rows: list[dict[str, Any]] = dep["contributions"][:top]
    text = Text()
    if not rows:
        return text.append("no features")
    scale = max(abs(r["contribution"]) for r in rows) or 1.0
    name_w = min(22, max(len(safe_text(r["feature"])) for r in rows) + 8)
    bar_w = max(6, min(16, width - name_w - 10 - 8 - 2))
    for r in rows:
        role = {"group": " (group)", "proxy": " (proxy)"}.get(r["role"], "")
        label = fit_label(safe_text(r["feature"]), role, name_w)
        text.append(f"{label:<{name_w}} ", "bold" if role else None)
        text.append(f"{_value(r['value'])[:10]:>10} ")
        c = float(r["contribution"])
        bar = block_bar(c, scale, bar_w)
        text.append(f"{bar:<{bar_w}}" if c > 0 else f"{bar:>{bar_w}}")
        text.append(f" {signed(c):>6}\n")
    rest = len(dep["contributions"]) - len(rows)
    text.append(
        f"average case {signed(dep['baseline'])}; the features add up to the margin "
        f"{signed(d['margin'])}" + (f" ({rest} smaller ones not shown)" if rest > 0 else "")
    )
    return text


def parts(d: dict[str, Any]) -> Text:
    """Group and proxy parts, the margin without them, whether the decision rests on them."""
    dep = d["dependence"]
    proxies = safe_text(", ".join(d["proxies"]["flagged"])) or "none flagged"
    margin = float(d["margin"])
    text = Text()
    text.append(f"group part {signed(dep['group_part'])}")
    text.append(f" · proxy part {signed(dep['proxy_part'])} ({proxies})")
    text.append(f" · rest {signed(dep['rest'])} · dependence share {percent(dep['share'])}\n")
    for label, key, rests in (
        ("without the group", "margin_group_neutral", dep["rests_on_group"]),
        ("without the group and its proxies", "margin_neutral", dep["rests_on_proxies"]),
    ):
        m = float(dep[key])
        text.append(f"{label}: {signed(m)} {_decision(m)} ")
        if rests:
            text.append(f"{FLIPS}: the decision rests on it\n", "bold")
        else:
            text.append(f"{SAME} decision as {signed(margin)} {_decision(margin)}\n")
    text.rstrip()
    return text


def counterparts(d: dict[str, Any]) -> Text:
    """The case in each other group, group swapped and proxies carried over."""
    text = Text()
    own = float(d["margin"])
    for cp in d["counterparts"]:
        text.append(f"as {safe_text(cp['group'])}: ", "bold")
        for label, mk, fk in (
            ("group swapped", "margin_group_swapped", "flips_group_swapped"),
            ("proxies carried too", "margin_carried", "flips_carried"),
        ):
            m = float(cp[mk])
            text.append(f"{label} {signed(m)} {_decision(m)} ")
            text.append(f"{FLIPS}" if cp[fk] else SAME, "bold" if cp[fk] else None)
            text.append("  ")
        text.rstrip()
        moved = ", ".join(
            f"{safe_text(c['feature'])} {_value(c['from'])}→{_value(c['to'])}"
            for c in cp.get("carried", [])
        )
        text.append(f"\n  carried: {moved or 'nothing'}\n")
    if not d["counterparts"]:
        text.append("no other group level")
    text.append(f"(this case: {signed(own)} {_decision(own)})")
    return text


def similar(d: dict[str, Any]) -> Text:
    """The nearest history cases and how they turned out, overall and per group."""
    nb = d["neighbours"]
    text = Text()
    for n in nb["neighbours"]:
        mark = "+" if n["outcome"] == "favourable" else "−"
        review = n.get("review")
        text.append(
            f"{mark} {safe_text(n['case_id']):<14} {safe_text(n['group']):<8} "
            f"{n['outcome']:<13} distance {n['distance']:.2f}"
            + (f"  reviewed: {review['action']}" if review else "")
            + "\n"
        )
    if not nb["neighbours"]:
        text.append("no history cases to compare with\n")
    per_group = [
        f"{safe_text(g['group'])} {percent(g['favourable_share'])} of {g['neighbours']}"
        for g in nb["by_group"]
        if g["favourable_share"] is not None and not math.isnan(g["favourable_share"])
    ]
    if per_group:
        text.append(
            f"favourable among the {nb['k']} nearest in each group: " + ", ".join(per_group)
        )
    return text


def history(entries: Sequence[Entry]) -> Text:
    """This case's ledger entries, oldest first."""
    text = Text()
    if not entries:
        return text.append("no decision recorded yet")
    for e in entries:
        text.append(f"#{e.seq} {e.time[:16].replace('T', ' ')} {safe_text(e.reviewer)}: ", "bold")
        text.append(ACTION_WORD.get(e.action, e.action))
        if e.reason:
            text.append(f" ({safe_text(e.reason)})")
        if e.supersedes is not None:
            text.append(f", corrects #{e.supersedes}")
        note = safe_text(" ".join(e.note.split()))
        if note:
            text.append(f"\n   “{note[:200]}{'…' if len(note) > 200 else ''}”")
        text.append("\n")
    text.rstrip()
    return text


def draft(value: Draft | None) -> Text:
    """The unrecorded note for this case, if any."""
    if value is None:
        return Text("no draft")
    text = Text()
    text.append("not recorded yet", "bold")
    if value.action:
        text.append(f" · {value.action}")
    if value.reason:
        text.append(f" ({safe_text(value.reason)})")
    note = safe_text(" ".join(value.note.split()))
    text.append(f"\n“{note[:300]}{'…' if len(note) > 300 else ''}” — d opens it")
    return text
