"""Hostile outputs (issue 10, items 1 and 2): no output option writes over a study's files.

Every refusal asserts the corpus contract (exit 2, one ``error:`` with a ``fix:``, no
traceback) and that every study file is byte-identical afterwards, SQLite's ``-wal`` and
``-shm`` included (checked by hand: the shared digest leaves them out). The written cases check
the owner-only mode with ``os.stat`` and that the file holds what was asked for.
"""

from __future__ import annotations

import os
import shutil
import stat
from pathlib import Path

import pandas as pd
import pytest
from hostile_helpers import Cli, assert_refused, assert_unchanged, copy_study, study_digests

#: SQLite's write-ahead log and rollback journal. A reader (study_digests' own included) may
#: create an empty ``-wal`` and rewrites the ``-shm`` read marks, so ``-shm`` is not compared.
COMPANIONS = ("ledger.sqlite-wal", "ledger.sqlite-journal")


def _companions(root: Path) -> dict[str, bytes | None]:
    """The SQLite companions' bytes (None when absent): study_digests leaves them out."""
    return {n: (root / n).read_bytes() if (root / n).exists() else None for n in COMPANIONS}


def _drop_companions(root: Path) -> None:
    for name in ("ledger.sqlite-wal", "ledger.sqlite-shm"):
        (root / name).unlink(missing_ok=True)


class Guard:
    """Digests of a study folder taken before a command, checked after it."""

    def __init__(self, root: Path) -> None:
        self.root = root
        self.digests = study_digests(root)
        self.companions = _companions(root)

    def check(self) -> None:
        assert_unchanged(self.digests, self.root)
        assert _companions(self.root) == self.companions


def _export(cli: Cli, study: Path, *args: str) -> object:
    return cli("ledger", "export", "--config", str(study / "closecall.toml"), *args)


def _disparity(cli: Cli, study: Path, *args: str) -> object:
    cfg = str(study / "closecall.toml")
    return cli("disparity", "--config", cfg, "--boot", "100", "--json", *args)


def _mode(path: Path) -> int:
    return stat.S_IMODE(os.stat(path).st_mode)


def _review_both_groups(study_dir: Path, per_group: int = 15) -> None:
    """Uphold some cases of every group, so that a disparity report can be computed."""
    import numpy as np

    from closecall.review.decisions import record_review
    from closecall.suite.opening import open_study

    study = open_study(study_dir / "closecall.toml")
    labels = np.asarray(study.snapshot.group_labels).astype(str)
    ids = np.asarray(study.snapshot.case_ids).astype(str)
    for level in np.unique(labels):
        for case in ids[labels == level][2 : 2 + per_group]:
            record_review(study, str(case), action="uphold", reason=None, note="")


# --------------------------------------------------------------------------- ledger export --out


