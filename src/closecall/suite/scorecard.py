"""The deployed model as a scorecard: points per feature level or bin, an intercept, a cut-off.

A *points card* gives points for each level of a categorical feature and for each bin
``[low, high)`` of a numeric one; a case's score is the intercept plus its points, and the
favourable decision is taken iff score ≥ cut-off. A *coefficients card* is a logistic model's
intercept and coefficients on the data's own scale (per unit of a numeric feature, per level of
a categorical one; an absent level is the reference, 0): its "points" are log-odds and its
cut-off is in log-odds. The file formats are described in docs/scorecard.md.

Interface (for the what-if engine and the analysis)
---------------------------------------------------
``Scorecard`` (frozen): ``source``, ``kind`` ("points" | "coefficients"), ``intercept``,
    ``cutoff`` (card units), ``rows`` (``CardRow``: feature, level | None, low, high, points;
    a coefficients card's per-unit row has level None and low = −inf, high = +inf),
    ``features`` (card order), ``pdo`` and ``anchor_points`` / ``anchor_odds`` (points cards,
    optional), ``factor`` / ``offset`` (points per unit of log-odds and the score at odds 1,
    None until known), ``scaling`` ("card" | "recalibrated" | "log-odds" | "none"), ``notes``.
``load_scorecard(path, data_columns) -> Scorecard`` : CSV or TOML; every refusal is a
    UserError naming the file, the row (CSV line / ``[[row]]`` number), the column and the fix.
``card_points(card, frame, drop=(), source=None) -> np.ndarray`` : total points per row of a
    DataFrame of raw values (vectorised); ``drop`` = features whose points are set to zero
    (e.g. ``("heritage",)``).
``card_logodds(card, frame, drop=(), source=None) -> np.ndarray`` : margin in log-odds
    relative to the cut-off, ``(points − cutoff) / factor``; needs a scaled card (the card's own
    PDO, or :func:`recalibrate` on the history; ``deployed_card(opened)`` returns a scaled card).
``card_probability(card, frame, drop=()) -> np.ndarray`` : P(favourable) =
    expit((points − offset) / factor) (needs the offset: an anchor or a recalibration).
``card_contributions(card, frame, source=None) -> (matrix rows × features, feature names)`` :
    each feature's points, uncentred and in points; row sums + intercept = card_points.
``unseen_levels(card, frame) -> {feature: {level: count}}`` : categories the card lacks.
``recalibrate(card, points, y) -> Scorecard`` : the card with ``factor`` and ``offset`` from a
    logistic fit of the outcome on the points (see docs/scorecard.md).
``deployed_card(opened) -> Scorecard | None`` (closecall.suite.scorecard_study) : the opened
    study's card, scaled, or None when ``[deployed] scorecard`` is not set.

References
----------
The points-to-double-odds scaling score = offset + factor · ln(odds), factor = PDO / ln 2, is
common practice in credit scoring (e.g. Siddiqi, *Credit Risk Scorecards*, Wiley 2006, ch. 6 —
from memory).
"""

from __future__ import annotations

import csv
import difflib
import io
import itertools
import math
import tomllib
from collections.abc import Collection, Iterable
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from scipy.special import expit

from closecall.core.errors import UserError

KINDS = ("points", "coefficients")
#: A level that matches every category the card does not list (points cards).
OTHER_LEVEL = "*"
#: A level that matches a missing value (numeric or categorical).
MISSING_LEVEL = "(missing)"
#: Settings rows of a CSV card: the ``feature`` cell holds one of these, the value column
#: (points or coefficient) its value.
SETTINGS = ("(intercept)", "(cutoff)", "(pdo)", "(anchor_points)", "(anchor_odds)")
_TOML_SETTINGS = ("intercept", "cutoff", "pdo", "anchor_points", "anchor_odds")
_CSV_COLUMNS = ("feature", "level", "low", "high", "points", "coefficient")
_ROW_KEYS = ("feature", "level", "low", "high", "points", "coefficient")
DOCS = "see docs/scorecard.md"


@dataclass(frozen=True)
class CardRow:
    """One row of a card: a level (``level``) or a numeric bin ``[low, high)`` and its points.

    For a coefficients card, ``points`` of a numeric feature is the coefficient per unit.
    """

    feature: str
    level: str | None
    low: float
    high: float
    points: float
    where: str = ""  # where the row is in the file, for messages


