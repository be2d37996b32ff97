"""The case screen's section on the deployed scorecard, drawn from ``explain_case`` data.

A plain function from data to rich Text: the card's points against its cut-off, the features
that move its margin most (points minus the history average), its group and proxy parts, the
neutralised decisions and the counterparts (docs/scorecard.md explains every figure).
"""

from __future__ import annotations

from typing import Any

from rich.text import Text

from closecall.core.text import safe_text

TOP = 6
FLIPS = "⇄ flips"


def _pts(x: float) -> str:
    return f"{x:+.4g}".replace("-", "−")


def _signed(x: float) -> str:
    return f"{x:+.2f}".replace("-", "−")


def _word(favourable: bool) -> str:
    return "fav" if favourable else "unfav"


def card_reasons(d: dict[str, Any]) -> Text:
    """The deployed card's own reasons for the case (empty text without a card)."""
    c = d.get("deployed_card")
    text = Text()
    if not c:
        return text
    text.append(f"{safe_text(c['card'])}: {c['points']:.4g} points, cut-off {c['cutoff']:.4g} ")
    text.append(f"→ {_pts(c['margin_points'])} ", "bold")
    if c["margin"] is not None:
        text.append(f"({_signed(c['margin'])} log-odds) ")
    text.append(_word(c["decision"] == "favourable"), "bold")
    for row in c["contributions"][:TOP]:
        tag = {"group": " (group)", "proxy": " (proxy)"}.get(row["role"], "")
        text.append(f"\n  {safe_text(row['feature'])}{tag}".ljust(30))
        text.append(f"{row['points']:>6.4g} pts  {_pts(row['contribution_points']):>7}")
    text.append(
        f"\n  group {_pts(c['group_part_points'])} · proxies {_pts(c['proxy_part_points'])} "
        "points (against the history average)"
    )
    for label, key, flag in (
        ("without the group", "margin_group_neutral_points", "rests_on_group"),
        ("without group and proxies", "margin_neutral_points", "rests_on_proxies"),
    ):
        text.append(f"\n  {label}: {_pts(c[key])} {_word(c[key] >= 0)}")
        if c[flag]:
            text.append(f" {FLIPS}", "bold")
    for cp in c["counterparts"]:
        text.append(
            f"\n  as {safe_text(cp['group'])}: {_pts(cp['margin_group_swapped'])} "
            f"{_word(cp['margin_group_swapped'] >= 0)}"
        )
        if cp["flips_group_swapped"]:
            text.append(f" {FLIPS}", "bold")
    for note in c["cannot"]:
        text.append(f"\n  cannot be computed: {safe_text(note)}", "italic")
    return text
