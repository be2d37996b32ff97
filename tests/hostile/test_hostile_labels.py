"""Hostile labels, notes and reviewer names (issue 10, items 9 and 10).

Nothing hostile reaches a terminal: group levels, column names, category values, notes and
reviewer names holding escape sequences (ESC[2J, OSC 8 hyperlinks ended by BEL), carriage
returns, backspace, DEL, C1 controls, bidi overrides and isolates, zero-width characters,
line separators, rich markup and matplotlib mathtext are shown as visible escapes in every
command's table, chart, CSV and JSON on standard output, and in the review screens; JSON keeps
every value exact. Nothing hostile reaches a spreadsheet: the exported files keep the exact
bytes, every CSV field holding a comma, quote, CR or LF is quoted (read back with Python's csv
module and pandas.read_csv, the outside readers), and ``--spreadsheet-safe`` defuses formula
characters after leading whitespace.

The hostile study is the 600-case demo with its two group levels, one column name and two zone
values rewritten in the CSV files, 60 simulated reviews and three reviews with hostile notes by
a reviewer with a hostile login; it is built once for the module and only read by the
commands (each test checks that every study file is byte-identical afterwards).
"""

from __future__ import annotations

import csv
import io
import json
import re
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pandas as pd
import pytest
from hostile_helpers import Cli, assert_unchanged, copy_study, study_digests

from closecall.setup.demo import write_demo
from closecall.suite.opening import open_study

# What must never reach a terminal raw. Written out here from the characters' names, not taken
# from closecall: C0 controls but LF (ESC, BEL, BS, CR, TAB…), DEL, C1 controls (CSI 0x9b…), the
# Arabic letter mark, zero-width space/joiners and LRM/RLM (U+200B–U+200F), line and paragraph
# separators (U+2028/2029), bidi embeddings and overrides (U+202A–U+202E), word joiner
# (U+2060), bidi isolates (U+2066–U+2069) and the zero-width no-break space (U+FEFF).
RAW = re.compile(
    "[\x00-\x09\x0b-\x1f\x7f-\x9f\u061c\u200b-\u200f\u2028\u2029\u202a-\u202e\u2060"
    "\u2066-\u2069\ufeff]"
)

# Escape sequences, an OSC 8 hyperlink closed by BEL, CSI as a C1 byte, DEL, backspace, bidi
# override / isolate / mark, a line separator, and matplotlib mathtext that cannot be parsed.
GROUP_A = (
    "\u200b$\\foo$ \x1b[2J\x1b]8;;http://evil.invalid/\x07Aster\x1b]8;;\x07 \u202eretsA"
    "\u2066x\u2069 \u200f\u061c\u2028\x9b31m\x7f\x08"
)
# Rich markup, HTML, a comma, quotes, a newline, a bare CR, and very long.
GROUP_B = '[bold]x[/] <b>Briar</b>, "quoted"\nline\r' + "long" * 60
ZONE = "zo\x1b[31mne\u202e"  # a column name
ZONE_SUFFIX = "\x1b[5m\u200b"  # appended to two of the zone values (category values)
REVIEWER = "r\u200fev\x1b[2J\u202eiewer[bold]x[/]\u2060"
NOTES = (
    'note\x1b]8;;http://e/\x07link\x1b]8;;\x07 bare\rCR, "q" \u202eevil\nnext\ufeff',
    '=HYPERLINK("x")\u2028\u200bz, \r\n then "more"',
    " \t-2+3 \u2066end\r",
)


@dataclass(frozen=True)
class Hostile:
    root: Path
    config: Path
    noted: tuple[str, ...]  # the cases reviewed with the hostile notes, in NOTES order
    zoned: str  # a case under review whose zone value is hostile

    def digests(self) -> dict[str, str]:
        return study_digests(self.root)


def _rest(h: Hostile) -> tuple[tuple[str, ...], str]:
    return h.noted, h.zoned


