"""Hostile values in the data files (issue 10, item 6): infinities, values that overflow the
standardised design matrix, missing-value markers, nested Parquet columns, a case in both files.

Each refusal asserts the contract (exit 2, one error naming the file, column and line — CSV
lines count the header as line 1 — and what the cell held, a fix, no traceback) and that every
study file is byte-identical afterwards.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from hostile_helpers import Cli, assert_refused, assert_unchanged, study_digests

CONFIG = "closecall.toml"
DIGEST_CACHE = ".closecall/digests.json"
INCOME = "household_income_k"


def _refused(cli: Cli, study: Path, *needles: str) -> str:
    """`closecall fit` on the (already damaged) study: refused, nothing changed or fitted."""
    before = study_digests(study)
    # the cache of the data files' digests (size, mtime -> SHA-256) is refreshed by every fit
    # that hashes the files; it is a cache, not a study record
    before.pop(DIGEST_CACHE, None)
    res = cli("fit", "--config", str(study / CONFIG))
    text = assert_refused(res, *needles)
    assert_unchanged(before, study, allow_new=(DIGEST_CACHE,))
    return text


def _set_cell(path: Path, line: int, column: str, text: str) -> None:
    """Write ``text`` into one cell of a plain CSV file (line 1 is the header), byte for byte."""
    lines = path.read_text().split("\n")
    header = lines[0].split(",")
    cells = lines[line - 1].split(",")
    assert '"' not in lines[line - 1] and len(cells) == len(header)
    cells[header.index(column)] = text
    lines[line - 1] = ",".join(cells)
    path.write_text("\n".join(lines))


def _edit_config(study: Path, old: str, new: str) -> None:
    path = study / CONFIG
    text = path.read_text()
    assert text.count(old) == 1, old
    path.write_text(text.replace(old, new))


def _history_sd(study: Path, column: str) -> tuple[float, float]:
    """History mean and population standard deviation, read independently with pandas."""
    x = pd.read_csv(study / "history.csv")[column].astype(float)
    return float(x.mean()), float(x.std(ddof=0))


# --------------------------------------------------------------------------- infinity
# pandas' CSV parser reads these texts as +-infinity (checked in the test below, not assumed)

INF_TEXTS = ["inf", "-inf", "+inf", "INF", "Infinity", "-Infinity", "1e999", "-1e400"]


def test_these_texts_do_parse_as_infinity() -> None:
    """The premise of the infinity cases: without a check they reach the data as inf."""
    import io

    parsed = pd.read_csv(io.StringIO("x\n" + "\n".join(INF_TEXTS) + "\n"))["x"].to_numpy()
    assert np.isinf(parsed).all()


@pytest.mark.parametrize("text", INF_TEXTS)
def test_infinity_in_a_history_feature(study_dir: Path, cli: Cli, text: str) -> None:
    _set_cell(study_dir / "history.csv", 6, INCOME, text)
    _refused(
        cli,
        study_dir,
        "history.csv",
        f"numeric feature '{INCOME}' has an infinite value at line 6 (holds '{text}')",
    )


@pytest.mark.parametrize(("column", "text"), [(INCOME, "-inf"), ("dwelling_age", "Infinity")])
def test_infinity_in_a_pending_feature(study_dir: Path, cli: Cli, column: str, text: str) -> None:
    _set_cell(study_dir / "pending.csv", 4, column, text)
    _refused(
        cli,
        study_dir,
        "pending.csv",
        f"numeric feature '{column}' has an infinite value at line 4 (holds '{text}')",
    )


@pytest.mark.parametrize("text", ["Infinity", "-inf", "NA"])
def test_infinity_or_missing_in_the_deployed_score(study_dir: Path, cli: Cli, text: str) -> None:
    config = study_dir / "closecall.toml"  # the model in use as scores, not the demo's card
    config.write_text(
        config.read_text()
        .replace('scorecard = "scorecard.csv"', "")
        .replace('group = ["heritage"]', 'group = ["heritage"]\ndeployed_score = "deployed_score"')
    )
    _set_cell(study_dir / "pending.csv", 9, "deployed_score", text)
    _refused(
        cli,
        study_dir,
        "pending.csv",
        "deployed score column 'deployed_score'",
        f"line 9 (holds '{text}')",
    )


def test_infinity_in_a_numeric_outcome(study_dir: Path, cli: Cli) -> None:
    """Outcome recoded 1/0 (favourable = 1); one cell holds inf."""
    path = study_dir / "history.csv"
    text = path.read_text().replace(",yes,", ",1,").replace(",no,", ",0,")
    path.write_text(text)
    _edit_config(study_dir, 'favourable = "yes"', "favourable = 1")
    _set_cell(path, 7, "completed", "inf")
    _refused(
        cli,
        study_dir,
        "history.csv",
        "outcome column 'completed' has an infinite value at line 7 (holds 'inf')",
    )


# --------------------------------------------------------------------------- overflow


@pytest.mark.parametrize("text", ["1e300", "-1e300", "1e200", "1.7e308"])
def test_a_history_value_whose_square_overflows(study_dir: Path, cli: Cli, text: str) -> None:
    """(x - mean)² of 1e200 is 1e400, beyond the largest double (about 1.8e308): the variance
    overflows and the column would silently become constant after standardising."""
    _set_cell(study_dir / "history.csv", 8, INCOME, text)
    _refused(
        cli,
        study_dir,
        "history.csv",
        f"numeric feature '{INCOME}' is too large to standardise",
        f"largest value {float(text):g} at line 8",
    )


def test_a_history_column_whose_mean_overflows(study_dir: Path, cli: Cli) -> None:
    """Two values of 1.7e308 sum past the largest double: the mean itself is inf."""
    for line in (3, 4):
        _set_cell(study_dir / "history.csv", line, "dwelling_age", "1.7e308")
    _refused(cli, study_dir, "history.csv", "'dwelling_age' is too large to standardise")


@pytest.mark.parametrize(("column", "factor"), [(INCOME, 2e6), ("depot_distance_km", -5e6)])
def test_a_pending_value_millions_of_sds_out(
    study_dir: Path, cli: Cli, column: str, factor: float
) -> None:
    mean, sd = _history_sd(study_dir, column)
    text = repr(mean + factor * sd)
    _set_cell(study_dir / "pending.csv", 11, column, text)
    _refused(
        cli,
        study_dir,
        "pending.csv",
        f"numeric feature '{column}' has a value more than 1,000,000 history standard deviations",
        f"at line 11 (holds '{text}')",
    )


def test_a_pending_value_of_1e300(study_dir: Path, cli: Cli) -> None:
    _set_cell(study_dir / "pending.csv", 2, INCOME, "1e300")
    _refused(cli, study_dir, "pending.csv", "line 2 (holds '1e300')", "standard deviations")


def test_a_far_but_finite_pending_value_is_scored(study_dir: Path, cli: Cli) -> None:
    """The bound leaves room: 10,000 history SDs out is refused by nothing and scored."""
    mean, sd = _history_sd(study_dir, INCOME)
    _set_cell(study_dir / "pending.csv", 2, INCOME, repr(mean + 1e4 * sd))
    res = cli("fit", "--config", str(study_dir / CONFIG))
    assert res.code == 0, res


# --------------------------------------------------------------------------- missing markers

MARKERS = [
    ("NA", "holds 'NA'"),
    ("None", "holds 'None'"),
    ("null", "holds 'null'"),
    ("NaN", "holds 'NaN'"),
    ("N/A", "holds 'N/A'"),
    ("#N/A", "holds '#N/A'"),
    ("<NA>", "holds '<NA>'"),
    ("", "empty"),
    ("   ", "holds '   '"),
]


@pytest.mark.parametrize(("text", "held"), MARKERS, ids=[m[0] or "empty" for m in MARKERS])
def test_a_group_cell_says_what_it_held(study_dir: Path, cli: Cli, text: str, held: str) -> None:
    """Before: a group cell holding 'NA' was reported as "empty" (pandas' default missing
    markers turned it into NaN before any message was written)."""
    _set_cell(study_dir / "history.csv", 5, "heritage", text)
    msg = _refused(
        cli, study_dir, "history.csv", f"group column 'heritage' has no value at line 5 ({held})"
    )
    if text.strip():
        assert "count as missing" in msg and "docs/config.md" in msg


def test_an_id_cell_says_what_it_held(study_dir: Path, cli: Cli) -> None:
    _set_cell(study_dir / "pending.csv", 3, "application_id", "NA")
    _refused(
        cli,
        study_dir,
        "pending.csv",
        "id column 'application_id' has no value at line 3 (holds 'NA')",
        "count as missing",
    )


def test_an_outcome_cell_says_what_it_held(study_dir: Path, cli: Cli) -> None:
    _set_cell(study_dir / "history.csv", 12, "completed", "null")
    _set_cell(study_dir / "history.csv", 13, "completed", "")
    _refused(
        cli,
        study_dir,
        "history.csv",
        "outcome column 'completed' has no value at line 12 (holds 'null'), line 13 (empty)",
    )


def test_markers_in_a_numeric_feature_are_missing_values(study_dir: Path) -> None:
    """The same rule in a feature: 'NA' and 'None' are missing, so they are imputed and get the
    missing indicator (not refused as text)."""
    from closecall.setup.config import load_config
    from closecall.setup.encode import fit_encoder
    from closecall.setup.load import load_study_data

    for line, text in ((5, "NA"), (6, "None"), (7, "")):
        _set_cell(study_dir / "history.csv", line, INCOME, text)
    data = load_study_data(load_config(study_dir / CONFIG))
    assert data.history[INCOME].isna().to_numpy().nonzero()[0].tolist() == [3, 4, 5]
    enc = fit_encoder(data.history, data.features, data.group_columns)
    assert f"{INCOME}: missing" in enc.columns


def test_a_near_marker_is_text_not_missing(study_dir: Path, cli: Cli) -> None:
    """Only an exact marker counts: lower-case 'na' is text, refused in a numeric feature."""
    _set_cell(study_dir / "history.csv", 5, INCOME, "na")
    _edit_config(study_dir, "[model]", f'[kinds]\n{INCOME} = "numeric"\n\n[model]')
    _refused(cli, study_dir, "history.csv", f"numeric feature '{INCOME}' has text 'na'", "line 5")


# --------------------------------------------------------------------------- Parquet


def _history_to_parquet(study: Path, table: pa.Table) -> Path:
    path = study / "history.parquet"
    pq.write_table(table, path)
    (study / "history.csv").unlink()
    _edit_config(study, 'history = "history.csv"', 'history = "history.parquet"')
    return path


def _history_table(study: Path) -> pa.Table:
    return pa.Table.from_pandas(pd.read_csv(study / "history.csv"), preserve_index=False)


@pytest.mark.parametrize(
    ("value", "held"), [("NA", "holds 'NA'"), ("None", "holds 'None'"), (None, "null")]
)
def test_parquet_follows_the_same_missing_rule(
    study_dir: Path, cli: Cli, value: str | None, held: str
) -> None:
    """A text cell 'NA' in Parquet is missing as in CSV (one rule); a Parquet null is missing."""
    table = _history_table(study_dir)
    groups = table.column("heritage").to_pylist()
    groups[3] = value
    table = table.set_column(
        table.schema.get_field_index("heritage"), "heritage", pa.array(groups, pa.string())
    )
    _history_to_parquet(study_dir, table)
    _refused(
        cli, study_dir, "history.parquet", f"group column 'heritage' has no value at row 3 ({held})"
    )


NESTED = [
    ("tags", pa.array([["a", "b"]] * 3, pa.list_(pa.string())), "list"),
    ("address", pa.array([{"street": "x", "no": 1}] * 3), "struct"),
    ("extras", pa.array([[("k", 1)]] * 3, pa.map_(pa.string(), pa.int64())), "map"),
]


def _with_nested(study: Path, name: str, sample: pa.Array) -> pa.Table:
    table = _history_table(study)
    n = table.num_rows
    values = (sample.to_pylist() * (n // 3 + 1))[:n]
    return table.append_column(name, pa.array(values, sample.type))


@pytest.mark.parametrize(("name", "sample", "kind"), NESTED, ids=[n[2] for n in NESTED])
def test_nested_parquet_feature_is_refused_by_name(
    study_dir: Path, cli: Cli, name: str, sample: pa.Array, kind: str
) -> None:
    _history_to_parquet(study_dir, _with_nested(study_dir, name, sample))
    _refused(cli, study_dir, "history.parquet", f"column '{name}' holds {kind} values", "exclude")


def test_nested_parquet_group_column_is_refused(study_dir: Path, cli: Cli) -> None:
    table = _with_nested(study_dir, "tags", NESTED[0][1])
    _history_to_parquet(study_dir, table)
    _edit_config(study_dir, 'group = ["heritage"]', 'group = ["heritage", "tags"]')
    _refused(cli, study_dir, "history.parquet", "column 'tags' holds list values")


def test_an_excluded_nested_parquet_column_is_left_alone(study_dir: Path) -> None:
    """Only the columns the study uses must be flat."""
    from closecall.setup.config import load_config
    from closecall.setup.load import load_study_data

    _history_to_parquet(study_dir, _with_nested(study_dir, "tags", NESTED[0][1]))
    _edit_config(study_dir, 'group = ["heritage"]', 'group = ["heritage"]\nexclude = ["tags"]')
    data = load_study_data(load_config(study_dir / CONFIG))
    assert "tags" not in {f.name for f in data.features}


# --------------------------------------------------------------------------- one case, two files


def _history_ids(study: Path) -> list[str]:
    return pd.read_csv(study / "history.csv", dtype=str)["application_id"].tolist()


def test_a_pending_id_that_is_also_a_history_id(study_dir: Path, cli: Cli) -> None:
    first = _history_ids(study_dir)[9]  # history line 11
    _set_cell(study_dir / "pending.csv", 6, "application_id", first)
    _refused(
        cli,
        study_dir,
        "pending.csv",
        "1 case id(s) also appear in",
        "history.csv",
        f"first: '{first}', line 6 of pending.csv and line 11 of history.csv",
    )


def test_several_shared_ids_are_counted(study_dir: Path, cli: Cli) -> None:
    ids = _history_ids(study_dir)
    for line, hist_row in ((3, 0), (20, 5), (40, 7)):
        _set_cell(study_dir / "pending.csv", line, "application_id", ids[hist_row])
    _refused(
        cli,
        study_dir,
        "3 case id(s) also appear in",
        f"first: '{ids[0]}', line 3 of pending.csv and line 2 of history.csv",
    )
