"""Fit the model suite: pooled, unaware, proxy-free, split (one per group) and deployed.

Every model lives in one design space: a model that may not use a column has a zero weight
there. Each model is fitted once on the whole history and once per fold (K-fold, stratified by
group × outcome, warm-started from the whole-history fit). The out-of-fold scores give honest
held-out metrics; with one labelled file they are also the scores under review
(cross-fitting), so no case is scored by a model that saw its own outcome. With a pending file,
pending cases are scored by the whole-history fits.

For each model and scored case we keep which fitted coefficient row scored it, the log-odds, and
x̃ᵀH⁻¹x̃ under that row's Hessian (the basis of the bands, see analysis/multiplicity.py).

Every fit (whole history, each fold, each split group) is checked (logit.check_fit): separation,
one outcome value, more columns than rows, a coefficient past the bound, no convergence. With
penalty 0 such a fit has no valid unpenalised estimate and the suite refuses it (UserError
naming the model, fit and group); with a penalty it is kept and listed in ``fit_flags``.

References
----------
Dwork, Immorlica, Kalai, Leiserson, "Decoupled classifiers for group-fair and efficient machine
learning", FAT* 2018 (the split model).
"""

from __future__ import annotations

from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from functools import cached_property
from typing import Any

import numpy as np
import pandas as pd
from scipy.special import expit, logit
from sklearn.model_selection import StratifiedKFold

from closecall.core.errors import UserError
from closecall.core.progress import Progress, quiet
from closecall.core.vocabulary import FITTED_MODELS
from closecall.setup.config import StudyConfig
from closecall.setup.encode import Encoder, fit_encoder
from closecall.setup.load import StudyData
from closecall.suite.fit_flags import PROBLEM_WORDS, fits_text, grouped_flags
from closecall.suite.proxies import ProxyReport, detect_proxies
from closecall.suite.solver import (
    COEF_BOUND,
    FitCheck,
    LogitFit,
    check_fit,
    cholesky_lower,
    fit_logit_blocks,
    held_out_state,
    map_threads,
    one_blas_thread,
    quadratic_form,
    restricted_start,
)


@dataclass
class ModelScores:
    """One model's fitted rows and its scores for the cases under review."""

    name: str
    W: np.ndarray  # (m, p+1): [intercept, coef] of each fitted row
    row_of_case: np.ndarray  # (n_scored,) which row of W scored each case; -1 = imported
    objective: np.ndarray  # (m,) penalised total NLL of each row at its optimum
    n_train: np.ndarray  # (m,)
    logit: np.ndarray  # (n_scored,) log-odds of the favourable outcome
    quad: np.ndarray  # (n_scored,) x̃ᵀH⁻¹x̃ (NaN for imported scores)
    oof_logit: np.ndarray  # (n_history,) out-of-fold log-odds on the history (NaN if none)
    full_W: np.ndarray  # (g, p+1) whole-history fit(s): one row, or one per group for split


@dataclass
class SuiteResult:
    encoder: Encoder
    group_levels: list[str]
    X: np.ndarray  # scored cases' design matrix
    group_codes: np.ndarray  # scored cases
    case_ids: np.ndarray
    outcome: np.ndarray  # scored cases: 1/0, -1 unknown
    hist_X: np.ndarray
    hist_y: np.ndarray
    hist_group_codes: np.ndarray
    hist_ids: np.ndarray
    fold: np.ndarray  # history rows: fold index
    models: dict[str, ModelScores]
    proxies: ProxyReport
    masks: dict[str, list[bool]]
    metrics: list[dict[str, Any]]
    notes: list[str] = field(default_factory=list)
    fit_flags: list[dict[str, Any]] = field(default_factory=list)  # see closecall.suite.fit_flags
    #: the deployed scorecard's arrays and metadata (closecall.suite.scorecard_study)
    card_arrays: dict[str, np.ndarray] = field(default_factory=dict)
    card_meta: dict[str, Any] | None = None


def _strata(y: np.ndarray, g: np.ndarray) -> np.ndarray:
    return g.astype(np.int64) * 2 + y