def _rewrite(root: Path) -> None:
    groups = {"Aster": GROUP_A, "Briar": GROUP_B}
    for name in ("history.csv", "pending.csv"):
        frame = pd.read_csv(root / name, dtype=str, keep_default_na=False)
        frame["heritage"] = frame["heritage"].map(groups)
        frame["zone"] = frame["zone"].where(
            ~frame["zone"].isin(["Q", "R"]), frame["zone"] + ZONE_SUFFIX
        )
        frame.rename(columns={"zone": ZONE}).to_csv(root / name, index=False)


@pytest.fixture(scope="module")
def hostile(tmp_path_factory: pytest.TempPathFactory) -> Hostile:
    """The hostile study, fitted, with simulated reviews and three hostile ones."""
    import closecall.review.ledger.access as access
    from closecall.review.decisions import ledger_entries, record_review
    from closecall.review.demo_reviews import simulate_reviews

    root = tmp_path_factory.mktemp("hostile-labels") / "study"
    config = write_demo(root, cases=600, seed=5)
    _rewrite(root)
    study = open_study(config)
    assert set(study.snapshot.group_levels) == {GROUP_A, GROUP_B}  # read back exactly
    assert simulate_reviews(study, 60, seed=3) == 60
    done = {e.case_id for e in ledger_entries(study.config)}
    free = [str(c) for c in study.snapshot.case_ids if str(c) not in done]
    actions = ("override-favourable", "override-unfavourable", "uphold")
    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(access, "current_login", lambda: REVIEWER)
        for case, action, note in zip(free, actions, NOTES, strict=False):
            reason = None if action == "uphold" else "other"
            record_review(study, case, action, reason, note)
    pending = pd.read_csv(root / "pending.csv", dtype=str, keep_default_na=False)
    zoned = pending.loc[pending[ZONE].str.endswith(ZONE_SUFFIX), "application_id"].iloc[0]
    return Hostile(root, config, tuple(free[:3]), str(zoned))


def _ids(value: object) -> str:
    """Test ids: the command's words (the expected strings get none)."""
    if isinstance(value, tuple) and value and value[0] in COMMANDS:
        return " ".join(value)
    return ""


COMMANDS = ("fit", "queue", "explain", "proxies", "bands", "compare", "ledger", "disparity")


def _raw(text: str) -> list[str]:
    return sorted({f"U+{ord(c):04X}" for c in RAW.findall(text)})


def _strings(obj: Any) -> Iterator[str]:
    """Every string (keys included) in parsed JSON."""
    if isinstance(obj, str):
        yield obj
    elif isinstance(obj, dict):
        for k, v in obj.items():
            yield k
            yield from _strings(v)
    elif isinstance(obj, list):
        for v in obj:
            yield from _strings(v)


def _run(cli: Cli, h: Hostile, *args: str) -> Any:
    before = h.digests()
    res = cli(*args, "--config", str(h.config))
    assert res.code == 0, res
    assert_unchanged(before, h.root, allow_new=(".closecall/",))
    assert not _raw(res.out), (args, _raw(res.out))
    assert not _raw(res.err), (args, _raw(res.err))
    return res


# --------------------------------------------------------------------------- terminal views


class TestTerminalViews:
    """Tables and charts: no raw character; the labels shown as visible escapes, markup as
    literal text (``[bold]x`` would vanish if rich read it)."""

    @pytest.mark.parametrize(
        ("args", "shown"),
        [
            (("fit",), ("[bold]x", "\\x1b[2J", "zo\\x1b[31mne\\u202e")),
            (("queue",), ("[bold]x", "\\u200b$")),
            (("queue", "--chart"), ("[bold]x", "\\u200b$\\foo$ \\x1b[2J")),
            (("explain", "ZONED"), ("[bold]x", "\\x1b[2J", "\\x1b[5m\\u200b")),
            (("proxies",), ("[bold]x", "\\x1b[2J", "zo\\x1b[31mne")),
            (("bands",), ("[bold]x", "\\x1b[2J", "$\\foo$")),
            (("compare", "--boot", "100"), ("[bold]x", "\\x1b[2J")),
            (("ledger", "show"), ("r\\u200fev",)),  # names and notes are cut at 80 columns
            (("disparity", "--boot", "100"), ("[bold]x", "\\x1b[2J", "r\\u200fev\\x1b")),
        ],
        ids=_ids,
    )
    def test_no_raw_character_and_labels_shown_escaped(
        self, cli: Cli, hostile: Hostile, args: tuple[str, ...], shown: tuple[str, ...]
    ) -> None:
        args = tuple(hostile.zoned if a == "ZONED" else a for a in args)
        res = _run(cli, hostile, *args)
        for needle in shown:
            assert needle in res.out, (needle, res.out[:2000])

    def test_very_long_label_is_cut_in_the_chart(self, cli: Cli, hostile: Hostile) -> None:
        res = _run(cli, hostile, "queue", "--chart")
        lines = [ln for ln in res.out.splitlines() if "within ±" in ln or "[bold]x" in ln]
        assert lines and all(len(ln) < 200 for ln in lines)
        assert "long" * 20 not in res.out  # 240 characters of label are not printed whole


