"""The analyst export: ledger entries as a flat table, optionally pseudonymised.

By default one row per effective decision: each reviewer's latest entry on a case that no
entry supersedes (the rule of :mod:`closecall.review.conflicts`; a second opinion is a row
beside the first), joined with the case's group, every model's margin and decision as the
reviewer saw them, the entry's final decision, how many decisions are in force on the case and
whether they conflict. ``all_entries`` gives every entry instead.

Pseudonyms are keyed HMAC-SHA256 values: without the key they cannot be reversed or recomputed
from a guessed id, and the same key gives the same pseudonyms in every export, so exports can be
joined. The key lives in a file readable by its owner only.

References
----------
RFC 2104, "HMAC: Keyed-Hashing for Message Authentication". FIPS 180-4 (SHA-256).
"""

from __future__ import annotations

import hmac
import io
import os
import re
import secrets
import stat
from collections.abc import Sequence
from dataclasses import dataclass
from hashlib import sha256
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from closecall.core.errors import Fix, UserError
from closecall.core.vocabulary import (
    final_decision,
)
from closecall.review.conflicts import NOT_A_DECISION
from closecall.review.ledger import Entry
from closecall.setup.output_files import StudyFile, check_key_file, study_files, write_output

if TYPE_CHECKING:
    from closecall.suite.opening import OpenedStudy

EXPORT_FORMATS = ("csv", "parquet", "jsonl")

#: Bytes of a new pseudonymisation key (256 bits, the HMAC-SHA256 block-size guidance of RFC 2104).
KEY_BYTES = 32
KEY_FILE_MODE = 0o600
EXPORT_FILE_MODE = 0o600

#: Columns dropped when case ids are pseudonymised: an entry's hash covers the raw case id, so
#: with the other fields it would let anyone confirm a guessed id.
HASH_COLUMNS = ("prev_hash", "hash")


# --------------------------------------------------------------------------- keys and pseudonyms


def load_or_create_key(path: str | Path, protected: Sequence[StudyFile] = ()) -> tuple[bytes, bool]:
    """Read a pseudonymisation key file, or create one (owner-only) if it does not exist.

    ``path`` may not be one of the ``protected`` study files (its ledger, config, data or
    snapshot folder): a key is never created, or looked for, there.

    Returns
    -------
    key, created
        The key bytes and whether the file was created now.

    Raises
    ------
    UserError
        The path is a study file; the file is readable by others, or does not hold a key
        written by closecall.
    """
    path = Path(path)
    check_key_file(path, protected)
    created = False
    if not path.exists():
        path.parent.mkdir(parents=True, exist_ok=True)
        try:
            fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL, KEY_FILE_MODE)
        except FileExistsError:  # created by another process meanwhile: use theirs
            pass
        except OSError as exc:
            raise UserError(f"{path}: cannot create the key file ({exc.strerror})") from None
        else:
            with os.fdopen(fd, "w", encoding="ascii") as fh:
                fh.write(secrets.token_hex(KEY_BYTES) + "\n")
            created = True
    if path.is_dir():
        raise UserError(f"{path}: is a folder, not a key file", "name a file for the key")
    mode = stat.S_IMODE(path.stat().st_mode)
    if mode & 0o077:
        raise UserError(
            f"{path}: the key file can be read by other logins (mode {mode:o})",
            f"restrict it with: chmod 600 {path}",
        )
    text = path.read_text(encoding="ascii", errors="replace").strip()
    try:
        key = bytes.fromhex(text)
    except ValueError:
        key = b""
    if len(key) < 16:
        raise UserError(
            f"{path}: does not hold a pseudonymisation key (expected hexadecimal text)",
            "pass the key file an earlier export created, or a new path to create one",
        )
    return key, created


def pseudonym(key: bytes, value: str, kind: str = "case") -> str:
    """HMAC-SHA256 of ``kind:value`` under ``key``, as 64 hexadecimal characters.

    ``kind`` separates name spaces, so a reviewer called like a case id gets another pseudonym.
    """
    return hmac.new(key, f"{kind}:{value}".encode(), sha256).hexdigest()