@dataclass
class _Layout:
    """The history sorted by (group, fold): every training or held-out set is a few contiguous
    row blocks of one matrix, so fits read views and never copy a subset of rows."""

    X: np.ndarray  # (n, p) history rows in sorted order, C-contiguous
    y: np.ndarray  # (n,) float64 labels in sorted order
    perm: np.ndarray  # sorted position -> history row
    bounds: np.ndarray  # (G, K + 1): group g, fold k rows are [bounds[g, k], bounds[g, k + 1])

    @classmethod
    def build(
        cls, X: np.ndarray, y: np.ndarray, group: np.ndarray, fold: np.ndarray, G: int, K: int
    ) -> _Layout:
        perm = np.lexsort((fold, group))  # stable: history order within each (group, fold)
        counts = np.bincount(group.astype(np.int64) * K + fold, minlength=G * K)
        bounds = np.zeros((G, K + 1), dtype=np.int64)
        bounds[:, 1:] = np.cumsum(counts).reshape(G, K)
        bounds[1:, 0] = bounds[:-1, K]
        return cls(np.take(X, perm, axis=0), y[perm].astype(np.float64), perm, bounds)

    def segments(self, groups: range | list[int], keep: Callable[[int], bool]) -> list[slice]:
        """Contiguous slices holding the given groups' rows in the folds ``keep`` accepts."""
        out: list[slice] = []
        for g in groups:
            for k in range(self.bounds.shape[1] - 1):
                lo, hi = int(self.bounds[g, k]), int(self.bounds[g, k + 1])
                if not keep(k) or hi == lo:
                    continue
                if out and out[-1].stop == lo:
                    out[-1] = slice(out[-1].start, hi)
                else:
                    out.append(slice(lo, hi))
        return out

    def blocks(self, segs: list[slice]) -> tuple[list[np.ndarray], list[np.ndarray]]:
        return [self.X[s] for s in segs], [self.y[s] for s in segs]

    def fit(
        self, segs: list[slice], mask: np.ndarray, penalty: float, warm: LogitFit | None = None
    ) -> LogitFit:
        Xb, yb = self.blocks(segs)
        return fit_logit_blocks(Xb, yb, mask, penalty, warm)

    def fit_within(
        self,
        parent: LogitFit,
        parent_mask: np.ndarray,
        segs: list[slice],
        mask: np.ndarray,
        penalty: float,
    ) -> LogitFit:
        """Fit on ``segs`` and a subset of the columns of ``parent``, a fit on the same rows,
        starting from the parent's quadratic expansion (see logit.restricted_start)."""
        Xb, yb = self.blocks(segs)
        begin = restricted_start(parent, parent_mask, mask)
        if begin is None:
            return fit_logit_blocks(Xb, yb, mask, penalty, _warm_from(parent, mask))
        return fit_logit_blocks(Xb, yb, mask, penalty, begin[0], hessian_guess=begin[1])

    def refit_without(
        self,
        full: LogitFit,
        train: list[slice],
        held_out: list[slice],
        mask: np.ndarray,
        penalty: float,
        keep_hessian: bool,
    ) -> LogitFit:
        """Fit on ``train`` starting from ``full``, a fit on train + held_out with the same
        columns: the start needs a pass over the held-out rows only."""
        state = full.state()
        start = None
        if state is not None:
            Xh, yh = self.blocks(held_out)
            start = held_out_state(full, state, Xh, yh, mask)
        Xb, yb = self.blocks(train)
        return fit_logit_blocks(
            Xb, yb, mask, penalty, full, start=start, final_hessian=keep_hessian
        )

    def _cells(self, segs: list[slice]) -> list[tuple[int, int]]:
        """The non-empty (group, fold) cells inside ``segs``."""
        return [
            (g, k)
            for g in range(self.bounds.shape[0])
            for k in range(self.bounds.shape[1] - 1)
            if self.bounds[g, k + 1] > self.bounds[g, k]
            and any(s.start <= self.bounds[g, k] and self.bounds[g, k + 1] <= s.stop for s in segs)
        ]

    def nonconstant(self, segs: list[slice], mask: np.ndarray) -> np.ndarray:
        """``mask`` without the columns that are constant over the rows of ``segs``."""
        lo, hi = self._cell_ranges
        cells = self._cells(segs)
        top = np.max([hi[c] for c in cells], axis=0)
        bottom = np.min([lo[c] for c in cells], axis=0)
        return mask & (top > bottom)

    def col_maxabs(self, segs: list[slice]) -> np.ndarray:
        """Largest |value| of each column over the rows of ``segs`` (from the cell ranges)."""
        lo, hi = self._cell_ranges
        cells = self._cells(segs)
        return np.max([np.maximum(np.abs(lo[c]), np.abs(hi[c])) for c in cells], axis=0)

    @cached_property
    def _cell_ranges(
        self,
    ) -> tuple[dict[tuple[int, int], np.ndarray], dict[tuple[int, int], np.ndarray]]:
        """Column minima and maxima of every (group, fold) cell: one pass over the rows."""
        lo: dict[tuple[int, int], np.ndarray] = {}
        hi: dict[tuple[int, int], np.ndarray] = {}
        for g in range(self.bounds.shape[0]):
            for k in range(self.bounds.shape[1] - 1):
                a, b = int(self.bounds[g, k]), int(self.bounds[g, k + 1])
                if b > a:
                    lo[g, k] = self.X[a:b].min(axis=0)
                    hi[g, k] = self.X[a:b].max(axis=0)
        return lo, hi