class TestExportOntoStudyFiles:
    """`ledger export --out` aimed at a study file is refused, with or without --force."""

    @pytest.mark.parametrize(
        ("target", "what"),
        [
            ("ledger.sqlite", "is the study's ledger"),
            ("ledger.sqlite-wal", "SQLite companion (wal)"),
            ("ledger.sqlite-shm", "SQLite companion (shm)"),
            ("ledger.sqlite-journal", "SQLite companion (journal)"),
            ("closecall.toml", "is the study's config"),
            ("history.csv", "is the study's history data file"),
            ("pending.csv", "is the study's pending data file"),
            (".closecall/snapshots/reviews.csv", "snapshot folder"),
            (".closecall/digests.json", "snapshot folder"),
        ],
    )
    @pytest.mark.parametrize("force", [False, True])
    def test_named_directly(
        self, cli: Cli, study_dir: Path, target: str, what: str, force: bool
    ) -> None:
        guard = Guard(study_dir)
        extra = ("--force",) if force else ()
        res = _export(cli, study_dir, "--out", str(study_dir / target), *extra)
        assert_refused(res, target.split("/")[-1], what, "--out")
        guard.check()

    def test_relative_path_through_dotdot(
        self, cli: Cli, study_dir: Path, monkeypatch: pytest.MonkeyPatch
    ) -> None:
        (study_dir.parent / "elsewhere").mkdir()
        monkeypatch.chdir(study_dir.parent / "elsewhere")
        guard = Guard(study_dir)
        res = _export(cli, study_dir, "--out", "../study/./sub/../ledger.sqlite", "--force")
        assert_refused(res, "is the study's ledger")
        guard.check()

    def test_relative_config_and_out(
        self, cli: Cli, study_dir: Path, monkeypatch: pytest.MonkeyPatch
    ) -> None:
        monkeypatch.chdir(study_dir)
        guard = Guard(study_dir)
        res = cli("ledger", "export", "--config", ".", "--out", "closecall.toml", "--force")
        assert_refused(res, "is the study's config")
        guard.check()

    def test_symlink_to_the_ledger(self, cli: Cli, study_dir: Path, tmp_path: Path) -> None:
        link = tmp_path / "reviews.csv"
        link.symlink_to(study_dir / "ledger.sqlite")
        guard = Guard(study_dir)
        res = _export(cli, study_dir, "--out", str(link), "--force")
        assert_refused(res, "is the study's ledger", "it leads to")
        guard.check()
        assert link.is_symlink()

    def test_symlink_to_the_history(self, cli: Cli, study_dir: Path, tmp_path: Path) -> None:
        link = tmp_path / "reviews.csv"
        link.symlink_to(study_dir / "history.csv")
        guard = Guard(study_dir)
        assert_refused(_export(cli, study_dir, "--out", str(link), "--force"), "history data")
        guard.check()

    def test_symlinked_folder(self, cli: Cli, study_dir: Path, tmp_path: Path) -> None:
        (tmp_path / "shortcut").symlink_to(study_dir, target_is_directory=True)
        guard = Guard(study_dir)
        res = _export(cli, study_dir, "--out", str(tmp_path / "shortcut" / "pending.csv"))
        assert_refused(res, "is the study's pending data file")
        guard.check()

    def test_dangling_symlink_to_the_wal(self, cli: Cli, study_dir: Path, tmp_path: Path) -> None:
        """The link's target does not exist yet: the name it leads to still counts."""
        guard = Guard(study_dir)
        _drop_companions(study_dir)  # the ledger is closed: SQLite needs neither
        link = tmp_path / "reviews.csv"
        link.symlink_to(study_dir / "ledger.sqlite-wal")
        assert_refused(_export(cli, study_dir, "--out", str(link)), "SQLite companion (wal)")
        wal = study_dir / "ledger.sqlite-wal"
        assert not wal.exists() or wal.stat().st_size == 0  # at most a reader's empty log
        assert_unchanged(guard.digests, study_dir)

    def test_hard_link_to_the_ledger(self, cli: Cli, study_dir: Path, tmp_path: Path) -> None:
        hard = tmp_path / "reviews.csv"
        os.link(study_dir / "ledger.sqlite", hard)
        guard = Guard(study_dir)
        res = _export(cli, study_dir, "--out", str(hard), "--force")
        assert_refused(res, "same file as the study's ledger", "hard link")
        guard.check()

    def test_hard_link_to_the_config(self, cli: Cli, study_dir: Path, tmp_path: Path) -> None:
        hard = tmp_path / "reviews.csv"
        os.link(study_dir / "closecall.toml", hard)
        guard = Guard(study_dir)
        res = _export(cli, study_dir, "--out", str(hard), "--force")
        assert_refused(res, "same file as the study's config")
        guard.check()

    def test_the_key_file(self, cli: Cli, study_dir: Path, tmp_path: Path) -> None:
        """Output and key the same new file: refused before the key is created."""
        key = tmp_path / "key"
        guard = Guard(study_dir)
        res = _export(cli, study_dir, "--pseudonymise", str(key), "--out", str(key))
        assert_refused(res, "is the pseudonymisation key file")
        guard.check()
        assert not key.exists()

    def test_an_existing_key_file(self, cli: Cli, study_dir: Path, tmp_path: Path) -> None:
        key = tmp_path / "key"
        assert _export(cli, study_dir, "--pseudonymise", str(key)).code == 0  # type: ignore[attr-defined]
        before = key.read_bytes()
        guard = Guard(study_dir)
        res = _export(cli, study_dir, "--pseudonymise", str(key), "--out", str(key), "--force")
        assert_refused(res, "is the pseudonymisation key file")
        guard.check()
        assert key.read_bytes() == before

    def test_another_studys_ledger(
        self, cli: Cli, study_dir: Path, hostile_base: Path, tmp_path: Path
    ) -> None:
        """A config beside the output names its own files: those are protected too."""
        other = tmp_path / "other"
        copy_study(hostile_base, other)
        (other / "ledger.sqlite").rename(other / "reviews.sqlite")
        text = (other / "closecall.toml").read_text()
        (other / "closecall.toml").write_text(
            text.replace('ledger = "ledger.sqlite"', 'ledger = "reviews.sqlite"')
            if 'ledger = "ledger.sqlite"' in text
            else text.replace("[review]", '[review]\nledger = "reviews.sqlite"')
        )
        guards = Guard(study_dir), Guard(other)
        res = _export(cli, study_dir, "--out", str(other / "reviews.sqlite"), "--force")
        assert_refused(res, "is the study's ledger")
        for g in guards:
            g.check()

    def test_any_sqlite_database(self, cli: Cli, study_dir: Path, tmp_path: Path) -> None:
        """A SQLite file that no config names (a moved ledger) is never replaced by an export."""
        moved = tmp_path / "old-ledger.db"
        shutil.copy(study_dir / "ledger.sqlite", moved)
        before = moved.read_bytes()
        res = _export(cli, study_dir, "--out", str(moved), "--force")
        assert_refused(res, "is a SQLite database")
        assert moved.read_bytes() == before


