"""Hostile configs (issue 10, item 5): every number finite and in its stated range, each column
plays one part, every column the config names exists.

Each case edits the copied demo study's closecall.toml, runs a command and asserts the refusal
contract (exit 2, one error naming the file, section and key, the value and the valid range,
a fix, no traceback) and that every study file is byte-identical afterwards. The ranges are
the ones docs/config.md states.
"""

from __future__ import annotations

from pathlib import Path

import pandas as pd
import pytest
from hostile_helpers import Cli, assert_refused, assert_unchanged, study_digests

CONFIG = "closecall.toml"
DIGEST_CACHE = ".closecall/digests.json"


def _edit(study: Path, *pairs: tuple[str, str]) -> None:
    """Replace text in the study config; each old text must be there exactly once."""
    path = study / CONFIG
    text = path.read_text()
    for old, new in pairs:
        assert text.count(old) == 1, old
        text = text.replace(old, new)
    path.write_text(text)


def _refused(cli: Cli, study: Path, *needles: str, command: tuple[str, ...] = ("fit",)) -> str:
    """Run the command on the (already damaged) study: refused, nothing changed or fitted."""
    before = study_digests(study)
    # the cache of the data files' digests (size, mtime -> SHA-256) is refreshed by every fit
    # that hashes the files; it is a cache, not a study record
    before.pop(DIGEST_CACHE, None)
    res = cli(*command, "--config", str(study / CONFIG))
    text = assert_refused(res, CONFIG if not needles else needles[0], *needles)
    # nothing may change, and no snapshot may appear
    assert_unchanged(before, study, allow_new=(DIGEST_CACHE,))
    return text


# --------------------------------------------------------------------------- not finite
# TOML writes nan, +nan, -nan, inf, +inf and -inf literally (TOML 1.0, "Float").

NOT_FINITE = [
    ("penalty = 1.0", "penalty = nan", "[model] penalty = nan", "finite number ≥ 0"),
    ("penalty = 1.0", "penalty = inf", "[model] penalty = inf", "finite number ≥ 0"),
    ("penalty = 1.0", "penalty = -inf", "[model] penalty = -inf", "finite number ≥ 0"),
    ("band = 0.5", "band = nan", "[review] band = nan", "finite number > 0"),
    ("band = 0.5", "band = +inf", "[review] band = inf", "finite number > 0"),
    ("epsilon = 0.001", "epsilon = nan", "[multiplicity] epsilon = nan", "> 0 and ≤ 0.1"),
    ("epsilon = 0.001", "epsilon = inf", "[multiplicity] epsilon = inf", "> 0 and ≤ 0.1"),
    (
        "cost_false_favourable = 3",
        "cost_false_favourable = nan",
        "[[lens]] 'cautious' cost_false_favourable = nan",
        "finite number > 0",
    ),
    (
        "cost_false_unfavourable = 2",
        "cost_false_unfavourable = inf",
        "[[lens]] 'cautious' cost_false_unfavourable = inf",
        "finite number > 0",
    ),
    ("association = 0.3", "association = nan", "[proxies] association = nan", "from 0 to 1"),
    ("influence = 0.02", "influence = -nan", "[proxies] influence = nan", "from 0 to 1"),
    (
        "band = 0.5",
        "band = 0.5\nclaim_minutes = inf",
        "[review] claim_minutes = inf",
        "> 0 and ≤ 10080",
    ),
]


@pytest.mark.parametrize(
    ("old", "new", "named", "valid"), NOT_FINITE, ids=[c[1] for c in NOT_FINITE]
)
def test_non_finite_numbers_are_refused(
    study_dir: Path, cli: Cli, old: str, new: str, named: str, valid: str
) -> None:
    _edit(study_dir, (old, new))
    text = _refused(cli, study_dir, CONFIG, named, "is not a finite number", valid)
    assert "docs/config.md" in text


# --------------------------------------------------------------------------- out of range

