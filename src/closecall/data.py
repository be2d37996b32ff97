"""Load and validate the study's data files (CSV or Parquet).

Every problem a user can cause raises :class:`~closecall.errors.UserError` naming the file,
column or row (as the line number in a CSV file) and the fix.

Missing values (one policy, documented in docs/config.md):

- id, outcome and group columns may not be missing: the rows are named in the error;
- numeric features: a missing value is replaced by the history mean, and a ``<name>: missing``
  indicator column is added to the model when the history has any missing values there;
- categorical features: a missing value is its own level, ``(missing)``.

No row is ever dropped.
"""

from __future__ import annotations

import csv
import io
from dataclasses import dataclass, field
from functools import cache
from pathlib import Path

import numpy as np
import pandas as pd

from closecall.config import DataConfig
from closecall.errors import UserError
from closecall.files import require_file

MISSING_LEVEL = "(missing)"
GROUP_SEPARATOR = "/"


def _line(row_index: int) -> int:
    """File line of a 0-based data row in a CSV file with a header line."""
    return int(row_index) + 2


def _rows_text(path: Path, positions: np.ndarray, limit: int = 5) -> str:
    """Name offending rows: CSV line numbers, or 0-based row numbers for Parquet."""
    pos = [int(p) for p in positions[:limit]]
    if path.suffix.lower() == ".csv":
        text = "line " + ", ".join(str(_line(p)) for p in pos)
    else:
        text = "row " + ", ".join(str(p) for p in pos)
    more = len(positions) - limit
    return text + (f" (and {more} more)" if more > 0 else "")


def read_table(path: Path, *, text_columns: tuple[str, ...] = ()) -> pd.DataFrame:
    """Read a CSV (UTF-8) or Parquet file, refusing empty files and duplicate columns."""
    require_file(path)
    suffix = path.suffix.lower()
    try:
        if suffix in (".parquet", ".pq"):
            frame = pd.read_parquet(path)
        elif suffix in (".csv", ".txt"):
            raw = path.read_bytes()
            try:
                text = raw.decode("utf-8-sig")
            except UnicodeDecodeError as exc:
                line = raw[: exc.start].count(b"\n") + 1
                raise UserError(
                    f"{path}: not UTF-8 text (first bad byte on line {line})",
                    "re-save the file as UTF-8 (e.g. iconv -f latin1 -t utf-8)",
                ) from None
            if not text or text.isspace():
                raise UserError(f"{path}: the file is empty", "export the data again")
            head = text[:_HEADER_PREFIX] if "\n" in text[:_HEADER_PREFIX] else text
            header = next(csv.reader(io.StringIO(head)))
            del text
            seen: set[str] = set()
            for name in header:
                if name in seen:
                    raise UserError(
                        f"{path}: column '{name}' appears twice in the header",
                        "rename or remove one of them",
                    )
                seen.add(name)
            frame = _read_csv_bytes(raw, [c for c in text_columns if c in seen])
        else:
            raise UserError(
                f"{path}: unsupported file type '{suffix}'", "use a .csv or .parquet file"
            )
    except UserError:
        raise
    except (pd.errors.ParserError, ValueError, OSError) as exc:
        raise UserError(f"{path}: cannot be read: {exc}", "check the file's format") from None
    if frame.columns.duplicated().any():
        dup = frame.columns[frame.columns.duplicated()][0]
        raise UserError(f"{path}: column '{dup}' appears twice", "rename or remove one of them")
    if len(frame) == 0:
        raise UserError(f"{path}: has a header but no rows", "export the data again")
    frame.columns = [str(c) for c in frame.columns]
    return frame


_HEADER_PREFIX = 1 << 16