def pseudonymise(values: pd.Series, key: bytes, kind: str) -> pd.Series:
    """Replace every value by its pseudonym (computed once per distinct value)."""
    uniques = pd.unique(values.astype(str))
    mapping = {v: pseudonym(key, str(v), kind) for v in uniques}
    return values.astype(str).map(mapping)


# --------------------------------------------------------------------------- tables


def effective_mask(entries: pd.DataFrame) -> np.ndarray:
    """True for each entry in force: its reviewer's latest on the case, not superseded.

    The rule of :func:`closecall.review.conflicts.effective_entries`, vectorised: a case has
    one effective entry per reviewer (a second opinion stands beside the first), and an entry
    another entry supersedes is out.
    """
    if not len(entries):
        return np.zeros(0, dtype=bool)
    latest = entries.groupby(["case_id", "reviewer"], sort=False)["seq"].transform("max")
    superseded = entries["seq"].isin(entries["supersedes"].dropna().astype(np.int64))
    return np.asarray((entries["seq"] == latest) & ~superseded, dtype=bool)


def conflict_mask(entries: pd.DataFrame, effective: np.ndarray) -> np.ndarray:
    """True for each entry of a case in conflict: its effective entries, deferrals aside,
    name different actions (the rule of :func:`closecall.review.conflicts.conflicted_cases`).
    """
    if not len(entries):
        return np.zeros(0, dtype=bool)
    live = entries[effective & ~entries["action"].isin(NOT_A_DECISION).to_numpy()]
    kinds = live.groupby("case_id", sort=False)["action"].nunique()
    return np.asarray(entries["case_id"].isin(kinds.index[kinds.to_numpy() > 1]), dtype=bool)


def case_decision_mask(
    entries: pd.DataFrame, effective: np.ndarray, conflict: np.ndarray
) -> np.ndarray:
    """True for the one entry that stands for its case in per-case figures (the disparity
    report's "with overrides"): none for a case in conflict (its reviewers disagree, so no
    human decision is settled and the model's decision stands); otherwise the latest effective
    entry that decides (a deferral only when no effective entry decides).
    """
    if not len(entries):
        return np.zeros(0, dtype=bool)
    candidates = entries[effective & ~conflict][["case_id", "seq", "action"]].assign(
        decides=lambda f: ~f["action"].isin(NOT_A_DECISION)
    )
    chosen = candidates.sort_values(["decides", "seq"]).groupby("case_id", sort=False).tail(1)
    return np.asarray(entries.index.isin(chosen.index), dtype=bool)


def entries_frame(entries: Sequence[Entry], models: Sequence[str] = ()) -> pd.DataFrame:
    """Ledger entries as a DataFrame, one row per entry in sequence order.

    Each model's margin and decision at review time become ``margin__MODEL`` and
    ``decision__MODEL`` columns; ``models`` fixes their order (others follow by name).
    """
    base = [
        "seq",
        "time",
        "reviewer",
        "case_id",
        "snapshot_id",
        "current_snapshot_id",
        "reference_model",
        "reference_decision",
        "reference_margin",
        "action",
        "reason",
        "note",
        "supersedes",
        "prev_hash",
        "hash",
    ]
    frame = pd.DataFrame([{k: getattr(e, k) for k in base} for e in entries], columns=base)
    names = list(models) + sorted({m for e in entries for m in e.decisions} - set(models))
    for m in names:
        frame[f"margin__{m}"] = [_margin(e, m) for e in entries]
        frame[f"decision__{m}"] = [e.decisions.get(m, {}).get("decision") for e in entries]
    frame["reference_margin"] = frame["reference_margin"].astype(float)
    frame["supersedes"] = frame["supersedes"].astype("Int64")
    return frame


def _margin(entry: Entry, model: str) -> float:
    value = entry.decisions.get(model, {}).get("margin")
    return float("nan") if value is None else float(value)


@dataclass(frozen=True)
class ExportResult:
    """The export table and what the caller should tell the user about it."""

    table: pd.DataFrame
    entries: int  # ledger entries read
    key_file: Path | None
    key_created: bool
    warnings: tuple[str, ...]
    #: what the user may do about the warnings, for each view to word
    advice: tuple[Fix, ...] = ()