# --------------------------------------------------------------------------- disparity --html


class TestHtmlOntoStudyFiles:
    """`disparity --html` aimed at a study file is refused before the report is computed."""

    @pytest.mark.parametrize(
        ("target", "what"),
        [
            ("ledger.sqlite", "is the study's ledger"),
            ("closecall.toml", "is the study's config"),
            ("history.csv", "is the study's history data file"),
            (".closecall/report.html", "snapshot folder"),
        ],
    )
    def test_named_directly(self, cli: Cli, study_dir: Path, target: str, what: str) -> None:
        guard = Guard(study_dir)
        res = _disparity(cli, study_dir, "--html", str(study_dir / target), "--force")
        assert_refused(res, "--html", what)
        guard.check()

    def test_the_outcomes_file_it_reads(self, cli: Cli, study_dir: Path) -> None:
        guard = Guard(study_dir)
        outcomes = str(study_dir / "pending_outcomes.csv")
        res = _disparity(cli, study_dir, "--outcomes", outcomes, "--html", outcomes, "--force")
        assert_refused(res, "is the outcomes file this report reads")
        guard.check()

    def test_the_key_file(self, cli: Cli, study_dir: Path, tmp_path: Path) -> None:
        key = tmp_path / "key"
        guard = Guard(study_dir)
        res = _disparity(cli, study_dir, "--pseudonymise", str(key), "--html", str(key))
        assert_refused(res, "is the pseudonymisation key file")
        guard.check()
        assert not key.exists()

    def test_symlink_to_the_config(self, cli: Cli, study_dir: Path, tmp_path: Path) -> None:
        link = tmp_path / "report.html"
        link.symlink_to(study_dir / "closecall.toml")
        guard = Guard(study_dir)
        assert_refused(_disparity(cli, study_dir, "--html", str(link), "--force"), "config")
        guard.check()


# --------------------------------------------------------------------------- --pseudonymise KEY


