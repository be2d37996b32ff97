"""A ledger whose override risk sets make even Firth's design singular gives a report with a
note, not a traceback (found while testing the Study API: LinAlgError in firth.py)."""

from __future__ import annotations

from pathlib import Path

from closecall import Study


def test_two_upholds_and_one_override_each_way_per_group(study_dir: Path) -> None:
    study = Study.open(study_dir / "closecall.toml")
    frame = study.queue().to_frame()
    reason = study.opened.config.review.reasons[0]
    done = {e.case_id for e in study.ledger.show().entries}
    for group in frame["group"].unique():
        sub = frame[(frame["group"] == group) & ~frame["case_id"].isin(done)]
        fav = sub[sub["decision"] == "favourable"]["case_id"].tolist()
        unf = sub[sub["decision"] != "favourable"]["case_id"].tolist()
        study.record(fav[0], action="uphold", note="ok")
        study.record(unf[0], action="uphold", note="ok")
        study.record(fav[1], action="override-unfavourable", reason=reason, note="x")
        study.record(unf[1], action="override-favourable", reason=reason, note="x")
    report = study.disparity().to_dict()
    text = repr(report)
    assert "could not be fitted either" in text  # the note, in place of a LinAlgError