def _read_csv_bytes(raw: bytes, text_columns: list[str]) -> pd.DataFrame:
    """``read_csv`` with ``text_columns`` read as text, the others inferred.

    Asking read_csv for a dtype makes it convert those columns through Python objects, which
    triples the parse time of a large file; so the file is parsed with inference and only a
    text column that inference did not read as text (numeric-looking ids, say) is parsed
    again, on its own, as text. The frame is the same as with ``dtype=str`` for those columns.
    """
    frame = pd.read_csv(io.BytesIO(raw), encoding="utf-8-sig", keep_default_na=True)
    again = [c for c in text_columns if frame[c].dtype != _text_dtype()]
    if again:
        text = pd.read_csv(
            io.BytesIO(raw),
            encoding="utf-8-sig",
            keep_default_na=True,
            usecols=again,
            dtype=dict.fromkeys(again, str),
        )
        for c in again:
            frame[c] = text[c]
    return frame


@cache
def _text_dtype() -> object:
    """The dtype read_csv gives a column read with ``dtype=str`` (depends on pandas)."""
    return pd.read_csv(io.StringIO("a\nx\n"), dtype={"a": str})["a"].dtype


@dataclass(frozen=True)
class Feature:
    """One input feature and how it enters the model."""

    name: str
    kind: str  # numeric | categorical
    is_group: bool = False


@dataclass
class StudyData:
    """Validated history (and optional pending) frames with the resolved feature list."""

    history: pd.DataFrame
    pending: pd.DataFrame | None
    features: list[Feature]  # non-group features
    group_columns: tuple[str, ...]
    y: np.ndarray  # 1 = favourable, history only
    history_group: np.ndarray  # group label per history row
    pending_group: np.ndarray | None
    deployed_probability: np.ndarray | None
    notes: list[str] = field(default_factory=list)  # what was imputed or mapped, for the report


def _check_columns(path: Path, frame: pd.DataFrame, columns: list[str], what: str) -> None:
    missing = [c for c in columns if c not in frame.columns]
    if missing:
        raise UserError(
            f"{path}: {what} column '{missing[0]}' is not in the file "
            f"(columns: {', '.join(map(str, frame.columns[:12]))})",
            "fix the column name in the study config",
        )


def _check_ids(path: Path, frame: pd.DataFrame, id_col: str) -> None:
    ids = frame[id_col]
    if ids.isna().any():
        raise UserError(
            f"{path}: id column '{id_col}' is empty at "
            f"{_rows_text(path, np.flatnonzero(ids.isna()))}",
            "give every case an id",
        )
    if ids.is_unique:
        return
    dup = ids.duplicated(keep=False).to_numpy()
    if dup.any():
        first = ids[dup].iloc[0]
        raise UserError(
            f"{path}: id '{first}' in column '{id_col}' is not unique "
            f"({_rows_text(path, np.flatnonzero((ids == first).to_numpy()))})",
            "make case ids unique",
        )


def _favourable_mask(path: Path, col: pd.Series, favourable: object, name: str) -> np.ndarray:
    if col.isna().any():
        raise UserError(
            f"{path}: outcome column '{name}' is empty at "
            f"{_rows_text(path, np.flatnonzero(col.isna()))}",
            "history cases need a known outcome; move undecided cases to the pending file",
        )
    values = pd.unique(col)
    if len(values) > 2:
        shown = ", ".join(repr(v) for v in values[:5])
        raise UserError(
            f"{path}: outcome column '{name}' has {len(values)} values ({shown}); it must have two",
            "recode the outcome to two values, e.g. favourable / unfavourable",
        )
    if (
        isinstance(favourable, (int, float))
        and not isinstance(favourable, bool)
        and (pd.api.types.is_numeric_dtype(col))
    ):
        mask = col.to_numpy(dtype=float) == float(favourable)
    else:
        mask = (
            col.astype(str).str.strip().str.lower() == str(favourable).strip().lower()
        ).to_numpy()
    if not mask.any():
        shown = ", ".join(repr(v) for v in values)
        raise UserError(
            f"{path}: outcome column '{name}' never takes the favourable value {favourable!r} "
            f"(values: {shown})",
            "set [data] favourable to one of those values",
        )
    return mask.astype(np.int8)