# --------------------------------------------------------------------------- data on stdout


class TestJsonOnTerminal:
    """``--json`` is data: every value exact after json.loads, the bytes terminal-safe."""

    @pytest.mark.parametrize(
        ("args", "exact"),
        [
            (("fit", "--json"), (GROUP_A, GROUP_B, ZONE)),
            (("queue", "--json"), (GROUP_A, GROUP_B)),
            (("queue", "--chart", "--json"), (GROUP_A, GROUP_B)),
            (("explain", "ZONED", "--json"), (GROUP_A, GROUP_B, ZONE, "Q" + ZONE_SUFFIX)),
            (("proxies", "--json"), (GROUP_A, GROUP_B, ZONE)),
            (("bands", "--json"), (GROUP_A, GROUP_B)),
            (("compare", "--boot", "100", "--json"), (GROUP_A, GROUP_B)),
            (("ledger", "show", "--json"), (REVIEWER, *NOTES)),
            (("disparity", "--boot", "100", "--json"), (GROUP_A, GROUP_B, REVIEWER)),
        ],
        ids=_ids,
    )
    def test_json_exact_and_terminal_safe(
        self, cli: Cli, hostile: Hostile, args: tuple[str, ...], exact: tuple[str, ...]
    ) -> None:
        args = tuple(hostile.zoned if a == "ZONED" else a for a in args)
        res = _run(cli, hostile, *args)
        strings = set(_strings(json.loads(res.out)))
        for value in exact:
            if value == "Q" + ZONE_SUFFIX and value not in strings:
                value = "R" + ZONE_SUFFIX  # the case's zone is Q or R
            assert value in strings, repr(value)


class TestCsvOnTerminal:
    """CSV on standard output: escaped cells, LF line ends, every row as wide as the header."""

    @pytest.mark.parametrize(
        ("args", "column", "shown"),
        [
            (("queue", "--format", "csv", "--all"), "group", "\\x1b[2J"),
            (("ledger", "show", "--format", "csv"), "reviewer", "r\\u200fev\\x1b[2J\\u202e"),
            (("ledger", "export"), "note", "\\x1b]8;;http://e/\\x07link"),
        ],
        ids=["queue --format csv", "ledger show --format csv", "ledger export"],
    )
    def test_csv_escaped_and_well_formed(
        self, cli: Cli, hostile: Hostile, args: tuple[str, ...], column: str, shown: str
    ) -> None:
        res = _run(cli, hostile, *args)
        rows = list(csv.reader(io.StringIO(res.out, newline="")))  # Python's csv module
        header, body = rows[0], rows[1:]
        assert body and all(len(r) == len(header) for r in body)
        cells = [r[header.index(column)] for r in body]
        assert any(shown in c for c in cells), (shown, cells[:5])

    def test_export_to_stdout_says_how_to_get_the_exact_text(
        self, cli: Cli, hostile: Hostile
    ) -> None:
        res = _run(cli, hostile, "ledger", "export")
        assert "--out" in res.err and "escape" in res.err
        table = pd.read_csv(io.StringIO(res.out), dtype=str, keep_default_na=False)
        assert len(table) == 63  # 60 simulated + 3 hostile reviews, one row per case

    def test_jsonl_export_to_stdout_keeps_exact_values(
        self, cli: Cli, hostile: Hostile, tmp_path: Path
    ) -> None:
        res = _run(cli, hostile, "ledger", "export", "--format", "jsonl")
        rows = [json.loads(line) for line in res.out.split("\n") if line]
        by_case = {r["case_id"]: r for r in rows}
        for case, note in zip(hostile.noted, NOTES, strict=True):
            assert by_case[case]["note"] == note
            assert by_case[case]["reviewer"] == REVIEWER
        assert {r["group"] for r in rows} == {GROUP_A, GROUP_B}
        assert "\u202e".encode() not in res.out.encode()  # escaped on stdout …
        out = tmp_path / "reviews.jsonl"
        written = cli("ledger", "export", "-c", str(hostile.config), "-f", "jsonl", "-o", str(out))
        assert written.code == 0, written
        data = out.read_bytes()
        assert "\u202e".encode() in data  # … the file keeps the raw bytes
        # JSON Lines: records end with LF (str.splitlines would also split at U+2028)
        saved = [json.loads(line) for line in data.decode("utf-8").split("\n") if line]
        assert saved == rows  # the same values either way


