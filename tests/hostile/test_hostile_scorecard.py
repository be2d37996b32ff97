"""Hostile scorecards (issue 15): the deployed model's card file, its fit to the data, the
[deployed] section.

Each case damages the copied demo study's scorecard.csv (or config, or data), runs
``closecall fit`` and asserts the refusal contract (exit 2, one error naming the file, the line
or row and the column, a fix, no traceback) and that every study file is byte-identical
afterwards. Categories the card does not list are reported, not refused.
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from hostile_helpers import Cli, assert_refused, assert_unchanged, study_digests

CONFIG = "closecall.toml"
CARD = "scorecard.csv"
DIGEST_CACHE = ".closecall/digests.json"


def _edit(path: Path, *pairs: tuple[str, str]) -> None:
    """Replace text in a file; each old text must be there exactly once."""
    text = path.read_text()
    for old, new in pairs:
        assert text.count(old) == 1, old
        text = text.replace(old, new)
    path.write_text(text)


def _refused(cli: Cli, study: Path, *needles: str) -> str:
    """``closecall fit`` on the (already damaged) study: refused, nothing changed or fitted."""
    before = study_digests(study)
    before.pop(DIGEST_CACHE, None)  # a cache of the data files' digests, refreshed by a fit
    res = cli("fit", "--config", str(study / CONFIG))
    text = assert_refused(res, *needles)
    assert_unchanged(before, study, allow_new=(DIGEST_CACHE,))
    return text


class TestCardFile:
    """The card itself: every refusal names the card, the line and the column."""

    @pytest.mark.parametrize(
        ("old", "new", "needles"),
        [
            (
                "household_income_k,,25,35,-5",
                "household_income_k,,20,35,-5",
                ("line 8", "household_income_k", "overlaps", "line 7"),
            ),
            (
                "household_income_k,,25,35,-5",
                "household_income_k,,27,35,-5",
                ("line 8", "gap", "25", "27"),
            ),
            (
                "prior_grant,yes,,,12",
                "prior_grants,yes,,,12",
                ("line 20", "prior_grants", "not a column of the data", "prior_grant"),
            ),
            ("heritage,Briar,,,-18", "heritage,Briar,,,-18pts", ("line 38", "points", "-18pts")),
            ("heritage,Briar,,,-18", "heritage,Briar,,,nan", ("line 38", "not a finite number")),
            ("heritage,Briar,,,-18", "heritage,Aster,,,-18", ("line 38", "listed again")),
            ("quotes_obtained,,3,,30", "quotes_obtained,,3,2,30", ("line 15", "low must be below")),
            ("prior_grant,no,,,0", "prior_grant,,0,1,0", ("prior_grant", "both categories and")),
            ("(cutoff),,,,500\n", "", ("no cut-off", CARD)),
            ("(pdo),,,,20\n", "", ("anchor but no pdo",)),
            ("(anchor_odds),,,,1\n", "", ("anchor_points", "anchor_odds")),
            ("(pdo),,,,20", "(pdo),,,,0", ("line 4", "pdo", "above 0")),
            ("(pdo),,,,20", "(pdoo),,,,20", ("line 4", "unknown setting", "(pdo)")),
            ("feature,level,low,high,points", "feature,level,low,high,points,weight", ("line 1",)),
            ("heritage,Briar,,,-18", "heritage,Briar,,-18", ("line 38", "cells for 5 columns")),
        ],
    )
    def test_damaged_card_is_refused(
        self, study_dir: Path, cli: Cli, old: str, new: str, needles: tuple[str, ...]
    ) -> None:
        _edit(study_dir / CARD, (old, new))
        text = _refused(cli, study_dir, CARD, *needles)
        assert "docs/scorecard.md" in text or "fix:" in text

    def test_missing_card_file(self, study_dir: Path, cli: Cli) -> None:
        (study_dir / CARD).unlink()
        _refused(cli, study_dir, CARD, "no scorecard file here")

    def test_card_not_utf8(self, study_dir: Path, cli: Cli) -> None:
        (study_dir / CARD).write_bytes(
            "feature,level,low,high,points\nheritage,Bri\xe4r,,,-18\n".encode("latin-1")
        )
        _refused(cli, study_dir, CARD, "not UTF-8")

    def test_empty_card(self, study_dir: Path, cli: Cli) -> None:
        (study_dir / CARD).write_text("")
        _refused(cli, study_dir, CARD, "empty")

    def test_card_of_another_kind_of_file(self, study_dir: Path, cli: Cli) -> None:
        (study_dir / "card.json").write_text("{}")
        _edit(study_dir / CONFIG, ('scorecard = "scorecard.csv"', 'scorecard = "card.json"'))
        _refused(cli, study_dir, "card.json", ".csv or .toml")

    def test_toml_card_with_syntax_error(self, study_dir: Path, cli: Cli) -> None:
        (study_dir / "card.toml").write_text('cutoff = 500\n[[row]\nfeature = "zone"\n')
        _edit(study_dir / CONFIG, ('scorecard = "scorecard.csv"', 'scorecard = "card.toml"'))
        _refused(cli, study_dir, "card.toml", "not valid TOML", "line 2")

    def test_toml_card_with_unknown_row_key(self, study_dir: Path, cli: Cli) -> None:
        (study_dir / "card.toml").write_text(
            'cutoff = 500\n[[row]]\nfeature = "zone"\nlevel = "N"\npoint = 5\n'
        )
        _edit(study_dir / CONFIG, ('scorecard = "scorecard.csv"', 'scorecard = "card.toml"'))
        _refused(cli, study_dir, "card.toml", "[[row]] number 1", "'point'", "'points'")

    def test_coefficients_card_with_bins(self, study_dir: Path, cli: Cli) -> None:
        _edit(
            study_dir / CARD,
            ("feature,level,low,high,points", "feature,level,low,high,coefficient"),
            ("(pdo),,,,20\n", ""),
            ("(anchor_points),,,,500\n", ""),
            ("(anchor_odds),,,,1\n", ""),
        )
        _refused(cli, study_dir, CARD, "line 4", "coefficients card", "per unit")

    def test_coefficients_card_with_a_scaling(self, study_dir: Path, cli: Cli) -> None:
        (study_dir / CARD).write_text(
            "feature,level,coefficient\n(cutoff),,0\n(pdo),,20\nquotes_obtained,,0.35\n"
        )
        _refused(cli, study_dir, CARD, "already in log-odds")


class TestCardAgainstTheData:
    """Scoring the data with the card: the data file, the row and the value are named."""

    def test_value_outside_every_bin(self, study_dir: Path, cli: Cli) -> None:
        _edit(study_dir / CARD, ("quotes_obtained,,,1,0", "quotes_obtained,,0,1,0"))
        pending = study_dir / "pending.csv"
        lines = pending.read_text().splitlines()
        header = lines[0].split(",")
        cells = lines[3].split(",")
        cells[header.index("quotes_obtained")] = "-1"
        lines[3] = ",".join(cells)
        pending.write_text("\n".join(lines) + "\n")
        _refused(cli, study_dir, "pending.csv", "'quotes_obtained' = -1", "outside every bin")

    def test_missing_value_the_card_does_not_score(self, study_dir: Path, cli: Cli) -> None:
        _edit(study_dir / CARD, ("dwelling_age,(missing),,,0\n", ""))
        _refused(cli, study_dir, "'dwelling_age' is missing", "(missing)")

    def test_text_in_a_feature_the_card_scores_as_a_number(self, study_dir: Path, cli: Cli) -> None:
        _edit(
            study_dir / CARD,
            ("energy_label,A,,,0", "energy_label,,,0,0\nenergy_label,,0,,1"),
            ("energy_label,B,,,0\n", ""),
            ("energy_label,C,,,0\n", ""),
            ("energy_label,D,,,0\n", ""),
            ("energy_label,E,,,-7\n", ""),
            ("energy_label,F,,,-7\n", ""),
            ("energy_label,G,,,-7\n", ""),
        )
        _refused(cli, study_dir, "'energy_label' holds", "as a number")

    def test_points_that_fall_with_the_favourable_outcome(self, study_dir: Path, cli: Cli) -> None:
        """Without a scaling the card is recalibrated on the history; a card whose points
        reward the unfavourable outcome has no log-odds scale."""
        card = study_dir / CARD
        rows = [
            line if line.startswith(("feature", "(")) else _negated(line)
            for line in card.read_text().splitlines()
            if not line.startswith(("(pdo)", "(anchor"))
        ]
        card.write_text("\n".join(rows) + "\n")
        _refused(cli, study_dir, CARD, "less likely as the card's points rise")

    def test_unlisted_category_is_reported_not_refused(self, study_dir: Path, cli: Cli) -> None:
        _edit(study_dir / CARD, ("energy_label,G,,,-7\n", ""))
        res = cli("fit", "--config", str(study_dir / CONFIG), "--json")
        assert res.code == 0, res
        assert "'energy_label' categories the card does not list: 'G'" in res.out
        assert "0 points" in res.out
        json.loads(res.out)


def _negated(line: str) -> str:
    cells = line.split(",")
    cells[-1] = str(-float(cells[-1]))
    return ",".join(cells)


class TestDeployedSection:
    """[deployed] in closecall.toml."""

    def test_card_and_score_column_together(self, study_dir: Path, cli: Cli) -> None:
        _edit(
            study_dir / CONFIG,
            ('group = ["heritage"]', 'group = ["heritage"]\ndeployed_score = "deployed_score"'),
        )
        _refused(cli, study_dir, CONFIG, "[deployed] scorecard and [data] deployed_score")

    def test_empty_scorecard_path(self, study_dir: Path, cli: Cli) -> None:
        _edit(study_dir / CONFIG, ('scorecard = "scorecard.csv"', 'scorecard = " "'))
        _refused(cli, study_dir, CONFIG, "[deployed] scorecard is empty")

    def test_unknown_key(self, study_dir: Path, cli: Cli) -> None:
        _edit(study_dir / CONFIG, ('scorecard = "scorecard.csv"', 'score_card = "scorecard.csv"'))
        _refused(cli, study_dir, CONFIG, "unknown key 'score_card' in [deployed]", "scorecard")

    def test_scorecard_not_text(self, study_dir: Path, cli: Cli) -> None:
        _edit(study_dir / CONFIG, ('scorecard = "scorecard.csv"', "scorecard = 5"))
        _refused(cli, study_dir, CONFIG, "[deployed] scorecard = 5")

    def test_reference_deployed_without_a_deployed_model(self, study_dir: Path, cli: Cli) -> None:
        _edit(
            study_dir / CONFIG,
            ('scorecard = "scorecard.csv"', ""),
            ('reference = "pooled"', 'reference = "deployed"'),
        )
        _refused(cli, study_dir, CONFIG, "reference = 'deployed'", "[deployed] no scorecard")