def group_labels(frame: pd.DataFrame, columns: tuple[str, ...]) -> np.ndarray:
    """One label per row: the group columns' values joined with '/'.

    The text work is done once per distinct value (or combination) and then spread over the
    rows, which is the same as doing it row by row.
    """
    if len(columns) == 1:
        col = frame[columns[0]]
        codes, uniques = pd.factorize(col, use_na_sentinel=False)
        distinct = pd.DataFrame({columns[0]: pd.Series(np.asarray(uniques), dtype=col.dtype)})
        return _joined_labels(distinct, columns)[codes]
    return _joined_labels(frame, columns)


def _joined_labels(frame: pd.DataFrame, columns: tuple[str, ...]) -> np.ndarray:
    parts = [frame[c].astype(str).str.strip() for c in columns]
    label = parts[0]
    for p in parts[1:]:
        label = label + GROUP_SEPARATOR + p
    return label.to_numpy(dtype=str)


def _check_group(path: Path, frame: pd.DataFrame, columns: tuple[str, ...]) -> None:
    for c in columns:
        na = frame[c].isna().to_numpy()
        if na.any():
            raise UserError(
                f"{path}: group column '{c}' is empty at {_rows_text(path, np.flatnonzero(na))}",
                "fill in the group attribute for every case",
            )


def infer_kind(series: pd.Series) -> str:
    """numeric for numbers (bools excluded), categorical otherwise."""
    if pd.api.types.is_bool_dtype(series):
        return "categorical"
    if pd.api.types.is_numeric_dtype(series):
        return "numeric"
    return "categorical"


def resolve_features(cfg: DataConfig, frame: pd.DataFrame, path: Path) -> list[Feature]:
    """The non-group features: those configured, or every column not otherwise used."""
    reserved = {cfg.id, cfg.outcome, *cfg.group, *cfg.exclude}
    if cfg.deployed_score:
        reserved.add(cfg.deployed_score)
    if cfg.features is not None:
        names = list(cfg.features)
        _check_columns(path, frame, names, "feature")
        clash = [n for n in names if n in {cfg.id, cfg.outcome, *cfg.group}]
        if clash:
            raise UserError(
                f"{path}: '{clash[0]}' is listed as a feature but is the id, outcome or group",
                "remove it from [data] features",
            )
    else:
        names = [c for c in frame.columns if c not in reserved]
    if not names:
        raise UserError(f"{path}: no feature columns left", "list features under [data] features")
    for name in cfg.kinds:
        if name not in names and name not in cfg.group:
            raise UserError(
                f"[kinds] names '{name}', which is not a feature", "remove it from [kinds]"
            )
    return [Feature(n, cfg.kinds.get(n) or infer_kind(frame[n])) for n in names]


def _check_feature_values(path: Path, frame: pd.DataFrame, features: list[Feature]) -> None:
    for f in features:
        col = frame[f.name]
        if col.isna().all():
            raise UserError(
                f"{path}: feature '{f.name}' is empty in every row",
                "exclude it under [data] exclude",
            )
        if f.kind == "numeric" and not pd.api.types.is_numeric_dtype(col):
            as_num = pd.to_numeric(col, errors="coerce")
            bad = np.flatnonzero((as_num.isna() & col.notna()).to_numpy())
            if len(bad):
                raise UserError(
                    f"{path}: numeric feature '{f.name}' has text {str(col.iloc[bad[0]])!r} "
                    f"at {_rows_text(path, bad)}",
                    "fix those values, or declare it categorical: "
                    f'[kinds] {f.name} = "categorical"',
                )


def _check_history_spread(path: Path, frame: pd.DataFrame, features: list[Feature]) -> None:
    for f in features:
        if frame[f.name].nunique(dropna=True) < 2:
            raise UserError(
                f"{path}: feature '{f.name}' has the same value in every history row",
                f"a constant column cannot inform the model; add '{f.name}' to [data] exclude",
            )