# --------------------------------------------------------------------------- files


class TestExportFiles:
    """``--out`` keeps the exact bytes; the CSV reads back exactly in outside readers."""

    def _export(self, cli: Cli, h: Hostile, out: Path, *args: str) -> bytes:
        before = h.digests()
        res = cli("ledger", "export", "--config", str(h.config), "--out", str(out), *args)
        assert res.code == 0, res
        assert not _raw(res.out) and not _raw(res.err)
        assert_unchanged(before, h.root, allow_new=(".closecall/",))
        return out.read_bytes()

    def test_csv_file_round_trips_with_the_csv_module(
        self, cli: Cli, hostile: Hostile, tmp_path: Path
    ) -> None:
        data = self._export(cli, hostile, tmp_path / "reviews.csv")
        for raw in ("\x1b]8;;http://e/\x07link", REVIEWER, "\u2028\u200bz", GROUP_A):
            assert raw.encode("utf-8") in data  # the exact bytes, not escapes
        # Python's csv module (RFC 4180 reader), as documented: open with newline=""
        rows = list(csv.reader(io.StringIO(data.decode("utf-8"), newline="")))
        header, body = rows[0], rows[1:]
        assert len(body) == 63 and all(len(r) == len(header) for r in body)
        col = {name: header.index(name) for name in ("case_id", "note", "reviewer", "group")}
        by_case = {r[col["case_id"]]: r for r in body}
        for case, note in zip(hostile.noted, NOTES, strict=True):
            assert by_case[case][col["note"]] == note
            assert by_case[case][col["reviewer"]] == REVIEWER
        assert {r[col["group"]] for r in body} == {GROUP_A, GROUP_B}

    def test_csv_file_round_trips_with_pandas(
        self, cli: Cli, hostile: Hostile, tmp_path: Path
    ) -> None:
        self._export(cli, hostile, tmp_path / "reviews.csv")
        # pandas.read_csv with its defaults but text kept as text
        table = pd.read_csv(tmp_path / "reviews.csv", dtype=str, keep_default_na=False)
        assert len(table) == 63
        noted = table.set_index("case_id").loc[list(hostile.noted)]
        assert noted["note"].tolist() == list(NOTES)
        assert (noted["reviewer"] == REVIEWER).all()
        assert set(table["group"]) == {GROUP_A, GROUP_B}
        assert pd.to_numeric(table["margin"]).notna().all()  # no column shifted

    def test_html_report_escapes_and_renders(
        self, cli: Cli, hostile: Hostile, tmp_path: Path
    ) -> None:
        out = tmp_path / "report.html"
        res = _run(cli, hostile, "disparity", "--boot", "100", "--json", "--html", str(out))
        assert json.loads(res.out)  # the figures drew: "$\foo$" was not read as mathtext
        page = out.read_text(encoding="utf-8")
        assert not _raw(page), _raw(page)
        assert "<b>Briar" not in page and "&lt;b&gt;Briar&lt;/b&gt;" in page
        assert "\\x1b[2J" in page and "\\u202eretsA" in page
        assert "r\\u200fev\\x1b[2J\\u202eiewer[bold]x[/]" in page  # reviewer name, escaped


