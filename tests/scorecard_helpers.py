"""Helpers for the scorecard tests: a demo study whose deployed model is a card, and the demo
card's points recomputed with plain pandas."""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pandas as pd

from closecall.setup.demo import DEMO_SCORECARD, write_demo


def card_study(folder: Path, card: str = DEMO_SCORECARD, *, cases: int = 1500) -> Path:
    """A demo study whose deployed model is ``card`` (written as scorecard.csv)."""
    config = write_demo(folder, cases=cases, seed=3)
    (folder / "scorecard.csv").write_text(card)
    text = config.read_text()
    if "\n[deployed]\n" not in text:  # a demo whose model in use is its scores column
        text = text.replace('deployed_score = "deployed_score"', "")
        text += '\n[deployed]\nscorecard = "scorecard.csv"\n'
    config.write_text(text)
    return config


def demo_points(frame: pd.DataFrame) -> np.ndarray:
    """The demo card's points recomputed with plain pandas/NumPy, row by row of the card."""
    return (474 + demo_points_by_feature(frame).sum(axis=1)).to_numpy(dtype=float)


def demo_points_by_feature(frame: pd.DataFrame) -> pd.DataFrame:
    """Each feature's points on the demo card (the intercept of 474 left out), one column per
    feature, recomputed with plain pandas/NumPy from the card's rows."""
    inc, q = frame["household_income_k"], frame["quotes_obtained"]
    age, dist = frame["dwelling_age"], frame["depot_distance_km"]
    share = frame["self_funded_share"]
    columns = {
        "household_income_k": np.select(
            [inc < 25, inc < 35, inc < 45, inc < 60], [-12, -5, 0, 8], 20
        ),
        "quotes_obtained": np.select([q < 1, q < 2, q < 3], [0, 10, 20], 30),
        "dwelling_age": np.select([age.isna(), age < 40, age < 80], [0, 4, 0], -4),
        "prior_grant": np.where(frame["prior_grant"] == "yes", 12, 0),
        "depot_distance_km": np.select([dist < 5, dist < 10], [3, 0], -4),
        "self_funded_share": np.select(
            [share < 0.1, share < 0.2, share < 0.3, share < 0.4], [0, 4, 9, 15], 21
        ),
        "energy_label": np.where(frame["energy_label"].isin(["E", "F", "G"]), -7, 0),
        "heritage": np.where(frame["heritage"] == "Briar", -18, 0),
    }
    return pd.DataFrame(
        {k: np.asarray(v, dtype=float) for k, v in columns.items()}, index=frame.index
    )


def without_card(config: Path) -> Path:
    """The demo study without its card (and without a deployed model)."""
    text = re.sub(r"\n\[deployed\]\nscorecard = [^\n]*\n", "\n", config.read_text())
    config.write_text(text)
    return config
