"""Load and validate the study's data files (CSV or Parquet).

Every problem a user can cause raises :class:`~closecall.core.errors.UserError` naming the file,
column or row (as the line number in a CSV file) and the fix.

Missing values (one policy, documented in docs/config.md):

- a cell is missing when it is empty (a Parquet null), or when its whole text is one of
  ``MISSING_MARKERS`` (``NA``, ``null``, ``None``, ``NaN``…), in every column of CSV and
  Parquet files alike; messages about a missing cell say what it held;
- id, outcome and group columns may not be missing: the rows are named in the error;
- numeric features: a missing value is replaced by the history mean, and a ``<name>: missing``
  indicator column is added to the model when the history has any missing values there;
- categorical features: a missing value is its own level, ``(missing)``.

No row is ever dropped. Numbers must be finite, and a numeric feature's values must stay
within ``MAX_STANDARD_SCORE`` history standard deviations of its history mean.
"""

from __future__ import annotations

import csv
import difflib
import io
from dataclasses import dataclass, field
from functools import cache
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from closecall.core.errors import UserError
from closecall.setup.config import DataConfig, StudyConfig
from closecall.setup.encode import MAX_STANDARD_SCORE, Feature, numeric_values, standard_scale
from closecall.setup.files import require_file

GROUP_SEPARATOR = "/"

# The texts that mean "no value" in any cell of a CSV or Parquet file (docs/config.md, Missing
# values): pandas' default missing markers as of pandas 3.1, written out here so that a pandas
# upgrade cannot change what a study's data means.
MISSING_MARKERS = (
    "",
    "#N/A",
    "#N/A N/A",
    "#NA",
    "-1.#IND",
    "-1.#QNAN",
    "-NaN",
    "-nan",
    "1.#IND",
    "1.#QNAN",
    "<NA>",
    "N/A",
    "NA",
    "NULL",
    "NaN",
    "None",
    "n/a",
    "nan",
    "null",
)
MISSING_RULE = (
    "an empty cell and the texts NA, N/A, n/a, null, NULL, None, NaN, nan, #N/A, <NA> count "
    "as missing (docs/config.md, Missing values)"
)
_CSV_SUFFIXES = (".csv", ".txt")
_PARQUET_SUFFIXES = (".parquet", ".pq")


def _is_csv(path: Path) -> bool:
    return path.suffix.lower() in _CSV_SUFFIXES


def _line(row_index: int) -> int:
    """File line of a 0-based data row in a CSV file with a header line."""
    return int(row_index) + 2


def _place(path: Path, position: int) -> str:
    """'line N' of a CSV file (1-based, the header is line 1), or 'row N' (0-based) of Parquet."""
    return f"line {_line(position)}" if _is_csv(path) else f"row {int(position)}"


def _rows_text(path: Path, positions: np.ndarray, limit: int = 5) -> str:
    """Name offending rows: CSV line numbers, or 0-based row numbers for Parquet."""
    pos = [int(p) for p in positions[:limit]]
    if _is_csv(path):
        text = "line " + ", ".join(str(_line(p)) for p in pos)
    else:
        text = "row " + ", ".join(str(p) for p in pos)
    more = len(positions) - limit
    return text + (f" (and {more} more)" if more > 0 else "")


def cells_as_written(path: Path, column: str, positions: np.ndarray) -> list[str | None]:
    """What the given cells of a column hold in the file itself, before any parsing: the CSV
    text (an empty cell is ''), or for Parquet the value as text (None for a null).

    Only for messages: the column is read again, once.
    """
    pos = np.asarray(positions, dtype=np.int64)
    if _is_csv(path):
        raw = pd.read_csv(
            path,
            usecols=[column],
            dtype=str,
            keep_default_na=False,
            na_filter=False,
            encoding="utf-8-sig",
        )[column]
        return [str(v) for v in raw.iloc[pos]]
    col = pd.read_parquet(path, columns=[column])[column].astype(object)
    return [
        None if v is None or (isinstance(v, float) and np.isnan(v)) else str(v)
        for v in col.iloc[pos]
    ]


def _held(cell: str | None) -> str:
    if cell is None:
        return "null"
    if cell == "":
        return "empty"
    return f"holds {cell!r}"