@dataclass(frozen=True)
class Scorecard:
    """A parsed card (see the module docstring)."""

    source: Path
    kind: str
    intercept: float
    cutoff: float
    rows: tuple[CardRow, ...]
    features: tuple[str, ...]
    pdo: float | None = None
    anchor_points: float | None = None
    anchor_odds: float | None = None
    factor: float | None = None  # points per unit of log-odds
    offset: float | None = None  # the score at odds 1 (log-odds 0)
    scaling: str = "none"  # card | recalibrated | log-odds | none
    notes: tuple[str, ...] = field(default=())

    @property
    def scaled(self) -> bool:
        """Whether margins in log-odds can be computed (the factor is known)."""
        return self.factor is not None

    def rows_of(self, feature: str) -> tuple[CardRow, ...]:
        return tuple(r for r in self.rows if r.feature == feature)

    def is_binned(self, feature: str) -> bool:
        """A numeric feature: scored by bins (points card) or per unit (coefficients card)."""
        return any(r.level is None for r in self.rows_of(feature))

    def to_json(self) -> dict[str, Any]:
        """The card as JSON-able data (stored in the snapshot)."""

        def num(x: float | None) -> float | str | None:
            if x is None:
                return None
            return x if math.isfinite(x) else ("inf" if x > 0 else "-inf")

        return {
            "source": str(self.source),
            "kind": self.kind,
            "intercept": self.intercept,
            "cutoff": self.cutoff,
            "rows": [
                {
                    "feature": r.feature,
                    "level": r.level,
                    "low": num(r.low),
                    "high": num(r.high),
                    "points": r.points,
                    "where": r.where,
                }
                for r in self.rows
            ],
            "features": list(self.features),
            "pdo": self.pdo,
            "anchor_points": self.anchor_points,
            "anchor_odds": self.anchor_odds,
            "factor": self.factor,
            "offset": self.offset,
            "scaling": self.scaling,
            "notes": list(self.notes),
        }

    @classmethod
    def from_json(cls, d: dict[str, Any]) -> Scorecard:
        rows = tuple(
            CardRow(
                r["feature"],
                r["level"],
                float(r["low"]),
                float(r["high"]),
                float(r["points"]),
                r.get("where", ""),
            )
            for r in d["rows"]
        )
        return cls(
            source=Path(d["source"]),
            kind=d["kind"],
            intercept=float(d["intercept"]),
            cutoff=float(d["cutoff"]),
            rows=rows,
            features=tuple(d["features"]),
            pdo=d.get("pdo"),
            anchor_points=d.get("anchor_points"),
            anchor_odds=d.get("anchor_odds"),
            factor=d.get("factor"),
            offset=d.get("offset"),
            scaling=d.get("scaling", "none"),
            notes=tuple(d.get("notes", ())),
        )


# --------------------------------------------------------------------------- reading


def _nearest(name: str, choices: Iterable[str]) -> str:
    close = difflib.get_close_matches(name, list(choices), n=1, cutoff=0.6)
    return f"did you mean '{close[0]}'? " if close else ""


def _number(path: Path, where: str, column: str, text: object, *, empty: float | None) -> float:
    """A finite number from a card cell; an empty cell gives ``empty`` (None: refused)."""
    if text is None or (isinstance(text, str) and not text.strip()):
        if empty is not None:
            return empty
        raise UserError(
            f"{path}: {where}: '{column}' is empty",
            f"write a number in the '{column}' column; {DOCS}",
        )
    if isinstance(text, bool):
        value = math.nan
    else:
        try:
            value = float(text)  # type: ignore[arg-type]
        except (TypeError, ValueError):
            value = math.nan
    if not math.isfinite(value):
        raise UserError(
            f"{path}: {where}: '{column}' holds {text!r}, which is not a finite number",
            f"write a plain number in the '{column}' column (e.g. 12.5); {DOCS}",
        )
    return value


def _level_text(value: object) -> str:
    """A level as the card and the data both spell it (see :func:`_as_text`)."""
    if isinstance(value, bool):
        return str(value)
    if isinstance(value, float) and value.is_integer():
        return str(int(value))
    return str(value).strip()


