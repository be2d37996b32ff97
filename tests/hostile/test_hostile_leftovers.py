"""Hostile corpus (issue 10), leftovers: numbers given on the command line that reach the engine
(NaN, infinity, negative counts, seeds NumPy cannot take, replicate counts past memory) and the
exact band of a case whose fit's training rows hold one outcome value.

Every refusal: exit 2, one ``error:`` line naming the option and its valid range, a ``fix:``,
no traceback, every study file byte-identical (``assert_unchanged``).
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

import numpy as np
import pytest
from hostile_helpers import Cli, assert_refused
from scipy.optimize import minimize

from closecall.analysis.fitted_rows import fitted_row, tilde
from closecall.analysis.multiplicity import exact_band
from closecall.suite.opening import open_study

sys.path.insert(0, str(Path(__file__).parent))

CONFIG = "closecall.toml"
# the data digests cache (size, mtime, inode, ctime -> digest) is rewritten by any command
# after the study is copied (new inodes); it is a cache, not a study file
DIGEST_CACHE = ".closecall/digests.json"


def study_digests(root: Path) -> dict[str, str]:
    from hostile_helpers import study_digests as digests

    out = digests(root)
    out.pop(DIGEST_CACHE, None)
    return out


def _config(study_dir: Path) -> str:
    return str(study_dir / CONFIG)


def _a_case(cli: Cli, config: str) -> str:
    res = cli("queue", "--all", "--json", "--config", config)
    assert res.code == 0, res
    return str(json.loads(res.out)["rows"][0]["case_id"])


# option, arguments, needles of the refusal (the option and its range)
NUMBERS: dict[str, tuple[tuple[str, ...], tuple[str, ...]]] = {
    "queue --band nan": (("queue", "--band", "nan"), ("band", "nan", "0.5")),
    "queue --band inf": (("queue", "--band", "inf"), ("band", "inf", "0.5")),
    "queue --band -inf": (("queue", "--band=-inf"), ("band", "-inf")),
    "queue --band -1": (("queue", "--band=-1"), ("band", "0")),
    "queue --epsilon nan": (("queue", "--epsilon", "nan"), ("epsilon", "nan")),
    "queue --epsilon nan --ambiguous": (
        ("queue", "--ambiguous", "--epsilon", "nan"),
        ("epsilon", "nan"),
    ),
    "queue --epsilon -1": (("queue", "--epsilon=-1"), ("epsilon", "-1")),
    "queue --epsilon 5 --sort ambiguity": (
        ("queue", "--sort", "ambiguity", "--epsilon", "5"),
        ("--epsilon", "≤ 0.1"),
    ),
    "queue --limit -1": (("queue", "--limit=-1"), ("limit", "-1")),
    "bands --epsilon nan": (("bands", "--epsilon", "nan"), ("epsilon", "not a finite number")),
    "bands --epsilon inf": (("bands", "--epsilon", "inf"), ("epsilon", "not a finite number")),
    "bands --epsilon 5": (("bands", "--epsilon", "5"), ("epsilon", "≤ 0.1")),
    "compare --seed -1": (("compare", "--seed=-1"), ("--seed", "from 0 to 4294967295")),
    "compare --seed 2**70": (("compare", "--seed", str(2**70)), ("--seed", "out of range")),
    "compare --boot 10**14": (("compare", "--boot", str(10**14)), ("--boot", "to 1000000")),
    "demo-reviews --seed -1": (("demo-reviews", "5", "--seed=-1"), ("--seed", "out of range")),
    "demo-reviews --bias nan": (
        ("demo-reviews", "5", "--bias", "nan"),
        ("--bias", "not a finite number"),
    ),
    "demo-reviews --bias inf": (
        ("demo-reviews", "5", "--bias", "inf"),
        ("--bias", "not a finite number"),
    ),
}


class TestNumbersOnTheCommandLine:
    """Every numeric option that reaches the engine is refused outside its range."""

    @pytest.mark.parametrize("case", list(NUMBERS))
    def test_refused_with_the_range(self, cli: Cli, study_dir: Path, case: str) -> None:
        args, needles = NUMBERS[case]
        before = study_digests(study_dir)
        res = cli(*args, "--config", _config(study_dir))
        text = assert_refused(res, *needles)
        assert "must be" in text
        after = study_digests(study_dir)
        assert after == before, "study files changed"

    def test_disparity_report_refuses_seed_and_boot(self) -> None:
        """closecall disparity's engine (build_report) checks --seed and --boot first."""
        import pandas as pd

        from closecall.core.errors import UserError
        from closecall.reports.disparity.report import build_report

        with pytest.raises(UserError, match="seed: -1"):
            build_report(pd.DataFrame(), seed=-1)
        with pytest.raises(UserError, match="n_boot"):
            build_report(pd.DataFrame(), n_boot=10**14)

    def test_limit_zero_still_lists_every_case(self, cli: Cli, study_dir: Path) -> None:
        """0 means all (documented in --help): the range check must not refuse it."""
        res = cli("queue", "--limit", "0", "--json", "--config", _config(study_dir))
        assert res.code == 0, res
        assert len(json.loads(res.out)["rows"]) > 20

    def test_engine_refuses_the_same(self, study_dir: Path) -> None:
        from closecall.core.errors import UserError
        from closecall.review.queue import build_queue, queue_rows

        snap = open_study(study_dir / CONFIG).snapshot
        for band in (float("nan"), float("inf"), -0.5):
            with pytest.raises(UserError, match="band"):
                build_queue(snap, band=band)
        q = build_queue(snap, band=0.5)
        with pytest.raises(UserError, match=r"limit|stop"):
            queue_rows(snap, q, 0, -1)
        assert len(queue_rows(snap, q, 0, 3)) == min(3, len(q))