@dataclass
class FitFlags:
    """Checks every fit of the suite: refuses at penalty 0, collects flags otherwise (the
    flags' keys are described in closecall.suite.fit_flags)."""

    config: StudyConfig
    layout: _Layout
    columns: list[str]
    levels: list[str]
    flags: list[dict[str, Any]] = field(default_factory=list)
    cold_refits: int = 0

    def before(
        self, model: str, segs: list[slice], mask: np.ndarray, group: int | None, fold: int | None
    ) -> None:
        """With penalty 0, refuse before fitting a fit with one outcome or too few rows."""
        if self.config.model.penalty > 0:
            return
        n = int(sum(s.stop - s.start for s in segs))
        favourable = float(sum(float(self.layout.y[s].sum()) for s in segs))
        fc = FitCheck(
            rows=n,
            columns=int(mask.sum()) + 1,
            one_outcome=favourable in (0.0, float(n)),
            separation=None,
            separated_rows=0,
            separating_columns=(),
            large_coefs=(),
            converged=True,
            cold_refit=False,
            how="counts",
        )
        for problem in fc.problems:
            raise self._refusal(self._flag(model, group, fold, None, problem, fc, None, segs))

    def after(
        self,
        model: str,
        fit: LogitFit,
        segs: list[slice],
        mask: np.ndarray,
        group: int | None,
        fold: int | None,
        row: int | None,
    ) -> None:
        """Check a fit; refuse it at penalty 0, flag it otherwise."""
        Xb, yb = self.layout.blocks(segs)
        fc = check_fit(Xb, yb, mask, self.config.model.penalty, fit, self.layout.col_maxabs(segs))
        self.cold_refits += int(fit.cold_refit)
        for problem in fc.problems:
            flag = self._flag(model, group, fold, row, problem, fc, fit, segs)
            if self.config.model.penalty == 0:
                raise self._refusal(flag)
            self.flags.append(flag)

    def _flag(
        self,
        model: str,
        group: int | None,
        fold: int | None,
        row: int | None,
        problem: str,
        fc: FitCheck,
        fit: LogitFit | None,
        segs: list[slice],
    ) -> dict[str, Any]:
        K = self.config.model.folds
        return {
            "model": model,
            "group": None if group is None else self.levels[group],
            "fit": "whole history" if fold is None else f"fold {fold + 1} of {K}",
            "fold": None if fold is None else fold + 1,
            "row": row,
            "problem": problem,
            "detail": self._detail(problem, fc, fit, segs),
            "rows": fc.rows,
            "columns": fc.columns,
        }

    def _names(self, cols: tuple[int, ...], most: int = 4) -> str:
        names = [self.columns[j] for j in cols[:most]]
        more = f" and {len(cols) - most} more" if len(cols) > most else ""
        return ", ".join(names) + more

    def _detail(self, problem: str, fc: FitCheck, fit: LogitFit | None, segs: list[slice]) -> str:
        n = f"{fc.rows:,}"
        by = f"a combination of {self._names(fc.separating_columns)}"
        if not fc.separating_columns:
            by = "the intercept alone"
        if problem == "one_outcome":
            favourable = float(sum(float(self.layout.y[s].sum()) for s in segs)) > 0
            word = "favourable" if favourable else "unfavourable"
            return f"all {n} of its history cases have the {word} outcome"
        if problem == "more_columns_than_rows":
            return f"{fc.columns} columns (intercept included) for {n} history cases"
        if problem == "complete_separation":
            return f"{by} separates the outcomes of all {n} history cases"
        if problem == "quasi_complete_separation":
            return f"{by} predicts {fc.separated_rows:,} of its {n} history cases with certainty"
        if problem == "separation_not_ruled_out":
            return "the separation check did not settle (a linear program ran out of rounds)"
        if problem == "coefficient_past_bound":
            assert fit is not None
            big = ", ".join(f"{self.columns[j]} {fit.coef[j]:+.1f}" for j in fc.large_coefs[:4])
            more = f" and {len(fc.large_coefs) - 4} more" if len(fc.large_coefs) > 4 else ""
            return f"{big}{more} (log-odds per unit; the bound is ±{COEF_BOUND:g})"
        return "the solver's stopping rule was not met where it stopped"

    def _refusal(self, flag: dict[str, Any]) -> UserError:
        where = (
            "the whole history"
            if flag["fold"] is None
            else (f"{flag['fit']} (the history without that fold's cases)")
        )
        if flag["group"] is not None:
            where += f", group '{flag['group']}'"
        return UserError(
            f"{self.config.path}: [model] penalty = 0, but the {flag['model']} model's fit on "
            f"{where} has {PROBLEM_WORDS[flag['problem']]}: {flag['detail']}. Without a "
            "penalty this fit has no unique finite optimum, so its coefficients and scores "
            "would not be valid",
            f"set a penalty above 0 under [model] in {self.config.path.name} (penalty = 1.0 "
            "is the default; see 'penalty' in docs/config.md): the fit is then kept and "
            "flagged in closecall fit and explain",
        )

    def notes(self) -> list[str]:
        """One note per model, group and problem (for the snapshot's notes)."""
        out: list[str] = []
        for entry in grouped_flags(self.flags):
            who = f"{entry['model']} model"
            if entry["group"] is not None:
                who += f", group '{entry['group']}'"
            out.append(
                f"fit flag: {who}: {PROBLEM_WORDS[entry['problem']]} in "
                f"{fits_text(entry['fits'])}; fitted with penalty "
                f"{self.config.model.penalty:g}, but read these scores with care"
            )
        if self.cold_refits:
            out.append(
                f"{self.cold_refits} fit(s) did not pass the convergence check from their warm "
                "start and were fitted again from a cold start"
            )
        return out


