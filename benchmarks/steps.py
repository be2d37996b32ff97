"""The benchmark steps. Each runs in its own process: ``python -m benchmarks.steps NAME PARAMS``
prints one JSON line of numbers (seconds end in ``_s``; ``peak_rss_mb`` is the process's peak).

Every step reads the demo study written by the runner (``params["config"]``); the steps after
``fit_study`` read its cached snapshot.
"""

from __future__ import annotations

import importlib
import json
import shutil
import sqlite3
import sys
import tempfile
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np

from benchmarks.measure import Clock, Result, peak_rss_mb

STEPS: dict[str, Callable[[dict[str, Any]], Result]] = {}


def step(name: str) -> Callable[[Callable[[dict[str, Any]], Result]], Callable[..., Result]]:
    def register(fn: Callable[[dict[str, Any]], Result]) -> Callable[..., Result]:
        STEPS[name] = fn
        return fn

    return register


def _optional(module: str) -> Any | None:
    """An analysis module if it exists yet (other work lands while the benchmark grows)."""
    try:
        return importlib.import_module(module)
    except ImportError:
        return None


def _skipped(why: str) -> Result:
    return {"skipped": 1.0, "note": why}


# ---------------------------------------------------------------------------- data and fit


@step("load_closecall")
def load_closecall(p: dict[str, Any]) -> Result:
    """closecall's load + validate + encode of history and pending files."""
    from closecall.setup.config import load_config
    from closecall.setup.encode import fit_encoder
    from closecall.setup.load import load_study_data

    cfg = load_config(p["config"])
    with Clock() as c:
        data = load_study_data(cfg.data)
        enc = fit_encoder(data.history, data.features, data.group_columns)
        hist_X, _ = enc.transform(data.history)
        pending_rows = 0
        if data.pending is not None:
            enc.transform(data.pending)
            pending_rows = len(data.pending)
    return {
        "time_s": c.wall,
        "cpu_s": c.cpu,
        "rows": float(len(data.history) + pending_rows),
        "design_columns": float(hist_X.shape[1]),
    }


@step("load_pandas")
def load_pandas(p: dict[str, Any]) -> Result:
    """Baseline: pandas read_csv of the same files, nothing else."""
    import pandas as pd

    from closecall.setup.config import load_config

    cfg = load_config(p["config"])
    with Clock() as c:
        rows = len(pd.read_csv(cfg.data.history))
        if cfg.data.pending is not None:
            rows += len(pd.read_csv(cfg.data.pending))
    return {"time_s": c.wall, "cpu_s": c.cpu, "rows": float(rows)}


@step("suite")
def suite(p: dict[str, Any]) -> Result:
    """fit_suite on loaded data: every model, whole history and every fold, bands' quad,
    proxies and held-out metrics; with the time of each of its stages."""
    import time

    from closecall.setup.config import load_config
    from closecall.setup.load import load_study_data
    from closecall.suite.fit import fit_suite

    cfg = load_config(p["config"])
    data = load_study_data(cfg.data)
    marks: list[tuple[str, float]] = []

    def progress(label: str, done: int, total: int) -> None:
        if not marks or marks[-1][0] != label:
            marks.append((label, time.perf_counter()))

    with Clock() as c:
        fit_suite(cfg, data, progress)
    end = time.perf_counter()
    out: Result = {"time_s": c.wall, "cpu_s": c.cpu}
    for (label, t), nxt in zip(marks, [*[m[1] for m in marks[1:]], end], strict=True):
        out[f"stage {label}_s"] = out.get(f"stage {label}_s", 0.0) + nxt - t
    return out


def _encoded(config: str) -> tuple[Any, Any, np.ndarray, np.ndarray]:
    from closecall.setup.config import load_config
    from closecall.setup.encode import fit_encoder
    from closecall.setup.load import load_study_data

    cfg = load_config(config)
    data = load_study_data(cfg.data)
    enc = fit_encoder(data.history, data.features, data.group_columns)
    X, _ = enc.transform(data.history)
    return cfg, data, X, np.asarray(data.y)


@step("plain_fit")
def plain_fit(p: dict[str, Any]) -> Result:
    """Baseline: one plain scikit-learn LogisticRegression() fit of the pooled model on the
    same encoded matrix (defaults: lbfgs, C = 1, which is the demo's penalty 1)."""
    from sklearn.linear_model import LogisticRegression

    _, _, X, y = _encoded(p["config"])
    with Clock() as c:
        clf = LogisticRegression().fit(X, y)
    return {"time_s": c.wall, "cpu_s": c.cpu, "iterations": float(clf.n_iter_[0])}


