"""The model screen: every model's weights on the data's own scale (``closecall model``).

One scrolling text: per model, each weight per unit (or per category against its reference
level) with standard error, odds ratio and 95 % interval; the intercept; each lens's threshold.
Group weights are marked ``[group]``, flagged proxies ``[proxy]``: words, not colour. A deployed
scorecard is shown whole: each feature's levels or ranges with their points, the base points,
the cut-off and the points that double the odds.
"""

from __future__ import annotations

import math
from typing import Any, ClassVar

from rich.text import Text
from textual import work
from textual.app import ComposeResult
from textual.binding import Binding, BindingType
from textual.containers import VerticalScroll
from textual.screen import Screen
from textual.widgets import Static

from closecall.core.errors import UserError
from closecall.core.text import safe_text
from closecall.tui.key_bar import KeyBar
from closecall.tui.session import ReviewSession


def _num(value: float) -> str:
    if not math.isfinite(value):
        return "—"
    if value != 0 and (abs(value) >= 1e5 or abs(value) < 1e-3):
        return f"{value:.1e}"
    text = f"{value:.3f}"
    return text.lstrip("-") if float(text) == 0 else text


def weights_text(data: dict[str, Any], term_width: int = 28) -> Text:
    """The weights as aligned plain lines (fits 80 columns with terms up to ``term_width``)."""
    out = Text(no_wrap=True, overflow="ellipsis")
    out.append(
        f"penalty {data['penalty']:g} (penalised weights are shrunk towards 0) · "
        f"{data['level']:.0%} intervals\n"
    )
    for lens, t in data["thresholds"].items():
        out.append(
            f"threshold, lens {lens}: {_num(t)} log-odds (p = {1 / (1 + math.exp(-t)):.2f})\n"
        )
    head = f"{'term':<{term_width}} {'weight':>8} {'se':>7} {'odds':>8}  interval (odds)\n"
    for m in data["models"]:
        fit = "" if m["fit"] == "all" else f" · fitted on group level {m['fit']}"
        out.append(f"\n{m['model']}{fit}\n", "bold")
        out.append(head, "underline")
        for r in m["rows"]:
            mark = " [group]" if r["group"] else (" [proxy]" if r["proxy"] else "")
            term = r["term"]
            width = term_width - len(mark)
            if len(term) > width:
                term = term[: max(width - 1, 1)] + "…"
            out.append(
                f"{term + mark:<{term_width}} {_num(r['weight']):>8} {_num(r['se']):>7} "
                f"{_num(r['odds_ratio']):>8}  {_num(r['or_low'])}–{_num(r['or_high'])}\n"
            )
    for name in data.get("imported", []):
        out.append(f"\n{name}: imported scores, no weights\n")
    if data.get("scorecard"):
        card = data["scorecard"]
        out.append(
            f"\n{card['model']}: the scorecard {safe_text(card['file'])}\n"
            "  points, not weights: a case's points are in its case view\n"
        )
        if data.get("card"):
            out.append_text(card_text(data["card"], _marked_features(data), term_width))
    return out


def _marked_features(data: dict[str, Any]) -> dict[str, str]:
    """Feature → ``[group]`` or ``[proxy]``, from the fitted models' marked terms."""
    marks: dict[str, str] = {}
    for m in data["models"]:
        for r in m["rows"]:
            feature = str(r["term"]).split("=")[0].split(":")[0]
            if r["group"]:
                marks[feature] = " [group]"
            elif r["proxy"]:
                marks.setdefault(feature, " [proxy]")
    return marks


def _points(value: float) -> str:
    return f"{value:+g}".replace("-", "−") if value else "0"


def _bin(row: dict[str, Any]) -> str:
    """A card row's level, or its range ``[low, high)`` in words."""
    if row.get("level") is not None:
        return safe_text(str(row["level"]))
    low, high = float(row["low"]), float(row["high"])
    if math.isinf(low) and math.isinf(high):
        return "any value"
    if math.isinf(low):
        return f"below {high:g}"
    if math.isinf(high):
        return f"{low:g} or more"
    return f"{low:g} to under {high:g}"


def card_text(card: dict[str, Any], marks: dict[str, str], term_width: int = 28) -> Text:
    """The whole deployed card (docs/scorecard.md): every feature's levels or ranges with
    their points, the intercept, the cut-off and the points-to-odds scale."""
    out = Text(no_wrap=True, overflow="ellipsis")
    unit = "points" if card.get("kind", "points") == "points" else "log-odds"
    out.append(
        f"  base {_num(card['intercept']).removesuffix('.000')} {unit} · cut-off "
        f"{_num(card['cutoff']).removesuffix('.000')}: favourable at or above it\n"
    )
    if card.get("pdo"):
        out.append(f"  {card['pdo']:g} points double the odds\n")
    head = f"  {'feature':<{term_width - 2}} {'level or range':<22} {unit:>8}\n"
    out.append(head, "underline")
    last = None
    for row in card["rows"]:
        feature = str(row["feature"])
        name = "" if feature == last else safe_text(feature) + marks.get(feature, "")
        last = feature
        if len(name) > term_width - 2:
            name = name[: term_width - 3] + "…"
        level = _bin(row)
        level = level if len(level) <= 22 else level[:21] + "…"
        out.append(f"  {name:<{term_width - 2}} {level:<22} {_points(float(row['points'])):>8}\n")
    return out


class ModelScreen(Screen[None]):
    """The suite's weights; esc goes back."""

    BINDINGS: ClassVar[list[BindingType]] = [
        Binding("escape", "back", "back", key_display="esc"),
        Binding("question_mark,f1", "app.help", "help", key_display="?"),
        Binding("down,j", "scroll(1)", "scroll down", show=False),
        Binding("up,k", "scroll(-1)", "scroll up", show=False),
    ]

    def __init__(self, session: ReviewSession) -> None:
        super().__init__()
        self.session = session
        self.data: dict[str, Any] | None = None

    def compose(self) -> ComposeResult:
        yield Static(Text("Model ─ weights on the data's own scale", no_wrap=True), id="title")
        with VerticalScroll(id="model-body"):
            yield Static("reading the weights…", id="weights", markup=False)
        yield KeyBar(self.BINDINGS, id="keys")

    def on_mount(self) -> None:
        self._load()

    @work(thread=True, group="model-weights")
    def _load(self) -> None:
        from closecall.api.study import Study

        try:
            study = Study(self.session.study)
            data = dict(study.model().data)
            if data.get("scorecard"):  # the whole card, beside the fitted models' weights
                data["card"] = study.scorecard().data["card"]
        except UserError as exc:
            self.app.call_from_thread(self._show, None, f"✗ {exc.message}")
            return
        self.app.call_from_thread(self._show, data, "")

    def _show(self, data: dict[str, Any] | None, message: str) -> None:
        self.data = data
        body = self.query_one("#weights", Static)
        body.update(weights_text(data) if data is not None else message)

    def action_scroll(self, step: int) -> None:
        self.query_one("#model-body", VerticalScroll).scroll_relative(y=step, animate=False)

    def action_back(self) -> None:
        self.dismiss()
