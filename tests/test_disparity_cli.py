"""`closecall disparity` and `closecall demo-reviews` on the real demo study."""

from __future__ import annotations

import json
import re
from pathlib import Path

import numpy as np
import pytest

from closecall.review.decisions import record_review
from closecall.review.demo_reviews import simulate_reviews
from closecall.suite.opening import open_study
from disparity_study import config_with_ledger


@pytest.fixture(scope="module")
def reviewed(demo_config: Path) -> Path:
    config = config_with_ledger(demo_config)
    assert simulate_reviews(open_study(config), 250, seed=7, bias=2.0) == 250
    return config


def test_terminal_report(cli, reviewed: Path) -> None:  # type: ignore[no-untyped-def]
    res = cli("disparity", "--config", str(reviewed), "--boot", "300")
    assert res.code == 0, res
    for text in (
        "Favourable rate",
        "Adverse impact ratio",
        "Overrides by group",
        "equal margin",
        "By reviewer",
        "Warnings and limits",
        "█",
    ):
        assert text in res.out


def test_json_report_and_html(cli, reviewed: Path, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    html = tmp_path / "report.html"
    res = cli("disparity", "-c", str(reviewed), "--json", "--html", str(html), "--boot", "300")
    assert res.code == 0, res
    data = json.loads(res.out)
    assert data["summary"]["reviews"] == 250
    assert set(data["summary"]["groups"]) == {"Aster", "Briar"}
    assert data["errors"] is None
    assert len(data["conditional"]) == 2
    text = html.read_text(encoding="utf-8")
    # rates, ratios, margin profile, every case, calibration, held-out errors, periods
    assert len(re.findall(r"data:image/png;base64,", text)) == 7
    assert "29 CFR 1607.4(D)" in text
    for heading in (
        "Every case under review",
        "Calibration of each model by group",
        "Error rates of each model by group",
        "Over time: by month",
        "Many tests, corrected together",
    ):
        assert heading in text
    # every section says what it cannot show
    assert text.count("What this cannot show.") >= 9
    # the audit sections are in the JSON report too
    pending = len(open_study(reviewed).snapshot.case_ids)
    assert data["population"]["cases"] == pending and data["population"]["reviewed"] == 250
    assert {r["model"] for r in data["calibration"]["rows"]} >= {"pooled", "split"}
    assert data["heldout_errors"]["reference_group"] in ("Aster", "Briar")
    assert [f["name"] for f in data["families"]] == ["review", "model"]
    assert data["periods"]["unit"] == "month" and len(data["periods"]["periods"]) == 1
    assert set(data["limits"]) >= {"population", "calibration", "periods", "multiplicity"}


def test_terminal_audit_sections_and_period_option(cli, reviewed: Path) -> None:  # type: ignore[no-untyped-def]
    res = cli("disparity", "-c", str(reviewed), "--boot", "200", "--period", "quarter")
    assert res.code == 0, res
    for text in (
        "Every case under review",
        "Calibration by group on held-out history",
        "Reliability of the pooled model",
        "Error rates by group on held-out history",
        "By quarter of the review's entry time",
        "Tests corrected together: the 'review' family",
        "cannot show:",
        "power:",
    ):
        assert text in res.out, text
    bad = cli("disparity", "-c", str(reviewed), "--period", "week")
    assert bad.code == 2 and "week" in bad.err and "month, quarter" in bad.err
    assert "Traceback" not in bad.err


def test_same_seed_same_report(cli, reviewed: Path) -> None:  # type: ignore[no-untyped-def]
    a = cli("disparity", "-c", str(reviewed), "--json", "--seed", "3", "--boot", "200").out
    b = cli("disparity", "-c", str(reviewed), "--json", "--seed", "3", "--boot", "200").out
    assert a == b


def test_outcomes_join(cli, reviewed: Path) -> None:  # type: ignore[no-untyped-def]
    outcomes = reviewed.parent / "pending_outcomes.csv"
    res = cli(
        "disparity", "-c", str(reviewed), "--json", "--outcomes", str(outcomes), "--boot", "200"
    )
    assert res.code == 0, res
    errors = json.loads(res.out)["errors"]
    total = sum(g["with_outcome"] for g in errors["rows"])
    summary = json.loads(res.out)["summary"]
    assert total == summary["decided"] == summary["with_outcome"]
    for g in errors["rows"]:
        for key in ("model_false_favourable", "final_false_unfavourable"):
            r = g[key]
            assert r["cases"] == 0 or r["low"] <= r["rate"] <= r["high"]


def test_outcome_file_with_unknown_columns(cli, reviewed: Path, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    bad = tmp_path / "outcomes.csv"
    bad.write_text("applicant,result\nHR-0000001,yes\n")
    res = cli("disparity", "-c", str(reviewed), "--outcomes", str(bad))
    assert res.code == 2
    assert "outcomes.csv" in res.err and "'applicant'" in res.err and "'result'" in res.err
    assert "Traceback" not in res.err


def test_pseudonymised_reviewers(cli, reviewed: Path, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    res = cli(
        "disparity",
        "-c",
        str(reviewed),
        "--json",
        "--boot",
        "200",
        "--pseudonymise",
        str(tmp_path / "key"),
    )
    assert res.code == 0, res
    assert "sim-reviewer" not in res.out
    names = [r["reviewer"] for r in json.loads(res.out)["reviewers"]]
    assert all(re.fullmatch(r"[0-9a-f]{64}", n) for n in names)


def test_empty_ledger(cli, demo_config: Path) -> None:  # type: ignore[no-untyped-def]
    res = cli("disparity", "-c", str(config_with_ledger(demo_config)))
    assert res.code == 2
    assert "no reviews yet" in res.err and "demo-reviews" in res.err


def test_one_group_only(cli, demo_config: Path) -> None:  # type: ignore[no-untyped-def]
    config = config_with_ledger(demo_config)
    study = open_study(config)
    aster = np.flatnonzero(study.snapshot.group_labels == "Aster")[:3]
    for i in aster:
        record_review(study, str(study.snapshot.case_ids[i]), "uphold", None, "")
    res = cli("disparity", "-c", str(config))
    assert res.code == 2
    assert "'Aster'" in res.err and "at least two groups" in res.err


def test_access_rule(cli, demo_config: Path) -> None:  # type: ignore[no-untyped-def]
    config = config_with_ledger(
        demo_config, analysts=["nobody-analyst"], reviewers=["nobody-reviewer"]
    )
    for args in (("disparity",), ("ledger", "export")):
        res = cli(*args, "-c", str(config))
        assert res.code == 2 and "may not read" in res.err


def test_demo_reviews_refuses_a_ledger_with_real_reviews(cli, demo_config: Path) -> None:  # type: ignore[no-untyped-def]
    config = config_with_ledger(demo_config)
    study = open_study(config)
    record_review(study, str(study.snapshot.case_ids[0]), "uphold", None, "")
    res = cli("demo-reviews", "10", "-c", str(config))
    assert res.code == 2 and "real reviews" in res.err


def test_demo_reviews_command(cli, demo_config: Path) -> None:  # type: ignore[no-untyped-def]
    config = config_with_ledger(demo_config)
    res = cli("demo-reviews", "40", "-c", str(config), "--seed", "2", "--json")
    assert res.code == 0, res
    assert json.loads(res.out)["recorded"] == 40
    listing = json.loads(cli("ledger", "show", "-c", str(config), "--json").out)
    assert listing["count"] == 40
    assert all(r["reviewer"].startswith("sim-reviewer-") for r in listing["rows"])
    assert all("Simulated review" in r["note"] for r in listing["rows"])


def test_outcome_file_without_the_favourable_value(cli, reviewed: Path, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    bad = tmp_path / "outcomes.csv"
    bad.write_text("application_id,completed\nHR-0000001,1\nHR-0000002,0\n")
    res = cli("disparity", "-c", str(reviewed), "--outcomes", str(bad))
    assert res.code == 2
    assert "never takes the favourable value 'yes'" in res.err