class TestKeyFileOnStudyFiles:
    """A key file is never created at, or read from, a study file's path."""

    @pytest.mark.parametrize(
        ("target", "what"),
        [
            ("ledger.sqlite", "is the study's ledger"),
            ("ledger.sqlite-wal", "SQLite companion (wal)"),
            ("closecall.toml", "is the study's config"),
            ("history.csv", "is the study's history data file"),
            (".closecall/key", "snapshot folder"),
        ],
    )
    def test_export_key(self, cli: Cli, study_dir: Path, target: str, what: str) -> None:
        guard = Guard(study_dir)
        res = _export(cli, study_dir, "--pseudonymise", str(study_dir / target))
        assert_refused(res, "--pseudonymise", what, "pseudonymisation key")
        guard.check()

    @pytest.mark.parametrize("target", ["ledger.sqlite", "pending.csv"])
    def test_disparity_key(self, cli: Cli, study_dir: Path, target: str) -> None:
        guard = Guard(study_dir)
        res = _disparity(cli, study_dir, "--pseudonymise", str(study_dir / target))
        assert_refused(res, "--pseudonymise", target)
        guard.check()

    def test_disparity_key_is_the_outcomes_file(self, cli: Cli, study_dir: Path) -> None:
        guard = Guard(study_dir)
        outcomes = str(study_dir / "pending_outcomes.csv")
        res = _disparity(cli, study_dir, "--outcomes", outcomes, "--pseudonymise", outcomes)
        assert_refused(res, "is the outcomes file this report reads")
        guard.check()

    def test_engine_refuses_too(self, study_dir: Path) -> None:
        """The engine call checks on its own (a script that skips the CLI)."""
        from closecall.core.errors import UserError
        from closecall.reports.export import export_reviews
        from closecall.review.decisions import ledger_entries
        from closecall.suite.opening import open_study

        study = open_study(study_dir / "closecall.toml")
        entries = ledger_entries(study.config)
        guard = Guard(study_dir)
        with pytest.raises(UserError, match="is the study's config"):
            export_reviews(study, entries, key_file=study_dir / "closecall.toml")
        guard.check()


# --------------------------------------------------------------------------- demo --out


class TestDemoFolder:
    """`demo --out` never writes into a folder that already holds a study."""

    def test_the_study_folder(self, cli: Cli, study_dir: Path) -> None:
        guard = Guard(study_dir)
        res = cli("demo", "--out", str(study_dir), "--cases", "300", "--no-fit")
        assert_refused(res, "already holds a study", "closecall.toml", "ledger.sqlite")
        guard.check()

    @pytest.mark.parametrize(
        "keep", ["ledger.sqlite", "closecall.toml", "history.csv", "pending.csv", ".closecall"]
    )
    def test_a_folder_with_one_study_file(
        self, cli: Cli, study_dir: Path, tmp_path: Path, keep: str
    ) -> None:
        folder = tmp_path / "partial"
        folder.mkdir()
        src = study_dir / keep
        (shutil.copytree if src.is_dir() else shutil.copy2)(src, folder / keep)
        guard = Guard(folder)
        res = cli("demo", "--out", str(folder), "--cases", "300", "--no-fit")
        assert_refused(res, "already holds a study", keep)
        guard.check()

    def test_inside_the_snapshot_folder(self, cli: Cli, study_dir: Path) -> None:
        guard = Guard(study_dir)
        res = cli("demo", "--out", str(study_dir / ".closecall" / "demo"), "--no-fit")
        assert_refused(res, "snapshot folder")
        guard.check()

    def test_a_file(self, cli: Cli, study_dir: Path) -> None:
        guard = Guard(study_dir)
        res = cli("demo", "--out", str(study_dir / "history.csv"), "--no-fit")
        assert_refused(res, "is a file, not a folder")
        guard.check()

    def test_a_new_name_beside_the_wal(self, cli: Cli, study_dir: Path) -> None:
        """A folder named like the ledger's companion would stop SQLite from writing its log."""
        guard = Guard(study_dir)
        _drop_companions(study_dir)
        res = cli("demo", "--out", str(study_dir / "ledger.sqlite-wal"), "--no-fit")
        assert_refused(res, "SQLite companion (wal)")
        assert not (study_dir / "ledger.sqlite-wal").exists()
        assert_unchanged(guard.digests, study_dir)

    @pytest.mark.parametrize("kind", ["new", "empty", "unrelated files"])
    def test_a_fresh_folder_is_fine(self, cli: Cli, tmp_path: Path, kind: str) -> None:
        folder = tmp_path / "demo"
        if kind != "new":
            folder.mkdir()
        if kind == "unrelated files":
            (folder / "notes.txt").write_text("mine")
        res = cli("demo", "--out", str(folder), "--cases", "300", "--no-fit", "--json")
        assert res.code == 0, res  # type: ignore[attr-defined]
        assert (folder / "closecall.toml").is_file() and (folder / "history.csv").is_file()
        if kind == "unrelated files":
            assert (folder / "notes.txt").read_text() == "mine"


