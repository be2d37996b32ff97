"""One reviewer's session over a study: the list settings, review states, claims, id search.

Plain Python and NumPy, no widgets: the screens call these methods (the slow ones from
workers) and draw what they return. Everything over all cases is vectorised.
"""

from __future__ import annotations

import math
import uuid
from collections.abc import Callable, Iterable
from dataclasses import dataclass, replace
from datetime import UTC, datetime

import numpy as np

from closecall.analysis.margin_distribution import MarginDistribution
from closecall.api.study import Ledger, Study
from closecall.core.errors import AccessDenied
from closecall.review.ledger import Claim
from closecall.review.query import QueueAnswer, QueueQuery, awaiting_decision
from closecall.review.queue import Queue
from closecall.suite.opening import OpenedStudy
from closecall.tui import analysis_bridge

SORTS = ("triage", "closeness", "ambiguity", "dependence")
#: Sorts that need no analysis measure.
PLAIN_SORTS = ("triage", "closeness")
Clock = Callable[[], datetime]


def utc_clock() -> datetime:
    return datetime.now(UTC)


@dataclass(frozen=True)
class ListSettings:
    """What the case list shows and in which order."""

    sort: str = "triage"
    group: str | None = None
    flips: str | None = None  # "any", "model" or "lens" (closecall.review.queue.FLIP_KINDS)
    ambiguous: bool = False
    unreviewed: bool = False
    rests_on: str | None = None  # "group" or "proxies": the decision flips without that part
    changed_by: str | None = None  # a what-if policy's text: only the cases it changes

    def describe(self) -> str:
        parts = [f"sort {self.sort}"]
        parts.append(f"group {self.group}" if self.group else "all groups")
        if self.flips:
            parts.append(f"{'' if self.flips == 'any' else self.flips + ' '}flips only")
        if self.ambiguous:
            parts.append("ambiguous only")
        if self.unreviewed:
            parts.append("unreviewed only")
        if self.rests_on:
            parts.append(f"resting on the {self.rests_on}")
        if self.changed_by:
            parts.append(f"changed by {self.changed_by}")
        return " · ".join(parts)


GroupChart = MarginDistribution  # the chart's counts come from the engine