def review_frame(
    study: OpenedStudy,
    entries: Sequence[Entry],
    *,
    all_entries: bool = False,
    per_case: bool = False,
) -> pd.DataFrame:
    """Entries joined with group and final decision; the effective ones only by default.

    Columns start with the review-table columns the disparity report reads (case_id, group,
    reviewer, margin, model_decision, final_decision, action), then the rest of the entry, then
    ``opinions`` (effective entries on the case) and ``conflict`` (the case's reviewers
    disagree). By default every effective entry is a row, so a case with a second opinion has
    two; ``per_case`` keeps one row per case by :func:`case_decision_mask` (cases in conflict
    left out); ``all_entries`` keeps every entry with an ``effective`` column.
    """
    snap = study.snapshot
    frame = entries_frame(entries, snap.model_names)
    effective = effective_mask(frame)
    conflict = conflict_mask(frame, effective)
    stands = case_decision_mask(frame, effective, conflict)
    frame["effective"] = effective
    live = frame[effective]
    frame["opinions"] = (
        frame["case_id"].map(live.groupby("case_id").size()).fillna(0).astype(np.int64)
    )
    frame["conflict"] = conflict
    if per_case:
        frame = frame[stands]
    elif not all_entries:
        frame = frame[effective]
    if not all_entries:
        frame = frame.drop(columns=["effective"])
    frame = frame.reset_index(drop=True)
    rows = pd.Index(snap.case_ids.astype(str)).get_indexer(frame["case_id"].astype(str))
    labels = np.asarray(snap.group_labels).astype(object)
    group = np.full(len(rows), None, dtype=object)
    group[rows >= 0] = labels[rows[rows >= 0]]
    final = [
        final_decision(d, a)
        for d, a in zip(frame["reference_decision"], frame["action"], strict=True)
    ]
    lead = pd.DataFrame(
        {
            "case_id": frame["case_id"].astype(str),
            "group": pd.Series(group, dtype=object),
            "reviewer": frame["reviewer"],
            "margin": frame["reference_margin"],
            "model_decision": frame["reference_decision"],
            "final_decision": pd.Series(final, dtype=object),
            "action": frame["action"],
        }
    )
    rest = frame.drop(
        columns=["case_id", "reviewer", "reference_margin", "reference_decision", "action"]
    )
    return pd.concat([lead, rest], axis=1)


def export_reviews(
    study: OpenedStudy,
    entries: Sequence[Entry],
    *,
    all_entries: bool = False,
    key_file: str | Path | None = None,
    pseudonymise_reviewers: bool = False,
    notes: bool = True,
) -> ExportResult:
    """Build the analyst export from ledger entries.

    Parameters
    ----------
    study
        The open study (its snapshot gives each case's group).
    entries
        Ledger entries in sequence order (see :func:`closecall.review.decisions.ledger_entries`).
    all_entries
        Every entry instead of the effective ones.
    key_file
        Pseudonymise case ids with the key in this file (created, owner-only, if missing).
    pseudonymise_reviewers
        Also pseudonymise reviewer names (needs ``key_file``).
    notes
        Keep the free-text notes (they may name people or cases).

    Raises
    ------
    UserError
        An empty ledger; reviewer pseudonyms asked for without a key; a key file that is unsafe
        or invalid.
    """
    if pseudonymise_reviewers and key_file is None:
        raise UserError(
            "needs a key (reviewer pseudonyms are keyed)",
            Fix("pseudonymise", hint="a new file is created with a fresh key"),
            about="pseudonymise_reviewers",
        )
    if not entries:
        raise UserError(
            f"{study.config.review.ledger}: the ledger has no reviews yet; nothing to export",
            "record reviews first (closecall record), or for the demo: closecall demo-reviews 300",
        )
    table = review_frame(study, entries, all_entries=all_entries)
    warnings: list[str] = []
    advice: list[Fix] = []
    unknown = int(table["group"].isna().sum())
    if unknown:
        warnings.append(
            f"{unknown} exported case(s) are not in the current snapshot {study.snapshot.id}: "
            "their group is empty"
        )
    if not notes:
        table = table.drop(columns=["note"])
    key_path = Path(key_file) if key_file is not None else None
    created = False
    if key_path is not None:
        key, created = load_or_create_key(key_path, study_files(study.config))
        table["case_id"] = pseudonymise(table["case_id"], key, "case")
        if pseudonymise_reviewers:
            table["reviewer"] = pseudonymise(table["reviewer"], key, "reviewer")
        table = table.drop(columns=list(HASH_COLUMNS))
        if notes:
            warnings.append("notes are exported as typed and may name people or cases")
            advice.append(Fix("notes", value="False", purpose="to leave them out"))
    return ExportResult(
        table=table,
        entries=len(entries),
        key_file=key_path,
        key_created=created,
        warnings=tuple(warnings),
        advice=tuple(advice),
    )