def proxy_columns(encoder: Encoder, hist_X: np.ndarray) -> dict[str, tuple[str, np.ndarray]]:
    """Each non-group feature as proxy detection reads it: the standardised (imputed) value
    of a numeric feature, the level code (0 = reference) of a categorical one."""
    raw: dict[str, tuple[str, np.ndarray]] = {}
    for ef in encoder.features:
        if ef.is_group:
            continue
        cols = encoder.source_mask([ef.name])
        if ef.kind == "numeric":
            raw[ef.name] = ("numeric", hist_X[:, np.flatnonzero(cols)[0]])
        else:
            block = hist_X[:, cols]
            codes = np.where(block.any(axis=1), block.argmax(axis=1) + 1, 0)
            raw[ef.name] = ("categorical", codes)
    return raw


def _id_text(column: pd.Series) -> np.ndarray:
    """The case ids as a NumPy text array (pandas converts value by value, holding the GIL,
    so running it beside the fits gains nothing)."""
    return column.astype(str).to_numpy(dtype=str)


def _warm_from(fit: LogitFit, mask: np.ndarray) -> LogitFit:
    """A starting point for a model on fewer columns: a fit's weights on those columns."""
    return LogitFit(fit.intercept, np.where(mask, fit.coef, 0.0), fit.objective, fit.n)


def fit_suite(config: StudyConfig, data: StudyData, progress: Progress = quiet) -> SuiteResult:
    """Fit every model of the suite and score the cases under review.

    The heavy passes stream the rows over a few threads of their own (see logit.py), so BLAS
    is held to one thread per call meanwhile: two layers of threads on a small machine only
    wait on each other.
    """
    with one_blas_thread():
        return _fit_suite(config, data, progress)


def _every(k: int) -> bool:
    """Every fold (a segment filter)."""
    return True


@dataclass
class _Cases:
    """The cases under review: their design rows, groups, ids and outcomes, and which fits
    score them (the fold fits when cross-fitted, else the whole-history fits)."""

    X: np.ndarray
    codes: np.ndarray
    ids: np.ndarray
    outcome: np.ndarray
    fits: dict[str, list[LogitFit]]
    masks: dict[str, list[np.ndarray]]
    row_of_case: dict[str, np.ndarray]