def _raw_rows(path: Path) -> tuple[str, list[tuple[str, dict[str, Any]]], dict[str, Any]]:
    """(value column, [(where, row dict)], settings) from a CSV or TOML card file."""
    if not path.is_file():
        raise UserError(
            f"{path}: no scorecard file here",
            "write the card (CSV or TOML, see docs/scorecard.md) or correct [deployed] "
            "scorecard in the study config",
        )
    try:
        text = path.read_text(encoding="utf-8-sig")
    except UnicodeDecodeError:
        raise UserError(f"{path}: not UTF-8 text", "save the scorecard as UTF-8") from None
    except OSError as exc:
        raise UserError(
            f"{path}: cannot read the scorecard ({exc.strerror or exc})",
            "check the file's permissions",
        ) from None
    if path.suffix.lower() == ".toml":
        return _toml_rows(path, text)
    if path.suffix.lower() not in (".csv", ".txt"):
        raise UserError(
            f"{path}: a scorecard is a .csv or .toml file",
            f"save the card as CSV or TOML; {DOCS}",
        )
    return _csv_rows(path, text)


def _csv_rows(
    path: Path, text: str
) -> tuple[str, list[tuple[str, dict[str, Any]]], dict[str, Any]]:
    reader = csv.reader(io.StringIO(text))
    try:
        header = [h.strip() for h in next(reader)]
    except StopIteration:
        raise UserError(
            f"{path}: the scorecard is empty", f"write the card's rows; {DOCS}"
        ) from None
    for name in header:
        if name not in _CSV_COLUMNS:
            raise UserError(
                f"{path}: line 1: unknown column '{name}'",
                f"{_nearest(name, _CSV_COLUMNS)}a card's columns are "
                f"{', '.join(_CSV_COLUMNS)}; {DOCS}",
            )
    if len(set(header)) != len(header):
        raise UserError(f"{path}: line 1: a column is named twice", "name each column once")
    value_col = _value_column(path, "line 1", set(header))
    if "feature" not in header:
        raise UserError(f"{path}: line 1: no 'feature' column", f"add a 'feature' column; {DOCS}")
    rows: list[tuple[str, dict[str, Any]]] = []
    settings: dict[str, Any] = {}
    for line_no, cells in enumerate(reader, start=2):
        if not cells or all(not c.strip() for c in cells):
            continue
        if len(cells) != len(header):
            raise UserError(
                f"{path}: line {line_no}: {len(cells)} cells for {len(header)} columns",
                "give every line one cell per column (empty cells are allowed)",
            )
        row = dict(zip(header, cells, strict=True))
        name = row["feature"].strip()
        where = f"line {line_no}"
        if name.startswith("(") and name.endswith(")"):
            if name not in SETTINGS:
                raise UserError(
                    f"{path}: {where}: unknown setting '{name}'",
                    f"{_nearest(name, SETTINGS)}settings are {', '.join(SETTINGS)}; {DOCS}",
                )
            key = name[1:-1]
            if key in settings:
                raise UserError(f"{path}: {where}: {name} is given twice", "keep one of the two")
            settings[key] = (where, row.get(value_col, ""))
            continue
        rows.append((where, row))
    return value_col, rows, settings


def _value_column(path: Path, where: str, keys: set[str]) -> str:
    has_p, has_c = "points" in keys, "coefficient" in keys
    if has_p == has_c:
        raise UserError(
            f"{path}: {where}: a card has either a 'points' column (a points card) or a "
            "'coefficient' column (a logistic model's coefficients)"
            + (", not both" if has_p else ", and this one has neither"),
            f"name the value column 'points' or 'coefficient'; {DOCS}",
        )
    return "points" if has_p else "coefficient"


