"""Similar cases carry their reviewers' decisions once a ledger exists (like cases alike)."""

from __future__ import annotations

from pathlib import Path

from closecall.analysis.explain import explain_case
from closecall.review.decisions import record_review
from closecall.setup.demo import write_demo
from closecall.suite.opening import open_study


def test_similar_cases_show_their_reviews(tmp_path: Path) -> None:
    config = write_demo(tmp_path, cases=1200, seed=8)
    text = config.read_text().replace('pending = "pending.csv"', "")
    config.write_text(text.replace('deployed_score = "deployed_score"', ""))
    study = open_study(config)  # cross-fitted: history cases are the cases under review
    case = str(study.snapshot.case_ids[0])
    before = explain_case(study, case)["neighbours"]["neighbours"]
    assert all(n["review"] is None for n in before)
    other = before[1]["case_id"]
    record_review(study, other, "override-favourable", "data-error", "income misread")
    after = explain_case(study, case)["neighbours"]["neighbours"]
    reviewed = {n["case_id"]: n["review"] for n in after}
    assert reviewed[other] == {"action": "override-favourable", "reason": "data-error", "seq": 1}
    assert sum(r is not None for r in reviewed.values()) == 1
