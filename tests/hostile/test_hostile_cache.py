"""Hostile cache: damaged, edited and foreign snapshots, a garbage digests cache, and data edited
behind the cache's back (issue 10, items 7 and 8).

Each case damages a fresh copy of the fitted demo study, then runs every study command. A
damaged snapshot is refused (exit 2, one message naming the snapshot folder, the fix
``closecall fit --refit``, no traceback) and nothing is altered; the ledger keeps reading. Then
``closecall fit --refit`` rebuilds the snapshot without reading the damaged one, and the rebuilt
one has the original id and the original arrays, byte for byte.
"""

from __future__ import annotations

import hashlib
import json
import os
import shutil
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from hostile_helpers import assert_refused, assert_unchanged, copy_study, study_digests

from closecall.cli.errors import error_lines

Damage = Callable[[Path, Path], None]  # (snapshot folder, study folder)

DIGESTS = ".closecall/digests.json"  # rewritten by any command that hashes the data afresh


def _snapshot(study: Path) -> Path:
    (folder,) = [p for p in (study / ".closecall" / "snapshots").iterdir() if p.name[0] != "."]
    return folder


def _arrays(folder: Path) -> dict[str, np.ndarray]:
    return {p.stem: np.load(p, allow_pickle=False) for p in sorted(folder.glob("*.npy"))}


def _meta(folder: Path) -> dict[str, Any]:
    return dict(json.loads((folder / "meta.json").read_text()))


def _write_meta(folder: Path, meta: dict[str, Any], *, redigest: bool) -> None:
    """Write meta.json; with ``redigest`` its integrity digest is made to match (a forger)."""
    if redigest:
        body = {k: v for k, v in meta.items() if k != "integrity"}
        text = json.dumps(body, sort_keys=True, separators=(",", ":"), ensure_ascii=True)
        meta["integrity"]["meta_sha256"] = hashlib.sha256(text.encode()).hexdigest()
    (folder / "meta.json").write_text(json.dumps(meta, indent=1))


# --------------------------------------------------------------------------- damage kinds