@step("fit_study")
def fit_study_step(p: dict[str, Any]) -> Result:
    """What `closecall fit` does: hash the files, load, fit the suite, write the snapshot."""
    from closecall.setup.config import load_config
    from closecall.suite.opening import fit_study
    from closecall.suite.snapshot import snapshot_dir, snapshot_id

    cfg = load_config(p["config"])
    folder = snapshot_dir(cfg, snapshot_id(cfg))
    shutil.rmtree(folder, ignore_errors=True)
    with Clock() as c:
        study = fit_study(cfg, refit=True)
    size = sum(f.stat().st_size for f in folder.iterdir())
    return {
        "time_s": c.wall,
        "cpu_s": c.cpu,
        "snapshot_mb": size / 2**20,
        "cases": float(study.snapshot.n_cases),
    }


@step("open_snapshot")
def open_snapshot(p: dict[str, Any]) -> Result:
    """Open the study with its cached (memory-mapped) snapshot."""
    from closecall.suite.opening import open_study

    with Clock() as c:
        study = open_study(p["config"])
    assert not study.fitted_now
    return {"time_s": c.wall, "cpu_s": c.cpu}


# ---------------------------------------------------------------------------- bands


@step("bands")
def bands_step(p: dict[str, Any]) -> Result:
    """Closed-form bands for every case: from the snapshot's stored x̃ᵀH⁻¹x̃ (what the queue
    and the TUI use), and from scratch for the pooled model (Hessian over the history,
    Cholesky, quadratic form of every case) to show the whole cost of the closed form."""
    multiplicity = _optional("closecall.analysis.multiplicity")
    if multiplicity is None:
        return _skipped("closecall.analysis.multiplicity not there yet")
    from closecall.suite.opening import open_study
    from closecall.suite.solver import LogitFit, cholesky_lower, hessian, quadratic_form

    study = open_study(p["config"])
    snap = study.snapshot
    fitted = [m for m in snap.model_names if len(snap.weights(m)[0])]
    with Clock() as c:
        ambiguous = 0
        for model in fitted:
            ambiguous += int(multiplicity.bands(snap, model).ambiguous.sum())
    W, _ = snap.weights("pooled")
    if len(W) != 1:
        return {"snapshot_all_models_s": c.wall, "note": "cross-fitted: from-scratch skipped"}
    penalty = float(snap.meta["penalty"])
    hist_X = np.asarray(snap.hist_X)
    X = np.asarray(snap.X)
    mask = np.ones(hist_X.shape[1], dtype=bool)
    with Clock() as s:
        fit = LogitFit(float(W[0, 0]), np.asarray(W[0, 1:]), 0.0, len(hist_X))
        chol = cholesky_lower(hessian(hist_X, mask, fit, penalty))
        quad = quadratic_form(X, mask, chol)
        half = np.sqrt(2 * multiplicity.UNCERTAINTY_EPSILON * quad)
    stored = np.asarray(snap.quad("pooled"))
    return {
        "snapshot_all_models_s": c.wall,
        "models": float(len(fitted)),
        "cases": float(snap.n_cases),
        "ambiguous_case_models": float(ambiguous),
        "scratch_pooled_s": s.wall,
        "scratch_vs_stored_max_rel_diff": float(np.max(np.abs(quad - stored) / stored)),
        "scratch_half_width_median": float(np.median(half)),
    }


