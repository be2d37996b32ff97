"""`closecall ledger export` on the real demo study with simulated reviews."""

from __future__ import annotations

import hmac
import io
import json
import os
import stat
from hashlib import sha256
from pathlib import Path

import pandas as pd
import pytest

from closecall.reports.disparity.table import REVIEW_COLUMNS
from closecall.review.decisions import record_review
from closecall.review.demo_reviews import simulate_reviews
from closecall.suite.opening import open_study
from disparity_study import config_with_ledger


@pytest.fixture(scope="module")
def reviewed(demo_config: Path) -> Path:
    """A demo config whose own ledger holds 200 simulated reviews."""
    config = config_with_ledger(demo_config)
    assert simulate_reviews(open_study(config), 200, seed=3) == 200
    return config


def _csv(out: str) -> pd.DataFrame:
    return pd.read_csv(io.StringIO(out), dtype={"case_id": str})


def test_default_export_is_one_effective_review_per_case(cli, reviewed: Path) -> None:  # type: ignore[no-untyped-def]
    res = cli("ledger", "export", "--config", str(reviewed))
    assert res.code == 0, res
    table = _csv(res.out)
    assert list(table.columns[: len(REVIEW_COLUMNS)]) == list(REVIEW_COLUMNS)
    assert len(table) == 200 and table["case_id"].is_unique
    snap = open_study(reviewed).snapshot
    idx = pd.Index(snap.case_ids.astype(str)).get_indexer(table["case_id"])
    assert (idx >= 0).all()
    assert (table["group"].to_numpy() == snap.group_labels[idx]).all()
    upheld = table["action"] == "uphold"
    assert (table.loc[upheld, "final_decision"] == table.loc[upheld, "model_decision"]).all()
    assert table.loc[table["action"] == "defer", "final_decision"].isna().all()
    assert (
        table.loc[table["action"] == "override-unfavourable", "final_decision"] == "unfavourable"
    ).all()
    for model in snap.model_names:
        assert f"margin__{model}" in table.columns and f"decision__{model}" in table.columns
    assert (table["margin"] == table[f"margin__{snap.reference}"]).all()


def test_pseudonyms_stable_keyed_and_without_raw_ids(  # type: ignore[no-untyped-def]
    cli, reviewed: Path, tmp_path: Path
) -> None:
    key1, key2 = tmp_path / "k1", tmp_path / "k2"
    args = ("ledger", "export", "--config", str(reviewed), "--pseudonymise-reviewers")
    first = cli(*args, "--pseudonymise", str(key1))
    assert first.code == 0, first
    assert "created the key file" in first.err
    assert stat.S_IMODE(key1.stat().st_mode) == 0o600
    again = cli(*args, "--pseudonymise", str(key1))
    other = cli(*args, "--pseudonymise", str(key2))
    plain = _csv(cli("ledger", "export", "--config", str(reviewed)).out)
    a, b, c = _csv(first.out), _csv(again.out), _csv(other.out)
    assert (a["case_id"] == b["case_id"]).all()  # same key, same pseudonyms
    assert not set(a["case_id"]) & set(c["case_id"])  # another key, other pseudonyms
    assert a["case_id"].str.fullmatch(r"[0-9a-f]{64}").all()
    for raw in plain["case_id"]:
        assert raw not in first.out
    assert "sim-reviewer" not in first.out
    assert "hash" not in a.columns and "prev_hash" not in a.columns
    # The pseudonym is HMAC-SHA256 (RFC 2104, Python's hmac as reference) of "case:<id>".
    key = bytes.fromhex(key1.read_text().strip())
    expected = hmac.new(key, f"case:{plain['case_id'].iloc[0]}".encode(), sha256).hexdigest()
    assert a["case_id"].iloc[0] == expected