class _SuiteFit:
    """One fit of the suite, step by step (:func:`_fit_suite` runs the steps in order).

    Holds what the steps share: the encoded history, its folds and layout, the fit checks,
    the whole-history fits and masks per model, and the fold fits with the rows each scores.
    """

    def __init__(self, config: StudyConfig, data: StudyData, progress: Progress) -> None:
        self.config, self.data, self.progress = config, data, progress
        self.penalty = config.model.penalty
        self.K = config.model.folds
        progress("encoding", 0, 1)
        self.encoder = fit_encoder(data.history, data.features, data.group_columns)
        self.hist_X, self.unseen_h = self.encoder.transform(data.history)
        self.levels = sorted(set(data.history_group.tolist()))
        self.level_array = np.array(self.levels)
        self.hg = np.searchsorted(self.level_array, data.history_group)
        self.y = data.y.astype(np.int8)
        self.G = len(self.levels)
        self.notes = list(data.notes)
        from closecall.suite.coverage import outside_history, outside_history_notes

        self.notes += outside_history_notes(outside_history(data))  # pending beyond history
        self.nongroup = ~self.encoder.group_mask
        self.cross_fitted = data.pending is None
        self.full: dict[str, list[LogitFit]] = {}
        self.masks: dict[str, list[np.ndarray]] = {}
        self.oof = {name: np.full(len(self.y), np.nan) for name in FITTED_MODELS}
        self.fold_fits: dict[str, list[LogitFit]] = {name: [] for name in FITTED_MODELS}
        self.fold_masks: dict[str, list[np.ndarray]] = {name: [] for name in FITTED_MODELS}
        self.fold_test: dict[str, list[list[slice]]] = {name: [] for name in FITTED_MODELS}

    def make_folds(self) -> None:
        """Stratified folds (group × outcome) and the row layout every fit reads."""
        self.progress("fitting whole-history models", 0, 1)
        y = self.y
        skf = StratifiedKFold(n_splits=self.K, shuffle=True, random_state=self.config.seed)
        self.fold = np.empty(len(y), dtype=np.int16)
        for k, (_, test) in enumerate(skf.split(np.zeros((len(y), 1)), _strata(y, self.hg))):
            self.fold[test] = k
        self.layout = _Layout.build(self.hist_X, y, self.hg, self.fold, self.G, self.K)
        self.checks = FitFlags(self.config, self.layout, self.encoder.columns, self.levels)
        self.all_rows = self.layout.segments(range(self.G), _every)

    def whole_row(self, g: int | None) -> int | None:
        """The row of a model's fitted weights a whole-history fit is (None: it scores no
        case under review, as in a cross-fitted study)."""
        return None if self.cross_fitted else (0 if g is None else g)

    def fit_pooled_and_unaware(self) -> None:
        """The whole-history pooled and unaware fits (the unaware warm-started from pooled)."""
        layout, checks, penalty, nongroup = self.layout, self.checks, self.penalty, self.nongroup
        all_rows, whole = self.all_rows, self.whole_row(None)
        pooled_mask = np.ones_like(self.encoder.group_mask)
        checks.before("pooled", all_rows, pooled_mask, None, None)
        if penalty == 0:  # a group with one outcome value is named before pooled trips on it
            for g in range(self.G):
                segs = layout.segments([g], _every)
                checks.before("split", segs, layout.nonconstant(segs, nongroup), g, None)
        self.full["pooled"] = [layout.fit(all_rows, pooled_mask, penalty)]
        checks.after("pooled", self.full["pooled"][0], all_rows, pooled_mask, None, None, whole)
        self.masks["pooled"] = [pooled_mask]
        checks.before("unaware", all_rows, nongroup, None, None)
        self.full["unaware"] = [
            layout.fit_within(self.full["pooled"][0], pooled_mask, all_rows, nongroup, penalty)
        ]
        checks.after("unaware", self.full["unaware"][0], all_rows, nongroup, None, None, whole)
        self.masks["unaware"] = [nongroup]

    def score_proxies(self) -> ProxyReport:
        """Proxy detection on the history and the unaware fit (run beside other fits)."""
        config, unaware = self.config, self.full["unaware"][0]
        return detect_proxies(
            raw_columns=proxy_columns(self.encoder, self.hist_X),
            X=self.hist_X,
            unaware_coef=unaware.coef,
            column_source=self.encoder.column_source,
            group_codes=self.hg,
            n_levels=self.G,
            association_threshold=config.proxies.association,
            influence_threshold=config.proxies.influence,
            extra=config.proxies.extra,
            never=config.proxies.never,
            seed=config.seed,
            nongroup_mask=self.nongroup,
            y=self.y,
            unaware_intercept=unaware.intercept,
            penalty=self.penalty,
        )

    def fit_split(self) -> None:
        """One whole-history fit per group, on the columns not constant within it."""
        layout, checks = self.layout, self.checks
        self.full["split"], self.masks["split"] = [], []
        for g in range(self.G):
            segs = layout.segments([g], _every)
            m = layout.nonconstant(segs, self.nongroup)
            checks.before("split", segs, m, g, None)
            start = _warm_from(self.full["unaware"][0], m)
            self.full["split"].append(layout.fit(segs, m, self.penalty, start))
            checks.after("split", self.full["split"][g], segs, m, g, None, self.whole_row(g))
            self.masks["split"].append(m)

    def cross_fit(self, name: str, k: int) -> None:
        """Fit fold k of a model on the other folds and score fold k with it (with one
        labelled file the fold fits score the cases: they keep their Hessians)."""
        layout, checks, G = self.layout, self.checks, self.G

        def _train(j: int) -> bool:
            return j != k

        def _test(j: int) -> bool:
            return j == k

        for g in range(G) if name == "split" else [None]:
            rows = range(G) if g is None else [g]
            train, test = layout.segments(rows, _train), layout.segments(rows, _test)
            if g is None:
                m = self.masks[name][0]
                start = self.full[name][0]
            else:
                m = layout.nonconstant(train, self.nongroup)
                start = self.full["split"][g]
            checks.before(name, train, m, g, k)
            if np.array_equal(m, self.masks[name][0 if g is None else g]):
                fit = layout.refit_without(start, train, test, m, self.penalty, self.cross_fitted)
            else:  # a column is constant outside this fold: a model on fewer columns
                Xb, yb = layout.blocks(train)
                fit = fit_logit_blocks(
                    Xb, yb, m, self.penalty, start, final_hessian=self.cross_fitted
                )
            row = (k * G + (g or 0) if g is not None else k) if self.cross_fitted else None
            checks.after(name, fit, train, m, g, k, row)
            for s in test:
                self.oof[name][layout.perm[s]] = fit.logit(layout.X[s])
            self.fold_fits[name].append(fit)
            self.fold_masks[name].append(m)
            self.fold_test[name].append(test)

    def fit_proxy_free(self, proxies: ProxyReport) -> None:
        """The proxy-free model (warm-started from unaware) and its folds."""
        checks, all_rows = self.checks, self.all_rows
        mask = self.nongroup & ~self.encoder.source_mask(proxies.proxies)
        if not mask.any():
            self.notes.append(
                "every non-group feature is a proxy: the proxy-free model is intercept-only"
            )
        checks.before("proxy_free", all_rows, mask, None, None)
        self.full["proxy_free"] = [
            self.layout.fit_within(
                self.full["unaware"][0], self.nongroup, all_rows, mask, self.penalty
            )
        ]
        whole = self.whole_row(None)
        checks.after("proxy_free", self.full["proxy_free"][0], all_rows, mask, None, None, whole)
        self.masks["proxy_free"] = [mask]
        for k in range(self.K):
            self.cross_fit("proxy_free", k)
        self.progress("cross-fitting", self.K, self.K)

    def cases_under_review(self) -> _Cases:
        """The history itself when cross-fitted, else the pending file (encoded here)."""
        data, G = self.data, self.G
        self.hist_ids = _id_text(data.history[self.config.data.id])  # once: ids when cross-fitted
        if data.pending is None:
            fold = self.fold.astype(np.int32)
            cases = _Cases(
                X=self.hist_X,
                codes=self.hg,
                ids=self.hist_ids,
                outcome=self.y.astype(np.int8),
                fits=self.fold_fits,
                masks=self.fold_masks,
                row_of_case={
                    name: (fold * G + self.hg if name == "split" else fold)
                    for name in FITTED_MODELS
                },
            )
        else:
            X, unseen_p = self.encoder.transform(data.pending)
            for col, count in unseen_p.items():
                self.notes.append(
                    f"{count} pending case(s) have a '{col}' value the history lacks; "
                    "coded as the reference level"
                )
            assert data.pending_group is not None
            codes = np.searchsorted(self.level_array, data.pending_group)
            ids = _id_text(data.pending[self.config.data.id])
            row_of_case = {name: np.zeros(len(ids), dtype=np.int32) for name in FITTED_MODELS}
            row_of_case["split"] = codes.astype(np.int32)
            cases = _Cases(
                X=X,
                codes=codes,
                ids=ids,
                outcome=np.full(len(ids), -1, dtype=np.int8),
                fits=self.full,
                masks=self.masks,
                row_of_case=row_of_case,
            )
        for col, count in self.unseen_h.items():
            self.notes.append(f"{count} history case(s) have an unseen '{col}' value")
        return cases

    def model_scores(self, cases: _Cases) -> dict[str, ModelScores]:
        """Each fitted model's log-odds and x̃ᵀH⁻¹x̃ for every case under review."""
        self.progress("bands", 0, 1)
        layout, n = self.layout, len(cases.ids)
        models: dict[str, ModelScores] = {}
        for name in FITTED_MODELS:
            fits = cases.fits[name]
            rc = cases.row_of_case[name]
            lg = np.empty(n)
            quad = np.empty(n)
            for r, f in enumerate(fits):
                assert f.hessian is not None  # the fit's Hessian at its optimum
                chol = cholesky_lower(f.hessian)
                if self.cross_fitted:  # the held-out fold's rows, read in place
                    for s in self.fold_test[name][r]:
                        rows = layout.perm[s]
                        lg[rows] = f.logit(layout.X[s])
                        quad[rows] = quadratic_form(layout.X[s], cases.masks[name][r], chol)
                    continue
                sel = np.flatnonzero(rc == r)
                if len(sel) == 0:
                    continue
                Xs = cases.X[sel]
                lg[sel] = f.logit(Xs)
                quad[sel] = quadratic_form(Xs, cases.masks[name][r], chol)
            models[name] = ModelScores(
                name=name,
                W=np.array([[f.intercept, *f.coef] for f in fits]),
                row_of_case=rc,
                objective=np.array([f.objective for f in fits]),
                n_train=np.array([f.n for f in fits]),
                logit=lg,
                quad=quad,
                oof_logit=self.oof[name],
                full_W=np.array([[f.intercept, *f.coef] for f in self.full[name]]),
            )
        return models

    def deployed_scores(
        self, cases: _Cases, models: dict[str, ModelScores]
    ) -> tuple[dict[str, np.ndarray], dict[str, Any] | None]:
        """The deployed model's imported scores or scorecard, added to ``models``; the card's
        arrays and metadata for the snapshot."""
        data, n, p1 = self.data, len(cases.ids), cases.X.shape[1] + 1
        if data.deployed_probability is not None:
            dl = logit(data.deployed_probability)
            oof = dl if self.cross_fitted else np.full(len(self.y), np.nan)
            models["deployed"] = _imported_scores(dl, oof, n, p1)
        if self.config.deployed.scorecard is None:
            return {}, None
        from closecall.suite.scorecard_study import score_card  # the model in use as a card

        self.progress("scoring the deployed scorecard", 0, 1)
        card = score_card(self.config, data, self.fold)
        self.notes += card.notes
        if card.logit is not None:
            models["deployed"] = _imported_scores(card.logit, card.oof_logit, n, p1)
        return card.arrays, card.meta

    def result(
        self,
        cases: _Cases,
        models: dict[str, ModelScores],
        proxies: ProxyReport,
        card: tuple[dict[str, np.ndarray], dict[str, Any] | None],
    ) -> SuiteResult:
        """The suite, with held-out metrics of every model."""
        self.progress("held-out metrics", 0, 1)
        metrics = held_out_metrics(models, self.y, self.hg, self.levels, self.config)
        return SuiteResult(
            encoder=self.encoder,
            group_levels=self.levels,
            X=cases.X,
            group_codes=cases.codes.astype(np.int32),
            case_ids=cases.ids,
            outcome=cases.outcome,
            hist_X=self.hist_X,
            hist_y=self.y,
            hist_group_codes=self.hg.astype(np.int32),
            hist_ids=self.hist_ids,
            fold=self.fold,
            models=models,
            proxies=proxies,
            masks={k: [bool(b) for b in v[0]] for k, v in self.masks.items() if k != "split"},
            metrics=metrics,
            notes=self.notes + self.checks.notes(),
            fit_flags=self.checks.flags,
            card_arrays=card[0],
            card_meta=card[1],
        )