@step("bootstrap")
def bootstrap(p: dict[str, Any]) -> Result:
    """Baseline: bootstrap refits of the pooled model (scikit-learn newton-cholesky, tol 1e-8).

    Cost: ``timed`` refits on resamples of the whole history, scaled to ``refits``.
    Agreement: ``refits`` refits on resamples of a random ``agree_rows`` history subsample,
    against the closed form of the same subsample's fit, on ``agree_cases`` pending cases: the
    bootstrap standard deviation of each margin over sqrt(x̃ᵀH⁻¹x̃), and whether the 95 % Wald
    band and the bootstrap percentile interval agree on straddling zero.
    """
    from scipy.special import logit as logit_fn
    from sklearn.linear_model import LogisticRegression

    from closecall.suite.opening import open_study
    from closecall.suite.solver import cholesky_lower, fit_logit, quadratic_form

    snap = open_study(p["config"]).snapshot
    penalty = float(snap.meta["penalty"])
    C = 1.0 / penalty if penalty > 0 else np.inf
    hist_X, y = np.asarray(snap.hist_X), np.asarray(snap.hist_y)
    X = np.asarray(snap.X)
    t = float(logit_fn(snap.lenses[0].threshold))
    rng = np.random.default_rng(int(p.get("seed", 11)))
    refits, timed = int(p["refits"]), int(p["timed"])
    n = len(y)

    def refit(Xr: np.ndarray, yr: np.ndarray) -> LogisticRegression:
        clf = LogisticRegression(C=C, solver="newton-cholesky", tol=1e-8, max_iter=100)
        return clf.fit(Xr, yr)

    with Clock() as c:
        for _ in range(timed):
            idx = rng.integers(0, n, n)
            refit(hist_X[idx], y[idx])
    per_refit = c.wall / timed

    m = min(int(p["agree_rows"]), n)
    sub = rng.choice(n, m, replace=False)
    Xs, ys = hist_X[sub], y[sub]
    cases = rng.choice(len(X), min(int(p["agree_cases"]), len(X)), replace=False)
    Xc = X[cases]
    mask = np.ones(hist_X.shape[1], dtype=bool)
    with Clock() as closed:
        fit = fit_logit(Xs, ys, mask, penalty)
        assert fit.hessian is not None
        se = np.sqrt(quadratic_form(Xc, mask, cholesky_lower(fit.hessian)))
    margin = fit.logit(Xc) - t
    draws = np.empty((refits, len(cases)))
    with Clock() as boot:
        for b in range(refits):
            idx = rng.integers(0, m, m)
            clf = refit(Xs[idx], ys[idx])
            draws[b] = clf.intercept_[0] + Xc @ clf.coef_[0] - t
    sd = draws.std(axis=0, ddof=1)
    lo, hi = np.percentile(draws, [2.5, 97.5], axis=0)
    ratio = sd / se
    wald = np.abs(margin) <= 1.96 * se
    pct = (lo <= 0) & (hi >= 0)
    return {
        "history_rows": float(n),
        "refit_s": per_refit,
        "refits_timed": float(timed),
        "bootstrap_estimated_s": per_refit * refits,
        "refits": float(refits),
        "agree_rows": float(m),
        "agree_cases": float(len(cases)),
        "agree_closed_form_s": closed.wall,
        "agree_bootstrap_s": boot.wall,
        "sd_over_se_median": float(np.median(ratio)),
        "sd_over_se_p05": float(np.percentile(ratio, 5)),
        "sd_over_se_p95": float(np.percentile(ratio, 95)),
        "se_sd_correlation": float(np.corrcoef(se, sd)[0, 1]),
        "straddle_agreement": float(np.mean(wald == pct)),
        "straddle_wald": float(wald.sum()),
        "straddle_bootstrap": float(pct.sum()),
        "straddle_both": float((wald & pct).sum()),
    }


# ---------------------------------------------------------------------------- analysis


@step("proxies")
def proxies_step(p: dict[str, Any]) -> Result:
    """Proxy detection as the suite runs it, on the whole history."""
    from closecall.setup.encode import fit_encoder
    from closecall.suite.fit import proxy_columns
    from closecall.suite.proxies import detect_proxies
    from closecall.suite.solver import fit_logit, one_blas_thread

    cfg, data, X, y = _encoded(p["config"])
    enc = fit_encoder(data.history, data.features, data.group_columns)
    levels = np.array(sorted(set(data.history_group.tolist())))
    hg = np.searchsorted(levels, data.history_group)
    nongroup = ~enc.group_mask
    unaware = fit_logit(X, y, nongroup, cfg.model.penalty)
    # fit_suite runs proxy detection with BLAS held to one thread (one_blas_thread); with the
    # default two, scikit-learn's group classifier spins both cores on a shared machine
    with one_blas_thread(), Clock() as c:
        report = detect_proxies(
            raw_columns=proxy_columns(enc, X),
            X=X,
            unaware_coef=unaware.coef,
            column_source=enc.column_source,
            group_codes=hg,
            n_levels=len(levels),
            association_threshold=cfg.proxies.association,
            influence_threshold=cfg.proxies.influence,
            extra=cfg.proxies.extra,
            never=cfg.proxies.never,
            seed=cfg.seed,
            nongroup_mask=nongroup,
            y=y,
            unaware_intercept=unaware.intercept,
            penalty=cfg.model.penalty,
        )
    return {"time_s": c.wall, "cpu_s": c.cpu, "proxies": float(len(report.proxies))}