# --------------------------------------------------------------------------- CSV quoting


CR_NOTES = [  # no comma, quote or LF: only the CR can make a writer quote them
    "bare\rCR",
    "\rat the start",
    "at the end\r",
    "two\r\rCRs",
    "\r.\r",
    "CR\r then; a semicolon",
]


class TestCsvQuoting:
    """A note with a CR (alone or not) is quoted: no reader shifts the later columns."""

    @pytest.mark.parametrize("note", CR_NOTES, ids=[repr(n) for n in CR_NOTES])
    def test_note_with_cr_reads_back_exactly(
        self, cli: Cli, study_dir: Path, tmp_path: Path, note: str
    ) -> None:
        from closecall.review.decisions import record_review

        study = open_study(study_dir / "closecall.toml")
        case = str(study.snapshot.case_ids[5])
        record_review(study, case, "override-favourable", "other", note)
        out = tmp_path / "reviews.csv"
        res = cli("ledger", "export", "-c", str(study_dir / "closecall.toml"), "--out", str(out))
        assert res.code == 0, res
        data = out.read_bytes()
        # Python's csv module: three rows of the header's width, the note exact
        rows = list(csv.reader(io.StringIO(data.decode("utf-8"), newline="")))
        assert len(rows) == 4 and all(len(r) == len(rows[0]) for r in rows)
        assert rows[3][rows[0].index("note")] == note
        # pandas.read_csv: the same, and the margins are still numbers
        table = pd.read_csv(out, dtype=str, keep_default_na=False)
        assert table.loc[table["case_id"] == case, "note"].tolist() == [note]
        assert pd.to_numeric(table["margin"]).notna().all()


# --------------------------------------------------------------------------- formulas


FORMULAS = [" =1+1", "  @SUM(A1:A9)", "\n=cmd|' /C calc'!A0", "\u00a0+1", " \t-2"]


class TestSpreadsheetSafe:
    """``--spreadsheet-safe``: formula characters after leading whitespace are defused too
    (OWASP, "CSV Injection": = + - @, tab and CR; common practice)."""

    @pytest.mark.parametrize("note", FORMULAS, ids=[repr(n) for n in FORMULAS])
    def test_formula_after_whitespace_gets_an_apostrophe(
        self, cli: Cli, study_dir: Path, tmp_path: Path, note: str
    ) -> None:
        from closecall.review.decisions import record_review

        config = study_dir / "closecall.toml"
        study = open_study(config)
        case = str(study.snapshot.case_ids[5])
        record_review(study, case, "override-favourable", "other", note)
        inner = str(study.snapshot.case_ids[6])
        record_review(study, inner, "override-favourable", "other", "a = b, total -2, x@y")
        out = tmp_path / "safe.csv"
        res = cli("ledger", "export", "-c", str(config), "--spreadsheet-safe", "--out", str(out))
        assert res.code == 0, res
        table = pd.read_csv(out, dtype=str, keep_default_na=False)
        notes = dict(zip(table["case_id"], table["note"], strict=True))
        assert notes[case] == "'" + note
        assert notes[inner] == "a = b, total -2, x@y"  # formula characters inside: untouched
        assert notes[str(study.snapshot.case_ids[0])] == "first look"  # plain text untouched


# --------------------------------------------------------------------------- review screens


def _screen(app: Any) -> str:
    """What the terminal shows, as text (the compositor's segments, nothing stripped)."""
    from rich.console import Console

    width, height = app.size
    console = Console(
        width=width,
        height=height,
        file=io.StringIO(),
        force_terminal=True,
        color_system=None,
        record=True,
        legacy_windows=False,
    )
    update = app.screen._compositor.render_update(
        full=True, screen_stack=app._background_screens, simplify=True
    )
    console.print(update)
    return console.export_text()


async def _until(pilot: Any, condition: Any, timeout: float = 20.0) -> None:
    waited = 0.0
    while not condition():
        assert waited < timeout, f"timed out waiting for {condition}"
        await pilot.pause(0.05)
        waited += 0.05
    await pilot.pause()


