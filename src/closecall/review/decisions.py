"""Reviewer actions on cases: record a decision, read a case's history, drafts and soft claims.

Every function here is one user action, shared by the CLI and the TUI. Everything a user can get
wrong is checked before the ledger file is opened for writing, so a refused action leaves the
ledger exactly as it was.
"""

from __future__ import annotations

import math
import re
from collections.abc import Callable, Iterable, Mapping
from pathlib import Path
from typing import TYPE_CHECKING, Any

from closecall.core.errors import Fix, UserError
from closecall.core.vocabulary import ACTIONS, OVERRIDES
from closecall.review.ledger import (
    Claim,
    Draft,
    Entry,
    EntryContent,
    NoLedger,
    VerifyResult,
)
from closecall.review.ledger.access import require_read, require_record
from closecall.review.ledger.backend import ledger_present, open_any_ledger, verify_any
from closecall.review.ledger.store import MAX_NOTE_BYTES
from closecall.setup.config import StudyConfig, load_config

if TYPE_CHECKING:
    from closecall.suite.opening import OpenedStudy

_HASH = re.compile(r"^[0-9a-f]{64}$")


# --------------------------------------------------------------------------- validation


def check_text(what: str, value: str) -> str:
    """``value`` if it is valid Unicode text; a UserError naming ``what`` otherwise.

    Text from the command line that was not valid UTF-8 arrives with lone surrogates
    (Python's surrogateescape); such text is refused rather than stored altered.
    """
    try:
        value.encode("utf-8")
    except UnicodeEncodeError as exc:
        raise UserError(
            f"{what} contains bytes that are not valid UTF-8 (at character {exc.start + 1})",
            "type it again in a UTF-8 terminal (check that LANG or LC_ALL ends in .UTF-8)",
        ) from None
    return value


def check_action(action: str) -> str:
    if action not in ACTIONS:
        raise UserError(
            f"unknown action '{check_text('the action', action)}'", Fix("action", allowed=ACTIONS)
        )
    return action


def check_reason(config: StudyConfig, action: str, reason: str | None) -> str | None:
    """The reason code (None if not given); overrides must give one from [review] reasons."""
    if reason is not None and not reason.strip():
        reason = None
    if reason is None:
        if action in OVERRIDES:
            raise UserError(
                f"an {action} needs a reason code",
                Fix("reason", allowed=tuple(config.review.reasons)),
            )
        return None
    check_text("the reason", reason)
    if reason not in config.review.reasons:
        raise UserError(
            f"unknown reason code '{reason}' (not in [review] reasons of {config.path})",
            Fix(
                "reason",
                allowed=tuple(config.review.reasons),
                hint="or add it to [review] reasons in the study config",
            ),
        )
    return reason


def check_note(action: str, note: str) -> str:
    """The note, unchanged; overrides need a non-blank one."""
    check_text("the note", note)
    if action in OVERRIDES and not note.strip():
        raise UserError(
            f"an {action} needs a note saying why the model's decision was overridden",
            Fix("note", hint="it is stored exactly as typed"),
        )
    size = len(note.encode("utf-8"))
    if size > MAX_NOTE_BYTES:
        raise UserError(
            f"the note is {size:,} bytes; the ledger takes at most {MAX_NOTE_BYTES:,}",
            "shorten it, or keep the long document elsewhere and cite it in the note",
        )
    return note


def check_anchor(anchor: str | None) -> str | None:
    if anchor is None:
        return None
    value = anchor.strip().lower()
    if not _HASH.match(value):
        raise UserError(
            f"'{anchor[:80]}' is not a head hash",
            Fix("anchor", range="64 hexadecimal characters (the head hash a verification printed)"),
            about="anchor",
        )
    return value