def _toml_rows(
    path: Path, text: str
) -> tuple[str, list[tuple[str, dict[str, Any]]], dict[str, Any]]:
    try:
        raw = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise UserError(f"{path}: not valid TOML ({exc})", "fix the line named above") from None
    for key in raw:
        if key not in (*_TOML_SETTINGS, "kind", "row"):
            raise UserError(
                f"{path}: unknown key '{key}'",
                f"{_nearest(key, (*_TOML_SETTINGS, 'kind', 'row'))}a TOML card has kind, "
                f"{', '.join(_TOML_SETTINGS)} and [[row]] tables; {DOCS}",
            )
    kind = raw.get("kind", "points")
    if kind not in KINDS:
        raise UserError(
            f"{path}: kind = {kind!r}", f"set kind to 'points' or 'coefficients'; {DOCS}"
        )
    value_col = "points" if kind == "points" else "coefficient"
    entries = raw.get("row", [])
    if not isinstance(entries, list):
        raise UserError(
            f"{path}: 'row' must be [[row]] tables", f"write each row as [[row]]; {DOCS}"
        )
    rows: list[tuple[str, dict[str, Any]]] = []
    for i, entry in enumerate(entries, start=1):
        where = f"[[row]] number {i}"
        if not isinstance(entry, dict):
            raise UserError(f"{path}: {where} is not a table", f"write it as [[row]]; {DOCS}")
        for key in entry:
            if key not in _ROW_KEYS:
                raise UserError(
                    f"{path}: {where}: unknown key '{key}'",
                    f"{_nearest(key, _ROW_KEYS)}a row has {', '.join(_ROW_KEYS)}; {DOCS}",
                )
        other = "coefficient" if value_col == "points" else "points"
        if other in entry:
            raise UserError(
                f"{path}: {where}: '{other}' in a {kind} card",
                f"write the row's value as '{value_col}' (kind = \"{kind}\"); {DOCS}",
            )
        row = {k: ("" if v is None else v) for k, v in entry.items()}
        row.setdefault("feature", "")
        rows.append((where, row))
    settings = {k: (f"key '{k}'", raw[k]) for k in _TOML_SETTINGS if k in raw}
    return value_col, rows, settings


def load_scorecard(path: str | Path, data_columns: Collection[str]) -> Scorecard:
    """Read and validate a card.

    Parameters
    ----------
    path
        A CSV or TOML card (docs/scorecard.md).
    data_columns
        The columns of the data the card will score: every feature must be one of them.

    Raises
    ------
    UserError
        Naming the file, the row and the column, with the fix: an unknown feature, a value that
        is not a finite number, a bin with low ≥ high, overlapping bins or a gap between bins, a
        level listed twice, a feature given both levels and bins, a missing cut-off, a partial
        or impossible scaling.
    """
    path = Path(path)
    value_col, raw_rows, settings = _raw_rows(path)
    kind = "points" if value_col == "points" else "coefficients"
    columns = set(map(str, data_columns))
    intercept, cutoff, pdo, anchor_points, anchor_odds = _card_settings(path, settings, kind)
    rows = [_card_row(path, where, row, columns, kind, value_col) for where, row in raw_rows]
    if not rows:
        raise UserError(f"{path}: the card has no feature rows", f"add the card's rows; {DOCS}")
    features = tuple(dict.fromkeys(r.feature for r in rows))
    for feat in features:
        _check_feature(path, kind, feat, [r for r in rows if r.feature == feat])
    card = Scorecard(
        source=path,
        kind=kind,
        intercept=float(intercept),
        cutoff=float(cutoff),
        rows=tuple(rows),
        features=features,
        pdo=pdo,
        anchor_points=anchor_points,
        anchor_odds=anchor_odds,
    )
    if kind == "coefficients":
        return replace(card, factor=1.0, offset=0.0, scaling="log-odds")
    if pdo is not None:
        factor = pdo / math.log(2.0)
        offset = (
            None
            if anchor_points is None or anchor_odds is None
            else anchor_points - factor * math.log(anchor_odds)
        )
        return replace(card, factor=factor, offset=offset, scaling="card")
    return card


def _setting(
    path: Path, settings: dict[str, Any], key: str, *, positive: bool = False
) -> float | None:
    """One of the card's settings as a number (None when absent); ``positive``: above 0."""
    if key not in settings:
        return None
    where, text = settings[key]
    value = _number(path, where, key, text, empty=None)
    if positive and value <= 0:
        raise UserError(
            f"{path}: {where}: {key} = {value:g} must be above 0",
            f"write {key} as a positive number; {DOCS}",
        )
    return value


