"""Frozen results of :class:`closecall.Study`: typed fields, ``to_dict()`` for JSON and, for
per-case tables, ``to_frame()`` (one row per case, flat columns)."""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

if TYPE_CHECKING:
    import pandas as pd

    from closecall.reports.disparity.report import DisparityReport
    from closecall.review.ledger import Entry
    from closecall.review.query import QueueAnswer, QueueQuery
    from closecall.suite.snapshot import Snapshot


def _plain(value: Any) -> Any:
    """Tuples and mappings turned into JSON-ready lists and dicts."""
    if isinstance(value, Mapping):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    if isinstance(value, np.generic):
        return value.item()
    return value


@dataclass(frozen=True)
class QueueResult:
    """The cases a :class:`~closecall.QueueQuery` lists, in order.

    Attributes
    ----------
    snapshot_id, reference, lens
        The snapshot, its reference model and the operative cost lens the margins are under.
    band, sort
        The review band (log-odds) and the order used.
    query
        The request answered.
    counts
        ``cases``, ``close_calls``, ``within_band``, ``flips``, ``listed`` and, when the
        ledger is readable, ``reviewed`` (decided) and ``deferred``.
    case_ids
        The listed case ids, in order (after the limit).
    measures
        The per-case analysis measures the query used (``ambiguity``, ``dependence``): each
        is a column of the rows and of the frame.
    group_attribute
        The group attribute's name (its columns joined with ``/``), as headers show it.
    same_as
        Models identical to an earlier one of the suite, ``{later: earlier}``.
    """

    snapshot_id: str
    reference: str
    lens: str
    band: float
    sort: str
    query: QueueQuery
    counts: Mapping[str, int]
    case_ids: tuple[str, ...]
    measures: tuple[str, ...]
    group_attribute: str
    same_as: Mapping[str, str]
    _answer: QueueAnswer = field(repr=False, compare=False)
    _snapshot: Snapshot = field(repr=False, compare=False)

    def __len__(self) -> int:
        return len(self.case_ids)

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready: the header and one dict per listed case (as ``closecall queue --json``).

        Examples
        --------
        >>> result = study.queue(QueueQuery(limit=3))  # doctest: +SKIP
        >>> result.to_dict()["rows"][0]["case_id"]  # doctest: +SKIP
        'HR-0002696'
        """
        return {
            "snapshot": self.snapshot_id,
            "reference": self.reference,
            "lens": self.lens,
            "band": self.band,
            "sort": self.sort,
            "query": self.query.to_dict(),
            "counts": dict(self.counts),
            "rows": self._answer.rows(self._snapshot),
        }

    def to_frame(self) -> pd.DataFrame:
        """One row per listed case with flat columns.

        Columns: ``rank``, ``case_id``, ``group``, ``margin`` (reference model, log-odds,
        > 0 favourable), ``decision``, ``flip``, ``differs`` (the ``model@lens`` pairs that
        decide otherwise, ``;``-separated), ``tier`` (the triage tier) and ``closeness`` (the
        distance from the threshold in words), ``margin_<model>`` and ``decision_<model>`` for
        every model, any measure the query used (``ambiguity``, ``dependence``), and
        ``state`` and ``claimed_by`` when the ledger is readable.

        Examples
        --------
        >>> frame = study.queue().to_frame()  # doctest: +SKIP
        >>> frame[["case_id", "margin", "state"]].head()  # doctest: +SKIP
        """
        import pandas as pd
        from scipy.special import logit

        from closecall.core.vocabulary import STATE_NAMES

        snap, answer = self._snapshot, self._answer
        q, rows = answer.queue, answer.listed
        margin = q.margin[rows]
        differs = q.grid.differs_at(rows)
        joined = np.full(len(rows), "", dtype=object)
        for j, (model, lens) in enumerate(q.grid.pairs):
            joined = np.where(differs[:, j], joined + f"{model}@{lens};", joined)
        cols: dict[str, Any] = {
            "rank": np.arange(1, len(rows) + 1),
            "case_id": np.asarray(snap.case_ids)[rows].astype(str),
            "group": np.asarray(snap.group_labels)[rows].astype(str),
            "margin": margin,
            "decision": np.where(margin > 0, "favourable", "unfavourable"),
            "flip": differs.any(axis=1),
            "differs": [s.rstrip(";") for s in joined],
        }
        if q.tier is not None:  # the triage tier and the distance in words (docs/tui.md)
            from closecall.review.triage import CLOSENESS_WORDS, TIERS, closeness_codes

            cols["tier"] = np.asarray(TIERS)[q.tier[rows]]
            cols["closeness"] = np.asarray(CLOSENESS_WORDS)[closeness_codes(margin, q.band)]
        t0 = float(logit(snap.lenses[0].threshold))
        for m in snap.model_names:
            mm = np.asarray(snap.logit(m))[rows] - t0
            cols[f"margin_{m}"] = mm
            cols[f"decision_{m}"] = np.where(mm > 0, "favourable", "unfavourable")
        for name, values in q.measures.items():
            cols[name] = np.asarray(values)[rows]
        if answer.states is not None:
            cols["state"] = np.asarray(STATE_NAMES)[answer.states[rows]]
            cols["claimed_by"] = [";".join(answer.claimed.get(c, [])) for c in cols["case_id"]]
        return pd.DataFrame(cols)


@dataclass(frozen=True)
class Explanation:
    """Why one case is close: every quantity of the analysis for it.

    Attributes
    ----------
    case_id, group
        The case and its group level.
    margin, decision
        The pooled model's margin (log-odds, > 0 favourable) and decision under ``lens``.
    lens
        The cost lens's name.
    details
        Everything else, as ``closecall explain --json`` gives it (suite decisions,
        contributions, dependence, counterparts, bands, neighbours, fit flags).
    """

    case_id: str
    group: str
    margin: float
    decision: str
    lens: str
    details: Mapping[str, Any] = field(repr=False)

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready, the same keys as ``closecall explain --json``.

        Examples
        --------
        >>> study.explain("HR-0002696").to_dict()["dependence"]["share"]  # doctest: +SKIP
        """
        return dict(_plain(self.details))