@step("contributions")
def contributions_step(p: dict[str, Any]) -> Result:
    """Contributions w_j (x_j − E x_j) and dependence of every case (pooled model)."""
    dep = _optional("closecall.analysis.dependence")
    if dep is None:
        return _skipped("closecall.analysis.dependence not there yet")
    from closecall.suite.opening import open_study

    snap = open_study(p["config"]).snapshot
    with Clock() as c:
        d = dep.dependence(snap, "pooled")
    return {"time_s": c.wall, "cpu_s": c.cpu, "cases": float(len(d.margin))}


@step("scorecard")
def scorecard_step(p: dict[str, Any]) -> Result:
    """The deployed scorecard over every case (history and pending): total points and the
    points per feature, from the loaded frames. Baseline: the same totals with plain pandas
    (pd.cut per binned feature, Series.map per categorical one)."""
    import pandas as pd

    from closecall.setup.config import load_config
    from closecall.setup.load import load_study_data
    from closecall.suite.scorecard import card_contributions, card_points, load_scorecard

    cfg = load_config(p["config"])
    if cfg.deployed.scorecard is None:
        return _skipped("the study has no [deployed] scorecard")
    data = load_study_data(cfg.data)
    frames = [data.history] if data.pending is None else [data.history, data.pending]
    frame = pd.concat(frames, ignore_index=True)
    card = load_scorecard(cfg.deployed.scorecard, [str(c) for c in frame.columns])
    with Clock() as c:
        total = card_points(card, frame)
    with Clock() as m:
        card_contributions(card, frame)
    with Clock() as b:
        plain = np.full(len(frame), card.intercept)
        for feat in card.features:
            rows = card.rows_of(feat)
            bins = sorted((r for r in rows if r.level is None), key=lambda r: r.low)
            levels = {r.level: r.points for r in rows if r.level is not None}
            col = frame[feat]
            if bins:
                edges = [bins[0].low, *(r.high for r in bins)]
                at = pd.cut(col, edges, right=False, labels=False).to_numpy()
                pts = np.array([r.points for r in bins])
                miss = col.isna().to_numpy()
                plain += np.where(
                    miss, levels.get("(missing)", 0.0), pts[np.nan_to_num(at).astype(int)]
                )
            else:
                plain += col.astype(str).map(levels).fillna(levels.get("*", 0.0)).to_numpy(float)
    assert np.allclose(plain, total)
    return {
        "time_s": c.wall,
        "cpu_s": c.cpu,
        "contributions_s": m.wall,
        "pandas_s": b.wall,
        "cases": float(len(frame)),
    }


@step("counterparts")
def counterparts_step(p: dict[str, Any]) -> Result:
    """Every case carried into every other group (group swapped, proxies mapped)."""
    cp = _optional("closecall.analysis.counterparts")
    if cp is None:
        return _skipped("closecall.analysis.counterparts not there yet")
    from closecall.suite.opening import open_study

    snap = open_study(p["config"]).snapshot
    with Clock() as c:
        cp.counterparts(snap)
    return {"time_s": c.wall, "cpu_s": c.cpu, "cases": float(snap.n_cases)}


def _queue_rows(study: Any, limit: int) -> np.ndarray:
    from closecall.review.queue import build_queue

    q = build_queue(study.snapshot, band=study.config.review.band)
    return np.asarray(q.order[:limit])


@step("similar")
def similar_step(p: dict[str, Any]) -> Result:
    """The k = 5 nearest history cases: of one close call, and of the first 1,000."""
    nb = _optional("closecall.analysis.neighbours")
    if nb is None:
        return _skipped("closecall.analysis.neighbours not there yet")
    from closecall.suite.opening import open_study

    study = open_study(p["config"])
    rows = _queue_rows(study, 1000)
    with Clock() as one:
        nb.nearest_history(study.snapshot, rows[:1], 5)
    with Clock() as many:
        nb.nearest_history(study.snapshot, rows, 5)
    return {"one_case_s": one.wall, "cases_1000_s": many.wall, "queried": float(len(rows))}


@step("explain")
def explain_step(p: dict[str, Any]) -> Result:
    """explain_case for the top close call: the case view's whole analysis."""
    ex = _optional("closecall.analysis.explain")
    if ex is None:
        return _skipped("closecall.analysis.explain not there yet")
    from closecall.suite.opening import open_study

    study = open_study(p["config"])
    rows = _queue_rows(study, 2)
    ids = np.asarray(study.snapshot.case_ids)
    with Clock() as first:
        ex.explain_case(study, str(ids[rows[0]]))
    with Clock() as second:
        ex.explain_case(study, str(ids[rows[1]]))
    return {"first_case_s": first.wall, "next_case_s": second.wall}