# --------------------------------------------------------------------------- one-outcome group


def _one_outcome_study(cli: Cli, tmp_path: Path) -> Path:
    from test_hostile_fits import _one_outcome_group, _write

    config = _write(tmp_path / "study", _one_outcome_group(), 1.0)
    assert cli("fit", "--config", str(config)).code == 0
    return config


class TestExactBandOneOutcomeGroup:
    """Group C's history is all favourable: the split model's fit of C has no finite optimum
    (its unpenalised intercept runs to +inf). The exact band used to stop with scipy's
    'f(a) and f(b) must have different signs' (brentq on a loss below the solver's
    resolution)."""

    def test_every_case_of_the_group_has_a_band(self, cli: Cli, tmp_path: Path) -> None:
        study = open_study(_one_outcome_study(cli, tmp_path))
        snap = study.snapshot
        in_c = np.flatnonzero(np.asarray(snap.group_codes) == snap.group_levels.index("C"))
        for i in in_c[:8]:
            ex = exact_band(study, str(snap.case_ids[i]), model="split")
            # relative slack of an infimum of 0: only the limit, margin +inf
            assert ex["one_outcome"] and ex["slack"] == 0.0
            assert ex["low"] == np.inf and ex["high"] == np.inf

    def test_wald_edge_matches_scipy(self, cli: Cli, tmp_path: Path) -> None:
        """Absolute slack 1.92 about the infimum 0: the lower edge is min x̃ᵀw − t subject to
        f(w) ≤ 1.92, solved independently by scipy's SLSQP (scipy.optimize.minimize)."""
        from scipy.special import logit

        from closecall.analysis.fitted_rows import penalised_objective

        study = open_study(_one_outcome_study(cli, tmp_path))
        snap = study.snapshot
        i = int(np.flatnonzero(np.asarray(snap.group_codes) == snap.group_levels.index("C"))[0])
        case = str(snap.case_ids[i])
        ex = exact_band(study, case, 1.92, absolute=True, model="split")
        assert ex["high"] == np.inf and np.isfinite(ex["low"])
        _, row_of_case = snap.weights("split")
        fr = fitted_row(snap, "split", int(np.asarray(row_of_case)[i]))
        Xt = tilde(np.asarray(snap.hist_X)[fr.train], fr.mask)
        y = np.asarray(snap.hist_y, dtype=float)[fr.train]
        c = tilde(np.asarray(snap.X[i], dtype=float)[None, :], fr.mask)[0]
        t = float(logit(snap.lens(None).threshold))

        def loss(w: np.ndarray) -> float:
            return float(penalised_objective(w, Xt, y, fr.penalty, derivatives=False)[0])

        start = np.zeros(len(c))
        start[0] = 10.0
        res = minimize(
            lambda w: float(c @ w),
            start,
            method="SLSQP",
            constraints=[{"type": "ineq", "fun": lambda w: 1.92 - loss(w)}],
            options={"ftol": 1e-12, "maxiter": 500},
        )
        assert res.success, res
        assert ex["low"] == pytest.approx(float(res.fun) - t, abs=1e-4)

    def test_explain_exact_through_the_cli(self, cli: Cli, tmp_path: Path) -> None:
        config = _one_outcome_study(cli, tmp_path)
        snap = open_study(config).snapshot
        i = int(np.flatnonzero(np.asarray(snap.group_codes) == snap.group_levels.index("C"))[0])
        res = cli("explain", str(snap.case_ids[i]), "--exact", "--json", "--config", str(config))
        assert res.code == 0, res
        assert "Traceback" not in res.err


# --------------------------------------------------------------------------- tiny levels


def test_two_cases_per_group_and_outcome_is_fitted_not_a_traceback(
    cli: Cli, tmp_path: Path
) -> None:
    """[data] min_group_cases = 2 allows levels of 4 cases; proxy detection's group
    recoverability used 5 stratified folds regardless and stopped with scikit-learn's
    'n_splits=5 cannot be greater than the number of members in each class'."""
    import pandas as pd
    from test_hostile_fits import _write

    frame = pd.DataFrame(
        {
            "id": [f"H{i}" for i in range(8)],
            "g": ["A"] * 4 + ["B"] * 4,
            "x1": [0.1, 0.5, -0.2, 0.9, 0.3, -0.4, 0.8, 0.05],
            "x2": [1, 2, 3, 4, 5, 6, 7, 8.5],
            "y": ["good", "bad"] * 4,  # two cases in each group × outcome cell
        }
    )
    config = _write(tmp_path / "study", frame, 1.0)
    text = config.read_text().replace("folds = 5", "folds = 2")
    config.write_text(text.replace('group = "g"', 'group = "g"\nmin_group_cases = 2'))
    res = cli("fit", "--config", str(config), "--json")
    assert res.code == 0, res
    out = json.loads(res.out)
    assert out["fit_flags"], out  # separated and wide fits are flagged, not silent
    snap = open_study(config).snapshot
    assert 0.0 <= snap.proxies.recoverability <= 1.0
    for args in (("queue", "--all"), ("bands",), ("explain", "H0", "--exact")):
        r = cli(*args, "--config", str(config))
        assert r.code == 0 and "Traceback" not in r.err, (args, r)
