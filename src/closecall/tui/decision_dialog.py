"""The decision dialog: action, reason code, note; records through ``closecall.Study``.

The note is kept as a draft while it is typed (saved after a short pause, in a worker), so a
closed dialog, a quit or a dropped connection loses nothing. Recording calls
:meth:`closecall.api.study.Study.record` (``record_review`` underneath), as ``closecall record``
does;
its refusals (an override without a reason or a note, …) are shown here word for word.
"""

from __future__ import annotations

import contextlib
from typing import ClassVar

from rich.text import Text
from textual import on, work
from textual.app import ComposeResult
from textual.binding import Binding, BindingType
from textual.containers import Horizontal, Vertical
from textual.screen import ModalScreen
from textual.timer import Timer
from textual.widgets import Static, TextArea

from closecall.api.study import Ledger, Study
from closecall.core.errors import UserError
from closecall.core.text import safe_text, signed
from closecall.core.vocabulary import ACTIONS, decision_word
from closecall.review.conflicts import ConflictingDecision
from closecall.review.ledger import Entry
from closecall.tui.choice_list import ChoiceList
from closecall.tui.conflict_prompt import SECOND_OPINION, SUPERSEDE, ConflictPrompt
from closecall.tui.draft_keeper import DraftKeeper, DraftValue
from closecall.tui.errors import fix_text, message_text
from closecall.tui.key_bar import KeyBar
from closecall.tui.session import ReviewSession

DRAFT_PAUSE_SECONDS = 0.6  # save the draft this long after the last keystroke

ACTION_LABELS = {
    "uphold": "uphold the model's decision",
    "override-favourable": "override → favourable",
    "override-unfavourable": "override → unfavourable",
    "defer": "defer: decide later",
}


