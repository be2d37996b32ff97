"""Authors' Ed25519 keys: make a key pair, sign an entry, check a signature.

Each reviewer keeps a private key readable by their own account only (mode 0600 under
``~/.config/closecall/keys/``, or the folder ``CLOSECALL_KEYS`` names); the study owner
registers the public keys in the study config under ``[team.keys]`` (login = base64 of the 32
raw public-key bytes). A recorded entry carries its author's signature over
:func:`~closecall.review.ledger.entry.signed_message`; ``closecall ledger verify`` checks it
against the key registered for the entry's reviewer.

References
----------
RFC 8032, Edwards-Curve Digital Signature Algorithm (EdDSA), section 5.1 (Ed25519).
"""

from __future__ import annotations

import base64
import binascii
import os
import pwd
from collections.abc import Callable
from pathlib import Path

from cryptography.exceptions import InvalidSignature
from cryptography.hazmat.primitives import serialization
from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey, Ed25519PublicKey

from closecall.core.errors import UserError

#: The private key's file name inside the key folder; the public key sits beside it + ".pub".
KEY_NAME = "ed25519"
#: Environment variable naming another key folder (tests, a key on removable media).
KEYS_ENV = "CLOSECALL_KEYS"


def key_folder() -> Path:
    """Where this account's key lives: ``$CLOSECALL_KEYS`` or ``~/.config/closecall/keys``.

    The home folder is the account's own (from the password database), not ``$HOME``, so a
    command run with another account's environment still finds its own key.
    """
    env = os.environ.get(KEYS_ENV)
    if env:
        return Path(env)
    try:
        home = Path(pwd.getpwuid(os.geteuid()).pw_dir)
    except KeyError:
        home = Path.home()
    return home / ".config" / "closecall" / "keys"


def public_text(key: Ed25519PublicKey) -> str:
    """Base64 of the 32 raw public-key bytes (what goes into ``[team.keys]``)."""
    raw = key.public_bytes(serialization.Encoding.Raw, serialization.PublicFormat.Raw)
    return base64.b64encode(raw).decode("ascii")


def parse_public(text: str) -> Ed25519PublicKey | None:
    """The public key written as base64 of 32 bytes; None when it is not one."""
    try:
        raw = base64.b64decode(text.strip(), validate=True)
    except (binascii.Error, ValueError):
        return None
    if len(raw) != 32:
        return None
    return Ed25519PublicKey.from_public_bytes(raw)


def create_key(folder: Path | None = None) -> tuple[Path, str]:
    """Make a new key pair in ``folder`` (private 0600, folder 0700); (private path, public).

    Raises
    ------
    UserError
        A key is already there (never overwritten: entries signed with it would become
        unverifiable), or the folder cannot be written.
    """
    folder = folder or key_folder()
    private = folder / KEY_NAME
    if private.exists():
        raise UserError(
            f"{private}: a key already exists for this account",
            "keep it (entries you signed need it registered); 'closecall keys show' prints "
            "its public key",
        )
    key = Ed25519PrivateKey.generate()
    pem = key.private_bytes(
        serialization.Encoding.PEM,
        serialization.PrivateFormat.PKCS8,
        serialization.NoEncryption(),
    )
    public = public_text(key.public_key())
    try:
        folder.mkdir(parents=True, exist_ok=True, mode=0o700)
        os.chmod(folder, 0o700)
        fd = os.open(private, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o600)
        try:
            os.fchmod(fd, 0o600)  # whatever the umask
            os.write(fd, pem)
            os.fsync(fd)
        finally:
            os.close(fd)
        (folder / f"{KEY_NAME}.pub").write_text(public + "\n", encoding="ascii")
    except OSError as exc:
        raise UserError(
            f"{folder}: cannot write the key ({exc.strerror})",
            f"make {folder} writable by your account, or set {KEYS_ENV} to a folder that is",
        ) from None
    return private, public


def load_private(folder: Path | None = None) -> Ed25519PrivateKey | None:
    """This account's private key, or None when it has none.

    Raises
    ------
    UserError
        The key file is readable by others than its owner, or is not an Ed25519 key.
    """
    private = (folder or key_folder()) / KEY_NAME
    try:
        st = private.stat()
        data = private.read_bytes()
    except FileNotFoundError:
        return None
    except OSError as exc:
        raise UserError(
            f"{private}: cannot read your signing key ({exc.strerror})",
            f"check its owner and mode: chmod 600 {private}",
        ) from None
    if st.st_mode & 0o077:
        raise UserError(
            f"{private}: your signing key is readable by others (mode {st.st_mode & 0o777:o}); "
            "anyone who can read it can sign in your name",
            f"chmod 600 {private}, then make a new key ('closecall keys init' after moving "
            "the old one away) if others may have copied it",
        )
    try:
        key = serialization.load_pem_private_key(data, password=None)
    except (ValueError, TypeError):
        key = None
    if not isinstance(key, Ed25519PrivateKey):
        raise UserError(
            f"{private}: not an Ed25519 private key",
            "move it away and run 'closecall keys init'",
        )
    return key


def signer(key: Ed25519PrivateKey) -> Callable[[bytes], str]:
    """A function that signs bytes and returns the base64 signature (64 bytes)."""

    def sign(message: bytes) -> str:
        return base64.b64encode(key.sign(message)).decode("ascii")

    return sign


def signature_valid(public: Ed25519PublicKey, message: bytes, signature: str) -> bool:
    """True when ``signature`` (base64) is ``public``'s signature of ``message``."""
    try:
        raw = base64.b64decode(signature, validate=True)
        public.verify(raw, message)
    except (binascii.Error, ValueError, InvalidSignature):
        return False
    return True
