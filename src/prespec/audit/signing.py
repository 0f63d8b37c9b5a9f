"""Signed lock and amend entries: Ed25519 keys, signing an entry, checking a signature.

The hash chain shows that nothing was edited after the fact, but anyone who can write the
folder can rewrite the whole chain. A signature by a key the writer cannot reach (the trial
statistician's, held apart from the folder) closes that gap for the entries that matter most,
the lock and its amendments.

An entry's ``signature`` is ``{"algorithm": "ed25519", "key": <base64 of the 32-byte public
key>, "value": <base64 of the 64-byte signature>}``. It signs
:func:`prespec.audit.log.signing_message` of the entry: a fixed context line and the RFC 8785
form of the entry without ``hash`` and ``signature``. The chain hash is then computed over the
entry including its signature, so the two can never stand in for each other.

Reference: Bernstein, Duif, Lange, Schwabe, Yang, "High-speed high-security signatures",
J. Cryptographic Engineering 2 (2012) 77-89; RFC 8032, Edwards-Curve Digital Signature
Algorithm (EdDSA) (2017).
"""

from __future__ import annotations

import base64
import binascii
import hashlib
import os
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from cryptography.exceptions import InvalidSignature
from cryptography.hazmat.primitives import serialization
from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey, Ed25519PublicKey

from prespec.audit.log import SIGNATURE_KEY, Signer, signing_message
from prespec.errors import BadInput

ALGORITHM = "ed25519"


@dataclass(frozen=True)
class KeyFiles:
    private: Path
    public: Path
    key_id: str  # sha256: of the raw public key, to name it in messages


def key_id(public: Ed25519PublicKey) -> str:
    raw = public.public_bytes(serialization.Encoding.Raw, serialization.PublicFormat.Raw)
    return "sha256:" + hashlib.sha256(raw).hexdigest()


def _pair_paths(name: str | Path) -> tuple[Path, Path]:
    path = Path(name)
    if path.suffix in (".key", ".pub"):
        path = path.with_suffix("")
    return path.with_name(path.name + ".key"), path.with_name(path.name + ".pub")


def new_key(name: str | Path) -> KeyFiles:
    """Write ``NAME.key`` (the private key, PEM PKCS#8, mode 0600) and ``NAME.pub`` (PEM).

    Existing files are never overwritten: losing a signing key would orphan its signatures.
    """
    private_path, public_path = _pair_paths(name)
    for path in (private_path, public_path):
        if path.exists() or path.is_symlink():
            raise BadInput(f"{path}: exists; choose another key name")
    if not private_path.parent.is_dir():
        raise BadInput(f"{private_path.parent}: no such folder")
    key = Ed25519PrivateKey.generate()
    private_pem = key.private_bytes(serialization.Encoding.PEM, serialization.PrivateFormat.PKCS8,
                                    serialization.NoEncryption())
    public_pem = key.public_key().public_bytes(serialization.Encoding.PEM,
                                               serialization.PublicFormat.SubjectPublicKeyInfo)
    fd = os.open(private_path, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o600)
    try:
        os.fchmod(fd, 0o600)  # whatever the umask
        os.write(fd, private_pem)
        os.fsync(fd)
    finally:
        os.close(fd)
    try:
        with open(public_path, "xb") as fh:
            fh.write(public_pem)
    except BaseException:
        private_path.unlink(missing_ok=True)
        raise
    return KeyFiles(private_path, public_path, key_id(key.public_key()))


def _read(path: Path, what: str) -> bytes:
    try:
        return path.read_bytes()
    except FileNotFoundError:
        raise BadInput(f"{path}: no such {what} file") from None
    except OSError as exc:
        raise BadInput(f"{path}: cannot read the {what} file ({exc.strerror})") from None


def load_private(path: str | Path) -> Ed25519PrivateKey:
    path = Path(path)
    try:
        key = serialization.load_pem_private_key(_read(path, "private key"), password=None)
    except (ValueError, TypeError):
        raise BadInput(f"{path}: not an unencrypted PEM private key") from None
    if not isinstance(key, Ed25519PrivateKey):
        raise BadInput(f"{path}: not an Ed25519 private key (prespec key new makes one)")
    return key


def load_public(path: str | Path) -> Ed25519PublicKey:
    path = Path(path)
    try:
        key = serialization.load_pem_public_key(_read(path, "public key"))
    except (ValueError, TypeError):
        raise BadInput(f"{path}: not a PEM public key") from None
    if not isinstance(key, Ed25519PublicKey):
        raise BadInput(f"{path}: not an Ed25519 public key")
    return key


def signer(private_path: str | Path) -> Signer:
    """A function that signs an entry's signing message with the key at ``private_path``."""
    key = load_private(private_path)
    raw = key.public_key().public_bytes(serialization.Encoding.Raw,
                                        serialization.PublicFormat.Raw)

    def sign(message: bytes) -> dict[str, str]:
        return {"algorithm": ALGORITHM, "key": base64.b64encode(raw).decode("ascii"),
                "value": base64.b64encode(key.sign(message)).decode("ascii")}

    return sign


def signature_problem(entry: dict[str, Any], expected: Ed25519PublicKey | None = None
                      ) -> str | None:
    """Why ``entry``'s signature does not hold (unsigned, another key, bad), or None.

    Without ``expected`` only an entry that carries a signature is checked, against the key
    it names; with ``expected`` the entry must be signed, by that key.
    """
    sig = entry.get(SIGNATURE_KEY)
    if sig is None:
        return "not signed" if expected is not None else None
    if not isinstance(sig, dict) or set(sig) != {"algorithm", "key", "value"} \
            or sig.get("algorithm") != ALGORITHM:
        return "a malformed signature"
    try:
        raw_key = base64.b64decode(str(sig["key"]), validate=True)
        value = base64.b64decode(str(sig["value"]), validate=True)
        named = Ed25519PublicKey.from_public_bytes(raw_key)
    except (binascii.Error, ValueError):
        return "a malformed signature"
    if expected is not None and key_id(named) != key_id(expected):
        return f"signed by another key ({key_id(named)}, not {key_id(expected)})"
    try:
        named.verify(value, signing_message(entry))
    except InvalidSignature:
        return "a signature that does not match the entry (bad signature)"
    return None
