"""``closecall.Study``: one study, opened for analysis and review from Python.

It holds the opened study (config and snapshot) and passes it to the engine. The command line
and the review screen are thin views over it (they get every result from its methods), so all
three give the same answers.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from closecall.api.results import (
    DisparityResult,
    Explanation,
    LedgerAnchor,
    LedgerEntries,
    QueueResult,
    Report,
    WhatIfResult,
)
from closecall.core.errors import UserError
from closecall.review.query import QueueQuery, answer_queue
from closecall.review.queue import group_attribute

if TYPE_CHECKING:
    import pandas as pd

    from closecall.analysis.margin_distribution import MarginDistribution
    from closecall.analysis.whatif import Policy
    from closecall.core.progress import Progress
    from closecall.reports.export import ExportResult
    from closecall.review.ledger import Claim, Draft, Entry
    from closecall.review.ledger.verify import VerifyResult
    from closecall.review.query import QueueAnswer
    from closecall.setup.config import StudyConfig
    from closecall.setup.init import Inference
    from closecall.suite.opening import OpenedStudy


def study_config(config_path: str | Path = "closecall.toml") -> StudyConfig:
    """A study's config alone, read and checked: nothing is loaded or fitted (the views use it
    to check paths and permissions before the work starts).

    Examples
    --------
    >>> study_config("demo-study/closecall.toml").review.ledger  # doctest: +SKIP
    """
    from closecall.setup.config import load_config

    return load_config(Path(config_path))


def draft_config(
    data: str | Path,
    pending: str | Path | None = None,
    *,
    relative_to: str | Path | None = None,
) -> Inference:
    """A commented ``closecall.toml`` drafted from a labelled data file (its ``text``),
    what was inferred (``inferred``) and what is left to decide (``to_decide``); nothing
    is written. Paths in the text are relative to ``relative_to`` (the config's folder).

    Examples
    --------
    >>> draft = draft_config("history.csv", "pending.csv")  # doctest: +SKIP
    >>> print(draft.to_decide)  # doctest: +SKIP
    """
    from closecall.setup.init import infer_config

    return infer_config(
        Path(data),
        None if pending is None else Path(pending),
        None if relative_to is None else Path(relative_to),
    )


def reason_codes(config: StudyConfig | None = None) -> list[dict[str, Any]]:
    """The reason codes a reviewer may give, in the config's ``[review] reasons`` order (the
    defaults every new study starts with, without a config): each ``{"code", "meaning",
    "default"}``, ``meaning`` None for a study's own code.

    Examples
    --------
    >>> [c["code"] for c in reason_codes()][:2]  # doctest: +SKIP
    """
    from closecall.review.reasons import reason_codes as codes

    return codes(config)


class Ledger:
    """The study's review ledger: read, verify and export it (see docs/ledger.md).

    Reached as :attr:`Study.ledger`, or with :meth:`Ledger.open` from the config alone
    (reading and verifying need no fitted snapshot; the export does).

    Examples
    --------
    >>> study.ledger.verify().ok  # doctest: +SKIP
    True
    """

    def __init__(self, config: StudyConfig, study: Study | None = None) -> None:
        self._config = config
        self._study = study

    @classmethod
    def open(cls, config_path: str | Path = "closecall.toml") -> Ledger:
        """The ledger of a study's config, without opening (or fitting) its snapshot.

        Examples
        --------
        >>> Ledger.open("demo-study/closecall.toml").verify().ok  # doctest: +SKIP
        True
        """
        return cls(study_config(config_path))

    @property
    def config(self) -> StudyConfig:
        """The study config the ledger belongs to (its path, ``[review]`` and ``[team]``).

        Examples
        --------
        >>> study.ledger.config.review.ledger  # doctest: +SKIP
        """
        return self._config

    def show(
        self,
        *,
        case_id: str | None = None,
        reviewer: str | None = None,
        limit: int | None = None,
        before: int | None = None,
    ) -> LedgerEntries:
        """Entries in sequence order, filtered; with ``limit``, the most recent ``limit``.

        With ``before``, only the entries numbered below it: the smallest ``seq`` of one page
        and the same ``limit`` give the page before it.

        Examples
        --------
        >>> study.ledger.show(limit=10).to_frame()  # doctest: +SKIP
        """
        from closecall.review.decisions import ledger_entries

        entries = ledger_entries(
            self._config, case_id=case_id, reviewer=reviewer, limit=limit, before=before
        )
        return LedgerEntries(tuple(entries))

    def check(self) -> None:
        """Refuse (``UserError``) a ledger closecall would not record in: not a ledger, damaged,
        or its structure changed. An absent ledger is fine (the first entry creates it).

        Examples
        --------
        >>> Ledger.open("demo-study/closecall.toml").check()  # doctest: +SKIP
        """
        from closecall.review.decisions import check_ledger

        check_ledger(self._config)

    def login(self) -> str:
        """Who records: the database session user for a PostgreSQL ledger, else the OS login.

        Examples
        --------
        >>> study.ledger.login()  # doctest: +SKIP
        'alice'
        """
        from closecall.review.ledger import ledger_login

        return ledger_login(self._config.review)

    def may_record(self, login: str) -> bool:
        """Whether ``login`` may record reviews in this study (``[review] reviewers``, or the
        database's roles for a PostgreSQL ledger; docs/team.md).

        Examples
        --------
        >>> study.ledger.may_record("alice")  # doctest: +SKIP
        True
        """
        from closecall.review.ledger.access import may_record

        return may_record(self._config.review, login)

    def refusal(self, login: str) -> str:
        """Why ``login`` may not record here, and whom to ask.

        Examples
        --------
        >>> study.ledger.refusal("mallory")  # doctest: +SKIP
        """
        from closecall.review.ledger.access import record_refusal

        return record_refusal(self._config.review, login, self._config.path)

    def head_seq(self) -> int:
        """The highest sequence number in the ledger (0 when there is none yet): pass it as
        :meth:`Study.record`'s ``seen_seq`` when a reviewer opens a case.

        Examples
        --------
        >>> study.ledger.head_seq()  # doctest: +SKIP
        2
        """
        from closecall.review.conflicts import last_seq

        return last_seq(self._config)

    def verify(self, anchor: str | None = None, *, allow_empty: bool = False) -> VerifyResult:
        """Check the ledger is there, structured as the schema says, and its chain intact.

        Examples
        --------
        >>> study.ledger.verify().ok  # doctest: +SKIP
        True
        """
        from closecall.review.decisions import verify_ledger

        return verify_ledger(self._config, anchor, allow_empty=allow_empty)

    def anchor(self, out: str | Path | None = None) -> LedgerAnchor:
        """Verify the ledger and write its head (sequence number and hash) to the anchor file:
        ``out``, or ``[team] anchor`` of the config. From then on :meth:`verify` checks that the
        chain still holds that entry, so a deleted, emptied or replaced ledger fails; keep the
        file where the reviewers cannot write (docs/team.md).

        Refused (``UserError``, nothing written) when no anchor file is named, the ledger does
        not verify, or the anchor's folder is not writable by this login.

        Examples
        --------
        >>> Ledger.open("/srv/grants/closecall.toml").anchor().seq  # doctest: +SKIP
        20
        """
        from closecall.review.decisions import anchor_ledger

        path, result = anchor_ledger(self._config, None if out is None else Path(out))
        return LedgerAnchor(path, result.head_seq, result.head_hash)

    def export(
        self,
        *,
        all_entries: bool = False,
        key_file: str | Path | None = None,
        pseudonymise_reviewers: bool = False,
        notes: bool = True,
    ) -> pd.DataFrame:
        """The analyst export: each case's effective review (or every entry) as a table.

        Examples
        --------
        >>> study.ledger.export(notes=False).head()  # doctest: +SKIP
        """
        return self.export_details(
            all_entries=all_entries,
            key_file=key_file,
            pseudonymise_reviewers=pseudonymise_reviewers,
            notes=notes,
        ).table

    def export_details(
        self,
        *,
        entries: LedgerEntries | None = None,
        all_entries: bool = False,
        key_file: str | Path | None = None,
        pseudonymise_reviewers: bool = False,
        notes: bool = True,
    ) -> ExportResult:
        """The export with what to tell its reader: the table, the entries read, whether the
        key file was created, warnings and the advice that goes with them.

        Parameters
        ----------
        entries
            Entries already read with :meth:`show` (None: the whole ledger is read).

        Examples
        --------
        >>> result = study.ledger.export_details(key_file="key.txt")  # doctest: +SKIP
        >>> result.key_created, result.warnings  # doctest: +SKIP
        """
        from closecall.reports.export import export_reviews

        if self._study is None:
            raise UserError(
                f"{self._config.path}: the export needs the study's snapshot",
                "open the study with Study.open and use its ledger",
            )
        read = self.show() if entries is None else entries
        return export_reviews(
            self._study.opened,
            list(read.entries),
            all_entries=all_entries,
            key_file=key_file,
            pseudonymise_reviewers=pseudonymise_reviewers,
            notes=notes,
        )


@dataclass(frozen=True)
class Study:
    """A configured data set, its fitted model suite and its ledger.

    Open one with :meth:`Study.open`; every method passes the opened study to the engine
    functions the command line and the review screen use. The tool supports human review
    and decides nothing; its statistics are evidence for review, not legal findings.

    Examples
    --------
    >>> from closecall import Study
    >>> study = Study.open("demo-study/closecall.toml")  # doctest: +SKIP
    >>> study.queue().to_frame().head()  # doctest: +SKIP
    """

    opened: OpenedStudy

    @classmethod
    def open(
        cls,
        config_path: str | Path = "closecall.toml",
        progress: Progress | None = None,
        *,
        refit: bool = False,
        rehash: bool = False,
    ) -> Study:
        """Read the config and load the cached snapshot, or fit the suite when there is none.

        Parameters
        ----------
        config_path
            The study's ``closecall.toml`` (or its folder).
        progress
            Called with (label, done, total) while a fit runs.
        refit
            Fit again and replace the cached snapshot whatever state it is in.
        rehash
            Hash the data files afresh instead of trusting the cached digests.

        Examples
        --------
        >>> study = Study.open("demo-study/closecall.toml")  # doctest: +SKIP
        >>> study.snapshot_id  # doctest: +SKIP
        """
        from closecall.core.progress import quiet
        from closecall.suite.opening import open_study

        return cls(open_study(config_path, progress or quiet, refit=refit, rehash=rehash))

    @staticmethod
    def write_demo(out: str | Path, *, cases: int = 5000, seed: int = 7) -> Path:
        """Write the invented demo study (data and config) to the folder ``out``; returns its
        config path. A folder that already holds a study is refused.

        Examples
        --------
        >>> study = Study.open(Study.write_demo("demo-study"))  # doctest: +SKIP
        """
        from closecall.setup.demo import write_demo

        return write_demo(Path(out), cases=cases, seed=seed)

    def fit(self, refit: bool = False, progress: Progress | None = None) -> Study:
        """The study on the current data and config (a new :class:`Study`; this one is frozen).

        Parameters
        ----------
        refit
            Fit again and replace the cached snapshot whatever state it is in.
        progress
            Called with (label, done, total) as the work goes on.

        Examples
        --------
        >>> study = study.fit(refit=True)  # doctest: +SKIP
        """
        from closecall.core.progress import quiet
        from closecall.suite.opening import fit_study

        return Study(fit_study(self.opened.config, progress or quiet, refit=refit, rehash=True))

    @property
    def snapshot_id(self) -> str:
        """The id of the snapshot every result is computed on.

        Examples
        --------
        >>> study.snapshot_id  # doctest: +SKIP
        '3f9c2a7d41e0b8c5'
        """
        return str(self.opened.snapshot.id)

    @property
    def group_attribute(self) -> str:
        """The group attribute's name (its columns joined with ``/``), as headers show it.

        Examples
        --------
        >>> study.group_attribute  # doctest: +SKIP
        'heritage'
        """
        return group_attribute(self.opened.snapshot)

    @property
    def ledger(self) -> Ledger:
        """The review ledger: ``show``, ``verify``, ``export``.

        Examples
        --------
        >>> len(study.ledger.show())  # doctest: +SKIP
        """
        return Ledger(self.opened.config, self)

    def queue(self, query: QueueQuery | None = None) -> QueueResult:
        """The close calls a query asks for, with each case's review state and claims.

        Examples
        --------
        >>> from closecall import QueueQuery
        >>> study.queue(QueueQuery(unreviewed=True, limit=20)).to_frame()  # doctest: +SKIP
        """
        snap = self.opened.snapshot
        answer = answer_queue(self.opened, query)
        listed = answer.listed
        return QueueResult(
            snapshot_id=str(snap.id),
            reference=snap.reference,
            lens=snap.lenses[0].name,
            band=float(answer.queue.band),
            sort=answer.queue.sort,
            query=answer.query,
            counts=dict(answer.queue.counts),
            case_ids=tuple(str(c) for c in snap.case_ids[listed]),
            measures=tuple(answer.queue.measures),
            group_attribute=self.group_attribute,
            same_as=dict(answer.queue.same_as),
            _answer=answer,
            _snapshot=snap,
        )

    def answer(
        self,
        query: QueueQuery | None = None,
        *,
        reviews: tuple[np.ndarray, dict[str, list[str]]] | None = None,
        cache: Mapping[str, np.ndarray] | None = None,
    ) -> QueueAnswer:
        """The engine's answer to a query, for a view that draws the whole ranked list itself
        (the review screen): the ranked :class:`~closecall.review.queue.Queue` and the listed
        rows, without building a row per case.

        Parameters
        ----------
        reviews
            Each case's review state (:meth:`review_states`) and who claims it, when the
            caller has them already (None: read from the ledger).
        cache
            Analysis measures and filters already computed, by name, to reuse.

        Examples
        --------
        >>> answer = study.answer(QueueQuery(sort="margin"))  # doctest: +SKIP
        >>> answer.queue.counts["listed"]  # doctest: +SKIP
        """
        return answer_queue(self.opened, query, reviews=reviews, cache=cache)

    def review_states(self) -> np.ndarray:
        """Every case's review state from the ledger, in snapshot order: 0 open, else 1 + the
        index of its latest action, or the conflict code (``closecall.core.vocabulary``).

        Examples
        --------
        >>> from closecall.core.vocabulary import STATE_NAMES  # doctest: +SKIP
        >>> STATE_NAMES[int(study.review_states()[0])]  # doctest: +SKIP
        """
        from closecall.review.states import ledger_states

        return ledger_states(self.opened)

    def explain(self, case_id: str, *, exact: bool = False, lens: str | None = None) -> Explanation:
        """Why one case is close: suite decisions, contributions, dependence, bands, neighbours.

        Examples
        --------
        >>> study.explain("HR-0002696").margin  # doctest: +SKIP
        """
        from closecall.analysis.explain import explain_case

        d = explain_case(self.opened, case_id, exact=exact, lens=lens)
        return Explanation(
            case_id=d["case_id"],
            group=d["group"],
            margin=float(d["margin"]),
            decision=d["decision"],
            lens=d["lens"]["name"],
            details=d,
        )

    def proxies(self) -> Report:
        """Which features stand in for the group attribute (the fit's proxy report), the
        proxy-set search, how much the pooled margins rest on the group and its proxies per
        group, and the counterpart flip rates.

        Its data, as ``closecall proxies --json`` gives it: the proxy report's fields
        (``features``, ``proxies``, ``recoverability_auc``…), ``proxy_sets``,
        ``dependence_by_group`` and ``counterparts``.

        Examples
        --------
        >>> study.proxies().to_dict()["proxies"]  # doctest: +SKIP
        >>> study.proxies().to_dict()["proxy_sets"]["steps"]  # doctest: +SKIP
        """
        from dataclasses import asdict

        import numpy as np

        from closecall.analysis.counterparts import counterpart_flip_rates
        from closecall.analysis.dependence import dependence_by_group
        from closecall.suite.proxies import proxy_sets

        snap = self.opened.snapshot
        sets = proxy_sets(
            np.asarray(snap.hist_X),
            np.asarray(snap.hist_group_codes),
            len(snap.group_levels),
            snap.meta["column_source"],
            [f.name for f in snap.encoder.features if not f.is_group],
            int(snap.meta.get("seed", 0)),
        )
        data = {
            **snap.proxies.to_json(),
            "proxy_sets": {
                "start_auc": sets.start_auc,
                "method": sets.method,
                "rows": sets.rows,
                "steps": [asdict(x) for x in sets.steps],
            },
            "dependence_by_group": dependence_by_group(snap),
            "counterparts": counterpart_flip_rates(snap),
        }
        return Report("proxies", str(snap.id), data)

    def bands(self, epsilon: float | None = None, lens: str | None = None) -> Report:
        """How many decisions could flip, per group, and how ambiguity grows with ε.

        Examples
        --------
        >>> study.bands(epsilon=0.002).to_dict()["groups"]  # doctest: +SKIP
        """
        from closecall.analysis.multiplicity import (
            EPSILON_CURVE,
            EPSILON_MAX,
            UNCERTAINTY_EPSILON,
            ambiguity_by_group,
            epsilon_curve,
        )
        from closecall.core.numbers import check_number

        opened = self.opened
        eps = opened.config.multiplicity.epsilon if epsilon is None else epsilon
        eps = check_number("epsilon", eps, 0, EPSILON_MAX, low_open=True, example="0.002")
        snap = opened.snapshot
        groups = ambiguity_by_group(snap, "pooled", eps, lens, seed=opened.config.seed)
        curve = epsilon_curve(snap, "pooled", tuple(sorted({*EPSILON_CURVE, eps})), lens)
        data = {
            "model": "pooled",
            "lens": snap.lens(lens).name,
            "uncertainty_epsilon": UNCERTAINTY_EPSILON,
            "epsilon": eps,
            "groups": groups,
            "epsilon_curve": curve,
        }
        return Report("bands", str(snap.id), data)

    def compare(
        self, *, lens: str | None = None, n_boot: int = 1000, seed: int | None = None
    ) -> Report:
        """Which model errs less for whom, on held-out history, with bootstrap intervals.

        Examples
        --------
        >>> study.compare(n_boot=500).to_dict()["rows"][0]  # doctest: +SKIP
        """
        from closecall.analysis.comparison import compare_models

        opened = self.opened
        res = compare_models(
            opened.snapshot,
            lens=lens,
            n_boot=n_boot,
            seed=opened.config.seed if seed is None else seed,
        )
        return Report("compare", str(opened.snapshot.id), res.to_dict())

    def model(self, level: float = 0.95) -> Report:
        """Every model's weights on the data's own scale, with standard errors, odds ratios and
        intervals, the intercept, each lens's threshold, group and proxy weights marked.

        Examples
        --------
        >>> study.model().to_dict()["models"][0]["rows"][0]["term"]  # doctest: +SKIP
        '(intercept)'
        """
        from closecall.analysis.weights import model_weights

        if not 0 < level < 1:
            raise UserError(f"confidence level {level} is not between 0 and 1", "pass e.g. 0.95")
        snap = self.opened.snapshot
        return Report("model", str(snap.id), model_weights(snap, level))

    def fit_flags(self, case_id: str | None = None) -> list[dict[str, Any]]:
        """The fits of the snapshot kept despite a problem (separation, no convergence…), each
        ``{"model", "group", "fit", "problem", "detail"}``; with ``case_id``, only those of the
        fits that scored that case.

        Examples
        --------
        >>> [f["problem"] for f in study.fit_flags()]  # doctest: +SKIP
        """
        from closecall.suite.fit_flags import case_fit_flags, snapshot_flags

        snap = self.opened.snapshot
        if case_id is None:
            return snapshot_flags(snap)
        return case_fit_flags(snap, snap.case_index(case_id))

    def same_models(self) -> dict[str, str]:
        """Models of the suite that are another, earlier one: ``{later: earlier}`` (lists name
        such a model once).

        Examples
        --------
        >>> study.same_models()  # doctest: +SKIP
        {'proxy_free': 'unaware'}
        """
        from closecall.review.queue import identical_models

        return identical_models(self.opened.snapshot)

    def margin_distribution(
        self,
        band: float,
        bins: int = 48,
        query: QueueQuery | None = None,
        *,
        rows: np.ndarray | None = None,
    ) -> MarginDistribution:
        """The reference margins per group in ``bins`` equal bins over ±3 review bands, with
        the count within the band (the queue's chart): of the cases ``query``'s filters keep,
        at any distance from the threshold (every case when it has no filter).

        ``rows`` gives the kept rows instead of ``query`` (from :meth:`kept_rows`, computed
        once for a list drawn many times).

        Examples
        --------
        >>> dist = study.margin_distribution(study.queue().band)  # doctest: +SKIP
        >>> dist.counts.shape  # doctest: +SKIP
        (3, 48)
        """
        from closecall.analysis.margin_distribution import kept_rows, margin_distribution

        if rows is None and query is not None:
            rows = kept_rows(self.opened, query)
        return margin_distribution(self.opened.snapshot, band, bins, rows)

    def kept_rows(
        self,
        query: QueueQuery,
        *,
        reviews: tuple[np.ndarray, dict[str, list[str]]] | None = None,
        cache: Mapping[str, np.ndarray] | None = None,
    ) -> np.ndarray | None:
        """Snapshot rows a query's filters keep at any distance from the threshold (None: it
        has no filter, every case counts); ``reviews`` and ``cache`` as in :meth:`answer`.

        Examples
        --------
        >>> rows = study.kept_rows(QueueQuery(group="Briar"))  # doctest: +SKIP
        """
        from closecall.analysis.margin_distribution import kept_rows

        return kept_rows(self.opened, query, reviews=reviews, cache=cache)

    def scorecard(self) -> Report:
        """The deployed scorecard as fitted (``[deployed] scorecard``, docs/scorecard.md): its
        rows, cut-off and scale, its held-out metrics per group against the recorded outcomes,
        and what could not be computed.

        Examples
        --------
        >>> study.scorecard().to_dict()["card"]["cutoff"]  # doctest: +SKIP
        500.0
        """
        from closecall.suite.scorecard_study import card_meta

        snap = self.opened.snapshot
        meta = card_meta(snap)
        if meta is None:
            raise UserError(
                f"{self.opened.config.path}: the study has no deployed scorecard",
                "name the card under [deployed] scorecard in the study config; see "
                "docs/scorecard.md",
            )
        data = {
            "card": meta["card"],
            "mean_points": meta["mean_points"],
            "baseline_source": meta["baseline_source"],
            "metrics": [m for m in snap.metrics if m["model"] == "deployed"],
            "cannot": meta["cannot"],
            "notes": meta["notes"],
        }
        return Report("scorecard", str(snap.id), data)

    def whatif(
        self,
        *,
        model: str | None = None,
        lens: str | None = None,
        drop: Sequence[str] = (),
        group_thresholds: Mapping[str, float] | None = None,
        against: str | None = None,
        level: float = 0.95,
    ) -> WhatIfResult:
        """What a policy change would do to the cases under review, against the decision in
        force (or against a second policy), by group: decisions changed by direction,
        favourable rates and adverse impact ratios, held-out error rates, with intervals.

        Parameters
        ----------
        model
            A model of the suite or ``deployed`` (None: the model in force).
        lens
            A cost lens (None: the deployed card's cut-off, or the operative lens).
        drop
            Features whose weights in the deployed scorecard are set to zero.
        group_thresholds
            Group level → probability threshold for that group (the others keep the lens's).
        against
            A second policy in text form (``model=unaware;lens=cautious``) to compare with,
            instead of the decision in force.
        level
            Confidence level of every interval.

        Examples
        --------
        >>> result = study.whatif(drop=["heritage"])  # doctest: +SKIP
        >>> result.by_group["Briar"]["to_favourable"]  # doctest: +SKIP
        >>> result.to_frame().head()  # doctest: +SKIP
        """
        from closecall.analysis.whatif import Policy, policy_from_text

        policy = Policy(
            model=model,
            lens=lens,
            drop=tuple(str(f) for f in drop),
            group_thresholds=tuple((str(k), v) for k, v in (group_thresholds or {}).items()),
        )
        other = policy_from_text(self.opened, against) if against is not None else None
        return self.weigh(policy, other, level=level)

    def weigh(
        self, policy: Policy, against: Policy | None = None, *, level: float = 0.95
    ) -> WhatIfResult:
        """:meth:`whatif` for a policy already built (as the review screen's choices are).

        Examples
        --------
        >>> first = study.policy_choices()[0]  # doctest: +SKIP
        >>> study.weigh(first).changed  # doctest: +SKIP
        """
        from closecall.analysis.whatif_figures import figures_dict, whatif

        snap = self.opened.snapshot
        fig = whatif(self.opened, policy, against, level=level)
        data = figures_dict(fig, snap.case_ids, snap.group_labels)
        return WhatIfResult(
            snapshot_id=str(snap.id),
            baseline=fig.baseline.label,
            policy=fig.policy.label,
            changed=fig.total.changed,
            to_favourable=fig.total.to_favourable,
            to_unfavourable=fig.total.to_unfavourable,
            by_group={c.group: data["changes"][i] for i, c in enumerate(fig.changes)},
            case_ids=tuple(str(c) for c in snap.case_ids[fig.rows]),
            data=data,
        )

    # ------------------------------------------------------------ drafts, claims, history

    def history(self, case_id: str) -> list[Entry]:
        """Every ledger entry of one case, oldest first (the case must be in the snapshot).

        Examples
        --------
        >>> [e.action for e in study.history("HR-0002696")]  # doctest: +SKIP
        """
        from closecall.review.decisions import case_history

        return case_history(self.opened, case_id)

    def save_draft(
        self, case_id: str, note: str, action: str | None = None, reason: str | None = None
    ) -> Draft:
        """Keep the login's unfinished note (and chosen action and reason) on a case; drafts
        are mutable and kept apart from the append-only chain.

        Examples
        --------
        >>> study.save_draft("HR-0002696", "income letter asked for")  # doctest: +SKIP
        """
        from closecall.review.decisions import save_draft

        return save_draft(self.opened, case_id, note, action, reason)

    def load_draft(self, case_id: str) -> Draft | None:
        """The login's draft on a case, or None.

        Examples
        --------
        >>> study.load_draft("HR-0002696").note  # doctest: +SKIP
        """
        from closecall.review.decisions import load_draft

        return load_draft(self.opened, case_id)

    def drop_draft(self, case_id: str) -> None:
        """Forget the login's draft on a case (after recording, or when discarded).

        Examples
        --------
        >>> study.drop_draft("HR-0002696")  # doctest: +SKIP
        """
        from closecall.review.decisions import drop_draft

        drop_draft(self.opened, case_id)

    def my_drafts(self) -> list[Draft]:
        """The login's drafts, oldest first.

        Examples
        --------
        >>> [d.case_id for d in study.my_drafts()]  # doctest: +SKIP
        """
        from closecall.review.decisions import my_drafts

        return my_drafts(self.opened)

    def claim(self, case_id: str, instance: str | None = None) -> Claim:
        """Tell other reviewers the login is looking at a case (advice only: it never stops
        anyone from recording); ``instance`` names the review screen holding it.

        Examples
        --------
        >>> study.claim("HR-0002696").expires  # doctest: +SKIP
        """
        from closecall.review.decisions import claim_case

        return claim_case(self.opened, case_id, instance)

    def release_claim(self, case_id: str, instance: str | None = None) -> None:
        """Give up the login's claim on a case (with ``instance``, only while that screen
        holds it).

        Examples
        --------
        >>> study.release_claim("HR-0002696")  # doctest: +SKIP
        """
        from closecall.review.decisions import release_claim

        release_claim(self.opened, case_id, instance)

    def claims(self, case_ids: Iterable[str] | None = None) -> dict[str, list[Claim]]:
        """The claims in force, by case (of ``case_ids``, or every case).

        Examples
        --------
        >>> study.claims(["HR-0002696"])  # doctest: +SKIP
        """
        from closecall.review.decisions import active_claims

        return active_claims(self.opened, case_ids)

    def policy_choices(self) -> list[Policy]:
        """The policies worth weighing first, in order: the deployed scorecard with each of its
        features' weights set to zero, every other model of the suite, and the model in force
        under every other cost lens.

        Examples
        --------
        >>> [p.label(study.baseline_model) for p in study.policy_choices()][:3]  # doctest: +SKIP
        """
        from closecall.analysis.whatif import policy_choices

        return policy_choices(self.opened)

    @property
    def baseline_model(self) -> str:
        """The model whose decision is in force: ``deployed`` when the study has a deployed
        scorecard, else the reference model.

        Examples
        --------
        >>> study.baseline_model  # doctest: +SKIP
        'deployed'
        """
        from closecall.analysis.whatif import baseline_model

        return baseline_model(self.opened.snapshot)

    def record(
        self,
        case_id: str,
        action: str,
        *,
        reason: str | None = None,
        note: str = "",
        supersedes: int | None = None,
        second_opinion: bool = False,
        seen_seq: int | None = None,
    ) -> Entry:
        """Record a reviewer's action on a case in the ledger, in the name the ledger knows
        the author by: the process's OS login for a ledger file, the database session user
        for a ledger in PostgreSQL (whatever the OS login).

        Parameters
        ----------
        action
            ``uphold``, ``override-favourable``, ``override-unfavourable`` or ``defer``.
        reason, note
            A code from ``[review] reasons`` and a note; both required for overrides.
        supersedes
            Sequence number of an earlier entry for this case that this one corrects.
        second_opinion
            Record beside another reviewer's decision on the case instead of refusing.
        seen_seq
            The ledger's last sequence number when the reviewer opened the case (the review
            screen passes it): only other reviewers' decisions recorded after it refuse. None:
            any other reviewer's decision in force refuses.

        Examples
        --------
        >>> study.record("HR-0002696", "defer", note="waiting for the survey")  # doctest: +SKIP
        """
        from closecall.review.decisions import record_review

        return record_review(
            self.opened,
            case_id,
            action,
            reason,
            note,
            supersedes,
            second_opinion=second_opinion,
            seen_seq=seen_seq,
        )

    def disparity(
        self,
        *,
        outcomes: str | Path | None = None,
        key_file: str | Path | None = None,
        level: float = 0.95,
        n_boot: int = 2000,
        seed: int = 0,
        period: str = "month",
    ) -> DisparityResult:
        """Human-versus-model disparity over the effective reviews, by group.

        Examples
        --------
        >>> study.disparity(n_boot=500).to_dict()["rates"]  # doctest: +SKIP
        >>> print(study.disparity(n_boot=500).headline())  # doctest: +SKIP
        """
        from closecall.reports.disparity.from_study import study_report

        report = study_report(
            self.opened,
            outcomes=outcomes,
            key_file=key_file,
            level=level,
            n_boot=n_boot,
            seed=seed,
            period=period,
        )
        snapshot_id = str(self.opened.snapshot.id)
        return DisparityResult("disparity", snapshot_id, report.to_dict(), report=report)

    def demo_reviews(
        self,
        n: int,
        seed: int = 7,
        *,
        bias: float = 2.0,
        biased_group: str | None = None,
        reviewers: int = 4,
    ) -> int:
        """Record ``n`` simulated reviews of close calls in a demo study's ledger (by
        ``sim-reviewer-1``, ``-2``…, each noted as simulated); a ledger holding real reviews
        is refused. Returns how many were recorded.

        Examples
        --------
        >>> Study.open("demo-study/closecall.toml").demo_reviews(300, bias=2.0)  # doctest: +SKIP
        300
        """
        from closecall.review.demo_reviews import simulate_reviews

        return simulate_reviews(
            self.opened, n, seed, bias=bias, biased_group=biased_group, reviewers=reviewers
        )


__all__ = ["Ledger", "Study", "draft_config", "reason_codes", "study_config"]