def _plain_decisions(decisions: Mapping[str, Mapping[str, Any]]) -> dict[str, dict[str, Any]]:
    """Plain JSON values (float margins, None when not finite) for every model."""
    out: dict[str, dict[str, Any]] = {}
    for model, d in decisions.items():
        margin = d.get("margin")
        m = None if margin is None or not math.isfinite(float(margin)) else float(margin)
        out[str(model)] = {"decision": str(d["decision"]), "margin": m}
    return out


def _current_snapshot_id(study: OpenedStudy) -> str | None:
    """The id of the snapshot the study's config and data give now (None if they can't be read).

    Differs from ``study.snapshot.id`` when the data files or the config changed after the
    study was opened: the review was made against a stale snapshot. The data files are hashed
    afresh (not taken from the digests cache), so the id recorded is the files' content's.
    """
    from closecall.suite.snapshot import snapshot_id

    try:
        config = load_config(study.config.path)
    except UserError:  # config now unreadable: judge by the data files alone
        config = study.config
    try:
        return snapshot_id(config, fresh=True)
    except (OSError, UserError):  # data files gone or unreadable: cannot tell
        return None


# --------------------------------------------------------------------------- recording


def _recheck_snapshot(study: OpenedStudy) -> None:
    """Refuse to record from a snapshot whose files changed on disk since the study was opened.

    Its arrays are memory-mapped: bytes written to them later would reach the recorded
    margins. Costs one ``stat`` per file when nothing changed.
    """
    from closecall.suite.opening import refit_fix
    from closecall.suite.snapshot import Snapshot, recheck_snapshot

    if isinstance(study.snapshot, Snapshot):
        recheck_snapshot(study.snapshot, fix=refit_fix(study.config))


def record_review(
    study: OpenedStudy,
    case_id: str,
    action: str,
    reason: str | None,
    note: str,
    supersedes: int | None = None,
    *,
    second_opinion: bool = False,
    seen_seq: int | None = None,
) -> Entry:
    """Record a reviewer's decision on a case as a new ledger entry.

    Parameters
    ----------
    study
        The open study; its snapshot supplies the models' decisions and margins.
    case_id
        The case reviewed.
    action
        ``uphold``, ``override-favourable``, ``override-unfavourable`` or ``defer``.
    reason
        A code from ``[review] reasons``; required for overrides.
    note
        Free text, stored exactly; required (non-blank) for overrides.
    supersedes
        Sequence number of an earlier entry for this case that this one corrects.
    second_opinion
        Record beside another reviewer's decision on the case instead of refusing.
    seen_seq
        The ledger's last sequence number when the reviewer opened the case (the review
        screen): only other reviewers' decisions recorded after it refuse. None (the command
        line): any other reviewer's decision in force refuses.

    Returns
    -------
    Entry
        The recorded entry, with its sequence number and hash. When the config or data
        changed since the study was opened, ``current_snapshot_id`` names the snapshot they
        give now, beside ``snapshot_id`` (the one the reviewer saw).

    Raises
    ------
    AccessDenied
        The login is not in ``[review] reviewers``.
    UserError
        Unknown case, action, reason or superseded entry; missing reason or note for an
        override; text that is not valid UTF-8; a snapshot whose files changed on disk since
        it was opened (fix: ``closecall fit --refit``); another reviewer's decision in force
        on the case (:class:`~closecall.review.conflicts.ConflictingDecision`, unless
        ``supersedes`` names it or ``second_opinion``). The ledger is not touched.
    """
    config = study.config
    login = require_record(config.review, config.path)
    sign = author_signer(config, login)
    check_text("the case id", case_id)
    check_action(action)
    reason = check_reason(config, action, reason)
    check_note(action, note)
    content = _entry_content(study, login, case_id, action, reason, note, supersedes)
    return _append_unless_collision(config, content, sign, seen_seq, second_opinion)