def load_study_data(cfg: DataConfig) -> StudyData:
    """Load and validate the history (and pending) files for a study."""
    text_cols = (cfg.id, *cfg.group)
    hist_path = cfg.history
    history = read_table(hist_path, text_columns=text_cols)
    _check_columns(hist_path, history, [cfg.id], "id")
    _check_columns(hist_path, history, [cfg.outcome], "outcome")
    _check_columns(hist_path, history, list(cfg.group), "group")
    _check_columns(hist_path, history, list(cfg.exclude), "excluded")
    _check_ids(hist_path, history, cfg.id)
    y = _favourable_mask(hist_path, history[cfg.outcome], cfg.favourable, cfg.outcome)
    if y.all() or not y.any():
        raise UserError(f"{hist_path}: outcome '{cfg.outcome}' has one value only")
    _check_group(hist_path, history, cfg.group)
    features = resolve_features(cfg, history, hist_path)
    _check_feature_values(hist_path, history, features)
    _check_history_spread(hist_path, history, features)
    hgroup = group_labels(history, cfg.group)
    levels, counts = np.unique(hgroup, return_counts=True)
    if len(levels) < 2:
        raise UserError(
            f"{hist_path}: group attribute {'/'.join(cfg.group)} has a single level '{levels[0]}'",
            "closecall compares groups: the history needs at least two group levels",
        )
    small = [(lv, int(n)) for lv, n in zip(levels, counts, strict=True) if n < cfg.min_group_cases]
    if small:
        lv, n = small[0]
        raise UserError(
            f"{hist_path}: group level '{lv}' has {n} history cases, fewer than the minimum "
            f"of {cfg.min_group_cases}",
            "merge small levels into a larger one in the data, or lower [data] min_group_cases "
            "(estimates for small groups are unreliable)",
        )
    notes: list[str] = []
    pending = None
    pgroup = None
    deployed = None
    if cfg.pending is not None:
        pend_path = cfg.pending
        pending = read_table(pend_path, text_columns=text_cols)
        _check_columns(pend_path, pending, [cfg.id], "id")
        _check_columns(pend_path, pending, list(cfg.group), "group")
        _check_columns(pend_path, pending, [f.name for f in features], "feature")
        _check_ids(pend_path, pending, cfg.id)
        _check_group(pend_path, pending, cfg.group)
        _check_feature_values(pend_path, pending, features)
        pgroup = group_labels(pending, cfg.group)
        unseen = sorted(set(np.unique(pgroup)) - set(levels))
        if unseen:
            raise UserError(
                f"{pend_path}: group level '{unseen[0]}' does not occur in the history",
                "the models cannot score a group they never saw; check the group column",
            )
        if cfg.deployed_score:
            deployed = _deployed(pend_path, pending, cfg.deployed_score)
    elif cfg.deployed_score:
        deployed = _deployed(hist_path, history, cfg.deployed_score)
    return StudyData(
        history=history,
        pending=pending,
        features=features,
        group_columns=cfg.group,
        y=y,
        history_group=hgroup,
        pending_group=pgroup,
        deployed_probability=deployed,
        notes=notes,
    )


def _deployed(path: Path, frame: pd.DataFrame, column: str) -> np.ndarray:
    _check_columns(path, frame, [column], "deployed score")
    raw = pd.to_numeric(frame[column], errors="coerce")
    bad = np.flatnonzero((raw.isna() | (raw <= 0) | (raw >= 1)).to_numpy())
    if len(bad):
        raise UserError(
            f"{path}: deployed score column '{column}' must hold probabilities strictly between "
            f"0 and 1; {str(frame[column].iloc[bad[0]])!r} at {_rows_text(path, bad)}",
            "export the deployed model's probabilities, not its decisions",
        )
    return raw.to_numpy(dtype=float)