#: A text cell a spreadsheet may run as a formula: one starting with a tab or a carriage return,
#: or with = + - @ after any leading whitespace (OWASP, "CSV Injection"; common practice).
FORMULA_START = re.compile(r"[\t\r]|\s*[=+\-@]")

#: Line ends of an exported CSV file: CRLF, as RFC 4180 (section 2) writes records. The csv
#: writer quotes every field holding a character of the line end, so CR and LF inside a note
#: are always quoted (with LF line ends a lone CR would go out unquoted).
CSV_LINE_END = "\r\n"


def spreadsheet_safe(table: pd.DataFrame) -> pd.DataFrame:
    """A copy whose text cells cannot run as spreadsheet formulas.

    A text cell that starts with = + - @ after any leading whitespace, or with a tab or a
    carriage return, gets a leading apostrophe, the usual guard against formula injection when
    a CSV is opened in a spreadsheet (OWASP, "CSV Injection"; common practice). Numbers are
    left alone. The export is then no longer byte-exact, which is why this is an option and
    not the default.
    """
    out = table.copy()
    for col in out.columns:
        series = out[col]
        if series.dtype == object or pd.api.types.is_string_dtype(series):
            text = series.astype("string")
            risky = text.str.match(FORMULA_START).fillna(False).to_numpy(dtype=bool)
            if risky.any():
                out[col] = series.astype(object).where(~risky, "'" + text.astype(object))
    return out


def table_bytes(table: pd.DataFrame, fmt: str, *, line_end: str = CSV_LINE_END) -> bytes:
    """The table encoded as CSV, Parquet or JSON Lines (UTF-8; missing values empty/null).

    CSV quotes every field that holds a comma, a double quote, a CR or an LF (RFC 4180):
    read back with Python's csv module or ``pandas.read_csv`` it gives the exact text.
    ``line_end`` ends each CSV record; a field holding any of its characters is quoted, so
    pass ``"\n"`` only for text that holds no CR.
    """
    if fmt == "csv":
        return table.to_csv(index=False, lineterminator=line_end).encode("utf-8")
    if fmt == "jsonl":
        if len(table) == 0:
            return b""
        text = table.to_json(orient="records", lines=True, force_ascii=False, date_format="iso")
        return (text if text.endswith("\n") else text + "\n").encode("utf-8")
    if fmt == "parquet":
        buf = io.BytesIO()
        table.to_parquet(buf, index=False)
        return buf.getvalue()
    raise UserError(f"unknown export format '{fmt}'", f"use one of: {', '.join(EXPORT_FORMATS)}")


def write_export(
    table: pd.DataFrame,
    fmt: str,
    out: str | Path,
    *,
    protected: Sequence[StudyFile] = (),
    force: bool = False,
) -> Path:
    """Write the table to ``out``: owner-only, via a temporary file renamed into place.

    ``out`` may not be one of the ``protected`` study files (see
    :func:`closecall.setup.output_files.study_files`) and replaces an existing file only with
    ``force``; returns the real path written.
    """
    data = table_bytes(table, fmt)
    return write_output(
        out,
        data,
        protected,
        field="out",
        force=force,
        mode=EXPORT_FILE_MODE,
        example=f"reviews.{fmt}",
    )
