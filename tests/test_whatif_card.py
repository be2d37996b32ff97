"""What-if on the deployed scorecard: the demo card with the heritage weight set to zero.

Every figure is recomputed here from the data files with plain pandas / NumPy and the card's
published rows (not through closecall's card code), then compared."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pytest
from sklearn.metrics import confusion_matrix
from statsmodels.stats.proportion import proportion_confint

from closecall import Study, UserError
from closecall.setup.demo import DEMO_SCORECARD, write_demo
from closecall.suite.opening import open_study


def _card_study(folder: Path) -> Path:
    """A demo study whose deployed model is the demo's published card (scorecard.csv)."""
    config = write_demo(folder, cases=1500, seed=3)
    (folder / "scorecard.csv").write_text(DEMO_SCORECARD)
    text = config.read_text()
    if "[deployed]" not in text:
        text = text.replace('deployed_score = "deployed_score"', "")
        text += '\n[deployed]\nscorecard = "scorecard.csv"\n'
    config.write_text(text)
    return config


def _points(frame: pd.DataFrame, *, heritage: bool = True) -> np.ndarray:
    """The demo card's points, row by row of its published table (plain pandas/NumPy)."""
    inc, q = frame["household_income_k"], frame["quotes_obtained"]
    age, dist = frame["dwelling_age"], frame["depot_distance_km"]
    share = frame["self_funded_share"]
    total = (
        474
        + np.select([inc < 25, inc < 35, inc < 45, inc < 60], [-12, -5, 0, 8], 20)
        + np.select([q < 1, q < 2, q < 3], [0, 10, 20], 30)
        + np.select([age.isna(), age < 40, age < 80], [0, 4, 0], -4)
        + np.where(frame["prior_grant"] == "yes", 12, 0)
        + np.select([dist < 5, dist < 10], [3, 0], -4)
        + np.select([share < 0.1, share < 0.2, share < 0.3, share < 0.4], [0, 4, 9, 15], 21)
        + np.where(frame["energy_label"].isin(["E", "F", "G"]), -7, 0)
    )
    if heritage:
        total = total + np.where(frame["heritage"] == "Briar", -18, 0)
    return np.asarray(total, dtype=float)


@pytest.fixture(scope="module")
def config(tmp_path_factory: pytest.TempPathFactory) -> Path:
    path = _card_study(tmp_path_factory.mktemp("whatif-card") / "study")
    open_study(path)
    return path


@pytest.fixture(scope="module")
def study(config: Path) -> Study:
    return Study.open(config)


def test_drop_heritage_counts_match_a_plain_pandas_recount(study: Study, config: Path) -> None:
    pending = pd.read_csv(config.parent / "pending.csv")
    # Reference: the card's rule (favourable iff points >= cut-off 500) applied with pandas to
    # the pending file's raw values, with and without the heritage row
    frame = pd.DataFrame(
        {
            "group": pending["heritage"],
            "before": _points(pending) >= 500,
            "after": _points(pending, heritage=False) >= 500,
        }
    )
    frame["up"] = ~frame["before"] & frame["after"]
    frame["down"] = frame["before"] & ~frame["after"]
    expected = frame.groupby("group")[["up", "down"]].sum()
    result = study.whatif(drop=["heritage"])
    assert "without heritage" in result.policy
    for g, row in expected.iterrows():
        assert result.by_group[str(g)]["to_favourable"] == row["up"]
        assert result.by_group[str(g)]["to_unfavourable"] == row["down"]
    # the planted weight only ever lowers Briar's points: dropping it moves Briar cases up only
    assert result.by_group["Aster"]["changed"] == 0
    assert result.by_group["Briar"]["to_favourable"] > 0
    assert result.to_unfavourable == 0
    changed = pending.loc[frame["up"] | frame["down"], "application_id"].astype(str)
    assert set(result.case_ids) == set(changed)


def test_drop_heritage_rates_and_error_rates_match_pandas_and_scikit_learn(
    study: Study, config: Path
) -> None:
    pending = pd.read_csv(config.parent / "pending.csv")
    history = pd.read_csv(config.parent / "history.csv")
    data = study.whatif(drop=["heritage"]).to_dict()
    fav = _points(pending, heritage=False) >= 500
    rates = {r["group"]: r for r in data["policy"]["rates"]}
    for g in ("Aster", "Briar"):
        sel = (pending["heritage"] == g).to_numpy()
        k, n = int(fav[sel].sum()), int(sel.sum())
        # Reference: statsmodels proportion_confint(method="wilson")
        lo, hi = proportion_confint(k, n, alpha=0.05, method="wilson")
        assert (rates[g]["favourable"], rates[g]["cases"]) == (k, n)
        assert rates[g]["low"] == pytest.approx(lo, abs=1e-10)
        assert rates[g]["high"] == pytest.approx(hi, abs=1e-10)
    errors = {r["group"]: r for r in data["policy"]["errors"]}
    pred = _points(history, heritage=False) >= 500
    y = (history["completed"] == "yes").to_numpy().astype(int)
    for g in ("Aster", "Briar"):
        sel = (history["heritage"] == g).to_numpy()
        # Reference: scikit-learn confusion_matrix of the history's recorded outcomes against
        # the card's decisions without heritage
        tn, fp, fn, tp = confusion_matrix(y[sel], pred[sel], labels=[0, 1]).ravel()
        assert (errors[g]["false_favourable"], errors[g]["unfavourable_outcomes"]) == (fp, fp + tn)
        assert (errors[g]["false_unfavourable"], errors[g]["favourable_outcomes"]) == (fn, fn + tp)