OUT_OF_RANGE = [
    ("penalty = 1.0", "penalty = -0.5", "[model] penalty = -0.5", "finite number ≥ 0"),
    ("band = 0.5", "band = 0", "[review] band = 0", "finite number > 0"),
    ("band = 0.5", "band = -1", "[review] band = -1", "finite number > 0"),
    ("epsilon = 0.001", "epsilon = 0", "[multiplicity] epsilon = 0", "> 0 and ≤ 0.1"),
    ("epsilon = 0.001", "epsilon = 0.5", "[multiplicity] epsilon = 0.5", "> 0 and ≤ 0.1"),
    (
        "cost_false_favourable = 3",
        "cost_false_favourable = 0",
        "[[lens]] 'cautious' cost_false_favourable = 0",
        "finite number > 0",
    ),
    (
        "cost_false_unfavourable = 1\n",
        "cost_false_unfavourable = -1\n",
        "[[lens]] 'equal-costs' cost_false_unfavourable = -1",
        "finite number > 0",
    ),
    ("association = 0.3", "association = 1.5", "[proxies] association = 1.5", "from 0 to 1"),
    ("association = 0.3", "association = -0.1", "[proxies] association = -0.1", "from 0 to 1"),
    ("influence = 0.02", "influence = 2", "[proxies] influence = 2", "from 0 to 1"),
    ("seed = 5", "seed = -1", "[study] seed = -1", "whole number from 0 to 4294967295"),
    ("seed = 5", "seed = 4294967296", "[study] seed = 4294967296", "from 0 to 4294967295"),
    ("neighbours = 5", "neighbours = 0", "[multiplicity] neighbours = 0", "from 1 to 100"),
    ("neighbours = 5", "neighbours = 1000", "[multiplicity] neighbours = 1000", "1 to 100"),
    ("folds = 5", "folds = 1", "[model] folds = 1", "whole number ≥ 2"),
    ("folds = 5", "folds = -5", "[model] folds = -5", "whole number ≥ 2"),
    (
        'group = ["heritage"]',
        'group = ["heritage"]\nmin_group_cases = 1',
        "[data] min_group_cases = 1",
        "whole number ≥ 2",
    ),
    ("band = 0.5", "band = 0.5\nclaim_minutes = 0", "[review] claim_minutes = 0", "> 0"),
    (
        "band = 0.5",
        "band = 0.5\nclaim_minutes = 1e9",
        "[review] claim_minutes = 1000000000.0",
        "≤ 10080",
    ),
]


@pytest.mark.parametrize(
    ("old", "new", "named", "valid"), OUT_OF_RANGE, ids=[c[1] for c in OUT_OF_RANGE]
)
def test_out_of_range_numbers_are_refused(
    study_dir: Path, cli: Cli, old: str, new: str, named: str, valid: str
) -> None:
    _edit(study_dir, (old, new))
    _refused(cli, study_dir, CONFIG, named, "is out of range", valid)


# --------------------------------------------------------------------------- not numbers

NOT_NUMBERS = [
    ("penalty = 1.0", "penalty = true", "[model] penalty = true", "is not a number"),
    ("band = 0.5", 'band = "0.5"', '[review] band = "0.5"', "is not a number"),
    ("seed = 5", "seed = false", "[study] seed = false", "is not a number"),
    ("folds = 5", "folds = 5.0", "[model] folds = 5.0", "is not a whole number"),
    ("neighbours = 5", "neighbours = 2.5", "[multiplicity] neighbours = 2.5", "whole number"),
    ("epsilon = 0.001", "epsilon = [0.001]", "[multiplicity] epsilon = an array", "a number"),
    (
        "cost_false_favourable = 3",
        'cost_false_favourable = "3"',
        "[[lens]] 'cautious' cost_false_favourable = \"3\"",
        "is not a number",
    ),
    ("association = 0.3", "association = true", "[proxies] association = true", "a number"),
]


@pytest.mark.parametrize(
    ("old", "new", "named", "what"), NOT_NUMBERS, ids=[c[1] for c in NOT_NUMBERS]
)
def test_booleans_text_and_fractions_are_not_numbers(
    study_dir: Path, cli: Cli, old: str, new: str, named: str, what: str
) -> None:
    _edit(study_dir, (old, new))
    _refused(cli, study_dir, CONFIG, named, what, "it must be")


@pytest.mark.parametrize(
    "command",
    [("queue",), ("explain", "HR-0000001"), ("ledger", "verify"), ("bands",)],
    ids=lambda c: c[0],
)
def test_every_command_refuses_a_bad_number(
    study_dir: Path, cli: Cli, command: tuple[str, ...]
) -> None:
    """A review-only key (band) does not change the snapshot, so commands that read the cache
    could skip it: they refuse it all the same."""
    _edit(study_dir, ("band = 0.5", "band = nan"))
    _refused(cli, study_dir, CONFIG, "[review] band = nan", command=command)


# --------------------------------------------------------------------------- thresholds


