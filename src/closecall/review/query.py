"""One queue request, answered once for every view.

A :class:`QueueQuery` says which cases to list and in which order; :func:`answer_queue` answers
it from an opened study, its ledger's review states and the claims. ``closecall queue``, the
review screen and :meth:`closecall.Study.queue` all build a query and call this function, so
they list the same cases for the same request.

Review policy: a case is *unreviewed* until a decision is recorded for it. A deferral records
no decision, so a deferred case stays unreviewed (and keeps its ``defer`` state).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np

from closecall.core.errors import UserError
from closecall.core.vocabulary import ACTIONS
from closecall.review.queue import (
    FLIP_KINDS,
    RESTS_ON,
    SORT_KEYS,
    Queue,
    build_queue,
    others_differ,
    queue_rows,
)
from closecall.review.triage import TriageInputs, closeness_codes

if TYPE_CHECKING:
    from closecall.suite.opening import OpenedStudy
    from closecall.suite.snapshot import Snapshot

#: Sorts by a per-case analysis measure (largest first, then nearest the threshold).
MEASURE_SORTS = ("ambiguity", "dependence")
#: The flips filter in words.
FLIP_WORDS = {"any": "flips", "model": "model flips", "lens": "lens-only flips"}
#: The review-state code of a deferral (codes: 0 open, 1 + ACTIONS.index(action)).
DEFERRED_STATE = 1 + ACTIONS.index("defer")


def awaiting_decision(states: np.ndarray) -> np.ndarray:
    """Cases with no recorded decision: never reviewed, or deferred (the one deferral policy)."""
    return np.asarray((states == 0) | (states == DEFERRED_STATE))


@dataclass(frozen=True)
class QueueQuery:
    """Which cases to list, and in which order.

    Parameters
    ----------
    sort
        One of ``triage`` (the default: rests on the group or its proxies, model flips,
        ambiguous, lens flips, near the threshold; nearest the threshold first within each),
        ``closeness`` (flips first, then nearest the threshold), ``margin``, ``ambiguity``,
        ``dependence``, ``id``.
    group
        Keep one level of the group attribute.
    flips
        Keep flips: ``"any"`` (some model or cost lens decides differently; ``True`` means
        the same), ``"model"`` (another model does, under the operative lens) or ``"lens"``
        (only another cost lens does). None or False: no flips filter.
    ambiguous
        Keep cases whose equally-good band straddles the threshold.
    rests_on
        ``"group"`` or ``"proxies"``: keep cases whose decision flips when that part is set to
        its history average.
    unreviewed
        Keep cases with no recorded decision (a deferred case is still listed).
    band
        Review band in log-odds (None: the study's ``[review] band``).
    epsilon
        Relative loss slack of the equally-good set (None: ``[multiplicity] epsilon``).
    model
        The model whose bands and dependence the analysis filters read (None: ``pooled``).
    limit
        At most this many cases (None: all).
    id_prefix
        Keep case ids starting with this text.
    all_cases
        List every case, not only the close calls.
    changed_by
        Keep the cases whose decision a what-if policy changes, against the decision in
        force, given in its text form (``drop=heritage``, ``model=unaware;lens=cautious``:
        :class:`closecall.analysis.whatif.Policy`); close calls or not.

    Examples
    --------
    >>> from closecall import QueueQuery
    >>> QueueQuery(flips="model", limit=10).flips
    'model'
    >>> QueueQuery(flips=True).flips
    'any'
    """

    sort: str = "triage"
    group: str | None = None
    flips: str | bool | None = None
    ambiguous: bool = False
    rests_on: str | None = None
    unreviewed: bool = False
    band: float | None = None
    epsilon: float | None = None
    model: str | None = None
    limit: int | None = None
    id_prefix: str | None = None
    all_cases: bool = False
    changed_by: str | None = None

    def __post_init__(self) -> None:
        if self.flips is True:
            object.__setattr__(self, "flips", "any")
        elif self.flips is False:
            object.__setattr__(self, "flips", None)
        if self.flips is not None and self.flips not in FLIP_KINDS:
            raise UserError(
                f"unknown kind of flip '{self.flips}'", f"use one of: {', '.join(FLIP_KINDS)}"
            )
        if self.sort not in SORT_KEYS:
            raise UserError(
                f"unknown sort key '{self.sort}'", f"use one of: {', '.join(SORT_KEYS)}"
            )
        if self.band is not None and not (math.isfinite(self.band) and self.band >= 0):
            raise UserError(
                f"the review band must be a number >= 0, not {self.band!r}",
                "pass a band such as 0.5 (log-odds)",
            )
        if self.epsilon is not None and not (math.isfinite(self.epsilon) and self.epsilon > 0):
            raise UserError(
                f"epsilon must be a number > 0, not {self.epsilon!r}",
                "pass a relative loss slack such as 0.01",
            )
        if self.rests_on is not None and self.rests_on not in RESTS_ON:
            raise UserError(
                f"unknown part '{self.rests_on}' for rests-on",
                f"use one of: {', '.join(RESTS_ON)}",
            )
        if self.limit is not None and (isinstance(self.limit, bool) or self.limit < 0):
            raise UserError(
                f"the limit must be a whole number >= 0, not {self.limit!r}",
                "pass a limit such as 20 (or none for every case)",
            )
        if self.changed_by is not None:  # the policy's form; the study checks its names
            from closecall.analysis.whatif_policy import Policy

            Policy.parse(self.changed_by)

    def describe(self) -> str:
        """The filters in force, in words (``all close calls`` when there is none).

        Examples
        --------
        >>> QueueQuery(group="Briar", flips="model", unreviewed=True).describe()
        'group Briar · model flips · unreviewed'
        """
        parts = [] if not self.all_cases else ["every case"]
        if self.group is not None:
            parts.append(f"group {self.group}")
        if self.flips is not None:
            parts.append(FLIP_WORDS[str(self.flips)])
        if self.ambiguous:
            parts.append("ambiguous")
        if self.rests_on is not None:
            part = "group or its proxies" if self.rests_on == "proxies" else "group"
            parts.append(f"resting on the {part}")
        if self.unreviewed:
            parts.append("unreviewed")
        if self.id_prefix:
            parts.append(f"ids starting {self.id_prefix!r}")
        if self.changed_by is not None:
            parts.append(f"changed by {self.changed_by}")
        return " · ".join(parts) or "all close calls"

    def to_dict(self) -> dict[str, Any]:
        """The query as JSON-ready values.

        Examples
        --------
        >>> QueueQuery(unreviewed=True).to_dict()["unreviewed"]
        True
        """
        return {name: getattr(self, name) for name in self.__dataclass_fields__}


@dataclass
class QueueAnswer:
    """The listed cases (``queue.order``), every case's review state, and who claims what."""

    query: QueueQuery
    queue: Queue
    states: np.ndarray | None  # (n,) int8 state codes; None: this login may not read the ledger
    claimed: dict[str, list[str]] = field(default_factory=dict)

    @property
    def listed(self) -> np.ndarray:
        """Snapshot rows listed, in order, after the limit."""
        limit = self.query.limit
        return self.queue.order if limit is None else self.queue.order[:limit]

    def closeness_codes(self) -> np.ndarray:
        """Every case's distance from the threshold in words, as (n,) int8 codes into
        :data:`closecall.review.triage.CLOSENESS_WORDS` (snapshot order), cut by the queue's band.

        Examples
        --------
        >>> from closecall.review.triage import CLOSENESS_WORDS  # doctest: +SKIP
        >>> answer = study.answer()  # doctest: +SKIP
        >>> CLOSENESS_WORDS[answer.closeness_codes()[answer.listed[0]]]  # doctest: +SKIP
        'on the line'
        """
        return closeness_codes(self.queue.margin, self.queue.band)

    def others_differ(self, row: int) -> list[str]:
        """Who decides the case at snapshot row ``row`` otherwise than the reference model, in
        words, most telling first: the other models under the operative lens (a model identical
        to an earlier one named once), then the reference model's other cost lenses
        (``cautious lens``); only when neither does, the other ``model@lens`` pairs. Empty:
        every model and lens agrees.

        Examples
        --------
        >>> answer = study.answer()  # doctest: +SKIP
        >>> answer.others_differ(int(answer.listed[0]))  # doctest: +SKIP
        ['unaware', 'cautious lens']
        """
        return others_differ(self.queue, self.queue.grid.differs_at(row))

    def rows(self, snapshot: Any) -> list[dict[str, Any]]:
        """Plain rows of the listed cases, with ``state`` and ``claimed_by`` when readable."""
        from closecall.core.vocabulary import STATE_NAMES

        rows = queue_rows(snapshot, self.queue, 0, self.query.limit)
        if self.states is not None:
            shown = self.states[self.listed]
            for r, code in zip(rows, shown, strict=True):
                r["state"] = STATE_NAMES[int(code)]
                r["claimed_by"] = self.claimed.get(r["case_id"], [])
        return rows


def _analysis(
    study: OpenedStudy, name: str, query: QueueQuery, cache: Mapping[str, np.ndarray] | None
) -> np.ndarray:
    """A per-case measure or filter of the analysis, from the caller's cache when it applies."""
    if cache is not None and query.model is None and query.epsilon is None and name in cache:
        return cache[name]
    snap = study.snapshot
    model = query.model or "pooled"
    options = {"config": study.config, "epsilon": query.epsilon, "model": model}
    if name in ("ambiguity", "ambiguous"):
        from closecall.analysis.multiplicity import ambiguity_measure, ambiguous_cases

        func = ambiguity_measure if name == "ambiguity" else ambiguous_cases
        return np.asarray(func(snap, options))
    from closecall.analysis.dependence import dependence_share, rests_on

    if name == "dependence":
        return np.asarray(dependence_share(snap, options), dtype=float)
    return np.asarray(rests_on(snap, name.removeprefix("rests_on_"), model), dtype=bool)


def answer_queue(
    study: OpenedStudy,
    query: QueueQuery | None = None,
    *,
    reviews: tuple[np.ndarray, dict[str, list[str]]] | None = None,
    cache: Mapping[str, np.ndarray] | None = None,
) -> QueueAnswer:
    """List the cases a query asks for, with review states and claims.

    Parameters
    ----------
    study
        The opened study.
    query
        The request (None: the default close-call queue).
    reviews
        Every case's state code and the claims, when the caller has read them already (the
        review screen keeps them); otherwise they are read from the ledger.
    cache
        Measures and filters the caller computed before (``ambiguity``, ``dependence``,
        ``ambiguous``, ``rests_on_group``, ``rests_on_proxies``, for the study's own ε and the
        pooled model); used only when the query names neither ``epsilon`` nor ``model``.

    Raises
    ------
    UserError
        An unknown group level or model; the unreviewed filter when this login may not read
        the ledger; an analysis that does not apply (imported scores have no band).
    """
    query = query or QueueQuery()
    snap = study.snapshot
    _require_model(snap, query.model)
    states, claimed = _review_states(study, query, reviews)
    triage = _triage_inputs(study, query, cache)
    keep, measures = _filters_and_measures(study, query, cache, states)
    q = build_queue(
        snap,
        band=float(study.config.review.band if query.band is None else query.band),
        group=query.group,
        flips_only=query.flips or False,
        close_only=not (query.all_cases or query.changed_by is not None),
        sort="closeness" if query.sort in MEASURE_SORTS else query.sort,
        id_prefix=query.id_prefix,
        exclude_rows=None if keep.all() else ~keep,
        triage=triage,
    )
    if query.sort in MEASURE_SORTS:
        _sort_by_measure(q, query.sort, measures[query.sort])
    q.measures.update(measures)
    _count_reviews(q, snap.case_ids, states, claimed)
    return QueueAnswer(query, q, states, claimed)


def _require_model(snap: Snapshot, model: str | None) -> None:
    """Refuse a model the study's suite does not have (None: the reference)."""
    if model is not None and model not in snap.model_names:
        raise UserError(
            f"no model '{model}' in this study's suite",
            f"choose one of: {', '.join(snap.model_names)}",
        )


def _review_states(
    study: OpenedStudy,
    query: QueueQuery,
    reviews: tuple[np.ndarray, dict[str, list[str]]] | None,
) -> tuple[np.ndarray | None, dict[str, list[str]]]:
    """Every case's state code and the claims: the caller's, else the ledger's if readable."""
    if reviews is None:
        from closecall.review.states import study_review_states

        reviews = study_review_states(study)
    if query.unreviewed and reviews is None:
        from closecall.review.ledger.access import require_read

        require_read(study.config.review, study.config.path)  # names the role (PostgreSQL)
        raise UserError(
            "listing unreviewed cases needs to read the ledger, and this login may not",
            "ask for your login to be listed under [review] reviewers or analysts",
        )
    return reviews if reviews is not None else (None, {})


def _filters_and_measures(
    study: OpenedStudy,
    query: QueueQuery,
    cache: Mapping[str, np.ndarray] | None,
    states: np.ndarray | None,
) -> tuple[np.ndarray, dict[str, np.ndarray]]:
    """The cases the query's filters keep, and the per-case measures its filters and sort read."""
    keep = np.ones(study.snapshot.n_cases, dtype=bool)
    if query.unreviewed and states is not None:
        keep &= awaiting_decision(states)
    measures: dict[str, np.ndarray] = {}
    if query.ambiguous:
        keep &= _analysis(study, "ambiguous", query, cache)
        measures["ambiguity"] = _analysis(study, "ambiguity", query, cache)
    if query.rests_on is not None:
        keep &= _analysis(study, f"rests_on_{query.rests_on}", query, cache)
        measures["dependence"] = _analysis(study, "dependence", query, cache)
    if query.sort in MEASURE_SORTS and query.sort not in measures:
        measures[query.sort] = _analysis(study, query.sort, query, cache)
    if query.changed_by is not None:
        keep &= _changed_by(study, query.changed_by)
    return keep, measures


def _sort_by_measure(q: Queue, sort: str, key: np.ndarray) -> None:
    """Reorder the listed cases by a measure (build_queue's rule: largest, then nearest zero)."""
    rows = q.order
    q.order = rows[np.lexsort((np.abs(q.margin[rows]), -key[rows]))]
    q.sort = sort


def _count_reviews(
    q: Queue, case_ids: np.ndarray, states: np.ndarray | None, claimed: dict[str, list[str]]
) -> None:
    """Count the reviewed, deferred and claimed cases among the listed ones (as all but two are)."""
    if states is not None:
        listed = states[q.order]
        q.counts["reviewed"] = int(np.count_nonzero(~awaiting_decision(listed)))
        q.counts["deferred"] = int(np.count_nonzero(listed == DEFERRED_STATE))
    if claimed:
        ids = case_ids[q.order]
        q.counts["claimed"] = int(
            np.count_nonzero(np.isin(ids, [c for c, who in claimed.items() if who]))
        )


def _changed_by(study: OpenedStudy, policy: str) -> np.ndarray:
    """Every case: True where the what-if policy changes the decision in force."""
    from closecall.analysis.whatif import changed_rows, policy_from_text

    rows, _ = changed_rows(study, policy_from_text(study, policy))
    changed = np.zeros(study.snapshot.n_cases, dtype=bool)
    changed[rows] = True
    return changed


def _triage_inputs(
    study: OpenedStudy, query: QueueQuery, cache: Mapping[str, np.ndarray] | None
) -> TriageInputs:
    """The analysis filters the triage tiers read; a filter that does not apply is None."""

    def get(name: str) -> np.ndarray | None:
        try:
            return _analysis(study, name, query, cache)
        except (UserError, ValueError):  # e.g. a reference model with imported scores
            return None

    return TriageInputs(get("rests_on_group"), get("rests_on_proxies"), get("ambiguous"))