# --------------------------------------------------------------------------- init --out


class TestInitConfig:
    """`init` drafts a config: never over a data file or a ledger; an old config needs --force."""

    def test_over_the_study_config_without_force(self, cli: Cli, study_dir: Path) -> None:
        guard = Guard(study_dir)
        res = cli(
            "init", str(study_dir / "history.csv"), "--out", str(study_dir / "closecall.toml")
        )
        assert_refused(res, "already exists", "--force")
        guard.check()

    @pytest.mark.parametrize(
        ("target", "what"),
        [
            ("ledger.sqlite", "is the study's ledger"),
            ("ledger.sqlite-wal", "SQLite companion (wal)"),
            ("history.csv", "history data file"),
            ("pending.csv", "is the study's pending data file"),
            (".closecall/closecall.toml", "snapshot folder"),
        ],
    )
    def test_over_a_study_file_even_with_force(
        self, cli: Cli, study_dir: Path, target: str, what: str
    ) -> None:
        guard = Guard(study_dir)
        res = cli(
            "init", str(study_dir / "history.csv"), "--out", str(study_dir / target), "--force"
        )
        assert_refused(res, what)
        guard.check()

    def test_over_the_data_file_it_reads(self, cli: Cli, study_dir: Path, tmp_path: Path) -> None:
        data = tmp_path / "cases.csv"
        shutil.copy(study_dir / "history.csv", data)
        before = data.read_bytes()
        res = cli("init", str(data), "--out", str(data), "--force")
        assert_refused(res, "is the history data file named here")
        assert data.read_bytes() == before

    def test_over_a_file_that_is_not_a_config(
        self, cli: Cli, study_dir: Path, tmp_path: Path
    ) -> None:
        other = tmp_path / "notes.toml"
        other.write_bytes(b"\x00\x01 not toml")
        res = cli("init", str(study_dir / "history.csv"), "--out", str(other), "--force")
        assert_refused(res, "is not a study config")
        assert other.read_bytes() == b"\x00\x01 not toml"

    def test_an_earlier_config_with_force(self, cli: Cli, study_dir: Path, tmp_path: Path) -> None:
        out = tmp_path / "draft.toml"
        out.write_text('[study]\nname = "old draft"\n')
        res = cli("init", str(study_dir / "history.csv"), "--out", str(out), "--force")
        assert res.code == 0, res  # type: ignore[attr-defined]
        assert "old draft" not in out.read_text() and "[data]" in out.read_text()


# --------------------------------------------------------------------------- --force and modes