def _imported_scores(lg: np.ndarray, oof: np.ndarray, n: int, p1: int) -> ModelScores:
    """A model scored outside the suite (imported scores or a scorecard): no fitted rows."""
    return ModelScores(
        name="deployed",
        W=np.zeros((0, p1)),
        row_of_case=np.full(n, -1, dtype=np.int32),
        objective=np.zeros(0),
        n_train=np.zeros(0),
        logit=lg,
        quad=np.full(n, np.nan),
        oof_logit=oof,
        full_W=np.zeros((0, p1)),
    )


def _fit_suite(config: StudyConfig, data: StudyData, progress: Progress) -> SuiteResult:
    """The suite's steps in order: whole-history fits, then (beside proxy detection, which
    mostly keeps one core busy) split and the folds of pooled, unaware and split; the
    proxy-free model once the proxies are known; then the scores of the cases under review."""
    run = _SuiteFit(config, data, progress)
    run.make_folds()
    run.fit_pooled_and_unaware()
    progress("scoring proxies", 0, 1)
    with ThreadPoolExecutor(max_workers=1, thread_name_prefix="closecall-proxies") as side:
        scoring = side.submit(run.score_proxies)
        run.fit_split()
        for k in range(run.K):
            progress("cross-fitting", k, run.K)
            for name in ("pooled", "unaware", "split"):
                run.cross_fit(name, k)
        proxies = scoring.result()
    run.fit_proxy_free(proxies)
    cases = run.cases_under_review()
    models = run.model_scores(cases)
    card = run.deployed_scores(cases, models)
    return run.result(cases, models, proxies, card)


