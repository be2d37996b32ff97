"""Turn validated frames into a numeric design matrix, learned on the history only.

Numeric features are standardised with the history mean and standard deviation (so one penalty
strength means the same for every feature); categorical features and the group attribute are
one-hot coded against their most frequent history level. See data.py for the missing-value
policy; levels a pending case has but the history lacks are coded as the reference level and
reported.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np

if TYPE_CHECKING:  # pandas is imported where data is encoded, not when a snapshot loads
    import pandas as pd

MISSING_LEVEL = "(missing)"


@dataclass(frozen=True)
class Feature:
    """One input feature and how it enters the model (resolved by :mod:`.load`)."""

    name: str
    kind: str  # numeric | categorical
    is_group: bool = False


# The largest distance from the history mean, in history standard deviations, a numeric value
# may have (data.py refuses others). A history value can never be this far out (Samuelson's
# inequality bounds it by sqrt(n - 1)); a pending value this far out is an entry or unit error.
MAX_STANDARD_SCORE = 1e6


def numeric_values(col: pd.Series) -> np.ndarray:
    """A numeric column as float64, anything that is not a number as NaN (missing)."""
    import pandas as pd

    return pd.to_numeric(col, errors="coerce").to_numpy(dtype=float)


def standard_scale(x: np.ndarray) -> tuple[float, float]:
    """Mean and standard deviation (ddof 0) of the non-missing values of a numeric column, as
    the encoder standardises with them. Either is inf or NaN when the values overflow double
    precision; the caller checks (data.py refuses such a column)."""
    with np.errstate(over="ignore", invalid="ignore"):
        return float(np.nanmean(x)), float(np.nanstd(x))


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
        import pandas as pd

        unseen: dict[str, int] = {}
        n = len(frame)
        # per design block: (first column, width, values); numeric values are the finished
        # column, categorical values the level index (0 = the reference level)
        parts: list[tuple[int, int, np.ndarray]] = []
        j = 0
        for f in self.features:
            col = frame[f.name]
            width = len(f.design_names())
            if f.kind == "numeric":
                x = numeric_values(col)
                miss = np.isnan(x)
                parts.append((j, 1, (np.where(miss, f.mean, x) - f.mean) / f.sd))
                if f.missing_indicator:
                    parts.append((j + 1, 1, miss.astype(float)))
            else:
                codes, labels = _category_codes(col)
                level_of = pd.Index(f.levels).get_indexer(pd.Index(labels))
                bad = level_of < 0
                if bad.any():
                    count = int(np.bincount(codes, minlength=len(labels))[bad].sum())
                    if count:
                        unseen[f.name] = count
                    level_of = np.where(bad, 0, level_of)
                parts.append((j, width, level_of[codes]))
            j += width
        return _assemble(n, j, parts), unseen


def _assemble(n: int, p: int, parts: list[tuple[int, int, np.ndarray]]) -> np.ndarray:
    """Write the design matrix row chunk by row chunk through a small transposed buffer, so
    every column is written contiguously and the result is read from cache."""
    X = np.empty((n, p))
    step = 8192
    buf = np.empty((p, step))
    for start in range(0, n, step):
        m = min(step, n - start)
        T = buf[:, :m]
        for j, width, values in parts:
            v = values[start : start + m]
            if width == 1 and values.dtype.kind == "f":
                T[j] = v
            else:
                T[j : j + width] = v[None, :] == np.arange(1, width + 1)[:, None]
        X[start : start + m] = T.T
    return X


def _category_codes(col: pd.Series) -> tuple[np.ndarray, np.ndarray]:
    """Each row's index into the column's distinct values, and those values as stripped text
    (missing as its own level). The text work is done once per distinct value."""
    import pandas as pd

    codes, uniques = pd.factorize(col, use_na_sentinel=True)
    labels = _category_strings(pd.Series(np.asarray(uniques, dtype=object), dtype=object))
    labels = np.append(labels, MISSING_LEVEL).astype(object)
    codes = np.where(codes < 0, len(labels) - 1, codes)
    return codes, labels


def _category_strings(col: pd.Series) -> np.ndarray:
    s = col.astype(object).where(col.notna(), MISSING_LEVEL)
    return s.astype(str).str.strip().to_numpy(dtype=object)


def fit_encoder(history: pd.DataFrame, features: list[Feature], group: tuple[str, ...]) -> Encoder:
    """Learn means, spreads and levels from the history."""
    out: list[EncodedFeature] = []
    specs = [(f.name, f.kind, f.is_group) for f in features]
    specs += [(g, "categorical", True) for g in group]
    for name, kind, is_group in specs:
        col = history[name]
        if kind == "numeric":
            x = numeric_values(col)
            miss = np.isnan(x)
            mean, sd = standard_scale(x)
            if not (np.isfinite(mean) and np.isfinite(sd)):  # load_study_data refuses these
                raise ValueError(f"numeric feature '{name}' overflows when standardised")
            out.append(
                EncodedFeature(
                    name,
                    "numeric",
                    is_group,
                    mean,
                    sd if sd > 0 else 1.0,
                    missing_indicator=bool(miss.any()),
                )
            )
        else:
            codes, labels = _category_codes(col)
            per_label = np.bincount(codes, minlength=len(labels))
            uniq, inverse = np.unique(labels.astype(str), return_inverse=True)
            counts = np.bincount(inverse, weights=per_label, minlength=len(uniq)).astype(np.int64)
            uniq, counts = uniq[counts > 0], counts[counts > 0]
            order = np.lexsort((uniq, -counts))  # most frequent first, ties by name
            out.append(EncodedFeature(name, "categorical", is_group, levels=list(uniq[order])))
    return Encoder(out)