@pytest.mark.parametrize(
    ("c_ff", "c_fu", "t"),
    [
        ("5e-324", "2", "0.0"),  # the smallest double against 2: t underflows to 0
        ("1", "1e-17", "1.0"),  # 1 / (1 + 1e-17) rounds to 1 in double precision
        ("1e308", "1e308", "0.0"),  # the sum overflows to inf, so t = 1e308 / inf = 0
    ],
)
def test_costs_whose_threshold_rounds_to_0_or_1_are_refused(
    study_dir: Path, cli: Cli, c_ff: str, c_fu: str, t: str
) -> None:
    _edit(
        study_dir,
        ("cost_false_favourable = 3", f"cost_false_favourable = {c_ff}"),
        ("cost_false_unfavourable = 2", f"cost_false_unfavourable = {c_fu}"),
    )
    _refused(cli, study_dir, CONFIG, "[[lens]] 'cautious'", f"= {t}", "strictly between 0 and 1")


@pytest.mark.parametrize("value", ["nan", "inf", "-inf"])
def test_favourable_may_not_be_nan_or_inf(study_dir: Path, cli: Cli, value: str) -> None:
    _edit(study_dir, ('favourable = "yes"', f"favourable = {value}"))
    _refused(cli, study_dir, CONFIG, f"[data] favourable = {value.lstrip('+')}", "favourable")


# --------------------------------------------------------------------------- folds vs data


def _smaller_class(study: Path) -> int:
    """Count of the rarer outcome in the history, read independently of closecall."""
    counts = pd.read_csv(study / "history.csv")["completed"].value_counts()
    return int(counts.min())


def _largest_cell(study: Path) -> int:
    """The largest group-and-outcome cell of the history (the folds are stratified by both:
    scikit-learn's StratifiedKFold refuses more splits than its largest stratum)."""
    hist = pd.read_csv(study / "history.csv")
    return int(hist.groupby(["heritage", "completed"]).size().max())


def test_more_folds_than_the_rarer_outcome_is_refused(study_dir: Path, cli: Cli) -> None:
    n = _smaller_class(study_dir)
    _edit(study_dir, ("folds = 5", f"folds = {n + 1}"))
    _refused(cli, study_dir, CONFIG, f"[model] folds = {n + 1}", f"from 2 to {n}", "history.csv")


def test_more_folds_than_the_largest_stratum_is_refused(study_dir: Path, cli: Cli) -> None:
    """Below the rarer outcome's count, but above every group-and-outcome cell (without the
    check scikit-learn raises a ValueError: a traceback)."""
    n, cell = _smaller_class(study_dir), _largest_cell(study_dir)
    assert cell < n  # the demo's groups split both outcomes
    _edit(study_dir, ("folds = 5", f"folds = {cell + 1}"))
    _refused(
        cli,
        study_dir,
        CONFIG,
        f"[model] folds = {cell + 1}",
        "group-and-outcome cell",
        f"from 2 to {cell}",
    )


def test_folds_at_the_bound_pass_the_data_check(study_dir: Path) -> None:
    """The bound is inclusive: K = min(rarer outcome, largest cell) passes (the fit itself is
    not run here)."""
    from closecall.setup.config import load_config
    from closecall.setup.load import load_study_data

    k = min(_smaller_class(study_dir), _largest_cell(study_dir))
    _edit(study_dir, ("folds = 5", f"folds = {k}"))
    data = load_study_data(load_config(study_dir / CONFIG))
    assert len(data.y) == len(pd.read_csv(study_dir / "history.csv"))


def test_folds_on_a_tiny_history_names_the_rarer_outcome(study_dir: Path, cli: Cli) -> None:
    """Only 3 unfavourable history cases: 5 folds cannot each hold one."""
    hist = pd.read_csv(study_dir / "history.csv", dtype=str, keep_default_na=False)
    no = hist.index[hist["completed"] == "no"]
    hist.loc[no[3:], "completed"] = "yes"
    hist.to_csv(study_dir / "history.csv", index=False)
    _refused(cli, study_dir, CONFIG, "[model] folds = 5", "3 unfavourable cases", "from 2 to 3")


# --------------------------------------------------------------------------- one part each