class DecisionDialog(ModalScreen[Entry | None]):
    """Record a reviewer's decision on one case; dismisses with the new entry (or None)."""

    BINDINGS: ClassVar[list[BindingType]] = [
        Binding("ctrl+r,ctrl+s", "record", "record", key_display="^r"),
        Binding(
            "tab",
            "app.focus_next",
            "next field",  # a digit picks and moves on: the options show their digits
            key_display="tab",
            show=True,
        ),
        Binding("escape", "close", "close, keep draft", key_display="esc"),
        Binding("enter", "done", "back (once recorded)", show=False),
    ]

    def __init__(self, session: ReviewSession, case_id: str, *, claim: bool = True) -> None:
        super().__init__()
        self.session = session
        self.case_id = case_id
        self.row = int(session.rows_of([case_id])[0])  # the session's id index: no re-sort
        if self.row < 0:
            self.row = session.snap.case_index(case_id)  # raises the engine's UserError
        self.keeper = DraftKeeper(session.study, case_id)
        self.entry: Entry | None = None
        self._claim = claim
        self._timer: Timer | None = None
        self._loading = True
        self.seen_seq: int | None = None  # the ledger's last entry when the dialog opened

    # ------------------------------------------------------------------ layout

    def compose(self) -> ComposeResult:
        snap = self.session.snap
        margin = float(snap.margins(snap.reference)[self.row])
        reasons = self.session.config.review.reasons
        with Vertical(id="dialog"):
            title = Text(no_wrap=True, overflow="ellipsis")
            title.append(f"Decision on {safe_text(self.case_id)}", "bold")
            group = safe_text(str(snap.group_labels[self.row])) if snap.group_levels else ""
            title.append(f" · {group} · {snap.reference} says ")
            title.append(f"{decision_word(margin > 0)} {signed(margin)}")
            yield Static(title, id="dialog-title")
            with Horizontal(id="dialog-choices"):
                with Vertical(id="action-box"):
                    yield Static("Action", classes="field-label")
                    yield ChoiceList(
                        [(a, ACTION_LABELS[a]) for a in ACTIONS], id="action", hand_to="reason"
                    )
                with Vertical(id="reason-box"):
                    yield Static("Reason (needed to override)", classes="field-label")
                    yield ChoiceList(
                        [(None, "— none —"), *((r, r) for r in reasons)],
                        id="reason",
                        hand_to="note",
                    )
            yield Static(
                "Note (stored exactly as typed; needed to override)", classes="field-label"
            )
            yield TextArea(id="note", soft_wrap=True, show_line_numbers=False)
            yield Static("", id="dialog-status", markup=False)
            yield KeyBar(self.BINDINGS, id="dialog-keys")

    def on_mount(self) -> None:
        self.query_one("#action", ChoiceList).focus()
        self._load()

    @work(thread=True, group="dialog-load")
    def _load(self) -> None:
        draft = None
        try:
            self.seen_seq = Ledger(self.session.config).head_seq()
            draft = Study(self.session.study).load_draft(self.case_id)
            if self._claim:
                Study(self.session.study).claim(self.case_id, self.session.instance)
        except UserError as exc:  # e.g. a ledger damaged meanwhile: say so, never crash
            self.app.call_from_thread(self.say, exc.message)
        self.app.call_from_thread(self._loaded, draft)

    def _loaded(self, draft: object) -> None:
        from closecall.review.ledger import Draft

        if isinstance(draft, Draft):
            value = DraftValue(draft.note, draft.action, draft.reason)
            self.keeper = DraftKeeper(self.session.study, self.case_id, saved=value)
            note = self.query_one("#note", TextArea)
            typed = note.text  # anything typed into the note while the draft was loading
            note.load_text(draft.note + typed)
            self.query_one("#action", ChoiceList).choose_value(draft.action)
            self.query_one("#reason", ChoiceList).choose_value(draft.reason)
            note.move_cursor(note.document.end)  # typing on appends to the note
            note.focus()
            self.say(f"draft restored (last saved {draft.updated[:16].replace('T', ' ')} UTC)")
        self._loading = False

    # ------------------------------------------------------------------ values and drafts

    def value(self) -> DraftValue:
        return DraftValue(
            self.query_one("#note", TextArea).text,
            self.query_one("#action", ChoiceList).value,
            self.query_one("#reason", ChoiceList).value,
        )

    @property
    def has_unrecorded_note(self) -> bool:
        """A note has been typed for this case and not recorded (it is kept as a draft)."""
        return self.entry is None and bool(self.value().note.strip())

    def _changed(self) -> None:
        if self._loading or self.entry is not None:
            return
        self.keeper.update(self.value())
        if self._timer is not None:
            self._timer.stop()
        self._timer = self.set_timer(DRAFT_PAUSE_SECONDS, self._save_draft)

    @on(TextArea.Changed, "#note")
    def _note_changed(self) -> None:
        self._changed()

    @on(ChoiceList.Chosen)
    def _chosen(self, event: ChoiceList.Chosen) -> None:
        self._changed()  # the list itself has passed the focus on (ChoiceList.hand_to)

    def _save_draft(self) -> None:
        if self.keeper.unsaved:
            self._flush()

    @work(thread=True, group="draft")
    def _flush(self) -> None:
        try:
            if self.keeper.flush() is not None:
                self.app.call_from_thread(self.say, "draft saved")
        except UserError as exc:
            self.app.call_from_thread(self.say, f"✗ draft not saved: {exc.message}")

    def flush_now(self) -> None:
        """Save any unsaved draft text before the app goes away (blocking, brief)."""
        if self.entry is None:
            self.keeper.update(self.value())
            self.keeper.flush()

    # ------------------------------------------------------------------ recording

    def action_record(self) -> None:
        if self.entry is not None:
            self.dismiss(self.entry)
            return
        value = self.value()
        if value.action is None:
            self.say("✗ choose an action first (up/down, then ⏎)")
            self.query_one("#action", ChoiceList).focus()
            return
        self.say("recording…")
        self._record(value)

    @work(thread=True, exclusive=True, group="record")
    def _record(
        self, value: DraftValue, supersedes: int | None = None, second_opinion: bool = False
    ) -> None:

        try:
            entry = Study(self.session.study).record(
                self.case_id,
                str(value.action),
                reason=value.reason,
                note=value.note,
                supersedes=supersedes,
                second_opinion=second_opinion,
                seen_seq=self.seen_seq,
            )
        except ConflictingDecision as exc:
            self.app.call_from_thread(self._conflict, exc, value)
            return
        except UserError as exc:
            self.app.call_from_thread(self._refused, exc)
            return
        self.app.call_from_thread(self._recorded, entry)

    def _refused(self, exc: UserError) -> None:
        text = Text()
        text.append("✗ not recorded: ", "bold")
        text.append(message_text(exc))
        fix = fix_text(exc)
        if fix:
            text.append(f"\n  {fix}")
        self.query_one("#dialog-status", Static).update(text)

    def _conflict(self, exc: ConflictingDecision, value: DraftValue) -> None:
        """Another reviewer decided meanwhile: show it and ask (replace, beside, cancel)."""
        first = exc.others[0].seq

        def answered(answer: str | None) -> None:
            if answer == SUPERSEDE:
                self.say(f"recording (supersedes entry {first})…")
                self._record(value, supersedes=first)
            elif answer == SECOND_OPINION:
                self.say("recording as a second opinion…")
                self._record(value, second_opinion=True)
            else:
                self.say(
                    f"✗ not recorded: entry {first} by {safe_text(exc.others[0].reviewer)} "
                    "decided this case meanwhile; your draft is kept"
                )

        self.app.push_screen(ConflictPrompt(self.case_id, exc.others), answered)

    def _recorded(self, entry: Entry) -> None:
        self.entry = entry
        self.keeper.close()
        if self._timer is not None:
            self._timer.stop()
        text = Text()
        text.append(f"✓ recorded entry {entry.seq}", "bold")
        text.append(f" · {entry.action}\nhash {entry.hash}\n⏎ back")
        self.query_one("#dialog-status", Static).update(text)
        self.query_one("#note", TextArea).read_only = True
        self.query_one("#dialog-keys", KeyBar).display = False
        self.add_class("-recorded")
        self.set_focus(None)

    def action_done(self) -> None:
        if self.entry is not None:
            self.dismiss(self.entry)

    # ------------------------------------------------------------------ leaving

    def action_close(self) -> None:
        if self.entry is not None:
            self.dismiss(self.entry)
            return
        if self.keeper.unsaved or self.value() != self.keeper.saved:
            self.keeper.update(self.value())
            try:
                self.keeper.flush()
            except UserError as exc:  # the note stays on screen: nothing typed is lost
                self.say(f"✗ draft not saved: {exc.message}")
                return
        if self._claim and not self.value().note.strip():
            self._release()
        self.dismiss(None)

    @work(thread=True, group="claims")
    def _release(self) -> None:
        with contextlib.suppress(UserError):  # a claim is advice and expires by itself
            Study(self.session.study).release_claim(self.case_id, self.session.instance)

    def say(self, message: str) -> None:
        self.query_one("#dialog-status", Static).update(message)
