"""Optional Ed25519 signatures over a record's or baseline's own hash.

A run record is sealed by ``record_sha256`` and a baseline by ``baseline_sha256``; anyone
who edits the file can recompute those. A signature ties the hash to a private key: with
``DAGMILL_SIGNING_KEY`` naming a file that holds an Ed25519 private key (PKCS#8 PEM, as
``dagmill keygen`` writes it), ``run``, ``check`` and ``pin`` sign what they store, and
``dagmill verify --public-key FILE`` checks every signature. Forging a record then needs
the key, which a team keeps out of the repository (a CI secret written to a file for the
job, or a path outside the checkout on a reviewer's machine).

The signed message is the 32 bytes of the hex digest (``bytes.fromhex(sha256)``), the
signature is stored base64-encoded with the sha256 of the raw 32-byte public key, so a
verifier can tell which key signed.

Ed25519 is the Edwards-curve signature scheme of Bernstein, Duif, Lange, Schwabe & Yang
(2012), "High-speed high-security signatures", J. Cryptographic Engineering 2(2), and
RFC 8032 (2017). The arithmetic is the ``cryptography`` package's (an optional extra,
``pip install 'dagmill[sign]'``); dagmill only stores and checks.
"""

from __future__ import annotations

import base64
import hashlib
import os
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

from runner.errors import InputError, Problem

if TYPE_CHECKING:  # the extra is imported only when a key is used
    from cryptography.hazmat.primitives.asymmetric.ed25519 import (
        Ed25519PrivateKey,
        Ed25519PublicKey,
    )

KEY_ENV = "DAGMILL_SIGNING_KEY"
ALGORITHM = "ed25519"
PRIVATE_FILE = "dagmill-signing-key.pem"
PUBLIC_FILE = "dagmill-signing-key.pub.pem"


def _crypto(where: str) -> Any:
    """The ``cryptography`` serialization and ed25519 modules, or a clear InputError."""
    try:
        from cryptography.hazmat.primitives import serialization
        from cryptography.hazmat.primitives.asymmetric import ed25519
    except ImportError:
        raise InputError(Problem(where, "signing needs the 'cryptography' package: "
                                 "pip install 'dagmill[sign]'")) from None
    return serialization, ed25519


def _raw_public(key: Ed25519PublicKey) -> bytes:
    serialization, _ = _crypto("public key")
    raw: bytes = key.public_bytes(serialization.Encoding.Raw, serialization.PublicFormat.Raw)
    return raw


def public_key_sha256(key: Ed25519PublicKey) -> str:
    """The sha256 of the raw 32-byte public key: how a signature names its key."""
    return hashlib.sha256(_raw_public(key)).hexdigest()


@dataclass(frozen=True)
class Signer:
    """A loaded private key and where it came from."""

    key: Ed25519PrivateKey
    source: str

    def sign(self, digest_hex: str) -> dict[str, str]:
        """The ``signature`` block for a document whose own hash is ``digest_hex``."""
        value = self.key.sign(bytes.fromhex(digest_hex))
        return {"algorithm": ALGORITHM,
                "public_key_sha256": public_key_sha256(self.key.public_key()),
                "value": base64.b64encode(value).decode("ascii")}


def _read_key_file(path: Path, what: str, where: str) -> bytes:
    try:
        return path.read_bytes()
    except FileNotFoundError:
        raise InputError(Problem(where, f"the {what} file does not exist", value=str(path))) \
            from None
    except OSError as exc:
        raise InputError(Problem(where, f"the {what} file cannot be read: {exc.strerror}",
                                 value=str(path))) from None


def load_signer(path: str | Path, where: str = KEY_ENV) -> Signer:
    """The Ed25519 private key in ``path`` (PKCS#8 PEM, unencrypted).

    Raises
    ------
    InputError
        The file is missing, unreadable or not an Ed25519 private key (naming ``where``).
    """
    serialization, ed25519 = _crypto(where)
    data = _read_key_file(Path(path), "signing key", where)
    try:
        key = serialization.load_pem_private_key(data, password=None)
    except (ValueError, TypeError) as exc:
        raise InputError(Problem(where, f"not an unencrypted PEM private key ({exc})",
                                 value=str(path))) from None
    if not isinstance(key, ed25519.Ed25519PrivateKey):
        raise InputError(Problem(where, "the signing key must be an Ed25519 key "
                                 "(`dagmill keygen DIR` makes one)", value=str(path)))
    return Signer(key, str(path))


def signer_from_environment() -> Signer | None:
    """The signer named by ``$DAGMILL_SIGNING_KEY``, or None when it is unset or empty."""
    path = os.environ.get(KEY_ENV, "")
    return load_signer(path) if path else None


def load_public_key(path: str | Path, where: str = "--public-key") -> Ed25519PublicKey:
    """The Ed25519 public key in ``path`` (SubjectPublicKeyInfo PEM)."""
    serialization, ed25519 = _crypto(where)
    data = _read_key_file(Path(path), "public key", where)
    try:
        key = serialization.load_pem_public_key(data)
    except (ValueError, TypeError) as exc:
        raise InputError(Problem(where, f"not a PEM public key ({exc})", value=str(path))) \
            from None
    if not isinstance(key, ed25519.Ed25519PublicKey):
        raise InputError(Problem(where, "the public key must be an Ed25519 key",
                                 value=str(path)))
    return key


def signature_problem(signature: Any, digest_hex: str, key: Ed25519PublicKey) -> str | None:
    """Why ``signature`` (a stored block) is not a valid signature of ``digest_hex`` by
    ``key``, or None when it is."""
    from cryptography.exceptions import InvalidSignature

    if not isinstance(signature, dict):
        return "not signed"
    if signature.get("public_key_sha256") != public_key_sha256(key):
        return "signed with another key"
    try:
        value = base64.b64decode(str(signature.get("value", "")), validate=True)
        key.verify(value, bytes.fromhex(digest_hex))
    except (InvalidSignature, ValueError):
        return "the signature does not match the content"
    return None


def generate_key_pair(folder: Path) -> tuple[Path, Path]:
    """Write a new Ed25519 key pair into ``folder``: the private key readable by its owner
    only (0600) and the public key; an existing key file is never overwritten.

    Raises
    ------
    InputError
        A key file already exists there.
    """
    serialization, ed25519 = _crypto("keygen")
    private, public = folder / PRIVATE_FILE, folder / PUBLIC_FILE
    for path in (private, public):
        if path.exists():
            raise InputError(Problem(str(path), "a key file is already there; keygen "
                                     "never overwrites a key (choose another folder)"))
    folder.mkdir(parents=True, exist_ok=True)
    key = ed25519.Ed25519PrivateKey.generate()
    pem = key.private_bytes(serialization.Encoding.PEM, serialization.PrivateFormat.PKCS8,
                            serialization.NoEncryption())
    fd = os.open(private, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o600)
    with os.fdopen(fd, "wb") as handle:
        handle.write(pem)
    public.write_bytes(key.public_key().public_bytes(
        serialization.Encoding.PEM, serialization.PublicFormat.SubjectPublicKeyInfo))
    return private, public