@step("queue")
def queue_step(p: dict[str, Any]) -> Result:
    """Ranking and filtering the close-call queue over every case."""
    from closecall.review.queue import build_queue, queue_rows
    from closecall.suite.opening import open_study

    study = open_study(p["config"])
    snap = study.snapshot
    band = study.config.review.band
    options = {"config": study.config}
    out: Result = {}
    variants: dict[str, dict[str, Any]] = {
        "rank": {},
        "group": {"group": snap.group_levels[-1]},
        "flips": {"flips_only": True},
        "id_prefix": {"id_prefix": str(np.asarray(snap.case_ids)[0])[:5]},
        "all_by_margin": {"close_only": False, "sort": "margin"},
        "ambiguous": {"ambiguous_only": True},
        "sort_ambiguity": {"sort": "ambiguity"},
        "sort_dependence": {"sort": "dependence"},
        "rests_on_proxies": {"rests_on_part": "proxies"},
    }
    for name, kwargs in variants.items():
        with Clock() as c:
            q = build_queue(snap, band=band, options=options, **kwargs)
        out[f"{name}_s"] = c.wall
        out[f"{name}_listed"] = float(len(q))
    q = build_queue(snap, band=band)
    with Clock() as c:
        queue_rows(snap, q, 0, 50)
    out["rows_50_s"] = c.wall
    # the default request of `closecall queue` and the review screen: triage order, whose
    # tiers read the rests-on and ambiguous filters (computed here from scratch)
    from closecall.review.query import QueueQuery, answer_queue

    no_reviews = (np.zeros(snap.n_cases, dtype=np.int8), {})
    with Clock() as c:
        answer = answer_queue(open_study(p["config"]), QueueQuery(), reviews=no_reviews)
    out["triage_s"] = c.wall
    out["triage_listed"] = float(len(answer.queue))
    return out


@step("whatif")
def whatif_step(p: dict[str, Any]) -> Result:
    """What-if figures over every case (changed decisions by group, rates and AIR, held-out
    error rates) for a model, a lens, a group threshold and, with a card, a dropped weight;
    the queue narrowed to the changed cases. Baseline: a pandas crosstab of group × the two
    decision columns (the counts alone)."""
    import pandas as pd
    from scipy.special import logit

    from closecall.analysis.whatif import Policy, baseline_model, policy_choices
    from closecall.analysis.whatif_figures import whatif
    from closecall.review.query import QueueQuery, answer_queue
    from closecall.suite.opening import open_study

    study = open_study(p["config"])
    snap = study.snapshot
    policies = {
        "model": Policy(model="unaware"),
        "lens": Policy(lens=snap.lenses[-1].name),
        "group_threshold": Policy(group_thresholds=((snap.group_levels[-1], 0.4),)),
    }
    drops = [c for c in policy_choices(study) if c.drop]
    if drops:
        policies["drop_weight"] = drops[0]
    out: Result = {"cases": float(snap.n_cases)}
    for name, policy in policies.items():
        with Clock() as c:
            fig = whatif(study, policy)
        out[f"{name}_s"] = c.wall
        out[f"{name}_changed"] = float(fig.total.changed)
    with Clock() as c:
        answer = answer_queue(study, QueueQuery(changed_by="model=unaware"))
    out["queue_changed_by_s"] = c.wall
    out["queue_changed_by_listed"] = float(len(answer.queue.order))
    t = float(logit(snap.lenses[0].threshold))
    before = np.asarray(snap.logit(baseline_model(snap))) > t
    after = np.asarray(snap.logit("unaware")) > t
    with Clock() as c:
        frame = pd.DataFrame({"group": snap.group_labels, "before": before, "after": after})
        pd.crosstab(frame["group"], [frame["before"], frame["after"]])
    out["pandas_crosstab_s"] = c.wall
    return out


# ---------------------------------------------------------------------------- ledger