def _entry_content(
    study: OpenedStudy,
    login: str,
    case_id: str,
    action: str,
    reason: str | None,
    note: str,
    supersedes: int | None,
) -> EntryContent:
    """The entry to record: the reviewer's decision beside every model's decision and margin."""
    snap = study.snapshot
    _recheck_snapshot(study)
    index = snap.case_index(case_id)
    decisions = _plain_decisions(snap.decisions_for(index))
    reference = decisions.get(snap.reference)
    if reference is None:  # an internal inconsistency of the snapshot, not a user error
        raise RuntimeError(f"snapshot {snap.id} has no decision for reference {snap.reference}")
    current = _current_snapshot_id(study)
    return EntryContent(
        reviewer=login,
        case_id=case_id,
        snapshot_id=str(snap.id),
        current_snapshot_id=current if current and current != snap.id else None,
        reference_model=str(snap.reference),
        reference_decision=reference["decision"],
        reference_margin=reference["margin"],
        decisions=decisions,
        action=action,
        reason=reason,
        note=note,
        supersedes=supersedes,
    )


def _append_unless_collision(
    config: StudyConfig,
    content: EntryContent,
    sign: Callable[[bytes], str] | None,
    seen_seq: int | None,
    second_opinion: bool,
) -> Entry:
    """Append the entry, unless its superseded entry is wrong or another decision is in force."""
    case_id, supersedes = content.case_id, content.supersedes
    if supersedes is not None:
        _check_supersedes(config, case_id, supersedes)
    from closecall.review.conflicts import check_no_collision

    with open_any_ledger(config.review.ledger) as ledger:
        # read through the writer: a damaged ledger gets the writer's message
        check_no_collision(
            config,
            case_id,
            content.reviewer,
            seen_seq=seen_seq,
            supersedes=supersedes,
            second_opinion=second_opinion,
            entries=() if second_opinion else ledger.entries(case_id=case_id),
        )
        return ledger.append(content, sign)


def author_signer(config: StudyConfig, login: str) -> Callable[[bytes], str] | None:
    """The function that signs ``login``'s entries, or None to record unsigned.

    With no key registered in ``[team.keys]`` an entry is signed if the account has a key
    (so it verifies once the key is registered) and unsigned otherwise. Once the study
    registers any key, every recording login must have one registered and hold the matching
    private key: a study that checks authorship never takes an unsigned entry.

    Raises
    ------
    UserError
        Keys are registered but not this login's, the account has no private key, or its
        key is not the registered one (docs/team.md, "Keys").
    """
    from closecall.review.ledger import signing

    key = signing.load_private()
    keys = config.team.keys
    if not keys:
        return None if key is None else signing.signer(key)
    folder = signing.key_folder()
    if login not in keys:
        raise UserError(
            f"{config.path}: login '{login}' has no public key registered under [team.keys]; "
            "this study signs every entry, so nothing was recorded",
            "run 'closecall keys init' (once) and ask the study owner to add the line it "
            "prints under [team.keys]",
        )
    if key is None:
        raise UserError(
            f"no signing key for login '{login}' in {folder}; this study signs every entry, "
            "so nothing was recorded",
            "copy your key back into that folder, or run 'closecall keys init' and ask the "
            "study owner to register the new public key under [team.keys]",
        )
    if signing.public_text(key.public_key()) != keys[login]:
        raise UserError(
            f"the signing key in {folder} is not the one registered for '{login}' under "
            f"[team.keys] of {config.path}; nothing was recorded",
            "ask the study owner to register the public key 'closecall keys show' prints",
        )
    return signing.signer(key)


def _check_supersedes(config: StudyConfig, case_id: str, supersedes: int) -> None:
    earlier: Entry | None = None
    if ledger_present(config.review.ledger):
        try:
            with open_any_ledger(config.review.ledger, readonly=True) as ledger:
                earlier = ledger.entry(supersedes)
        except NoLedger:
            earlier = None
    if earlier is None:
        raise UserError(
            f"{supersedes}: there is no ledger entry {supersedes}",
            Fix("supersedes", hint=f"name one of the entries of case {case_id} in the ledger"),
            about="supersedes",
        )
    if earlier.case_id != case_id:
        raise UserError(
            f"{supersedes}: entry {supersedes} is about case '{earlier.case_id}', not '{case_id}'",
            Fix("supersedes", hint=f"name one of the entries of case {case_id} in the ledger"),
            about="supersedes",
        )