def _cells_text(path: Path, column: str, positions: np.ndarray, limit: int = 5) -> str:
    """Name offending cells with what each holds: "line 5 (holds 'NA'), line 9 (empty)"."""
    pos = np.asarray(positions[:limit])
    cells = cells_as_written(path, column, pos)
    text = ", ".join(
        f"{_place(path, int(p))} ({_held(c)})" for p, c in zip(pos, cells, strict=True)
    )
    more = len(positions) - limit
    return text + (f" (and {more} more)" if more > 0 else "")


def _missing_fix(path: Path, column: str, positions: np.ndarray, fix: str) -> str:
    """The fix for a refused missing cell; names the rule when a marker text caused it."""
    cells = cells_as_written(path, column, np.asarray(positions[:5]))
    markers = sorted({c for c in cells if c})
    if not markers:
        return fix
    shown = ", ".join(repr(m) for m in markers)
    return (
        f"{fix}; {MISSING_RULE}, so a real value {shown} must be written differently "
        "(e.g. spelt out)"
    )


def read_table(path: Path, *, text_columns: tuple[str, ...] = ()) -> pd.DataFrame:
    """Read a CSV (UTF-8) or Parquet file, refusing empty files and duplicate columns."""
    require_file(path)
    suffix = path.suffix.lower()
    try:
        if suffix in _PARQUET_SUFFIXES:
            frame = _read_parquet(path)
        elif suffix in _CSV_SUFFIXES:
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
    frame = pd.read_csv(io.BytesIO(raw), encoding="utf-8-sig", **_NA_OPTIONS)
    again = [c for c in text_columns if frame[c].dtype != _text_dtype()]
    if again:
        text = pd.read_csv(
            io.BytesIO(raw),
            encoding="utf-8-sig",
            **_NA_OPTIONS,
            usecols=again,
            dtype=dict.fromkeys(again, str),
        )
        for c in again:
            frame[c] = text[c]
    return frame


_NA_OPTIONS: dict[str, Any] = {"keep_default_na": False, "na_values": list(MISSING_MARKERS)}


def _read_parquet(path: Path) -> pd.DataFrame:
    """``read_parquet`` with the missing markers applied to text columns, as in a CSV file."""
    frame = pd.read_parquet(path)
    for name in _parquet_text_columns(path):
        if name in frame.columns:
            col = frame[name]
            marked = col.isin(MISSING_MARKERS)
            if marked.any():
                frame[name] = col.where(~marked)
    return frame


def _parquet_types(path: Path) -> dict[str, Any]:
    """Column name -> Arrow type of a Parquet file (read from its footer only)."""
    import pyarrow.parquet as pq

    return {f.name: f.type for f in pq.read_schema(path)}


def _parquet_text_columns(path: Path) -> list[str]:
    import pyarrow as pa

    def is_text(t: Any) -> bool:
        if pa.types.is_dictionary(t):
            return is_text(t.value_type)
        return bool(pa.types.is_string(t) or pa.types.is_large_string(t))

    return [n for n, t in _parquet_types(path).items() if is_text(t)]


def _check_flat(path: Path, columns: list[str]) -> None:
    """Refuse Parquet columns of list, struct, map or union type among those the study uses."""
    if path.suffix.lower() not in _PARQUET_SUFFIXES:
        return
    import pyarrow as pa

    types = _parquet_types(path)
    for name in columns:
        t = types.get(name)
        inner = t.value_type if t is not None and pa.types.is_dictionary(t) else t
        if inner is not None and pa.types.is_nested(inner):
            raise UserError(
                f"{path}: column '{name}' holds {str(inner).split('<')[0]} values (Parquet type "
                f"{inner}); closecall reads one plain value (number or text) per cell",
                f"flatten '{name}' into plain columns in the file, or leave it out of the study "
                "(add it to [data] exclude if it would be a feature)",
            )


@cache
def _text_dtype() -> object:
    """The dtype read_csv gives a column read with ``dtype=str`` (depends on pandas)."""
    return pd.read_csv(io.StringIO("a\nx\n"), dtype={"a": str})["a"].dtype


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


