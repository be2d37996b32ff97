"""Turn validated frames into a numeric design matrix, learned on the history only.

Numeric features are standardised with the history mean and standard deviation (so one penalty
strength means the same for every feature); categorical features and the group attribute are
one-hot coded against their most frequent history level. See data.py for the missing-value
policy; levels a pending case has but the history lacks are coded as the reference level and
reported.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from closecall.data import MISSING_LEVEL, Feature


@dataclass
class EncodedFeature:
    """How one source column maps to design columns."""

    name: str
    kind: str  # numeric | categorical
    is_group: bool
    mean: float = 0.0
    sd: float = 1.0
    levels: list[str] = field(default_factory=list)  # categorical: reference first
    missing_indicator: bool = False

    def design_names(self) -> list[str]:
        if self.kind == "numeric":
            return [self.name] + ([f"{self.name}: missing"] if self.missing_indicator else [])
        return [f"{self.name}={lv}" for lv in self.levels[1:]]


@dataclass
class Encoder:
    """Learned encoding from source columns to a float64 design matrix."""

    features: list[EncodedFeature]

    @property
    def columns(self) -> list[str]:
        return [n for f in self.features for n in f.design_names()]

    @property
    def column_source(self) -> list[str]:
        return [f.name for f in self.features for _ in f.design_names()]

    @property
    def group_mask(self) -> np.ndarray:
        return np.array([f.is_group for f in self.features for _ in f.design_names()], dtype=bool)

    def source_mask(self, names: set[str] | list[str] | tuple[str, ...]) -> np.ndarray:
        """Design columns that come from any of the named source columns."""
        wanted = set(names)
        return np.array([s in wanted for s in self.column_source], dtype=bool)

    def to_json(self) -> list[dict[str, Any]]:
        return [asdict(f) for f in self.features]

    @classmethod
    def from_json(cls, data: list[dict[str, Any]]) -> Encoder:
        return cls([EncodedFeature(**d) for d in data])

    def transform(self, frame: pd.DataFrame) -> tuple[np.ndarray, dict[str, int]]:
        """Design matrix for a frame, and counts of unseen category values per column."""
        blocks: list[np.ndarray] = []
        unseen: dict[str, int] = {}
        n = len(frame)
        for f in self.features:
            col = frame[f.name]
            if f.kind == "numeric":
                x = pd.to_numeric(col, errors="coerce").to_numpy(dtype=float)
                miss = np.isnan(x)
                z = (np.where(miss, f.mean, x) - f.mean) / f.sd
                blocks.append(z[:, None])
                if f.missing_indicator:
                    blocks.append(miss.astype(float)[:, None])
            else:
                values = _category_strings(col)
                codes = pd.Index(f.levels).get_indexer(values)
                bad = codes < 0
                if bad.any():
                    unseen[f.name] = int(bad.sum())
                    codes = np.where(bad, 0, codes)
                onehot = np.zeros((n, max(len(f.levels) - 1, 0)))
                rows = np.flatnonzero(codes > 0)
                onehot[rows, codes[rows] - 1] = 1.0
                blocks.append(onehot)
        return (np.hstack(blocks) if blocks else np.zeros((n, 0))), unseen


def _category_strings(col: pd.Series) -> np.ndarray:
    s = col.astype(object).where(col.notna(), MISSING_LEVEL)
    return s.astype(str).str.strip().to_numpy(dtype=object)


def fit_encoder(history: pd.DataFrame, features: list[Feature], group: tuple[str, ...]) -> Encoder:
    """Learn means, spreads and levels from the history."""
    out: list[EncodedFeature] = []
    for f in [*features, *(Feature(g, "categorical", True) for g in group)]:
        col = history[f.name]
        if f.kind == "numeric":
            x = pd.to_numeric(col, errors="coerce").to_numpy(dtype=float)
            miss = np.isnan(x)
            mean = float(np.nanmean(x))
            sd = float(np.nanstd(x))
            out.append(
                EncodedFeature(
                    f.name,
                    "numeric",
                    f.is_group,
                    mean,
                    sd if sd > 0 else 1.0,
                    missing_indicator=bool(miss.any()),
                )
            )
        else:
            values = _category_strings(col)
            uniq, counts = np.unique(values.astype(str), return_counts=True)
            order = np.lexsort((uniq, -counts))  # most frequent first, ties by name
            out.append(EncodedFeature(f.name, "categorical", f.is_group, levels=list(uniq[order])))
    return Encoder(out)
