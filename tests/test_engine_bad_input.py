"""Every kind of bad input gives one clear message (file, column or row, and the fix), exit
code 2 and no traceback."""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

BASE_CONFIG = """
[data]
history = "history.csv"
id = "id"
outcome = "outcome"
favourable = "good"
group = "grp"
[data_extra]
"""


def _frame(n: int = 120, seed: int = 0) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    return pd.DataFrame(
        {
            "id": [f"c{i}" for i in range(n)],
            "outcome": rng.choice(["good", "bad"], n),
            "grp": np.where(np.arange(n) % 3 == 0, "B", "A"),
            "income": rng.normal(30, 5, n).round(1),
            "sector": rng.choice(["x", "y", "z"], n),
        }
    )


def _study(
    tmp_path: Path, frame: pd.DataFrame | None = None, config: str | None = None, extra: str = ""
) -> Path:
    (frame if frame is not None else _frame()).to_csv(tmp_path / "history.csv", index=False)
    text = (config or BASE_CONFIG).replace("[data_extra]\n", extra)
    (tmp_path / "closecall.toml").write_text(text)
    return tmp_path / "closecall.toml"


def _fails(cli: Callable, config: Path, *needles: str) -> str:  # type: ignore[type-arg]
    res = cli("fit", "--config", str(config))
    assert res.code == 2, res
    assert "Traceback" not in res.err and "Traceback" not in res.out
    assert res.err.startswith("error:"), res
    assert "fix:" in res.err, res  # every message says how to fix it
    for n in needles:
        assert n in res.err, (n, res.err)
    return res.err


def test_good_study_fits(tmp_path: Path, cli) -> None:  # type: ignore[no-untyped-def]
    res = cli("fit", "--config", str(_study(tmp_path)), "--json")
    assert res.code == 0, res


def test_missing_file(tmp_path: Path, cli) -> None:  # type: ignore[no-untyped-def]
    config = _study(tmp_path)
    (tmp_path / "history.csv").unlink()
    _fails(cli, config, "history.csv", "file not found")


def test_missing_config(tmp_path: Path, cli) -> None:  # type: ignore[no-untyped-def]
    _fails(cli, tmp_path / "nope.toml", "nope.toml", "closecall init")


def test_unreadable_file(tmp_path: Path, cli) -> None:  # type: ignore[no-untyped-def]
    config = _study(tmp_path)
    (tmp_path / "history.csv").unlink()
    (tmp_path / "history.csv").mkdir()
    _fails(cli, config, "history.csv", "folder")


def test_empty_file(tmp_path: Path, cli) -> None:  # type: ignore[no-untyped-def]
    config = _study(tmp_path)
    (tmp_path / "history.csv").write_text("")
    _fails(cli, config, "history.csv", "empty")


def test_header_only(tmp_path: Path, cli) -> None:  # type: ignore[no-untyped-def]
    config = _study(tmp_path)
    (tmp_path / "history.csv").write_text("id,outcome,grp,income\n")
    _fails(cli, config, "no rows")


def test_wrong_encoding(tmp_path: Path, cli) -> None:  # type: ignore[no-untyped-def]
    config = _study(tmp_path)
    frame = _frame()
    frame.loc[5, "sector"] = "café"
    (tmp_path / "history.csv").write_bytes(frame.to_csv(index=False).encode("latin-1"))
    _fails(cli, config, "not UTF-8", "line 7")


def test_missing_column(tmp_path: Path, cli) -> None:  # type: ignore[no-untyped-def]
    _fails(cli, _study(tmp_path, _frame().drop(columns="grp")), "group column 'grp'")


def test_duplicate_column(tmp_path: Path, cli) -> None:  # type: ignore[no-untyped-def]
    config = _study(tmp_path)
    text = (tmp_path / "history.csv").read_text().splitlines()
    text = [line + ",1" for line in text]
    text[0] = text[0][:-2] + ",income"
    (tmp_path / "history.csv").write_text("\n".join(text) + "\n")
    _fails(cli, config, "'income' appears twice")


def test_duplicate_ids(tmp_path: Path, cli) -> None:  # type: ignore[no-untyped-def]
    frame = _frame()
    frame.loc[10, "id"] = "c3"
    _fails(cli, _study(tmp_path, frame), "id 'c3'", "line 5, 12")


def test_outcome_with_three_values(tmp_path: Path, cli) -> None:  # type: ignore[no-untyped-def]
    frame = _frame()
    frame.loc[4, "outcome"] = "unsure"
    _fails(cli, _study(tmp_path, frame), "outcome column 'outcome' has 3 values")


def test_outcome_without_favourable_value(tmp_path: Path, cli) -> None:  # type: ignore[no-untyped-def]
    config = _study(tmp_path, config=BASE_CONFIG.replace('"good"', '"yes"'))
    _fails(cli, config, "never takes the favourable value 'yes'", "favourable")


def test_small_group_level(tmp_path: Path, cli) -> None:  # type: ignore[no-untyped-def]
    frame = _frame()
    frame.loc[:9, "grp"] = "C"
    frame.loc[10:, "grp"] = np.where(np.arange(len(frame) - 10) % 2, "A", "B")
    _fails(cli, _study(tmp_path, frame), "group level 'C' has 10 history cases", "minimum of 30")