PARTS = [
    ('group = ["heritage"]', 'group = ["completed"]', "group names 'completed'", "outcome"),
    ('group = ["heritage"]', 'group = ["application_id"]', "group names 'application_id'", "id"),
    (
        'group = ["heritage"]',
        'group = ["deployed_score"]\ndeployed_score = "deployed_score"',
        "group names 'deployed_score'",
        "deployed score",
    ),
    ('group = ["heritage"]', 'group = ["heritage", "heritage"]', "'heritage'", "twice"),
    (
        'group = ["heritage"]',
        'group = ["heritage"]\nfeatures = ["zone", "dwelling_age", "zone"]',
        "'zone'",
        "twice under [data] features",
    ),
    (
        'group = ["heritage"]',
        'group = ["heritage"]\nfeatures = ["zone", "completed"]',
        "'completed'",
        "under [data] outcome and features",
    ),
    (
        'group = ["heritage"]',
        'group = ["heritage"]\nfeatures = ["zone", "dwelling_age"]\nexclude = ["zone"]',
        "'zone'",
        "under [data] features and exclude",
    ),
    (
        'group = ["heritage"]',
        'group = ["heritage"]\nexclude = ["heritage"]',
        "group names 'heritage'",
        "exclude",
    ),
    (
        'group = ["heritage"]',
        'group = ["heritage"]\ndeployed_score = "zone"\nfeatures = ["zone", "dwelling_age"]',
        "'zone'",
        "under [data] deployed_score and features",
    ),
    (
        "influence = 0.02",
        'influence = 0.02\nextra = ["zone"]\nnever = ["zone"]',
        "'zone'",
        "both [proxies] extra and never",
    ),
    (
        "influence = 0.02",
        'influence = 0.02\nextra = ["heritage"]',
        "[proxies] extra names 'heritage'",
        "not a feature",
    ),
    (
        "[model]",
        '[kinds]\nheritage = "numeric"\n\n[model]',
        '[kinds] heritage = "numeric"',
        "group column",
    ),
]


@pytest.mark.parametrize(
    ("old", "new", "named", "why"), PARTS, ids=[c[1].split("\n")[-1] for c in PARTS]
)
def test_each_column_plays_one_part(
    study_dir: Path, cli: Cli, old: str, new: str, named: str, why: str
) -> None:
    _edit(study_dir, (old, new))
    _refused(cli, study_dir, CONFIG, named, why)


# --------------------------------------------------------------------------- columns exist

EXIST = [
    (
        'group = ["heritage"]',
        'group = ["heritage"]\nfeatures = ["zone", "dwelling_agee"]',
        "history.csv",
        "feature column 'dwelling_agee' is not in the file",
        "did you mean 'dwelling_age'?",
    ),
    (
        "[model]",
        '[kinds]\nhousehold_sise = "categorical"\n\n[model]',
        CONFIG,
        "[kinds] names 'household_sise', which is not a column of",
        "did you mean 'household_size'?",
    ),
    (
        "influence = 0.02",
        'influence = 0.02\nnever = ["zoen"]',
        CONFIG,
        "[proxies] never names 'zoen', which is not a column of",
        "did you mean 'zone'?",
    ),
    (
        "influence = 0.02",
        'influence = 0.02\nextra = ["depot_distance"]',
        CONFIG,
        "[proxies] extra names 'depot_distance'",
        "did you mean 'depot_distance_km'?",
    ),
    (
        'group = ["heritage"]',
        'group = ["heritage"]\nexclude = ["self_funded"]',
        "history.csv",
        "excluded column 'self_funded' is not in the file",
        "did you mean 'self_funded_share'?",
    ),
    (
        'group = ["heritage"]',
        'group = ["heritage"]\nexclude = ["zone"]',
        CONFIG,
        "[proxies] never names 'zone'",
        "not a feature",
    ),
]


@pytest.mark.parametrize(
    ("old", "new", "where", "named", "hint"), EXIST, ids=[c[1].split("\n")[-1] for c in EXIST]
)
def test_every_named_column_exists(
    study_dir: Path, cli: Cli, old: str, new: str, where: str, named: str, hint: str
) -> None:
    _edit(study_dir, (old, new))
    if "never names 'zone'" in named:  # an excluded column is not a feature
        _edit(study_dir, ("influence = 0.02", 'influence = 0.02\nnever = ["zone"]'))
    _refused(cli, study_dir, where, named, hint)


# --------------------------------------------------------------------------- shapes


@pytest.mark.parametrize(
    ("section", "top", "named"),
    [
        ("[model]", "model = 3", "[model] should be a table of keys, got 3"),
        ("[review]", 'review = "strict"', '[review] should be a table of keys, got "strict"'),
        ("[[lens]]", "lens = [1]", "[[lens]] number 1 should be a table of costs, got 1"),
        ("[[lens]]", "lens = []", "[[lens]] should be one or more tables of costs"),
    ],
)
def test_sections_of_the_wrong_shape(
    study_dir: Path, cli: Cli, section: str, top: str, named: str
) -> None:
    """A section written as a plain value (TOML allows it at the top) is refused by name."""
    path = study_dir / CONFIG
    kept, skipping = [], False
    for line in path.read_text().splitlines():
        if line.startswith("["):
            skipping = line.split("#")[0].strip() == section
        if not skipping:
            kept.append(line)
    path.write_text(top + "\n" + "\n".join(kept) + "\n")
    _refused(cli, study_dir, CONFIG, named)