# --------------------------------------------------------------------------- reading


def ledger_entries(
    config: StudyConfig,
    *,
    case_id: str | None = None,
    reviewer: str | None = None,
    limit: int | None = None,
    before: int | None = None,
) -> list[Entry]:
    """Entries in sequence order, filtered; with ``limit``, the most recent ``limit``.

    With ``before``, only entries numbered below it: ``before`` = the smallest ``seq`` of
    one page and the same ``limit`` give the page before it (the review screen pages back
    this way, reading only what it shows). An absent ledger reads as empty. Needs read
    permission (reviewers or analysts).
    """
    require_read(config.review, config.path)
    if limit is not None and limit < 1:
        raise UserError(
            f"{limit} must be at least 1", Fix("limit", range="a whole number ≥ 1"), about="limit"
        )
    if before is not None and before < 1:
        raise UserError(f"entries before {before}: sequence numbers start at 1")
    try:
        with open_any_ledger(config.review.ledger, readonly=True) as ledger:
            return ledger.entries(case_id=case_id, reviewer=reviewer, limit=limit, before=before)
    except NoLedger:
        return []


def latest_entries(config: StudyConfig, case_ids: Iterable[str]) -> dict[str, Entry]:
    """The latest entry of each of ``case_ids`` that has one, read through one ledger
    connection; empty without a ledger. Needs read permission (reviewers or analysts)."""
    require_read(config.review, config.path)
    found: dict[str, Entry] = {}
    try:
        with open_any_ledger(config.review.ledger, readonly=True) as ledger:
            for case_id in case_ids:
                entries = ledger.entries(case_id=case_id, limit=1)
                if entries:
                    found[case_id] = entries[-1]
    except NoLedger:
        pass
    return found


def latest_actions(config: StudyConfig) -> list[tuple[str, str]]:
    """(case_id, action) of every reviewed case's latest entry; empty without a ledger.

    Needs read permission (reviewers or analysts).
    """
    require_read(config.review, config.path)
    try:
        with open_any_ledger(config.review.ledger, readonly=True) as ledger:
            return ledger.latest_actions()
    except NoLedger:
        return []


def case_history(study: OpenedStudy, case_id: str) -> list[Entry]:
    """Every entry recorded for ``case_id``, oldest first (UserError if the case is unknown)."""
    study.snapshot.case_index(case_id)
    return ledger_entries(study.config, case_id=case_id)


def verify_ledger(
    config: StudyConfig, anchor: str | None = None, *, allow_empty: bool = False
) -> VerifyResult:
    """Check the study ledger: there, structured as the schema says, chain intact.

    See :func:`closecall.review.ledger.backend.verify_any`: a missing or empty ledger is a problem
    unless ``allow_empty``. Needs read permission (reviewers or analysts). Without ``anchor``,
    the head recorded in the ``[team] anchor`` file is checked when that file is there
    (:mod:`closecall.review.anchors`), so a deleted, emptied or replaced ledger fails.
    """

    require_read(config.review, config.path)
    if anchor is None and config.team.anchor is not None:
        from closecall.review.anchors import read_anchor

        recorded = read_anchor(config.team.anchor)
        anchor = recorded[1] if recorded else None
    return verify_any(
        config.review.ledger, check_anchor(anchor), allow_empty=allow_empty, keys=config.team.keys
    )


def anchor_ledger(config: StudyConfig, out: Path | None = None) -> tuple[Path, VerifyResult]:
    """Verify the ledger and, when it is intact, write its head to the anchor file.

    Raises
    ------
    UserError
        No anchor file named, the ledger does not verify (nothing is written), or the anchor
        folder is not writable by this login.
    """
    from closecall.review.anchors import anchor_path, write_anchor

    path = anchor_path(config, out)
    require_read(config.review, config.path)
    result = verify_any(config.review.ledger, None, keys=config.team.keys)
    if not result.ok:
        first = result.problem.message if result.problem else "it does not verify"
        raise UserError(
            f"{config.review.ledger}: not anchored, the ledger does not verify: {first}",
            "run 'closecall ledger verify' and restore the ledger before anchoring it",
        )
    write_anchor(path, result.head_seq, result.head_hash)
    return path, result