def truncate_array(folder: Path, study: Path) -> None:
    path = folder / "logit__pooled.npy"
    data = path.read_bytes()
    path.write_bytes(data[: len(data) // 2])


def flip_a_byte(folder: Path, study: Path) -> None:
    """One byte of the pooled model's log-odds, in place: the file still loads as an array."""
    path = folder / "logit__pooled.npy"
    with path.open("r+b") as fh:
        fh.seek(-5, os.SEEK_END)
        b = fh.read(1)
        fh.seek(-5, os.SEEK_END)
        fh.write(bytes([b[0] ^ 0x40]))


def edit_a_byte_keeping_size_and_mtime(folder: Path, study: Path) -> None:
    path = folder / "X.npy"
    st = path.stat()
    flip_a_byte_in(path, -3)
    os.utime(path, ns=(st.st_atime_ns, st.st_mtime_ns))


def flip_a_byte_in(path: Path, offset: int) -> None:
    with path.open("r+b") as fh:
        fh.seek(offset, os.SEEK_END)
        b = fh.read(1)
        fh.seek(offset, os.SEEK_END)
        fh.write(bytes([b[0] ^ 0x01]))


def swap_byte_order(folder: Path, study: Path) -> None:
    """Same size, same bytes, another dtype in the header: every number read differently."""
    path = folder / "logit__split.npy"
    data = path.read_bytes()
    assert b"'<f8'" in data[:128]
    path.write_bytes(data.replace(b"'<f8'", b"'>f8'", 1))


def delete_array(folder: Path, study: Path) -> None:
    (folder / "quad__split.npy").unlink()


def add_foreign_array(folder: Path, study: Path) -> None:
    np.save(folder / "logit__extra.npy", np.zeros(600))


def array_replaced_by_folder(folder: Path, study: Path) -> None:
    (folder / "outcome.npy").unlink()
    (folder / "outcome.npy").mkdir()


def pickled_array(folder: Path, study: Path) -> None:
    """case_ids.npy replaced by an object array whose unpickling would create a folder."""
    np.save(folder / "case_ids.npy", np.array([_Trap(study / "UNPICKLED")], dtype=object))


class _Trap:
    def __init__(self, marker: Path) -> None:
        self.marker = str(marker)

    def __reduce__(self) -> tuple[Any, tuple[str]]:
        return os.mkdir, (self.marker,)


def meta_not_json(folder: Path, study: Path) -> None:
    (folder / "meta.json").write_text('{"id": "half a file", "format": ')


def meta_empty(folder: Path, study: Path) -> None:
    (folder / "meta.json").write_bytes(b"")


def meta_not_utf8(folder: Path, study: Path) -> None:
    (folder / "meta.json").write_bytes(b'{"id": "\xff\xfe"}')


def meta_a_list(folder: Path, study: Path) -> None:
    (folder / "meta.json").write_text("[1, 2, 3]")


def meta_missing(folder: Path, study: Path) -> None:
    (folder / "meta.json").unlink()


def meta_wrong_types(folder: Path, study: Path) -> None:
    meta = _meta(folder)
    meta["models"] = "pooled"
    meta["n_cases"] = "600"
    _write_meta(folder, meta, redigest=False)


def meta_wrong_types_redigested(folder: Path, study: Path) -> None:
    meta = _meta(folder)
    meta["lenses"] = [{"name": "equal", "cost_false_favourable": "one"}]
    _write_meta(folder, meta, redigest=True)


def meta_missing_key_redigested(folder: Path, study: Path) -> None:
    meta = _meta(folder)
    del meta["encoder"]
    _write_meta(folder, meta, redigest=True)


def meta_no_integrity_table(folder: Path, study: Path) -> None:
    meta = _meta(folder)
    del meta["integrity"]
    _write_meta(folder, meta, redigest=False)


def meta_table_altered_to_match(folder: Path, study: Path) -> None:
    """A truncated array whose size in the table was edited to match: the digest still differs."""
    truncate_array(folder, study)
    meta = _meta(folder)
    meta["integrity"]["arrays"]["logit__pooled"]["bytes"] = (
        (folder / "logit__pooled.npy").stat().st_size
    )
    _write_meta(folder, meta, redigest=False)


def meta_of_an_older_format(folder: Path, study: Path) -> None:
    meta = _meta(folder)
    meta["format"] = 2
    _write_meta(folder, meta, redigest=True)


def meta_names_another_id(folder: Path, study: Path) -> None:
    meta = _meta(folder)
    meta["id"] = "0123456789abcdef"
    _write_meta(folder, meta, redigest=True)


def meta_id_not_of_its_inputs(folder: Path, study: Path) -> None:
    """A self-consistent meta.json whose recorded data digest is not the one its id was made of."""
    meta = _meta(folder)
    meta["data_digests"]["history"] = "0" * 64
    _write_meta(folder, meta, redigest=True)


def meta_of_another_snapshot(folder: Path, study: Path) -> None:
    """The meta.json of the same study fitted with another penalty, copied in."""
    other = study.parent / "other"
    config = copy_study(study, other)
    text = config.read_text()
    assert "penalty = 1.0" in text
    config.write_text(text.replace("penalty = 1.0", "penalty = 3.0"))
    from closecall.suite.opening import open_study

    foreign = open_study(config).snapshot.id
    assert foreign != folder.name
    shutil.copyfile(
        other / ".closecall" / "snapshots" / foreign / "meta.json", folder / "meta.json"
    )
    shutil.rmtree(other)


def folder_replaced_by_a_file(folder: Path, study: Path) -> None:
    shutil.rmtree(folder)
    folder.write_text("not a snapshot")


def folder_replaced_by_a_broken_link(folder: Path, study: Path) -> None:
    shutil.rmtree(folder)
    folder.symlink_to(study / "nowhere")


REFUSED: dict[str, Damage] = {
    f.__name__: f
    for f in (
        truncate_array,
        flip_a_byte,
        edit_a_byte_keeping_size_and_mtime,
        swap_byte_order,
        delete_array,
        add_foreign_array,
        array_replaced_by_folder,
        pickled_array,
        meta_not_json,
        meta_empty,
        meta_not_utf8,
        meta_a_list,
        meta_missing,
        meta_wrong_types,
        meta_wrong_types_redigested,
        meta_missing_key_redigested,
        meta_no_integrity_table,
        meta_table_altered_to_match,
        meta_of_an_older_format,
        meta_names_another_id,
        meta_id_not_of_its_inputs,
        meta_of_another_snapshot,
        folder_replaced_by_a_file,
        folder_replaced_by_a_broken_link,
    )
}

NEEDLES: dict[str, str] = {  # what each refusal must say, beside the folder and the fix
    "truncate_array": "logit__pooled.npy",
    "flip_a_byte": "logit__pooled.npy",
    "edit_a_byte_keeping_size_and_mtime": "X.npy",
    "swap_byte_order": "logit__split.npy",
    "delete_array": "quad__split.npy",
    "add_foreign_array": "logit__extra.npy",
    "array_replaced_by_folder": "outcome.npy",
    "pickled_array": "Python objects",
    "meta_not_json": "not valid JSON",
    "meta_empty": "not valid JSON",
    "meta_not_utf8": "not UTF-8",
    "meta_a_list": "not an object",
    "meta_missing": "meta.json is missing",
    "meta_wrong_types": "edited",
    "meta_wrong_types_redigested": "'lenses' should be",
    "meta_missing_key_redigested": "no 'encoder'",
    "meta_no_integrity_table": "integrity",
    "meta_table_altered_to_match": "does not match the SHA-256",
    "meta_of_an_older_format": "format 2",
    "meta_names_another_id": "0123456789abcdef",
    "meta_id_not_of_its_inputs": "digests",
    "meta_of_another_snapshot": "belongs elsewhere",
    "folder_replaced_by_a_file": "not a folder",
    "folder_replaced_by_a_broken_link": "not a folder",
}


def _case(folder: Path) -> str:
    return str(np.load(folder / "case_ids.npy", allow_pickle=False)[7])


def _study_commands(config: Path, case: str) -> list[tuple[str, ...]]:
    c = ("--config", str(config))
    return [
        ("queue", *c),
        ("queue", "--json", *c),
        ("explain", case, *c),
        ("fit", *c),
        ("fit", "--json", *c),
        ("record", case, "--action", "uphold", "--note", "checked", *c),
        ("ledger", "show", *c),
    ]


def _outside_digests(before: dict[str, str]) -> dict[str, str]:
    return {k: v for k, v in before.items() if k != DIGESTS}


def _refit_restores(cli: Any, config: Path, folder: Path, original: dict[str, np.ndarray]) -> None:
    """fit --refit rebuilds the snapshot: the same id and the same arrays, byte for byte."""
    res = cli("fit", "--refit", "--json", "--config", str(config))
    assert res.code == 0, res
    out = json.loads(res.out)
    assert out["snapshot"] == folder.name and out["fitted_now"] is True
    assert folder.is_dir()
    rebuilt = _arrays(folder)
    assert sorted(rebuilt) == sorted(original)
    for name, arr in original.items():
        assert rebuilt[name].dtype == arr.dtype, name
        np.testing.assert_array_equal(rebuilt[name], arr, err_msg=name)
    again = cli("queue", "--json", "--config", str(config))
    assert again.code == 0, again


@pytest.mark.parametrize("kind", list(REFUSED))
def test_a_damaged_snapshot_is_refused_then_rebuilt(kind: str, study_dir: Path, cli: Any) -> None:
    config = study_dir / "closecall.toml"
    folder = _snapshot(study_dir)
    original = _arrays(folder)
    case = _case(folder)
    REFUSED[kind](folder, study_dir)
    before = _outside_digests(study_digests(study_dir))
    for args in _study_commands(config, case)[:-1]:
        res = cli(*args)
        assert_refused(res, f"snapshot {folder}", "closecall fit --refit", NEEDLES[kind])
    assert not (study_dir / "UNPICKLED").exists()  # the pickle was never loaded
    # the ledger is a separate record: it still reads and verifies
    assert cli(*_study_commands(config, case)[-1]).code == 0
    res = cli("ledger", "verify", "--json", "--config", str(config))
    assert res.code == 0 and json.loads(res.out)["entries"] == 2, res
    assert_unchanged(before, study_dir, allow_new=(DIGESTS,))
    outside = {k: v for k, v in before.items() if not k.startswith(".closecall/")}
    assert "ledger.sqlite#rows" in outside  # the refit below touches the cache only
    _refit_restores(cli, config, folder, original)
    assert_unchanged(outside, study_dir, allow_new=(".closecall/",))
    assert not (study_dir / "UNPICKLED").exists()


def test_a_damaged_snapshot_is_refused_by_the_engine_too(study_dir: Path) -> None:
    from closecall.core.errors import UserError
    from closecall.suite.opening import open_study

    folder = _snapshot(study_dir)
    flip_a_byte(folder, study_dir)
    with pytest.raises(UserError, match="does not match the SHA-256"):
        open_study(study_dir / "closecall.toml")


# --------------------------------------------------------------------------- digests cache


def _digests_not_json(path: Path) -> None:
    path.write_text("{garbage")


def _digests_a_list(path: Path) -> None:
    path.write_text('["a", "b"]')


def _digests_wrong_values(path: Path) -> None:
    """Every key kept, every digest replaced: a cache that lies about the data."""
    known = json.loads(path.read_text())
    assert known
    path.write_text(json.dumps({k: "f" * 64 for k in known}))


def _digests_wrong_kinds(path: Path) -> None:
    known = json.loads(path.read_text())
    path.write_text(json.dumps({k: [1, 2] for k in known}))


def _digests_a_folder(path: Path) -> None:
    path.unlink()
    path.mkdir()


DIGEST_DAMAGE = {
    f.__name__[1:]: f
    for f in (
        _digests_not_json,
        _digests_a_list,
        _digests_wrong_values,
        _digests_wrong_kinds,
        _digests_a_folder,
    )
}


@pytest.mark.parametrize("kind", list(DIGEST_DAMAGE))
def test_a_damaged_digests_cache_is_ignored(kind: str, study_dir: Path, cli: Any) -> None:
    config = study_dir / "closecall.toml"
    folder = _snapshot(study_dir)
    cli("queue", "--config", str(config))  # the copy's files are new: cache their digests
    cache = study_dir / DIGESTS
    assert cache.is_file()
    DIGEST_DAMAGE[kind](cache)
    before = study_digests(study_dir)
    case = _case(folder)
    for args in [a for a in _study_commands(config, case) if a[0] != "record"]:
        res = cli(*args)
        assert res.code == 0, (args, res)
        if args[:2] == ("fit", "--json"):
            out = json.loads(res.out)
            assert out["snapshot"] == folder.name and out["fitted_now"] is False
    assert [p.name for p in folder.parent.iterdir() if p.name[0] != "."] == [folder.name]
    assert_unchanged(_outside_digests(before), study_dir, allow_new=(DIGESTS,))
    if kind != "digests_a_folder":  # rewritten with the true digests
        known = json.loads(cache.read_text())
        for name in ("history.csv", "pending.csv"):
            path = study_dir / name
            (value,) = [v for k, v in known.items() if k.startswith(f"{path.resolve()}|")]
            assert value == hashlib.sha256(path.read_bytes()).hexdigest()
    res = cli(
        "record", case, "--action", "uphold", "--note", "checked", "--json", "-c", str(config)
    )
    assert res.code == 0, res
    assert json.loads(res.out)["snapshot_id"] == folder.name
    assert json.loads(res.out)["current_snapshot_id"] is None


# --------------------------------------------------------------------------- data edits (item 8)


def _edit_keeping_size_and_mtime(path: Path) -> None:
    """Change one digit of the file in place, then set its modification time back."""
    st = path.stat()
    data = bytearray(path.read_bytes())
    at = data.rindex(b"1")
    data[at : at + 1] = b"2"
    with path.open("r+b") as fh:
        fh.write(bytes(data))
    os.utime(path, ns=(st.st_atime_ns, st.st_mtime_ns))
    after = path.stat()
    assert (after.st_size, after.st_mtime_ns) == (st.st_size, st.st_mtime_ns)


@pytest.mark.parametrize("name", ["history.csv", "pending.csv"])
@pytest.mark.parametrize("command", ["queue", "fit", "record"])
def test_data_edited_keeping_size_and_mtime_gives_a_new_snapshot(
    name: str, command: str, study_dir: Path, cli: Any
) -> None:
    config = study_dir / "closecall.toml"
    folder = _snapshot(study_dir)
    case = _case(folder)
    assert cli("queue", "--config", str(config)).code == 0  # the cache knows the old digests
    _edit_keeping_size_and_mtime(study_dir / name)
    # the id of the edited files' content: a copy of the study without its cache, fitted afresh
    fresh = study_dir.parent / "fresh"
    copy_study(study_dir, fresh)
    shutil.rmtree(fresh / ".closecall")
    res = cli("fit", "--json", "--config", str(fresh / "closecall.toml"))
    assert res.code == 0, res
    truth = json.loads(res.out)["snapshot"]
    assert truth != folder.name
    before = study_digests(study_dir)
    c = ("--config", str(config))
    if command == "queue":
        res = cli("queue", "--json", *c)
        assert res.code == 0, res
    elif command == "fit":
        res = cli("fit", "--json", *c)
        assert res.code == 0, res
        assert json.loads(res.out)["snapshot"] == truth
    else:
        res = cli("record", case, "--action", "uphold", "--note", "after edit", "--json", *c)
        assert res.code == 0, res
        entry = json.loads(res.out)
        assert entry["snapshot_id"] == truth and entry["current_snapshot_id"] is None
    assert (study_dir / ".closecall" / "snapshots" / truth).is_dir()
    out = cli("fit", "--json", *c)
    assert json.loads(out.out)["snapshot"] == truth and not json.loads(out.out)["fitted_now"]
    outside = {k: v for k, v in before.items() if not k.startswith(".closecall/")}
    if command == "record":  # one entry more; the two earlier ones as they were
        outside = {k: v for k, v in outside.items() if "ledger" not in k}
    assert_unchanged(outside, study_dir, allow_new=(".closecall/", "ledger"))
    res = cli("ledger", "verify", "--json", *c)
    assert res.code == 0 and json.loads(res.out)["entries"] == (3 if command == "record" else 2)


def _make_the_cache_lie(study_dir: Path) -> None:
    """Edit pending.csv, then map its new stat key to its old digest in the digests cache."""
    cache = study_dir / DIGESTS
    pending = study_dir / "pending.csv"
    old = hashlib.sha256(pending.read_bytes()).hexdigest()
    _edit_keeping_size_and_mtime(pending)
    known = json.loads(cache.read_text())
    resolved = str(pending.resolve())
    st = pending.stat()
    known = {k: v for k, v in known.items() if not k.startswith(resolved + "|")}
    key = f"{resolved}|{st.st_size}|{st.st_mtime_ns}|{st.st_ino}|{st.st_ctime_ns}"
    known[key] = old
    cache.write_text(json.dumps(known))


def test_record_hashes_the_data_afresh(study_dir: Path) -> None:
    """A review recorded after an edit that the digests cache cannot see names the new id."""
    from closecall.review.decisions import record_review
    from closecall.suite.opening import open_study

    config = study_dir / "closecall.toml"
    study = open_study(config)
    case = _case(_snapshot(study_dir))
    _make_the_cache_lie(study_dir)
    assert open_study(config).snapshot.id == study.snapshot.id  # read-only: trusts the cache
    entry = record_review(study, case, "uphold", None, "edited behind the cache's back")
    assert entry.snapshot_id == study.snapshot.id
    assert entry.current_snapshot_id not in (None, study.snapshot.id)  # the content's id


def test_fit_hashes_the_data_afresh(study_dir: Path, cli: Any) -> None:
    """`fit` does not trust the digests cache: it names the snapshot by the files' content."""
    config = study_dir / "closecall.toml"
    old = _snapshot(study_dir).name
    assert cli("queue", "--config", str(config)).code == 0
    _make_the_cache_lie(study_dir)
    res = cli("queue", "--json", "--config", str(config))
    assert res.code == 0 and old in res.out  # a read-only command may trust the cache
    res = cli("fit", "--json", "--config", str(config))
    assert res.code == 0, res
    fitted = json.loads(res.out)
    assert fitted["snapshot"] != old and fitted["fitted_now"]
    res = cli("queue", "--json", "--config", str(config))  # the cache now holds the truth
    assert res.code == 0 and fitted["snapshot"] in res.out and old not in res.out


def test_a_snapshot_edited_after_opening_is_not_recorded_from(study_dir: Path) -> None:
    """The arrays are memory-mapped: bytes written after opening would reach the entry."""
    from closecall.core.errors import UserError
    from closecall.review.decisions import record_review
    from closecall.review.ledger import open_ledger
    from closecall.suite.opening import open_study

    config = study_dir / "closecall.toml"
    study = open_study(config)
    folder = _snapshot(study_dir)
    case = _case(folder)
    before = study_digests(study_dir)
    flip_a_byte(folder, study_dir)
    with pytest.raises(UserError, match=r"logit__pooled\.npy") as err:
        record_review(study, case, "uphold", None, "seen")
    assert err.value.remedy is not None and err.value.remedy.field == "refit"  # engine words
    assert "closecall fit --refit" in (error_lines(err.value)[1] or "")  # the command line's
    with open_ledger(study.config.review.ledger, readonly=True) as ledger:
        assert ledger.count() == 2
    damaged = f".closecall/snapshots/{folder.name}/logit__pooled.npy"
    kept = {k: v for k, v in before.items() if k not in (damaged, DIGESTS)}
    assert_unchanged(kept, study_dir, allow_new=(DIGESTS, damaged))


def test_a_snapshot_touched_but_unchanged_still_records(study_dir: Path) -> None:
    from closecall.review.decisions import record_review
    from closecall.suite.opening import open_study

    study = open_study(study_dir / "closecall.toml")
    folder = _snapshot(study_dir)
    os.utime(folder / "X.npy")  # a new modification time, the same bytes
    entry = record_review(study, _case(folder), "uphold", None, "seen")
    assert entry.seq == 3 and entry.snapshot_id == folder.name