def test_margins_are_points_over_the_card_scale(study: Study, config: Path) -> None:
    pending = pd.read_csv(config.parent / "pending.csv").set_index("application_id")
    frame = study.whatif(drop=["heritage"]).to_frame().set_index("case_id")
    rows = pending.loc[frame.index]
    # Reference: score = offset + factor·ln(odds), factor = PDO / ln 2 (common practice in
    # credit scoring; Siddiqi 2006, from memory): a margin of (points − cut-off)·ln 2 / 20
    factor = 20 / np.log(2)
    np.testing.assert_allclose(frame["baseline_margin"], (_points(rows) - 500) / factor)
    np.testing.assert_allclose(
        frame["policy_margin"], (_points(rows, heritage=False) - 500) / factor
    )


def test_card_under_a_group_threshold_uses_its_probability(study: Study, config: Path) -> None:
    pending = pd.read_csv(config.parent / "pending.csv")
    # Reference: the card's own scale, 500 points = odds 1:1 and 20 points to double the
    # odds: p = 1 / (1 + exp(−(points − 500)·ln 2 / 20)) (the PDO formula, common practice)
    p = 1 / (1 + np.exp(-(_points(pending) - 500) * np.log(2) / 20))
    cut = np.where(pending["heritage"] == "Briar", 0.4, 0.5)
    expected = int(((p > cut) != (_points(pending) >= 500)).sum())
    result = study.whatif(group_thresholds={"Briar": 0.4})
    assert result.changed == expected > 0


def test_unknown_feature_is_refused_with_the_cards_features(study: Study) -> None:
    with pytest.raises(UserError) as err:
        study.whatif(drop=["zone"])  # a feature of the data the card does not score
    assert err.value.about == "drop"
    assert "heritage" in str(err.value.fix)


def test_cli_done_when(config: Path, cli: Any) -> None:
    """Issue 15's done-when: `closecall whatif --drop-weight heritage` says per group how many
    decisions would change, with intervals."""
    res = cli("whatif", "--config", str(config), "--drop-weight", "heritage")
    assert res.code == 0, res
    assert "without heritage" in res.out
    briar = next(line for line in res.out.splitlines() if line.strip().startswith("Briar"))
    assert "%–" in briar  # the share changed and its interval
    data = json.loads(
        cli("whatif", "--config", str(config), "--drop-weight", "heritage", "--json").out
    )
    assert data["total"]["changed"] == sum(c["changed"] for c in data["changes"])


def test_the_demo_figures_in_docs_whatif_hold(tmp_path: Path) -> None:
    """docs/whatif.md quotes the default demo (5,000 cases, seed 7) without heritage's weight."""
    config = write_demo(tmp_path / "demo", cases=5000, seed=7)
    (config.parent / "scorecard.csv").write_text(DEMO_SCORECARD)
    text = config.read_text()
    if "[deployed]" not in text:
        text = text.replace('deployed_score = "deployed_score"', "")
        config.write_text(text + '\n[deployed]\nscorecard = "scorecard.csv"\n')
    result = Study.open(config).whatif(drop=["heritage"])
    data = result.to_dict()
    briar = result.by_group["Briar"]
    page = (Path(__file__).resolve().parents[1] / "docs" / "whatif.md").read_text()
    page = " ".join(page.split())
    rates = {(r["group"], side): r for side in ("baseline", "policy") for r in data[side]["rates"]}
    quoted = (
        f"changes {result.changed} decisions",
        f"{data['total']['cases']} pending",
        f"{100 * briar['share']:.1f} % of Briar's {briar['cases']}",
        f"{100 * briar['share_low']:.1f} %–{100 * briar['share_high']:.1f} %",
        f"from {100 * rates['Briar', 'baseline']['rate']:.1f} % to "
        f"{100 * rates['Briar', 'policy']['rate']:.1f} %",
        *(
            f"{word} {r['air']:.2f} ({r['air_low']:.2f}–{r['air_high']:.2f})"
            for word, r in (("from", rates["Briar", "baseline"]), ("to", rates["Briar", "policy"]))
        ),
    )
    for text in quoted:
        assert text in page, text
    assert result.to_unfavourable == 0 and result.by_group["Aster"]["changed"] == 0