def _card_settings(
    path: Path, settings: dict[str, Any], kind: str
) -> tuple[float, float, float | None, float | None, float | None]:
    """Intercept, cut-off, pdo and anchor, refusing a missing cut-off or a partial or
    impossible scaling."""
    intercept = _setting(path, settings, "intercept") or 0.0
    cutoff = _setting(path, settings, "cutoff")
    if cutoff is None:
        raise UserError(
            f"{path}: the card gives no cut-off",
            "add a row '(cutoff)' (CSV) or a key cutoff = ... (TOML): the score at or above "
            "which the favourable decision is taken"
            + (" (in log-odds for a coefficients card)" if kind == "coefficients" else "")
            + f"; {DOCS}",
        )
    pdo = _setting(path, settings, "pdo", positive=True)
    anchor_points = _setting(path, settings, "anchor_points")
    anchor_odds = _setting(path, settings, "anchor_odds", positive=True)
    if kind == "coefficients" and (pdo or anchor_points is not None or anchor_odds):
        raise UserError(
            f"{path}: a coefficients card is already in log-odds: it takes no pdo or anchor",
            f"remove pdo, anchor_points and anchor_odds from the card; {DOCS}",
        )
    if (anchor_points is None) != (anchor_odds is None):
        raise UserError(
            f"{path}: the card gives one of anchor_points and anchor_odds without the other",
            f"give both (the score at which the odds are anchor_odds to 1) or neither; {DOCS}",
        )
    if anchor_points is not None and pdo is None:
        raise UserError(
            f"{path}: the card gives an anchor but no pdo (points to double the odds)",
            f"add pdo, or remove the anchor; {DOCS}",
        )
    return intercept, cutoff, pdo, anchor_points, anchor_odds


def _card_row(
    path: Path, where: str, row: dict[str, Any], columns: set[str], kind: str, value_col: str
) -> CardRow:
    """One feature row of the card: a level, a bin or (coefficients) a per-unit weight."""
    name = str(row.get("feature", "")).strip()
    if not name:
        raise UserError(
            f"{path}: {where}: 'feature' is empty",
            f"name the data column the row scores; {DOCS}",
        )
    if name not in columns:
        raise UserError(
            f"{path}: {where}: feature '{name}' is not a column of the data",
            f"{_nearest(name, columns)}name a column of the study's data files",
        )
    value = _number(path, where, value_col, row.get(value_col, ""), empty=None)
    level_raw = row.get("level", "")
    level = None if level_raw == "" else _level_text(level_raw)
    low_raw, high_raw = row.get("low", ""), row.get("high", "")
    has_bin = not (low_raw == "" and high_raw == "")
    if level is not None and has_bin:
        raise UserError(
            f"{path}: {where}: feature '{name}' row gives both a level and a bin",
            "a row scores one category (level) or one numeric range (low, high), not both",
        )
    if level is not None and level == "":
        raise UserError(f"{path}: {where}: 'level' is blank", "write the category's text")
    if level is not None:
        return CardRow(name, level, -math.inf, math.inf, value, where)
    if kind == "coefficients" and has_bin:
        raise UserError(
            f"{path}: {where}: a coefficients card gives a numeric feature one "
            "coefficient per unit, not bins",
            f"leave low and high empty for '{name}'; {DOCS}",
        )
    if kind == "points" and not has_bin:
        raise UserError(
            f"{path}: {where}: feature '{name}' row gives neither a level nor a bin",
            "give a category in 'level', or a numeric range in 'low' and 'high' "
            f"(an empty end is open); {DOCS}",
        )
    low = _number(path, where, "low", low_raw, empty=-math.inf)
    high = _number(path, where, "high", high_raw, empty=math.inf)
    if not low < high:
        raise UserError(
            f"{path}: {where}: feature '{name}' bin [{low:g}, {high:g}) is empty: "
            "low must be below high",
            "a bin holds low ≤ value < high: correct the two ends",
        )
    return CardRow(name, level, low, high, value, where)