def _nearest(name: str, choices: list[str]) -> str:
    """ " (did you mean 'x'?)" for the nearest of choices, or ""."""
    close = difflib.get_close_matches(name, choices, n=1, cutoff=0.6)
    return f"did you mean '{close[0]}'? " if close else ""


def _check_columns(path: Path, frame: pd.DataFrame, columns: list[str], what: str) -> None:
    missing = [c for c in columns if c not in frame.columns]
    if missing:
        raise UserError(
            f"{path}: {what} column '{missing[0]}' is not in the file "
            f"(columns: {', '.join(map(str, frame.columns[:12]))})",
            _nearest(missing[0], list(frame.columns)) + "fix the column name in the study config",
        )


def _check_ids(path: Path, frame: pd.DataFrame, id_col: str) -> None:
    ids = frame[id_col]
    if ids.isna().any():
        bad = np.flatnonzero(ids.isna().to_numpy())
        raise UserError(
            f"{path}: id column '{id_col}' has no value at {_cells_text(path, id_col, bad)}",
            _missing_fix(path, id_col, bad, "give every case an id"),
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
        bad = np.flatnonzero(col.isna().to_numpy())
        raise UserError(
            f"{path}: outcome column '{name}' has no value at {_cells_text(path, name, bad)}",
            _missing_fix(
                path,
                name,
                bad,
                "history cases need a known outcome; move undecided cases to the pending file",
            ),
        )
    if pd.api.types.is_float_dtype(col):
        _check_finite(path, name, col.to_numpy(dtype=float), "outcome column")
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
    """Every case has a group level: no missing cell, and none that is blank once stripped
    (its label would be empty)."""
    for c in columns:
        col = frame[c]
        na = col.isna().to_numpy()
        if not na.any():
            codes, uniques = pd.factorize(col)
            blank = np.asarray([str(u).strip() == "" for u in uniques], dtype=bool)
            na = blank[codes] if blank.any() else na
        if na.any():
            bad = np.flatnonzero(na)
            raise UserError(
                f"{path}: group column '{c}' has no value at {_cells_text(path, c, bad)}",
                _missing_fix(path, c, bad, "fill in the group attribute for every case"),
            )


def _check_finite(path: Path, column: str, values: np.ndarray, what: str) -> None:
    """Refuse infinite values (inf, -inf, or text such as 'Infinity' or '1e999' that parses
    as one), naming the lines and what they hold."""
    bad = np.flatnonzero(np.isinf(values))
    if len(bad):
        raise UserError(
            f"{path}: {what} '{column}' has an infinite value at {_cells_text(path, column, bad)}",
            "replace it with a finite number, or empty the cell to have it treated as missing",
        )


def infer_kind(series: pd.Series) -> str:
    """numeric for numbers (bools excluded), categorical otherwise."""
    if pd.api.types.is_bool_dtype(series):
        return "categorical"
    if pd.api.types.is_numeric_dtype(series):
        return "numeric"
    return "categorical"


def _default_features(cfg: DataConfig, frame: pd.DataFrame) -> list[str]:
    reserved = {cfg.id, cfg.outcome, *cfg.group, *cfg.exclude}
    if cfg.deployed_score:
        reserved.add(cfg.deployed_score)
    return [c for c in frame.columns if c not in reserved]


def resolve_features(
    cfg: DataConfig, frame: pd.DataFrame, path: Path, config_path: Path | None = None
) -> list[Feature]:
    """The non-group features: those configured, or every column not otherwise used.

    ``config_path`` names the study config in messages about its [kinds].
    """
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
        names = _default_features(cfg, frame)
    if not names:
        raise UserError(f"{path}: no feature columns left", "list features under [data] features")
    where = str(config_path) if config_path is not None else "the study config"
    for name in cfg.kinds:
        if name not in frame.columns:
            raise UserError(
                f"{where}: [kinds] names '{name}', which is not a column of {path}",
                _nearest(name, list(frame.columns)) + "fix the name, or remove it from [kinds]",
            )
        if name not in names and name not in cfg.group:
            raise UserError(
                f"{where}: [kinds] names '{name}', which is not a feature",
                "remove it from [kinds]",
            )
    return [Feature(n, cfg.kinds.get(n) or infer_kind(frame[n])) for n in names]


def _check_feature_values(
    path: Path, frame: pd.DataFrame, features: list[Feature]
) -> dict[str, np.ndarray]:
    """Refuse empty features, text in numeric features and infinite numbers; returns each
    numeric feature's values (NaN = missing)."""
    numeric: dict[str, np.ndarray] = {}
    for f in features:
        col = frame[f.name]
        if col.isna().all():
            first = np.arange(min(3, len(col)))
            held = sorted({_held(c) for c in cells_as_written(path, f.name, first)})
            raise UserError(
                f"{path}: feature '{f.name}' is empty in every row ({', '.join(held)}, ...)",
                f"exclude it under [data] exclude; {MISSING_RULE}",
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
        if f.kind == "numeric":
            values = numeric_values(col)
            _check_finite(path, f.name, values, "numeric feature")
            numeric[f.name] = values
    return numeric


def _check_scale(
    hist_path: Path,
    hist_values: dict[str, np.ndarray],
    pend_path: Path | None = None,
    pend_values: dict[str, np.ndarray] | None = None,
) -> None:
    """Refuse numeric values the design matrix cannot hold: a history column whose mean or
    spread overflows in double precision, and any value more than MAX_STANDARD_SCORE history
    standard deviations from the history mean (almost surely a unit or entry error)."""
    for name, x in hist_values.items():
        mean, sd = standard_scale(x)
        if not (np.isfinite(mean) and np.isfinite(sd)):
            at = int(np.nanargmax(np.abs(x)))
            raise UserError(
                f"{hist_path}: numeric feature '{name}' is too large to standardise: its "
                f"history mean or spread overflows (largest value {x[at]:g} at "
                f"{_place(hist_path, at)})",
                f"check the values and units of '{name}': numbers this large (beyond about "
                "1e150) cannot be squared in double precision",
            )
        files = [(hist_path, x)]
        if pend_path is not None and pend_values is not None:
            files.append((pend_path, pend_values[name]))
        for path, values in files:
            with np.errstate(over="ignore", invalid="ignore"):
                far = np.abs(values - mean) > MAX_STANDARD_SCORE * sd
            if far.any():
                bad = np.flatnonzero(far)
                raise UserError(
                    f"{path}: numeric feature '{name}' has a value more than "
                    f"{MAX_STANDARD_SCORE:,.0f} history standard deviations from the history mean "
                    f"({mean:g} ± {sd:g}) at {_cells_text(path, name, bad)}",
                    f"check the values and units of '{name}' at those lines; a value this far "
                    "out is almost surely an entry or unit error",
                )


def _check_history_spread(path: Path, frame: pd.DataFrame, features: list[Feature]) -> None:
    for f in features:
        if frame[f.name].nunique(dropna=True) < 2:
            raise UserError(
                f"{path}: feature '{f.name}' has the same value in every history row",
                f"a constant column cannot inform the model; add '{f.name}' to [data] exclude",
            )


def load_study_data(config: DataConfig | StudyConfig) -> StudyData:
    """Load and validate the history (and pending) files for a study.

    Given the whole :class:`~closecall.setup.config.StudyConfig`, the config's other data-dependent
    checks are made too: ``[model] folds`` against the history's smaller outcome class and the
    ``[proxies]`` lists against the features (messages then name the config file).
    """
    study = config if isinstance(config, StudyConfig) else None
    cfg = config.data if isinstance(config, StudyConfig) else config
    config_path = study.path if study is not None else None
    hist_path = cfg.history
    history = _read_history(cfg)
    y = _favourable_mask(hist_path, history[cfg.outcome], cfg.favourable, cfg.outcome)
    if y.all() or not y.any():
        raise UserError(
            f"{hist_path}: outcome '{cfg.outcome}' has one value only",
            "the history needs cases with both outcomes to fit a model",
        )
    _check_group(hist_path, history, cfg.group)
    features = resolve_features(cfg, history, hist_path, config_path)
    if study is not None:
        _check_proxy_names(study, hist_path, history, features)
    hist_numbers = _check_feature_values(hist_path, history, features)
    _check_history_spread(hist_path, history, features)
    hgroup = group_labels(history, cfg.group)
    levels, hcodes = _history_levels(cfg, hgroup)
    if study is not None:
        _check_folds(study, hist_path, y, hcodes, len(levels))
    pending = pgroup = deployed = None
    if cfg.pending is not None:
        pending, pgroup = _read_pending(cfg, history, features, hist_numbers, levels, cfg.pending)
        if cfg.deployed_score:
            deployed = _deployed(cfg.pending, pending, cfg.deployed_score)
    else:
        _check_scale(hist_path, hist_numbers)
        if cfg.deployed_score:
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
        notes=[],
    )


def _read_history(cfg: DataConfig) -> pd.DataFrame:
    """Read the history file and check that its named columns exist, are flat and its ids
    unique."""
    hist_path = cfg.history
    history = read_table(hist_path, text_columns=(cfg.id, *cfg.group))
    _check_columns(hist_path, history, [cfg.id], "id")
    _check_columns(hist_path, history, [cfg.outcome], "outcome")
    _check_columns(hist_path, history, list(cfg.group), "group")
    _check_columns(hist_path, history, list(cfg.exclude), "excluded")
    if cfg.features is not None:
        _check_columns(hist_path, history, list(cfg.features), "feature")
    deployed_here = [cfg.deployed_score] if cfg.deployed_score and cfg.pending is None else []
    _check_flat(
        hist_path,
        [
            cfg.id,
            cfg.outcome,
            *cfg.group,
            *deployed_here,
            *(cfg.features if cfg.features is not None else _default_features(cfg, history)),
        ],
    )
    _check_ids(hist_path, history, cfg.id)
    return history


def _history_levels(cfg: DataConfig, hgroup: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The history's group levels and each case's code; refuse one level or a small one."""
    hist_path = cfg.history
    levels, hcodes, counts = np.unique(hgroup, return_inverse=True, return_counts=True)
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
    return levels, hcodes


def _read_pending(
    cfg: DataConfig,
    history: pd.DataFrame,
    features: list[Feature],
    hist_numbers: dict[str, np.ndarray],
    levels: np.ndarray,
    pend_path: Path,
) -> tuple[pd.DataFrame, np.ndarray]:
    """Read the pending file, check it against the history, and return it with its groups."""
    hist_path = cfg.history
    pending = read_table(pend_path, text_columns=(cfg.id, *cfg.group))
    _check_columns(pend_path, pending, [cfg.id], "id")
    _check_columns(pend_path, pending, list(cfg.group), "group")
    _check_columns(pend_path, pending, [f.name for f in features], "feature")
    pend_deployed = [cfg.deployed_score] if cfg.deployed_score else []
    _check_flat(pend_path, [cfg.id, *cfg.group, *pend_deployed, *(f.name for f in features)])
    _check_ids(pend_path, pending, cfg.id)
    _check_shared_ids(hist_path, history, pend_path, pending, cfg.id)
    _check_group(pend_path, pending, cfg.group)
    pend_numbers = _check_feature_values(pend_path, pending, features)
    _check_scale(hist_path, hist_numbers, pend_path, pend_numbers)
    pgroup = group_labels(pending, cfg.group)
    unseen = sorted(set(np.unique(pgroup)) - set(levels))
    if unseen:
        raise UserError(
            f"{pend_path}: group level '{unseen[0]}' does not occur in the history",
            "the models cannot score a group they never saw; check the group column",
        )
    return pending, pgroup


def _check_folds(
    study: StudyConfig, hist_path: Path, y: np.ndarray, group_codes: np.ndarray, n_levels: int
) -> None:
    """K-fold cross-fitting needs at least K history cases of each outcome (and the folds are
    stratified by group and outcome, which needs one group-and-outcome cell of at least K)."""
    folds = study.model.folds
    favourable = int(y.sum())
    counts = {"favourable": favourable, "unfavourable": len(y) - favourable}
    smaller = min(counts, key=lambda k: counts[k])
    n = counts[smaller]
    cells = np.bincount(group_codes * 2 + y.astype(np.int64), minlength=2 * n_levels)
    if folds <= n and folds <= int(cells.max()):
        return
    if folds <= n:
        n = int(cells.max())
        raise UserError(
            f"{study.path}: [model] folds = {folds} is more than the largest group-and-outcome "
            f"cell of the history ({n} cases in {hist_path.name}): it must be a whole number "
            f"from 2 to {n}",
            f"set [model] folds to a whole number from 2 to {n} (5 is usual)",
        )
    if n < 2:
        raise UserError(
            f"{hist_path}: the history has {n} {smaller} case: too few to fit and check a model "
            f"with [model] folds = {folds}",
            f"add history cases with the {smaller} outcome",
        )
    raise UserError(
        f"{study.path}: [model] folds = {folds} is more than the history's smaller outcome "
        f"class ({n} {smaller} cases in {hist_path.name}): it must be a whole number from 2 "
        f"to {n}",
        f"set [model] folds to a whole number from 2 to {n} (5 is usual)",
    )


def _check_proxy_names(
    study: StudyConfig, hist_path: Path, frame: pd.DataFrame, features: list[Feature]
) -> None:
    """Every column named under [proxies] extra or never is a (non-group) feature."""
    names = {f.name for f in features}
    for key, listed in (("extra", study.proxies.extra), ("never", study.proxies.never)):
        for name in listed:
            if name in names:
                continue
            if name not in frame.columns:
                raise UserError(
                    f"{study.path}: [proxies] {key} names '{name}', which is not a column of "
                    f"{hist_path}",
                    _nearest(name, sorted(names)) + f"fix the name in [proxies] {key}",
                )
            raise UserError(
                f"{study.path}: [proxies] {key} names '{name}', which is not a feature of the "
                "study (a proxy is a feature other than the group attribute)",
                f"list only features under [proxies] {key}",
            )


def _id_text(col: pd.Series) -> Any:
    """A column of ids as an Arrow array of text (numbers written as text, as the ids are)."""
    import pyarrow as pa

    if not pd.api.types.is_string_dtype(col) or col.dtype == object:
        col = col.astype(str)
    return pa.array(col, from_pandas=True).cast(pa.large_string())


def _check_shared_ids(
    hist_path: Path, history: pd.DataFrame, pend_path: Path, pending: pd.DataFrame, id_col: str
) -> None:
    """Refuse pending cases whose id is also a history case's: such a case would be scored by
    models fitted on its own outcome, and its own row would be among its neighbours."""
    import pyarrow.compute as pc

    hist_ids, pend_ids = _id_text(history[id_col]), _id_text(pending[id_col])
    # probe the history against a hash set of the (usually fewer) pending ids; pandas' isin on
    # Arrow text goes through Python objects and costs seconds at 850,000 cases
    in_pending = pc.is_in(hist_ids, value_set=pend_ids).to_numpy(zero_copy_only=False)
    if not in_pending.any():
        return
    shared_ids = hist_ids.filter(in_pending)
    at = np.flatnonzero(pc.is_in(pend_ids, value_set=shared_ids).to_numpy(zero_copy_only=False))
    first = pend_ids[int(at[0])].as_py()
    in_hist = int(np.flatnonzero(pc.equal(hist_ids, first).to_numpy(zero_copy_only=False))[0])
    raise UserError(
        f"{pend_path}: {len(at)} case id(s) also appear in {hist_path} "
        f"(first: '{first}', {_place(pend_path, int(at[0]))} of {pend_path.name} and "
        f"{_place(hist_path, in_hist)} of {hist_path.name})",
        "a case awaiting review cannot also be a history case with a known outcome (its "
        "score would come from a model fitted on it): remove it from one file, or give it "
        "its own id",
    )


def _deployed(path: Path, frame: pd.DataFrame, column: str) -> np.ndarray:
    _check_columns(path, frame, [column], "deployed score")
    raw = pd.to_numeric(frame[column], errors="coerce")
    bad = np.flatnonzero((raw.isna() | (raw <= 0) | (raw >= 1)).to_numpy())
    if len(bad):
        raise UserError(
            f"{path}: deployed score column '{column}' must hold probabilities strictly between "
            f"0 and 1; not so at {_cells_text(path, column, bad)}",
            "export the deployed model's probabilities, not its decisions",
        )
    return raw.to_numpy(dtype=float)