@dataclass(frozen=True)
class Report:
    """A study-wide result (proxies, bands, a model comparison, weights, the disparity report).

    Attributes
    ----------
    kind
        Which report: ``proxies``, ``bands``, ``compare``, ``model``, ``scorecard`` or
        ``disparity``.
    snapshot_id
        The snapshot it was computed on.
    data
        Its figures, as the command's ``--json`` gives them.
    """

    kind: str
    snapshot_id: str
    data: Mapping[str, Any] = field(repr=False)

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready figures.

        Examples
        --------
        >>> study.bands().to_dict()["epsilon"]  # doctest: +SKIP
        """
        return {"kind": self.kind, "snapshot": self.snapshot_id, **_plain(self.data)}


@dataclass(frozen=True)
class DisparityResult(Report):
    """The disparity report: its figures as data (``to_dict()``, as ``closecall disparity
    --json``) and as the typed report the views print, with its headline and HTML page.

    Attributes
    ----------
    report
        The typed report (:class:`closecall.reports.disparity.report.DisparityReport`): rates,
        overrides, reviewers, errors, calibration, periods, warnings.
    """

    report: DisparityReport = field(repr=False, compare=False)

    def headline(self) -> str:
        """The plain-words verdict on the change of the lowest adverse impact ratio.

        Examples
        --------
        >>> study.disparity(n_boot=500).headline()  # doctest: +SKIP
        """
        from closecall.reports.disparity.html import report_headline

        return report_headline(self.report)

    def html(self) -> str:
        """The whole report as one self-contained HTML document.

        Examples
        --------
        >>> Path("disparity.html").write_text(study.disparity().html())  # doctest: +SKIP
        """
        from closecall.reports.disparity.html import render_html

        return render_html(self.report)


@dataclass(frozen=True)
class LedgerEntries:
    """Ledger entries in sequence order.

    Attributes
    ----------
    entries
        The entries (frozen :class:`closecall.review.ledger.Entry` records).
    """

    entries: tuple[Entry, ...]

    def __len__(self) -> int:
        return len(self.entries)

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready: ``{"entries": [...]}``, each entry as ``closecall ledger show --json``.

        Examples
        --------
        >>> study.ledger.show(limit=5).to_dict()["entries"][0]["action"]  # doctest: +SKIP
        """
        return {"entries": [e.to_dict() for e in self.entries]}

    def to_frame(self) -> pd.DataFrame:
        """One row per entry, flat columns (the per-model decisions left out: see to_dict).

        Examples
        --------
        >>> study.ledger.show().to_frame()[["seq", "case_id", "action"]]  # doctest: +SKIP
        """
        import pandas as pd

        names = ("seq", "time", "reviewer", "case_id", "snapshot_id", "reference_model",
                 "reference_decision", "reference_margin", "action", "reason", "note",
                 "supersedes", "hash")  # fmt: skip
        return pd.DataFrame(
            {n: [getattr(e, n) for e in self.entries] for n in names}, columns=list(names)
        )