class TestReviewScreens:
    """The review screens show the same labels as visible escapes, never raw, never markup."""

    def test_queue_case_decision_and_ledger_screens(self, hostile: Hostile, tmp_path: Path) -> None:
        import asyncio

        # a private copy: the screens write soft claims and drafts beside the ledger's chain
        copy_study(hostile.root, tmp_path / "study")
        h = Hostile(tmp_path / "study", tmp_path / "study" / "closecall.toml", *_rest(hostile))
        asyncio.run(self._drive(h))

    async def _drive(self, h: Hostile) -> None:
        import numpy as np
        from textual.content import Content

        from closecall.review.decisions import ledger_entries
        from closecall.tui.app import ReviewApp
        from closecall.tui.case_screen import CaseScreen
        from closecall.tui.decision_dialog import DecisionDialog
        from closecall.tui.ledger_screen import LedgerScreen
        from closecall.tui.queue_screen import QueueScreen

        # the ledger file (claims, drafts) and the digest cache (a copy's new inodes) may change
        skip = ("ledger.sqlite", ".closecall/digests")
        before = {k: v for k, v in h.digests().items() if not k.startswith(skip)}
        study = open_study(h.config)
        assert not study.fitted_now  # the copy reuses the fit
        entries = ledger_entries(study.config)
        ids = study.snapshot.case_ids.astype(str)
        app = ReviewApp(study=study, login="reviewer")
        async with app.run_test(size=(100, 32)) as pilot:
            await _until(pilot, lambda: isinstance(app.screen, QueueScreen))
            queue = app.screen
            assert isinstance(queue, QueueScreen)
            text = _screen(app)
            assert not _raw(text), _raw(text)
            assert "[bold]x" in text and "\\u200b$" in text  # list and chart, as text

            # the command palette reads its titles as markup: each group's command shows the
            # label as text, escaped
            titles = [
                Content.from_markup(c.title).plain
                for c in app.get_system_commands(queue)
                if c.title.startswith("Only group")
            ]
            assert len(titles) == 2 and not _raw(" ".join(titles))
            assert any(t.startswith("Only group [bold]x[/] <b>Briar</b>") for t in titles)

            queue.only_group(GROUP_B)  # the settings line names the group
            await _until(pilot, lambda: app.session.settings.group == GROUP_B)  # type: ignore[union-attr]
            await pilot.pause(0.2)
            text = _screen(app)
            assert not _raw(text), _raw(text)
            assert "g group: [bold]x[/] <b>Briar</b>," in text

            zoned = int(np.flatnonzero(ids == h.zoned)[0])
            queue.open_row(zoned)
            await _until(pilot, lambda: isinstance(app.screen, CaseScreen))
            await _until(pilot, lambda: app.screen.details is not None)  # type: ignore[attr-defined]
            text = _screen(app)
            assert not _raw(text), [ln for ln in text.splitlines() if _raw(ln)]
            assert f"Case {h.zoned}" in text and "zo\\x1b[31mne" in text

            await pilot.press("d")
            await _until(pilot, lambda: isinstance(app.screen, DecisionDialog))
            await pilot.pause(0.2)
            text = _screen(app)
            assert not _raw(text), _raw(text)
            assert f"Decision on {h.zoned}" in text
            await pilot.press("escape")
            await _until(pilot, lambda: isinstance(app.screen, CaseScreen))
            await pilot.press("escape")
            await _until(pilot, lambda: isinstance(app.screen, QueueScreen))

            noted = int(np.flatnonzero(ids == h.noted[0])[0])
            queue.open_row(noted)
            await _until(pilot, lambda: isinstance(app.screen, CaseScreen))
            await _until(pilot, lambda: app.screen.details is not None)  # type: ignore[attr-defined]
            await pilot.press("l")
            await _until(pilot, lambda: isinstance(app.screen, LedgerScreen))
            ledger = app.screen
            await _until(pilot, lambda: bool(ledger.entries))  # type: ignore[attr-defined]
            text = _screen(app)
            assert not _raw(text), _raw(text)
            assert "r\\u200fev\\x1b[2J" in text
        after = {k: v for k, v in h.digests().items() if not k.startswith(skip)}
        assert after == before
        assert ledger_entries(study.config) == entries  # nothing recorded