def _content(i: int) -> Any:
    from closecall.review.ledger import EntryContent

    margin = ((i * 7919) % 2000 - 1000) / 1000.0
    return EntryContent(
        reviewer=f"reviewer{i % 7}",
        case_id=f"HR-{i:07d}",
        snapshot_id="0123456789abcdef",
        current_snapshot_id=None,
        reference_model="pooled",
        reference_decision="favourable" if margin > 0 else "unfavourable",
        reference_margin=margin,
        decisions={m: {"decision": "favourable", "margin": margin} for m in ("pooled", "split")},
        action="uphold" if i % 3 else "override-favourable",
        reason=None if i % 3 else "local knowledge",
        note=f"benchmark entry {i}: checked the file and the quotes",
    )


@step("ledger")
def ledger_step(p: dict[str, Any]) -> Result:
    """Durable appends (WAL, synchronous=FULL, one transaction per entry, hash chained) and
    verify of a long ledger, against plain SQLite inserts of the same rows."""
    ledger_mod = _optional("closecall.review.ledger")
    if ledger_mod is None:
        return _skipped("closecall.review.ledger not there yet")
    from closecall.review.ledger.entry import (
        ENTRY_FORMAT,
        HASHED_FIELDS,
        canonical_json,
        entry_hash,
    )

    appends, long = int(p["appends"]), int(p["verify_entries"])
    columns = (*HASHED_FIELDS, "hash")
    out: Result = {}
    with tempfile.TemporaryDirectory(prefix="cc-bench-ledger-", dir=p.get("tmp")) as tmp:
        folder = Path(tmp)
        with ledger_mod.open_ledger(folder / "ledger.sqlite") as ledger:
            with Clock() as c:
                for i in range(appends):
                    ledger.append(_content(i))
            out["appends"] = float(appends)
            out["append_per_s"] = appends / c.wall
            rows = [tuple(r[k] for k in columns) for r in ledger.iter_rows()]

        def plain(path: Path, one_transaction: bool) -> float:
            conn = sqlite3.connect(path, isolation_level=None)
            conn.execute("PRAGMA journal_mode = WAL")
            conn.execute("PRAGMA synchronous = FULL")
            conn.execute(f"CREATE TABLE entries ({', '.join(columns)})")
            sql = f"INSERT INTO entries VALUES ({', '.join('?' for _ in columns)})"
            with Clock() as t:
                if one_transaction:
                    conn.execute("BEGIN")
                for r in rows:
                    conn.execute(sql, r)
                if one_transaction:
                    conn.execute("COMMIT")
            conn.close()
            return len(rows) / t.wall

        out["plain_insert_durable_per_s"] = plain(folder / "plain1.sqlite", False)
        out["plain_insert_one_transaction_per_s"] = plain(folder / "plain2.sqlite", True)

        path = folder / "long.sqlite"
        with ledger_mod.open_ledger(path) as ledger:
            conn = ledger.connection
            prev = ledger_mod.GENESIS_HASH
            sql = f"INSERT INTO entries ({', '.join(columns)}) "
            sql += f"VALUES ({', '.join('?' for _ in columns)})"
            conn.execute("BEGIN IMMEDIATE")
            for i in range(long):
                content = _content(i)
                fields: dict[str, Any] = {
                    "seq": i + 1,
                    "format": ENTRY_FORMAT,
                    "time": "2026-12-01T09:00:00.000000Z",
                    **{
                        k: getattr(content, k)
                        for k in HASHED_FIELDS
                        if k not in ("seq", "format", "time", "prev_hash", "signature")
                    },
                    "prev_hash": prev,
                    "signature": None,
                }
                fields["hash"] = prev = entry_hash(fields)
                fields["decisions"] = canonical_json(fields["decisions"]).decode("utf-8")
                conn.execute(sql, [fields[k] for k in columns])
            conn.execute("COMMIT")
        with ledger_mod.open_ledger(path, readonly=True) as ledger:
            with Clock() as c:
                result = ledger.verify()
            with Clock() as r:
                read = len(ledger.connection.execute("SELECT * FROM entries").fetchall())
        if not result.ok:
            raise RuntimeError(f"the benchmark ledger did not verify: {result.problem}")
        out["verify_entries"] = float(long)
        out["verify_s"] = c.wall
        out["plain_read_s"] = r.wall
        out["plain_read_rows"] = float(read)
    return out


# ---------------------------------------------------------------------------- main


def main(argv: list[str]) -> None:
    name, params = argv[0], json.loads(argv[1]) if len(argv) > 1 else {}
    result = STEPS[name](params)
    result["peak_rss_mb"] = peak_rss_mb()
    print(json.dumps(result))


if __name__ == "__main__":
    main(sys.argv[1:])