def test_notes_warning_and_no_notes(cli, reviewed: Path, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    key = tmp_path / "k"
    res = cli("ledger", "export", "-c", str(reviewed), "--pseudonymise", str(key))
    assert "--no-notes" in res.err
    res = cli("ledger", "export", "-c", str(reviewed), "--pseudonymise", str(key), "--no-notes")
    assert res.code == 0 and "note" not in _csv(res.out).columns
    assert "--no-notes" not in res.err


def test_unsafe_or_bad_key_file_is_refused(cli, reviewed: Path, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    key = tmp_path / "open-key"
    key.write_text("ab" * 32 + "\n")
    os.chmod(key, 0o644)
    res = cli("ledger", "export", "-c", str(reviewed), "--pseudonymise", str(key))
    assert res.code == 2 and "chmod 600" in res.err and "Traceback" not in res.err
    os.chmod(key, 0o600)
    key.write_text("not a key")
    res = cli("ledger", "export", "-c", str(reviewed), "--pseudonymise", str(key))
    assert res.code == 2 and "does not hold a pseudonymisation key" in res.err
    res = cli("ledger", "export", "-c", str(reviewed), "--pseudonymise-reviewers")
    assert res.code == 2 and "needs a key" in res.err


def test_parquet_and_jsonl_round_trip(cli, reviewed: Path, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    out = tmp_path / "reviews.parquet"
    res = cli("ledger", "export", "-c", str(reviewed), "--format", "parquet", "--out", str(out))
    assert res.code == 0, res
    assert stat.S_IMODE(out.stat().st_mode) == 0o600
    pq = pd.read_parquet(out)
    plain = _csv(cli("ledger", "export", "-c", str(reviewed)).out)
    assert list(pq["case_id"]) == list(plain["case_id"])
    assert pq["margin"].to_numpy() == pytest.approx(plain["margin"].to_numpy())
    res = cli("ledger", "export", "-c", str(reviewed), "--format", "jsonl")
    rows = [json.loads(line) for line in res.out.splitlines()]
    assert len(rows) == 200
    deferred = [r for r in rows if r["action"] == "defer"]
    assert deferred and all(r["final_decision"] is None for r in deferred)


def test_superseded_entry_is_not_effective(cli, demo_config: Path) -> None:  # type: ignore[no-untyped-def]
    config = config_with_ledger(demo_config)
    study = open_study(config)
    simulate_reviews(study, 20, seed=5)
    table = _csv(cli("ledger", "export", "-c", str(config), "--all-entries").out)
    first = table.iloc[0]
    new_action = "defer" if first["action"] != "defer" else "uphold"
    entry = record_review(
        study, first["case_id"], new_action, None, "", supersedes=int(first["seq"])
    )
    everything = _csv(cli("ledger", "export", "-c", str(config), "--all-entries").out)
    assert len(everything) == 21
    assert list(everything.loc[everything["case_id"] == first["case_id"], "effective"]) == [
        False,
        True,
    ]
    effective = _csv(cli("ledger", "export", "-c", str(config)).out)
    assert len(effective) == 20
    row = effective[effective["case_id"] == first["case_id"]].iloc[0]
    assert (row["action"], int(row["seq"])) == (new_action, entry.seq)


def test_empty_ledger_is_a_clear_error(cli, demo_config: Path) -> None:  # type: ignore[no-untyped-def]
    res = cli("ledger", "export", "-c", str(config_with_ledger(demo_config)))
    assert res.code == 2
    assert "no reviews yet" in res.err and "Traceback" not in res.err


def test_spreadsheet_safe_export_defuses_formulas(tmp_path: Path, cli) -> None:  # type: ignore[no-untyped-def]
    """Formula injection guard (OWASP "CSV Injection"; common practice): off by default so
    the export is exact, on request text cells starting with = + - @ get an apostrophe."""
    from closecall.setup.demo import write_demo

    config = write_demo(tmp_path, cases=600, seed=12)
    study = open_study(config)
    case = str(study.snapshot.case_ids[0])
    note = '=HYPERLINK("http://example.invalid","x")'
    record_review(study, case, "override-favourable", "other", note)
    exact = _csv(cli("ledger", "export", "--config", str(config)).out)
    assert exact.loc[0, "note"] == note
    safe = _csv(cli("ledger", "export", "--config", str(config), "--spreadsheet-safe").out)
    assert safe.loc[0, "note"] == "'" + note
    assert safe.loc[0, "case_id"] == case  # ordinary text is untouched
    assert safe.loc[0, "margin"] == pytest.approx(exact.loc[0, "margin"])  # numbers untouched