class ReviewSession:
    """A study opened for review by one login.

    Parameters
    ----------
    study
        The open study (config + snapshot).
    login
        The name shown for "you" on screen (tests inject a fixed one). The ledger always
        records, and claims are compared with, the process's real login (for a ledger in
        PostgreSQL, the database session user).
    clock
        Source of the current time for anything the screens show about "now".
    """

    def __init__(self, study: OpenedStudy, *, login: str | None = None, clock: Clock = utc_clock):
        self.study = study
        self.snap = study.snapshot
        self.config = study.config
        self.login = Ledger(self.config).login()  # the database user on PostgreSQL
        self.display_login = login or self.login
        self.clock = clock
        self.band = float(study.config.review.band)
        #: The group attribute's name, as the list's header shows it.
        self.group_attribute = Study(study).group_attribute
        self.settings = ListSettings()
        #: The current list: the ranked queue and the words of its rows (None: not built yet).
        self.answer: QueueAnswer | None = None
        self.states = np.zeros(self.snap.n_cases, dtype=np.int8)
        self.claims: dict[str, list[Claim]] = {}
        #: This review screen's id: its claims carry it, and it releases only those.
        self.instance = uuid.uuid4().hex
        #: Case ids of this login's saved drafts, newest first (read with the ledger).
        self.drafts: list[str] = []
        self._measures: dict[str, np.ndarray | None] = {}
        self._half_widths: dict[str, np.ndarray | None] = {}
        self.measures_ready = False
        self._masks: dict[str, np.ndarray | None] = {}
        self._bands: tuple[np.ndarray, np.ndarray] | tuple[()] | None = None
        self._position: np.ndarray | None = None
        #: The rows the chart counts: those the list's filters keep (None: every case).
        self.chart_rows: np.ndarray | None = None

    @property
    def queue(self) -> Queue | None:
        """The ranked queue of the current list (None: not built yet)."""
        return None if self.answer is None else self.answer.queue

    # ------------------------------------------------------------------ measures

    def measure(self, name: str) -> np.ndarray | None:
        """A per-case measure from the analysis package (computed once; None if unavailable)."""
        if name not in self._measures:
            self._measures[name] = analysis_bridge.measure(self.study, name)
        return self._measures[name]

    def peek(self, name: str) -> np.ndarray | None:
        """A measure if already computed (for drawing: never starts a computation)."""
        return self._measures.get(name)

    def band_limits(self, compute: bool = True) -> tuple[np.ndarray, np.ndarray] | None:
        """(low, high) reference margins over the equally good models, when available."""
        if self._bands is None and compute:
            self._bands = analysis_bridge.band_limits(self.study) or ()
        return self._bands or None

    def half_width(self, model: str, row: int) -> float | None:
        """The equally-good half-width of one case under a model (None: no band)."""
        if model not in self._half_widths:
            self._half_widths[model] = analysis_bridge.half_widths(self.study, model)
        widths = self._half_widths[model]
        return None if widths is None else float(widths[row])

    def mask(self, name: str) -> np.ndarray | None:
        """A per-case filter of the analysis package (computed once; None if unavailable)."""
        if name not in self._masks:
            self._masks[name] = analysis_bridge.mask(self.study, name)
        return self._masks[name]

    def peek_mask(self, name: str) -> np.ndarray | None:
        """A filter if already computed (for drawing: never starts a computation)."""
        return self._masks.get(name)

    def ambiguous_mask(self) -> np.ndarray | None:
        """Cases whose band of equally good margins straddles the threshold."""
        return self.mask("ambiguous")

    def warm_up(self) -> None:
        """Compute the measures the list draws (slow at national scale: from a worker)."""
        for name in ("dependence", "ambiguity"):
            self.measure(name)
        self.band_limits()
        self.mask("ambiguous")
        self.measures_ready = True

    # ------------------------------------------------------------------ the list

    def available_sorts(self) -> list[str]:
        return [s for s in SORTS if s in PLAIN_SORTS or self.measure(s) is not None]

    def rebuild(self, settings: ListSettings | None = None) -> Queue:
        """Build the list for ``settings`` (slow at national scale: call from a worker).

        Filters and the closeness order come from :func:`closecall.review.queue.build_queue`; the
        analysis measures and filters are computed once per session and reused, and a sort by
        a measure follows build_queue's rule (largest first, then nearest the threshold).
        """
        settings = settings or self.settings
        if settings.sort not in PLAIN_SORTS and self.measure(settings.sort) is None:
            settings = replace(settings, sort="triage")
        query = self.query(settings)
        reviews = (self.states, {c: [x.reviewer for x in cs] for c, cs in self.claims.items()})
        study = Study(self.study)
        answer = study.answer(query, reviews=reviews, cache=self._analysis_cache())
        chart_rows = study.kept_rows(query, reviews=reviews, cache=self._analysis_cache())
        q = answer.queue
        position = np.full(self.snap.n_cases, -1, dtype=np.int64)
        position[q.order] = np.arange(len(q.order))
        self.settings, self.answer, self._position = settings, answer, position
        self.chart_rows = chart_rows
        return q

    def query(self, settings: ListSettings | None = None) -> QueueQuery:
        """The engine's request for ``settings`` (a filter the analysis cannot give is off)."""
        s = settings or self.settings
        for name in ("rests_on_group", "rests_on_proxies", "ambiguous"):
            self.mask(name)  # the triage tiers read them: computed once, then from the cache
        ambiguous = s.ambiguous and self.mask("ambiguous") is not None
        rests_on = s.rests_on
        if rests_on is not None and self.mask(f"rests_on_{rests_on}") is None:
            rests_on = None
        return QueueQuery(
            sort=s.sort,
            group=s.group,
            flips=s.flips,
            ambiguous=ambiguous,
            rests_on=rests_on,
            unreviewed=s.unreviewed,
            band=self.band,
            changed_by=s.changed_by,
        )

    def _analysis_cache(self) -> dict[str, np.ndarray]:
        """The measures and filters this session has computed, for the engine to reuse."""
        known = {**self._measures, **self._masks}
        return {name: value for name, value in known.items() if value is not None}

    def position_of_row(self, row: int) -> int:
        """Where snapshot row ``row`` sits in the current list (−1 if not listed)."""
        if self._position is None:
            return -1
        return int(self._position[row])

    # ------------------------------------------------------------------ id search

    def rows_with_prefix(self, prefix: str) -> np.ndarray:
        """Snapshot rows whose id starts with ``prefix`` (binary search on sorted ids)."""
        return self.snap.rows_with_prefix(prefix)

    def find(self, prefix: str) -> tuple[int | None, int]:
        """(first list position whose id starts with prefix or None, matches in the study)."""
        rows = self.rows_with_prefix(prefix)
        if len(rows) == 0 or self._position is None:
            return None, len(rows)
        pos = self._position[rows]
        pos = pos[pos >= 0]
        return (int(pos.min()) if len(pos) else None), len(rows)

    def rows_of(self, case_ids: list[str]) -> np.ndarray:
        """Snapshot rows of ids (−1 for ids the snapshot does not hold)."""
        return self.snap.rows_of(case_ids)

    # ------------------------------------------------------------------ ledger and claims

    def refresh_reviews(self) -> None:
        """Read each case's latest action and the claims (call from a worker)."""
        study = Study(self.study)
        self.states = study.review_states()  # codes of closecall.core.vocabulary
        self.claims = study.claims()
        self.drafts = self._my_drafts()

    def _my_drafts(self) -> list[str]:
        try:
            return [d.case_id for d in Study(self.study).my_drafts()]
        except AccessDenied:  # an analyst keeps no drafts
            return []

    def forget_released_claims(self, open_cases: Iterable[str]) -> bool:
        """Drop this review screen's own claims on cases it no longer has open (released a
        moment ago from a worker), so the list and its counts need not wait for the next read
        of the ledger; another screen's claims, the same login's included, stay. True when
        one was dropped."""
        still_open = set(open_cases)
        dropped = False
        for case_id in list(self.claims):
            if case_id in still_open:
                continue
            kept = [c for c in self.claims[case_id] if c.instance != self.instance]
            if len(kept) != len(self.claims[case_id]):
                dropped = True
                if kept:
                    self.claims[case_id] = kept
                else:
                    del self.claims[case_id]
        return dropped

    def claimed_by_others(self, case_id: str) -> list[str]:
        return [c.reviewer for c in self.claims.get(case_id, []) if c.reviewer != self.login]

    def claimed_by_me(self, case_id: str) -> bool:
        return any(c.reviewer == self.login for c in self.claims.get(case_id, []))

    def counts(self) -> dict[str, int]:
        """Header counts: the queue's counts plus reviewed and claimed cases and this login's
        drafts."""
        q = self.queue
        out = dict(q.counts) if q is not None else {}
        # of the listed cases, like every count of the queue
        listed = q.order if q is not None else np.zeros(0, dtype=np.int64)
        out["reviewed"] = int(np.count_nonzero(~awaiting_decision(self.states[listed])))
        claimed = [case for case, who in self.claims.items() if who]
        out["claimed"] = int(np.count_nonzero(np.isin(self.snap.case_ids[listed], claimed)))
        out["drafts"] = len(self.drafts)
        return out

    # ------------------------------------------------------------------ chart

    def group_chart(self, bins: int) -> GroupChart:
        """Reference margins per group near the threshold, in ``bins`` equal bins: of the
        cases the list's filters keep, at any distance (every case with no filter)."""
        return Study(self.study).margin_distribution(self.band, bins, rows=self.chart_rows)


def finite(value: float | None) -> bool:
    return value is not None and math.isfinite(value)
