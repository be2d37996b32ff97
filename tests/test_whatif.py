"""What-if policies (issue 15, item 3): counts, rates, AIR intervals and error rates, each
checked against an outside recomputation named beside the check."""

from __future__ import annotations

import json
import re
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pytest
from scipy.special import logit
from scipy.stats.contingency import relative_risk
from sklearn.metrics import confusion_matrix
from statsmodels.stats.proportion import proportion_confint

from closecall import Study, UserError
from closecall.analysis.whatif import Policy, changed_rows
from closecall.setup.demo import write_demo
from closecall.suite.opening import open_study


def imported_scores(config: Path) -> Path:
    """The demo study with the model in use entered as its scores (the pending file's
    deployed_score column) rather than as a scorecard, whichever the demo writes."""
    text = re.sub(r"\n\[deployed\]\nscorecard = [^\n]*\n(#[^\n]*\n)*", "\n", config.read_text())
    if 'deployed_score = "deployed_score"' not in text:
        text = text.replace(
            'group = ["heritage"]', 'group = ["heritage"]\ndeployed_score = "deployed_score"', 1
        )
    config.write_text(text)
    return config


@pytest.fixture(scope="module")
def demo_config(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A 3,000-case demo study whose deployed model is imported scores, fitted once."""
    config = imported_scores(write_demo(tmp_path_factory.mktemp("whatif"), cases=3000, seed=11))
    open_study(config)
    return config


@pytest.fixture(scope="module")
def study(demo_config: Path) -> Study:
    opened = open_study(demo_config)
    assert "deployed" in opened.snapshot.model_names
    assert opened.config.deployed.scorecard is None
    return Study(opened)


def _plain_counts(snap: Any, before: np.ndarray, after: np.ndarray) -> pd.DataFrame:
    """Changed decisions per group and direction, recomputed with pandas from two decision
    columns (independent of closecall.analysis.whatif)."""
    frame = pd.DataFrame({"group": snap.group_labels, "before": before, "after": after})
    frame["up"] = ~frame["before"] & frame["after"]
    frame["down"] = frame["before"] & ~frame["after"]
    return frame.groupby("group")[["up", "down"]].sum()


def _baseline(snap: Any) -> np.ndarray:
    """The deployed model's decision under the operative lens: logit > logit(t)."""
    t = snap.lenses[0].threshold
    return np.asarray(snap.logit("deployed")) > logit(t)


@pytest.mark.parametrize("model", ["pooled", "unaware", "proxy_free", "split"])
def test_counts_of_a_suite_model_match_a_plain_pandas_recount(study: Study, model: str) -> None:
    snap = study.opened.snapshot
    t = snap.lenses[0].threshold
    after = np.asarray(snap.logit(model)) > logit(t)
    # Reference: a plain pandas recomputation from the snapshot's log-odds (not whatif's code)
    expected = _plain_counts(snap, _baseline(snap), after)
    result = study.whatif(model=model)
    for level, row in expected.iterrows():
        got = result.by_group[str(level)]
        assert got["to_favourable"] == row["up"]
        assert got["to_unfavourable"] == row["down"]
    assert result.changed == int(expected.to_numpy().sum()) > 0
    changed = set(snap.case_ids[_baseline(snap) != after].astype(str))
    assert set(result.case_ids) == changed


def test_counts_of_a_lens_and_a_group_threshold_match_a_plain_pandas_recount(
    study: Study,
) -> None:
    snap = study.opened.snapshot
    p = 1 / (1 + np.exp(-np.asarray(snap.logit("deployed"))))
    level = snap.group_levels[-1]
    # Reference: plain pandas/NumPy on probabilities: the named group at 0.4, others at the
    # second lens's threshold c_ff / (c_ff + c_fu) (Elkan 2001)
    lens = snap.lenses[1]
    cut = np.where(snap.group_labels == level, 0.4, lens.threshold)
    expected = _plain_counts(snap, _baseline(snap), p > cut)
    result = study.whatif(lens=lens.name, group_thresholds={level: 0.4})
    for g, row in expected.iterrows():
        assert result.by_group[str(g)]["to_favourable"] == row["up"]
        assert result.by_group[str(g)]["to_unfavourable"] == row["down"]
    assert result.changed > 0


def test_two_policies_side_by_side_count_against_each_other(study: Study) -> None:
    snap = study.opened.snapshot
    t = snap.lenses[0].threshold
    unaware = np.asarray(snap.logit("unaware")) > logit(t)
    split = np.asarray(snap.logit("split")) > logit(t)
    # Reference: plain pandas recount of split against unaware
    expected = _plain_counts(snap, unaware, split)
    result = study.whatif(model="split", against="model=unaware")
    assert result.baseline.startswith("unaware") and result.policy.startswith("split")
    for g, row in expected.iterrows():
        assert result.by_group[str(g)]["to_favourable"] == row["up"]
        assert result.by_group[str(g)]["to_unfavourable"] == row["down"]
    rows, up = changed_rows(study.opened, Policy(model="split"), Policy(model="unaware"))
    assert np.array_equal(rows, np.flatnonzero(unaware != split))
    assert np.array_equal(up, split[rows])


def test_rates_and_air_intervals_match_statsmodels_and_scipy(study: Study) -> None:
    snap = study.opened.snapshot
    t = snap.lenses[0].threshold
    fav = np.asarray(snap.logit("unaware")) > logit(t)
    data = study.whatif(model="unaware").to_dict()
    rates = {r["group"]: r for r in data["policy"]["rates"]}
    k = {g: int(fav[snap.group_labels == g].sum()) for g in snap.group_levels}
    n = {g: int((snap.group_labels == g).sum()) for g in snap.group_levels}
    top = max(snap.group_levels, key=lambda g: k[g] / n[g])
    assert data["policy"]["most_favoured"] == top
    for g in snap.group_levels:
        # Reference: statsmodels proportion_confint(method="wilson") (Wilson 1927)
        lo, hi = proportion_confint(k[g], n[g], alpha=0.05, method="wilson")
        assert rates[g]["low"] == pytest.approx(lo, abs=1e-10)
        assert rates[g]["high"] == pytest.approx(hi, abs=1e-10)
        if g == top:
            assert rates[g]["air"] == 1.0 and rates[g]["air_low"] is None
            continue
        # Reference: scipy.stats.contingency.relative_risk(...).confidence_interval, Katz et
        # al. 1978 method C (the log interval the disparity report uses)
        rr = relative_risk(k[g], n[g], k[top], n[top])
        ci = rr.confidence_interval(confidence_level=0.95)
        assert rates[g]["air"] == pytest.approx(rr.relative_risk, rel=1e-12)
        assert rates[g]["air_low"] == pytest.approx(ci.low, rel=1e-9)
        assert rates[g]["air_high"] == pytest.approx(ci.high, rel=1e-9)
        assert rates[g]["air_method"] == "katz-log"
        assert rates[g]["below_four_fifths"] == (rr.relative_risk < 0.8)


def test_change_share_interval_matches_statsmodels_wilson(study: Study) -> None:
    result = study.whatif(model="pooled", level=0.9)
    for g, c in result.by_group.items():
        # Reference: statsmodels proportion_confint(method="wilson"), 90 %
        lo, hi = proportion_confint(c["changed"], c["cases"], alpha=0.10, method="wilson")
        assert c["share_low"] == pytest.approx(lo, abs=1e-10), g
        assert c["share_high"] == pytest.approx(hi, abs=1e-10), g


@pytest.mark.parametrize("model", ["unaware", "split"])
def test_held_out_error_rates_match_scikit_learn_confusion_matrix(study: Study, model: str) -> None:
    snap = study.opened.snapshot
    oof = np.asarray(snap.arrays[f"oof__{model}"])
    level = snap.group_levels[0]
    cut = np.where(np.asarray(snap.group_levels)[snap.hist_group_codes] == level, 0.55, 0.5)
    pred = oof > logit(cut)
    data = study.whatif(model=model, group_thresholds={level: 0.55}).to_dict()
    errors = {r["group"]: r for r in data["policy"]["errors"]}
    for gi, g in enumerate(snap.group_levels):
        sel = np.asarray(snap.hist_group_codes) == gi
        # Reference: scikit-learn confusion_matrix on the held-out decisions (labels 0, 1):
        # false-favourable = FP / (FP + TN), false-unfavourable = FN / (FN + TP)
        tn, fp, fn, tp = confusion_matrix(snap.hist_y[sel], pred[sel], labels=[0, 1]).ravel()
        assert errors[g]["false_favourable"] == fp
        assert errors[g]["unfavourable_outcomes"] == fp + tn
        assert errors[g]["false_unfavourable"] == fn
        assert errors[g]["favourable_outcomes"] == fn + tp
        assert errors[g]["false_favourable_rate"] == pytest.approx(fp / (fp + tn))
        assert errors[g]["false_unfavourable_rate"] == pytest.approx(fn / (fn + tp))
    assert data["policy"]["errors_source"] == "out-of-fold scores of the history"


def test_imported_deployed_scores_say_what_cannot_be_computed(study: Study) -> None:
    data = study.whatif(model="unaware").to_dict()
    assert data["baseline"]["errors"] == []
    assert any("cannot be computed" in n for n in data["baseline"]["notes"])


def test_to_frame_lists_exactly_the_changed_cases(study: Study) -> None:
    result = study.whatif(model="unaware")
    frame = result.to_frame()
    assert list(frame.columns) == [
        "case_id", "group", "direction", "baseline_margin", "policy_margin",
    ]  # fmt: skip
    assert tuple(frame["case_id"]) == result.case_ids
    up = frame["direction"] == "to favourable"
    assert (frame.loc[up, "policy_margin"] > 0).all()
    assert (frame.loc[up, "baseline_margin"] <= 0).all()
    assert (frame.loc[~up, "policy_margin"] <= 0).all()
    assert int(up.sum()) == result.to_favourable


@pytest.mark.parametrize(
    "text",
    [
        "model=unaware",
        "lens=cautious;drop=heritage;drop=zone",
        "model=split;threshold=Briar=0.45;threshold=A=B=0.2",
    ],
)
def test_policy_text_round_trips(text: str) -> None:
    assert Policy.parse(text).to_text() == text
    assert Policy.parse(Policy.parse(text).to_text()) == Policy.parse(text)


def test_policy_level_with_an_equals_sign_keeps_it() -> None:
    assert Policy.parse("threshold=A=B=0.2").group_thresholds == (("A=B", 0.2),)


@pytest.mark.parametrize(
    ("kwargs", "field"),
    [
        ({"model": "nonesuch"}, "model"),
        ({"lens": "reckless"}, "lens"),
        ({"group_thresholds": {"Nowhere": 0.5}}, "group_threshold"),
        ({"group_thresholds": {"Briar": 1.0}}, "group_threshold"),
        ({"group_thresholds": {"Briar": float("nan")}}, "group_threshold"),
        ({"drop": ["heritage"]}, "drop"),  # imported scores have no weights
        ({"against": "colour=red"}, "policy"),
        ({"level": 1.5}, "level"),
    ],
)
def test_library_refusals_name_the_field(study: Study, kwargs: dict[str, Any], field: str) -> None:
    with pytest.raises(UserError) as err:
        study.whatif(**kwargs)
    assert err.value.about == field
    assert err.value.fix


def test_cli_json_is_the_library_result(study: Study, demo_config: Path, cli: Any) -> None:
    res = cli("whatif", "--config", str(demo_config), "--model", "unaware", "--json")
    assert res.code == 0, res
    assert json.loads(res.out) == json.loads(json.dumps(study.whatif(model="unaware").to_dict()))


def test_cli_table_names_the_counts_per_group(study: Study, demo_config: Path, cli: Any) -> None:
    res = cli("whatif", "--config", str(demo_config), "--model", "unaware", "--cases")
    assert res.code == 0, res
    result = study.whatif(model="unaware")
    assert f"{result.changed:,} of" in res.out
    for g, c in result.by_group.items():
        assert any(
            line.split()[:3] == [g, f"{c['cases']:,}", f"{c['changed']:,}"]
            for line in res.out.splitlines()
            if line.split()
        ), g
    assert result.case_ids[0] in res.out


def test_queue_changed_by_lists_exactly_the_changed_cases(study: Study) -> None:
    from closecall import QueueQuery

    snap = study.opened.snapshot
    t = snap.lenses[0].threshold
    after = np.asarray(snap.logit("split")) > logit(t)
    # Reference: the changed cases recomputed with NumPy from the snapshot's log-odds
    expected = set(snap.case_ids[_baseline(snap) != after].astype(str))
    listed = study.queue(QueueQuery(changed_by="model=split", limit=None)).case_ids
    assert set(listed) == expected and len(listed) == len(expected) > 0
    grouped = study.queue(QueueQuery(changed_by="model=split", group="Briar")).case_ids
    briar = set(snap.case_ids[snap.group_labels == "Briar"].astype(str))
    assert set(grouped) == expected & briar


def test_cli_queue_changed_by(study: Study, demo_config: Path, cli: Any) -> None:
    res = cli(
        "queue", "--config", str(demo_config), "--changed-by", "model=unaware", "--limit", "0",
        "--json",
    )  # fmt: skip
    assert res.code == 0, res
    data = json.loads(res.out)
    assert data["filters"]["changed_by"] == "model=unaware"
    assert {r["case_id"] for r in data["rows"]} == set(study.whatif(model="unaware").case_ids)


def test_imported_scores_of_the_history_are_not_called_held_out(tmp_path: Path) -> None:
    """One labelled file with a deployed score column: the history's deployed scores are the
    imported ones (not out-of-fold), and the figures say so."""
    config = write_demo(tmp_path / "one-file", cases=600, seed=4)
    history = pd.read_csv(config.parent / "history.csv")
    pending = pd.read_csv(config.parent / "pending.csv")
    both = pd.concat([history, pending.assign(completed="no")], ignore_index=True)
    both["deployed_score"] = both["deployed_score"].fillna(0.5)
    both.to_csv(config.parent / "history.csv", index=False)
    text = imported_scores(config).read_text().replace('pending = "pending.csv"', "")
    config.write_text(text)
    study = Study.open(config)
    assert study.opened.snapshot.cross_fitted
    data = study.whatif(model="unaware").to_dict()
    assert (
        data["baseline"]["errors_source"] == "the deployed model's imported scores of the history"
    )
    assert any("may not be held-out" in n for n in data["baseline"]["notes"])
    assert data["policy"]["errors_source"] == "out-of-fold scores of the history"