def auc_sorted(scores: np.ndarray, labels: np.ndarray) -> float:
    """Area under the ROC curve of ascending ``scores`` with 0/1 ``labels``.

    The Mann–Whitney form with tied scores at their average rank, which equals the trapezoidal
    ROC area scikit-learn's ``roc_auc_score`` computes (ties count one half).

    References
    ----------
    Hanley & McNeil, "The meaning and use of the area under a receiver operating
    characteristic (ROC) curve", Radiology 143 (1982) 29–36.
    """
    n = len(scores)
    starts = np.flatnonzero(np.r_[True, scores[1:] != scores[:-1]])
    ends = np.r_[starts[1:], n]
    ranks = np.repeat((starts + ends + 1) / 2.0, ends - starts)
    n1 = int(labels.sum())
    n0 = n - n1
    return float((ranks[labels == 1].sum() - n1 * (n1 + 1) / 2.0) / (n1 * n0))


def held_out_metrics(
    models: dict[str, ModelScores],
    y: np.ndarray,
    groups: np.ndarray,
    levels: list[str],
    config: StudyConfig,
) -> list[dict[str, Any]]:
    """Per group and overall: held-out log-loss, AUC, error rate per lens, calibration.

    Per-case quantities are computed once per model and summed per group with ``bincount``;
    one sort per model serves the AUC of every group. Models run on the worker threads.
    """
    per_model = map_threads(
        lambda ms: _model_metrics(ms, y, groups, levels, config), list(models.values())
    )
    return [row for rows in per_model for row in rows]


