"""Signed entries: keys init, signing on record, verify against [team.keys], forgeries named.

The signature scheme is Ed25519 (RFC 8032); the checks below use the `cryptography` package's
own implementation as the outside reference: a signature made by a key outside closecall must
verify, and closecall's stored signatures must verify with `cryptography` directly.
"""

from __future__ import annotations

import base64
import json
import sqlite3
import stat
import subprocess
import sys
from pathlib import Path
from typing import Any

import pytest
from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey
from ledger_helpers import FakeSnapshot, FakeStudy, content, entries_digest
from test_ledger_docs import _script

from closecall.core.errors import UserError
from closecall.review.decisions import record_review, verify_ledger
from closecall.review.ledger import current_login, entry_hash, open_ledger
from closecall.review.ledger.entry import SIGNED_FIELDS, canonical_json, signed_message
from closecall.review.ledger.signing import public_text
from closecall.setup.config import StudyConfig, parse_config


@pytest.fixture
def keys_dir(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> Path:
    folder = tmp_path / "home-keys"
    monkeypatch.setenv("CLOSECALL_KEYS", str(folder))
    return folder


def _config(folder: Path, keys: dict[str, str] | None = None) -> StudyConfig:
    raw: dict[str, Any] = {
        "data": {"history": "h.csv", "id": "id", "outcome": "y", "favourable": 1, "group": "g"},
        "review": {"ledger": "ledger.sqlite"},
    }
    if keys is not None:
        raw["team"] = {"keys": keys}
    return parse_config(raw, folder / "closecall.toml")


def _my_key(cli: Any) -> str:
    r = cli("keys", "init", "--json")
    assert r.code == 0, r.err
    return str(json.loads(r.out)["public_key"])


def _forge(path: Path, reviewer: str, key: Ed25519PrivateKey | None, fmt: int = 2) -> int:
    """Append, by hand, an entry in ``reviewer``'s name with a correct hash (what any group
    member with write access to the file can do, following docs/ledger.md)."""
    conn = sqlite3.connect(path, isolation_level=None)
    seq, prev = conn.execute("SELECT seq, hash FROM entries ORDER BY seq DESC LIMIT 1").fetchone()
    fields: dict[str, Any] = {
        "seq": seq + 1,
        "format": fmt,
        "time": "2026-12-03T10:00:00.000000Z",
        "reviewer": reviewer,
        "case_id": "A-2",
        "snapshot_id": "feedc0ffee000001",
        "current_snapshot_id": None,
        "reference_model": "pooled",
        "reference_decision": "favourable",
        "reference_margin": 0.125,
        "decisions": {"pooled": {"decision": "favourable", "margin": 0.125}},
        "action": "override-unfavourable",
        "reason": "other",
        "note": "forged",
        "supersedes": None,
        "prev_hash": prev,
    }
    if fmt != 1:
        fields["signature"] = (
            base64.b64encode(key.sign(signed_message(fields))).decode() if key else None
        )
    fields["hash"] = entry_hash(fields)
    row = {**fields, "decisions": canonical_json(fields["decisions"]).decode()}
    cols = list(row)
    conn.execute(
        f"INSERT INTO entries ({', '.join(cols)}) VALUES ({', '.join('?' for _ in cols)})",
        [row[c] for c in cols],
    )
    conn.close()
    return int(fields["seq"])


def _record(config: StudyConfig, case: str = "A-1") -> Any:
    return record_review(FakeStudy(config, FakeSnapshot()), case, "uphold", None, "ok")


class TestKeys:
    def test_keys_init_writes_a_private_key_only_its_owner_reads(
        self, keys_dir: Path, cli: Any
    ) -> None:
        public = _my_key(cli)
        private = keys_dir / "ed25519"
        assert stat.S_IMODE(private.stat().st_mode) == 0o600
        assert stat.S_IMODE(keys_dir.stat().st_mode) == 0o700
        assert len(base64.b64decode(public)) == 32
        r = cli("keys", "show")
        assert r.code == 0 and f'{current_login()} = "{public}"' in r.out

    def test_keys_init_never_overwrites(self, keys_dir: Path, cli: Any) -> None:
        _my_key(cli)
        before = (keys_dir / "ed25519").read_bytes()
        r = cli("keys", "init")
        assert r.code == 2 and "already exists" in r.err
        assert (keys_dir / "ed25519").read_bytes() == before

    def test_a_key_readable_by_others_is_refused(
        self, keys_dir: Path, cli: Any, tmp_path: Path
    ) -> None:
        _my_key(cli)
        (keys_dir / "ed25519").chmod(0o644)
        with pytest.raises(UserError, match="readable by others"):
            _record(_config(tmp_path))

    def test_a_malformed_registered_key_is_a_config_error(self, tmp_path: Path) -> None:
        with pytest.raises(UserError, match=r"\[team.keys\] alice"):
            _config(tmp_path, {"alice": "not-a-key"})


class TestSigning:
    def test_a_recorded_entry_carries_a_signature_the_reference_library_accepts(
        self, keys_dir: Path, cli: Any, tmp_path: Path
    ) -> None:
        public = _my_key(cli)
        config = _config(tmp_path, {current_login(): public})
        entry = _record(config)
        assert entry.format == 2 and entry.signature is not None
        # the cryptography package's own Ed25519 verify (RFC 8032) as the outside check
        from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PublicKey

        key = Ed25519PublicKey.from_public_bytes(base64.b64decode(public))
        message = canonical_json({k: getattr(entry, k) for k in SIGNED_FIELDS})
        key.verify(base64.b64decode(entry.signature), message)  # raises if wrong
        result = verify_ledger(config)
        assert result.ok and result.signed == 1 and result.keys_checked

    def test_an_unregistered_login_cannot_record_in_a_signing_study(
        self, keys_dir: Path, cli: Any, tmp_path: Path
    ) -> None:
        _my_key(cli)
        other = public_text(Ed25519PrivateKey.generate().public_key())
        config = _config(tmp_path, {"someone-else": other})
        with pytest.raises(UserError, match="no public key registered"):
            _record(config)
        assert entries_digest(config.review.ledger) == "no-file"

    def test_a_key_that_is_not_the_registered_one_cannot_record(
        self, keys_dir: Path, cli: Any, tmp_path: Path
    ) -> None:
        _my_key(cli)
        other = public_text(Ed25519PrivateKey.generate().public_key())
        config = _config(tmp_path, {current_login(): other})
        with pytest.raises(UserError, match="not the one registered"):
            _record(config)

    def test_no_private_key_in_a_signing_study_records_nothing(
        self, keys_dir: Path, tmp_path: Path
    ) -> None:
        other = public_text(Ed25519PrivateKey.generate().public_key())
        config = _config(tmp_path, {current_login(): other})
        with pytest.raises(UserError, match="no signing key"):
            _record(config)


class TestForgery:
    """A group member appends a correctly hashed entry in another reviewer's name."""

    @pytest.fixture
    def signed_study(self, keys_dir: Path, cli: Any, tmp_path: Path) -> tuple[StudyConfig, str]:
        public = _my_key(cli)
        self.victim = Ed25519PrivateKey.generate()
        keys = {current_login(): public, "bob": public_text(self.victim.public_key())}
        config = _config(tmp_path, keys)
        _record(config, "A-1")
        _record(config, "A-3")
        return config, public

    def test_signed_with_the_forgers_own_key(
        self, signed_study: tuple[StudyConfig, str], cli: Any
    ) -> None:
        config, _ = signed_study
        seq = _forge(config.review.ledger, "bob", Ed25519PrivateKey.generate())
        result = verify_ledger(config)
        assert not result.ok
        kinds = [(p.kind, p.seq) for p in result.problems]
        assert ("forged-signature", seq) in kinds
        r = cli("ledger", "verify", "--config", str(_write_config(config.root, config.team.keys)))
        assert r.code == 1 and f"entry {seq} claims reviewer bob" in r.out

    def test_left_unsigned(self, signed_study: tuple[StudyConfig, str]) -> None:
        config, _ = signed_study
        seq = _forge(config.review.ledger, "bob", None)
        result = verify_ledger(config)
        assert not result.ok and ("unsigned", seq) in [(p.kind, p.seq) for p in result.problems]

    def test_written_as_an_old_format_entry(self, signed_study: tuple[StudyConfig, str]) -> None:
        config, _ = signed_study
        seq = _forge(config.review.ledger, "bob", None, fmt=1)
        result = verify_ledger(config)
        assert not result.ok and ("unsigned", seq) in [(p.kind, p.seq) for p in result.problems]

    def test_in_the_name_of_a_login_with_no_registered_key(
        self, signed_study: tuple[StudyConfig, str]
    ) -> None:
        config, _ = signed_study
        seq = _forge(config.review.ledger, "carol", Ed25519PrivateKey.generate())
        result = verify_ledger(config)
        kinds = [(p.kind, p.seq) for p in result.problems]
        assert not result.ok and ("unregistered", seq) in kinds

    def test_the_real_key_verifies(self, signed_study: tuple[StudyConfig, str]) -> None:
        config, _ = signed_study  # the check that makes the three above meaningful
        _forge(config.review.ledger, "bob", self.victim)
        result = verify_ledger(config)
        assert result.ok and result.signed == 3

    def test_the_documented_verifier_checks_signatures(
        self, signed_study: tuple[StudyConfig, str]
    ) -> None:
        config, _ = signed_study
        path = config.review.ledger
        args = [f"{k}={v}" for k, v in config.team.keys.items()]

        def run() -> subprocess.CompletedProcess[str]:
            return subprocess.run(
                [sys.executable, "-c", _script(), str(path), *args],
                capture_output=True,
                text=True,
                timeout=60,
            )

        ok = run()
        assert ok.returncode == 0, ok.stderr
        seq = _forge(path, "bob", Ed25519PrivateKey.generate())
        bad = run()
        assert bad.returncode == 1 and f"entry {seq}: signature is not bob's" in bad.stderr


def test_older_unsigned_entries_stay_valid_and_are_listed(
    keys_dir: Path, cli: Any, tmp_path: Path
) -> None:
    config = _config(tmp_path)
    with open_ledger(config.review.ledger) as ledger:
        ledger.append(content("before keys"))  # format 2, unsigned
    _forge(config.review.ledger, "tester", None, fmt=1)  # an entry from before signatures
    public = _my_key(cli)
    signing = _config(tmp_path, {current_login(): public})
    _record(signing, "A-3")
    result = verify_ledger(signing)
    assert result.ok and result.unsigned == (1, 2) and result.signed == 1
    r = cli("ledger", "verify", "--config", str(_write_config(tmp_path, {current_login(): public})))
    assert r.code == 0 and "2 unsigned (older entries): 1, 2" in r.out


def _write_config(folder: Path, keys: dict[str, str]) -> Path:
    path = folder / "closecall.toml"
    lines = "".join(f'"{login}" = "{public}"\n' for login, public in keys.items())
    path.write_text(
        '[data]\nhistory = "h.csv"\nid = "id"\noutcome = "y"\nfavourable = 1\ngroup = "g"\n'
        f'[review]\nledger = "ledger.sqlite"\n[team.keys]\n{lines}'
    )
    return path