def check_ledger(config: StudyConfig) -> None:
    """Refuse, before a review session starts, a ledger closecall would not record in: not a
    ledger, damaged, or its structure changed. An absent ledger is fine (the first record
    creates it). Reads only."""
    try:
        with open_any_ledger(config.review.ledger, readonly=True) as ledger:
            ledger.require_intact()
    except NoLedger:
        return


# --------------------------------------------------------------------------- drafts and claims


def save_draft(
    study: OpenedStudy,
    case_id: str,
    note: str,
    action: str | None = None,
    reason: str | None = None,
) -> Draft:
    """Keep the note being typed for a case (outside the chain) until it is recorded."""
    config = study.config
    login = require_record(config.review, config.path)
    study.snapshot.case_index(case_id)
    check_text("the note", note)
    if action is not None:
        check_action(action)
    if reason is not None:
        check_text("the reason", reason)
    with open_any_ledger(config.review.ledger) as ledger:
        return ledger.drafts.save(login, case_id, note, action, reason)


def load_draft(study: OpenedStudy, case_id: str) -> Draft | None:
    """This login's saved draft for ``case_id``, if any."""
    config = study.config
    login = require_record(config.review, config.path)
    try:
        with open_any_ledger(config.review.ledger, readonly=True) as ledger:
            return ledger.drafts.load(login, case_id)
    except NoLedger:
        return None


def my_drafts(study: OpenedStudy) -> list[Draft]:
    """This login's saved drafts on every case, most recently updated first."""
    config = study.config
    login = require_record(config.review, config.path)
    try:
        with open_any_ledger(config.review.ledger, readonly=True) as ledger:
            return ledger.drafts.of(login)
    except NoLedger:
        return []


def drop_draft(study: OpenedStudy, case_id: str) -> None:
    """Discard this login's draft for ``case_id`` (recording removes it by itself)."""
    config = study.config
    login = require_record(config.review, config.path)
    if ledger_present(config.review.ledger):
        with open_any_ledger(config.review.ledger) as ledger:
            ledger.drafts.drop(login, case_id)


def claim_case(study: OpenedStudy, case_id: str, instance: str | None = None) -> Claim:
    """Show others that this login has ``case_id`` open, for ``[review] claim_minutes``;
    ``instance`` names the review screen holding it (see :func:`release_claim`).

    A claim is advice only: it never stops anyone from recording.
    """
    config = study.config
    login = require_record(config.review, config.path)
    study.snapshot.case_index(case_id)
    with open_any_ledger(config.review.ledger) as ledger:
        return ledger.claims.take(case_id, login, config.review.claim_minutes, instance)


def release_claim(study: OpenedStudy, case_id: str, instance: str | None = None) -> None:
    """Withdraw this login's claim on ``case_id`` (no-op if there is none); with
    ``instance``, only while that review screen holds it (a newer one of the same login keeps
    its claim)."""
    config = study.config
    login = require_record(config.review, config.path)
    if ledger_present(config.review.ledger):
        with open_any_ledger(config.review.ledger) as ledger:
            ledger.claims.release(case_id, login, instance)


def active_claims(
    study: OpenedStudy, case_ids: Iterable[str] | None = None
) -> dict[str, list[Claim]]:
    """Unexpired claims by case id (every claimed case when ``case_ids`` is None)."""
    config = study.config
    require_read(config.review, config.path)
    try:
        with open_any_ledger(config.review.ledger, readonly=True) as ledger:
            return ledger.claims.active(case_ids)
    except NoLedger:
        return {}