@dataclass(frozen=True)
class LedgerAnchor:
    """The ledger's head, verified and written to the anchor file.

    Attributes
    ----------
    path
        The anchor file written.
    seq, hash
        The head entry's sequence number and chain hash, as the file now holds them.
    """

    path: Path
    seq: int
    hash: str

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready: ``anchor`` (the file), ``seq`` and ``hash`` (as ``closecall ledger anchor
        --json``).

        Examples
        --------
        >>> study.ledger.anchor("/srv/anchors/grants.anchor").to_dict()["seq"]  # doctest: +SKIP
        20
        """
        return {"anchor": str(self.path), "seq": self.seq, "hash": self.hash}


@dataclass(frozen=True)
class WhatIfResult:
    """A what-if: a policy against the baseline (or a second policy), over the cases under
    review (docs/whatif.md explains every figure).

    Attributes
    ----------
    snapshot_id
        The snapshot it was computed on.
    baseline, policy
        The two policies in words (``deployed``, ``deployed without heritage``…).
    changed, to_favourable, to_unfavourable
        How many decisions the policy changes, in all and by direction.
    by_group
        Per group level: ``cases``, ``changed``, ``to_favourable``, ``to_unfavourable``,
        ``share`` of the group's cases changed with its Wilson interval.
    case_ids
        The changed cases' ids, in snapshot order.
    data
        Every figure, as ``closecall whatif --json`` gives it (rates and adverse impact ratios
        per group with intervals, held-out error rates per group, notes).
    """

    snapshot_id: str
    baseline: str
    policy: str
    changed: int
    to_favourable: int
    to_unfavourable: int
    by_group: Mapping[str, Mapping[str, Any]]
    case_ids: tuple[str, ...]
    data: Mapping[str, Any] = field(repr=False)

    def __len__(self) -> int:
        return len(self.case_ids)

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready figures (as ``closecall whatif --json``).

        Examples
        --------
        >>> study.whatif(drop=["heritage"]).to_dict()["total"]["changed"]  # doctest: +SKIP
        """
        return {"kind": "whatif", "snapshot": self.snapshot_id, **_plain(self.data)}

    def to_frame(self) -> pd.DataFrame:
        """One row per changed case: ``case_id``, ``group``, ``direction`` (``to favourable``
        or ``to unfavourable``), ``baseline_margin`` and ``policy_margin`` (log-odds, > 0
        favourable).

        Examples
        --------
        >>> study.whatif(model="unaware").to_frame().groupby("group").size()  # doctest: +SKIP
        """
        import pandas as pd

        names = ("case_id", "group", "direction", "baseline_margin", "policy_margin")
        rows = self.data.get("changed_cases", [])
        return pd.DataFrame({n: [r[n] for r in rows] for n in names}, columns=list(names))