def _check_feature(path: Path, kind: str, feat: str, rows: list[CardRow]) -> None:
    """One feature's rows: all levels or all bins/per-unit; no duplicates, overlaps or gaps."""
    levels = [r for r in rows if r.level is not None and r.level != MISSING_LEVEL]
    numeric = [r for r in rows if r.level is None]
    if levels and numeric:
        raise UserError(
            f"{path}: {levels[0].where} and {numeric[0].where}: feature '{feat}' is given both "
            "categories and " + ("bins" if kind == "points" else "a per-unit coefficient"),
            "score a feature either by category or by numeric value, not both",
        )
    seen: dict[str, CardRow] = {}
    for r in rows:
        if r.level is None:
            continue
        if r.level in seen:
            raise UserError(
                f"{path}: {r.where}: level '{r.level}' of feature '{feat}' is listed again "
                f"(first at {seen[r.level].where})",
                "list each level once",
            )
        seen[r.level] = r
    if OTHER_LEVEL in seen and kind == "coefficients":
        raise UserError(
            f"{path}: {seen[OTHER_LEVEL].where}: level '*' in a coefficients card",
            "a coefficients card's absent levels are the reference (0): remove the row",
        )
    if kind == "coefficients" and len(numeric) > 1:
        raise UserError(
            f"{path}: {numeric[1].where}: feature '{feat}' has a second per-unit coefficient "
            f"(first at {numeric[0].where})",
            "give a numeric feature one coefficient",
        )
    if kind == "points" and numeric:
        ordered = sorted(numeric, key=lambda r: r.low)
        for a, b in itertools.pairwise(ordered):
            if b.low < a.high:
                raise UserError(
                    f"{path}: {b.where}: feature '{feat}' bin [{b.low:g}, {b.high:g}) overlaps "
                    f"[{a.low:g}, {a.high:g}) at {a.where}",
                    "make the bins meet end to start (one's high is the next one's low)",
                )
            if b.low > a.high:
                raise UserError(
                    f"{path}: {b.where}: feature '{feat}' has a gap between its bins: nothing "
                    f"scores values from {a.high:g} up to {b.low:g}",
                    f"start the bin at {b.where} at {a.high:g}, or add a bin for the gap",
                )


# --------------------------------------------------------------------------- scoring


def _as_text(column: pd.Series) -> np.ndarray:
    """A data column's values as the card spells levels (integers without '.0'); missing
    values become :data:`MISSING_LEVEL`."""
    missing = column.isna().to_numpy()
    if pd.api.types.is_bool_dtype(column):
        text = column.astype(str).to_numpy(dtype=object)
    elif pd.api.types.is_numeric_dtype(column):
        values = column.to_numpy(dtype=float, na_value=np.nan)
        whole = np.isfinite(values) & (values == np.round(values))
        text = np.where(
            whole,
            np.char.mod("%d", np.where(whole, values, 0).astype(np.int64)).astype(object),
            column.astype(str).to_numpy(dtype=object),
        )
    else:
        text = column.astype(str).str.strip().to_numpy(dtype=object)
    return np.where(missing, MISSING_LEVEL, text)


def _label(source: str | None, frame: pd.DataFrame, pos: int) -> str:
    where = source or "the data"
    return f"{where}, row {frame.index[pos]!s}"


def _feature_points(
    card: Scorecard, feat: str, frame: pd.DataFrame, source: str | None
) -> np.ndarray:
    """Points of one feature for every row (vectorised)."""
    rows = card.rows_of(feat)
    if feat not in frame.columns:
        raise UserError(
            f"{source or 'the data'}: has no column '{feat}', which the scorecard "
            f"{card.source.name} scores",
            "add the column to the data file, or remove its rows from the card",
        )
    column = frame[feat]
    n = len(frame)
    missing_row = next((r for r in rows if r.level == MISSING_LEVEL), None)
    numeric = [r for r in rows if r.level is None]
    if numeric:
        values = pd.to_numeric(column, errors="coerce").to_numpy(dtype=float, na_value=np.nan)
        bad_text = (~column.isna().to_numpy()) & np.isnan(values)
        if bad_text.any():
            pos = int(np.flatnonzero(bad_text)[0])
            raise UserError(
                f"{_label(source, frame, pos)}: '{feat}' holds {column.iloc[pos]!r}, but the "
                f"scorecard {card.source.name} scores '{feat}' as a number",
                "correct the cell, or score the feature by category in the card",
            )
        missing = np.isnan(values)
        out = np.zeros(n)
        if card.kind == "coefficients":
            out = np.where(missing, 0.0, numeric[0].points * np.where(missing, 0.0, values))
        else:
            ordered = sorted(numeric, key=lambda r: r.low)
            lows = np.array([r.low for r in ordered])
            highs = np.array([r.high for r in ordered])
            pts = np.array([r.points for r in ordered])
            at = np.searchsorted(lows, np.where(missing, lows[0], values), side="right") - 1
            inside = (at >= 0) & (values < highs[np.clip(at, 0, None)])
            outside = ~missing & ~inside
            if outside.any():
                pos = int(np.flatnonzero(outside)[0])
                raise UserError(
                    f"{_label(source, frame, pos)}: '{feat}' = {values[pos]:g} lies outside "
                    f"every bin of the scorecard {card.source.name} (its bins cover "
                    f"[{lows[0]:g}, {highs[-1]:g})); {int(outside.sum()):,} row(s) in all",
                    "widen the first or last bin (an empty low or high is open-ended)",
                )
            out = np.where(missing, 0.0, pts[np.clip(at, 0, None)])
        if missing.any():
            if missing_row is None:
                pos = int(np.flatnonzero(missing)[0])
                raise UserError(
                    f"{_label(source, frame, pos)}: '{feat}' is missing, and the scorecard "
                    f"{card.source.name} gives no points for a missing '{feat}'; "
                    f"{int(missing.sum()):,} row(s) in all",
                    f"add a row for '{feat}' with level '{MISSING_LEVEL}', or fill the cells",
                )
            out = np.where(missing, missing_row.points, out)
        return out
    text = _as_text(column)
    table = {r.level: r.points for r in rows}
    levels = np.array(list(table), dtype=object)
    values = np.array(list(table.values()), dtype=float)
    other = table.get(OTHER_LEVEL, 0.0)
    # one lookup for all rows: unique levels, then take
    uniq, inverse = np.unique(text.astype(str), return_inverse=True)
    known = {str(k): v for k, v in zip(levels, values, strict=True)}
    per_level = np.array([known.get(str(u), other) for u in uniq], dtype=float)
    return per_level[inverse.reshape(-1)]