def _model_metrics(
    ms: ModelScores, y: np.ndarray, groups: np.ndarray, levels: list[str], config: StudyConfig
) -> list[dict[str, Any]]:
    rows: list[dict[str, Any]] = []
    G = len(levels)
    eta = ms.oof_logit
    valid = ~np.isnan(eta)
    if not valid.any():
        return rows
    e, yy, gg = (eta, y, groups) if valid.all() else (eta[valid], y[valid], groups[valid])
    gg = gg.astype(np.int64)
    yf = yy.astype(np.float64)
    p = expit(e)
    per_case: dict[str, np.ndarray] = {
        "loss": np.maximum(e, 0.0) + np.log1p(np.exp(-np.abs(e))) - yf * e,
        "y": yf,
        "p": p,
    }
    for lens in config.lenses:
        per_case[lens.name] = ((p > lens.threshold) != (yy == 1)).astype(np.float64)
    by_group = {k: np.bincount(gg, weights=v, minlength=G) for k, v in per_case.items()}
    cases = np.bincount(gg, minlength=G)
    order = np.argsort(e)
    e_sorted, y_sorted, g_sorted = e[order], yy[order], gg[order]
    for gi, label in [*enumerate(levels), (-1, "all")]:
        n = int(cases[gi]) if gi >= 0 else len(e)
        if n == 0:
            continue
        total = {
            k: float(v[gi]) if gi >= 0 else float(per_case[k].sum()) for k, v in by_group.items()
        }
        auc = None
        if 0 < total["y"] < n:
            if gi < 0:
                auc = auc_sorted(e_sorted, y_sorted)
            else:
                here = g_sorted == gi
                auc = auc_sorted(e_sorted[here], y_sorted[here])
        row: dict[str, Any] = {
            "model": ms.name,
            "group": label,
            "cases": n,
            "log_loss": total["loss"] / n,
            "auc": auc,
            "calibration_in_the_large": total["y"] / n - total["p"] / n,
        }
        for lens in config.lenses:
            row[f"error_rate[{lens.name}]"] = total[lens.name] / n
        rows.append(row)
    return rows