def test_single_group_level(tmp_path: Path, cli) -> None:  # type: ignore[no-untyped-def]
    frame = _frame()
    frame["grp"] = "A"
    _fails(cli, _study(tmp_path, frame), "single level 'A'")


def test_text_in_numeric_feature(tmp_path: Path, cli) -> None:  # type: ignore[no-untyped-def]
    frame = _frame().astype({"income": object})
    frame.loc[7, "income"] = "n/a-ish"
    config = _study(tmp_path, frame, extra='[kinds]\nincome = "numeric"\n')
    _fails(cli, config, "numeric feature 'income'", "'n/a-ish'", "line 9")


def test_all_missing_column(tmp_path: Path, cli) -> None:  # type: ignore[no-untyped-def]
    frame = _frame()
    frame["empty"] = np.nan
    _fails(cli, _study(tmp_path, frame), "feature 'empty' is empty in every row")


def test_constant_column(tmp_path: Path, cli) -> None:  # type: ignore[no-untyped-def]
    frame = _frame()
    frame["const"] = 4
    _fails(cli, _study(tmp_path, frame), "feature 'const' has the same value", "exclude")


def test_toml_syntax_error(tmp_path: Path, cli) -> None:  # type: ignore[no-untyped-def]
    config = _study(tmp_path, config=BASE_CONFIG + "\nband = = 3\n")
    _fails(cli, config, "TOML syntax error", "line")


def test_unknown_key_suggests_the_nearest(tmp_path: Path, cli) -> None:  # type: ignore[no-untyped-def]
    config = _study(tmp_path, extra="[review]\nbnad = 0.3\n")
    _fails(cli, config, "unknown key 'bnad'", "did you mean 'band'?")
    config = _study(tmp_path, extra="[modle]\npenalty = 1\n")
    _fails(cli, config, "unknown section [modle]", "did you mean 'model'?")


def test_missing_values_follow_the_policy(tmp_path: Path, cli) -> None:  # type: ignore[no-untyped-def]
    """Numeric gaps are imputed with the history mean plus an indicator; categorical gaps are
    their own level; no row is dropped."""
    from closecall.suite.opening import open_study

    frame = _frame()
    frame.loc[[1, 2, 3], "income"] = np.nan
    frame.loc[[4, 5], "sector"] = np.nan
    snap = open_study(_study(tmp_path, frame)).snapshot
    assert snap.n_cases == len(frame)
    assert "income: missing" in snap.columns
    assert "sector=(missing)" in snap.columns
    col = snap.columns.index("income: missing")
    np.testing.assert_array_equal(np.flatnonzero(np.asarray(snap.X)[:, col]), [1, 2, 3])


def test_unseen_pending_categories_are_reported(tmp_path: Path, cli) -> None:  # type: ignore[no-untyped-def]
    pending = _frame(40, seed=1).drop(columns="outcome")
    pending["id"] = [f"p{i}" for i in range(40)]
    pending.loc[[0, 1], "sector"] = "new-sector"
    pending.to_csv(tmp_path / "pending.csv", index=False)
    config = _study(
        tmp_path,
        config=BASE_CONFIG.replace(
            'history = "history.csv"', 'history = "history.csv"\npending = "pending.csv"'
        ),
    )
    res = cli("fit", "--config", str(config), "--json")
    assert res.code == 0, res
    import json

    notes = json.loads(res.out)["notes"]
    assert any("2 pending case(s)" in n and "sector" in n for n in notes)


def test_unknown_pending_group_level(tmp_path: Path, cli) -> None:  # type: ignore[no-untyped-def]
    pending = _frame(40, seed=1).drop(columns="outcome")
    pending["id"] = [f"p{i}" for i in range(40)]
    pending.loc[3, "grp"] = "Z"
    pending.to_csv(tmp_path / "pending.csv", index=False)
    config = _study(
        tmp_path,
        config=BASE_CONFIG.replace(
            'history = "history.csv"', 'history = "history.csv"\npending = "pending.csv"'
        ),
    )
    _fails(cli, config, "pending.csv", "group level 'Z'")


@pytest.mark.parametrize("args", [["queue", "--group", "nope"], ["queue", "--sort", "bogus"]])
def test_bad_queue_options(tmp_path: Path, cli, args: list[str]) -> None:  # type: ignore[no-untyped-def]
    config = _study(tmp_path)
    res = cli(*args, "--config", str(config))
    assert res.code == 2 and "error:" in res.err and "Traceback" not in res.err


def test_markup_like_group_labels_print_as_written(tmp_path: Path, cli) -> None:  # type: ignore[no-untyped-def]
    """Data values reach the table as plain text: rich markup in them is not interpreted."""
    frame = _frame()
    frame["grp"] = np.where(frame["grp"] == "B", "[bold]B[/]", "A")
    res = cli("fit", "--config", str(_study(tmp_path, frame)))
    assert res.code == 0, res
    assert "[bold]B[/]" in res.out