def unseen_levels(card: Scorecard, frame: pd.DataFrame) -> dict[str, dict[str, int]]:
    """Categories of the data the card does not list, with their counts, per feature.

    A points card scores them with its ``*`` row when it has one, with 0 otherwise; a
    coefficients card scores them 0 (the reference level). A missing value counts as the level
    ``(missing)`` when the card has no row for it. (A numeric feature's missing value without a
    ``(missing)`` row is refused by :func:`card_points` instead.)
    """
    out: dict[str, dict[str, int]] = {}
    for feat in card.features:
        rows = card.rows_of(feat)
        if any(r.level is None for r in rows) or feat not in frame.columns:
            continue
        listed = {r.level for r in rows}
        text = _as_text(frame[feat]).astype(str)
        uniq, counts = np.unique(text, return_counts=True)
        lacking = {str(u): int(c) for u, c in zip(uniq, counts, strict=True) if u not in listed}
        if lacking:
            out[feat] = lacking
    return out


def card_contributions(
    card: Scorecard, frame: pd.DataFrame, source: str | None = None
) -> tuple[np.ndarray, list[str]]:
    """Each feature's points per row: (matrix rows × features, feature names in card order).

    Row sums plus the intercept equal :func:`card_points`. The points are uncentred and in the
    card's units (log-odds for a coefficients card).
    """
    if len(frame) == 0:
        return np.zeros((0, len(card.features))), list(card.features)
    M = np.column_stack([_feature_points(card, f, frame, source) for f in card.features])
    return M, list(card.features)


def card_points(
    card: Scorecard,
    frame: pd.DataFrame,
    drop: Iterable[str] = (),
    source: str | None = None,
) -> np.ndarray:
    """Total points per row: intercept + each feature's points (``drop``: features at 0).

    ``drop`` may name features the card does not score (they contribute nothing anyway).
    """
    dropped = set(drop)
    total = np.full(len(frame), card.intercept, dtype=float)
    for feat in card.features:
        if feat not in dropped:
            total += _feature_points(card, feat, frame, source)
    return total


def _need_factor(card: Scorecard) -> float:
    if card.factor is None:
        raise ValueError(
            "the card has no scaling: recalibrate it on the history first "
            "(closecall.suite.scorecard.recalibrate, or deployed_card(opened))"
        )
    return card.factor


def points_to_logodds(card: Scorecard, points: np.ndarray) -> np.ndarray:
    """Margin in log-odds relative to the cut-off: (points − cutoff) / factor."""
    return (np.asarray(points, dtype=float) - card.cutoff) / _need_factor(card)