class TestForceAndOwnerOnly:
    """Other existing files need --force; every export and report is created owner-only."""

    def test_existing_file_without_force(self, cli: Cli, study_dir: Path, tmp_path: Path) -> None:
        out = tmp_path / "reviews.csv"
        out.write_text("my earlier analysis\n")
        guard = Guard(study_dir)
        res = _export(cli, study_dir, "--out", str(out))
        assert_refused(res, "already exists", "--force")
        guard.check()
        assert out.read_text() == "my earlier analysis\n"

    def test_existing_html_without_force(self, cli: Cli, study_dir: Path, tmp_path: Path) -> None:
        out = tmp_path / "report.html"
        out.write_text("<p>mine</p>")
        res = _disparity(cli, study_dir, "--html", str(out))
        assert_refused(res, "already exists", "--force")
        assert out.read_text() == "<p>mine</p>"

    def test_existing_file_with_force(self, cli: Cli, study_dir: Path, tmp_path: Path) -> None:
        out = tmp_path / "reviews.csv"
        out.write_text("my earlier analysis\n")
        os.chmod(out, 0o644)
        res = _export(cli, study_dir, "--out", str(out), "--force")
        assert res.code == 0, res  # type: ignore[attr-defined]
        assert _mode(out) == 0o600
        assert len(pd.read_csv(out)) == 2  # the base study's two reviews

    def test_new_export_is_owner_only(self, cli: Cli, study_dir: Path, tmp_path: Path) -> None:
        old = os.umask(0o022)  # a usual umask: the file is still created 600, not 644
        try:
            for fmt in ("csv", "jsonl", "parquet"):
                out = tmp_path / f"reviews.{fmt}"
                res = _export(cli, study_dir, "--format", fmt, "--out", str(out))
                assert res.code == 0, res  # type: ignore[attr-defined]
                assert _mode(out) == 0o600, fmt
        finally:
            os.umask(old)
        assert not [p for p in tmp_path.iterdir() if p.name.endswith(".tmp")]

    def test_html_report_is_owner_only(self, cli: Cli, study_dir: Path, tmp_path: Path) -> None:
        _review_both_groups(study_dir)
        out = tmp_path / "report.html"
        res = _disparity(cli, study_dir, "--html", str(out))
        assert res.code == 0, res  # type: ignore[attr-defined]
        assert _mode(out) == 0o600
        assert out.read_text(encoding="utf-8").lstrip().lower().startswith("<!doctype html")

    def test_html_replaced_with_force_is_owner_only(
        self, cli: Cli, study_dir: Path, tmp_path: Path
    ) -> None:
        _review_both_groups(study_dir)
        out = tmp_path / "report.html"
        out.write_text("<p>old</p>")
        os.chmod(out, 0o664)
        res = _disparity(cli, study_dir, "--html", str(out), "--force")
        assert res.code == 0, res  # type: ignore[attr-defined]
        assert _mode(out) == 0o600 and "<p>old</p>" not in out.read_text()

    def test_symlink_to_an_unrelated_file_with_force(
        self, cli: Cli, study_dir: Path, tmp_path: Path
    ) -> None:
        """The link is followed: the file it points to is replaced, the link kept."""
        target = tmp_path / "real.csv"
        target.write_text("old\n")
        link = tmp_path / "link.csv"
        link.symlink_to(target)
        assert_refused(_export(cli, study_dir, "--out", str(link)), "already exists")
        res = _export(cli, study_dir, "--out", str(link), "--force")
        assert res.code == 0, res  # type: ignore[attr-defined]
        assert link.is_symlink() and _mode(target) == 0o600
        assert len(pd.read_csv(target)) == 2

    def test_a_folder(self, cli: Cli, study_dir: Path, tmp_path: Path) -> None:
        guard = Guard(study_dir)
        assert_refused(_export(cli, study_dir, "--out", str(tmp_path), "--force"), "is a folder")
        guard.check()

    def test_a_missing_folder(self, cli: Cli, study_dir: Path, tmp_path: Path) -> None:
        guard = Guard(study_dir)
        res = _export(cli, study_dir, "--out", str(tmp_path / "nowhere" / "reviews.csv"))
        assert_refused(res, "does not exist")
        guard.check()
        assert not (tmp_path / "nowhere").exists()