def card_logodds(
    card: Scorecard,
    frame: pd.DataFrame,
    drop: Iterable[str] = (),
    source: str | None = None,
) -> np.ndarray:
    """Margin in log-odds relative to the card's cut-off (> 0: favourable, = 0 at the cut-off
    taken as favourable by the card); ``drop`` as in :func:`card_points`."""
    return points_to_logodds(card, card_points(card, frame, drop, source))


def absolute_logodds(card: Scorecard, points: np.ndarray) -> np.ndarray:
    """ln(odds of the favourable outcome) = (points − offset) / factor."""
    if card.offset is None:
        raise ValueError("the card has no offset: recalibrate it on the history first")
    return (np.asarray(points, dtype=float) - card.offset) / _need_factor(card)


def card_probability(card: Scorecard, frame: pd.DataFrame, drop: Iterable[str] = ()) -> np.ndarray:
    """P(favourable) under the card's scaling: expit((points − offset) / factor)."""
    return np.asarray(expit(absolute_logodds(card, card_points(card, frame, drop))))


# --------------------------------------------------------------------------- recalibration


def logistic_line(x: np.ndarray, y: np.ndarray, slope: float | None = None) -> tuple[float, float]:
    """Maximum-likelihood (a, b) of P(y = 1) = expit(a + b·x), by Newton's method.

    With ``slope`` given, only ``a`` is fitted (b fixed). ``x`` is centred and scaled inside
    for a well-conditioned fit. Raises ValueError when the fit does not converge (the outcome
    separated by x).
    """
    x = np.asarray(x, dtype=float)
    yf = np.asarray(y, dtype=float)
    mu = float(x.mean())
    sd = float(x.std()) or 1.0
    z = (x - mu) / sd
    prior = float(np.clip(yf.mean(), 1e-6, 1 - 1e-6))
    a = math.log(prior / (1 - prior))
    b = 0.0 if slope is None else slope * sd
    for _ in range(100):
        p = expit(a + b * z)
        w = p * (1 - p)
        ga = float(np.sum(yf - p))
        if slope is None:
            gb = float(np.sum((yf - p) * z))
            haa, hab, hbb = float(w.sum()), float((w * z).sum()), float((w * z * z).sum())
            det = haa * hbb - hab * hab
            if det <= 0:
                raise ValueError("singular recalibration")
            da = (hbb * ga - hab * gb) / det
            db = (haa * gb - hab * ga) / det
        else:
            da, db = ga / float(w.sum()), 0.0
        a, b = a + da, b + db
        if max(abs(da), abs(db)) < 1e-12:
            return a - b * mu / sd, b / sd
    raise ValueError("the recalibration did not converge")


def recalibrate(card: Scorecard, points: np.ndarray, y: np.ndarray) -> Scorecard:
    """The card with its log-odds scale fitted to recorded outcomes.

    With no PDO, ln(odds) = a + b·points is fitted by maximum likelihood (factor = 1/b,
    offset = −a/b); with a PDO but no anchor, the slope is the card's (1/factor) and only the
    offset is fitted. A card with both, or a coefficients card, is returned as it is.

    Raises
    ------
    UserError
        When the points do not rise with the favourable outcome on these cases (b ≤ 0), or
        separate the outcomes, so that no log-odds scale can be fitted.
    """
    if card.factor is not None and card.offset is not None:
        return card
    try:
        if card.factor is None:
            a, b = logistic_line(points, y)
        else:
            a, b = logistic_line(points, y, slope=1.0 / card.factor)
    except ValueError:
        raise UserError(
            f"{card.source}: the card's points separate the history's outcomes, so no "
            "log-odds scale can be fitted to them",
            f"add the card's scaling (pdo, anchor_points, anchor_odds) to the card; {DOCS}",
        ) from None
    if not b > 0:
        raise UserError(
            f"{card.source}: on the history, the favourable outcome becomes less likely as the "
            f"card's points rise (fitted slope {b:.3g} per point)",
            "check [data] favourable and the card's sign (higher points must favour the "
            f"favourable outcome), or give the card's scaling; {DOCS}",
        )
    note = (
        f"log-odds scale recalibrated on {len(y):,} history cases: ln(odds) = "
        f"{a:.4g} + {b:.4g}·points"
    )
    return replace(
        card,
        factor=1.0 / b,
        offset=-a / b,
        scaling="recalibrated",
        notes=(*card.notes, note),
    )
