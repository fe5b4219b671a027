"""Signed model blocks: who wrote a model, checked with Ed25519 keys (pure: no files, no home folder).

A block's checksum catches accidental damage only: anyone who edits a block can
compute it again, as the public format describes. A signature tells who wrote
the block. `sign_block` adds a ``signature`` row (format 3; `sheetnet.block`
lays it out) whose Ed25519 signature covers every other row of the block, so
the block carries it through every door that copies it. `check_signature`
says whether a block is signed by a trusted key, by an unknown key, wrongly
(changed after signing), or not at all.

Key files are texts of our own (`key_file_text`, `public_key_file_text`)::

    sheetnet signing key            (or: sheetnet public key)
    # lines starting with # are comments
    name: alice
    key id: 1f0c9a7e55d2b3c4        (first 16 hex digits of the SHA-256 of the public key)
    public: <64 hex digits: the 32-byte Ed25519 public key>
    private: <64 hex digits: the 32-byte Ed25519 private key>   (signing keys only)

`sheetnet.keyring` keeps them on disk (private keys readable by their owner only).
"""

from __future__ import annotations

import hashlib
import re
from collections import OrderedDict
from dataclasses import dataclass
from typing import Any, Literal, Sequence

from cryptography.exceptions import InvalidSignature
from cryptography.hazmat.primitives import serialization
from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey, Ed25519PublicKey

from .block import BlockError, BlockSignature, block_signature, key_id_of, with_signature
from .errors import InputError

SIGNING_KEY_HEADING = "sheetnet signing key"
PUBLIC_KEY_HEADING = "sheetnet public key"
KEY_NAME_RULE = re.compile(r"[A-Za-z0-9][A-Za-z0-9_.-]{0,39}")  # also a file name on every system


class SigningKeyError(InputError):
    """A key, a key file or a key name cannot be used."""


@dataclass(frozen=True)
class PublicKey:
    """A public key with the name its owner (or the person who trusted it) gave it."""

    name: str
    public: bytes  # 32 bytes

    @property
    def key_id(self) -> str:
        return key_id_of(self.public)


@dataclass(frozen=True, repr=False)
class SigningKey:
    """A private key that signs blocks, with its public half."""

    name: str
    private: bytes  # the 32-byte Ed25519 private key
    public: bytes

    @property
    def key_id(self) -> str:
        return key_id_of(self.public)

    def public_key(self) -> PublicKey:
        return PublicKey(self.name, self.public)

    def __repr__(self) -> str:  # never print the private key
        return f"SigningKey({self.name!r}, key id {self.key_id})"


SignatureState = Literal["trusted", "unknown", "wrong", "unsigned"]


@dataclass(frozen=True)
class SignatureCheck:
    """What `check_signature` found: the state, the signing key's id, and the trusted name of that key."""

    state: SignatureState
    key_id: str = ""
    trusted_as: str = ""  # the name the key has among the trusted keys

    def in_words(self) -> str:
        """The finding as `sheetnet check` prints it."""
        if self.state == "trusted":
            return f"signed by the trusted key '{self.trusted_as}' ({self.key_id})"
        if self.state == "unknown":
            return f"signed by a key that is not among your trusted keys ({self.key_id}); trust it (sheetnet keys trust FILE.pub) only if you know whose it is"
        if self.state == "wrong":
            return f"wrongly signed: the block was changed after the key {self.key_id} signed it; do not use it, ask its author for the signed original"
        return "unsigned: nothing shows who wrote it (the checksum catches accidental damage, not deliberate edits)"


def check_key_name(name: str) -> str:
    """The name if it is a valid key name: 1 to 40 letters, digits, '_', '.', '-', starting with a letter or digit."""
    if not isinstance(name, str) or not KEY_NAME_RULE.fullmatch(name):
        raise SigningKeyError(f"'{str(name)[:40]}' is not a key name; use 1 to 40 letters, digits, '_', '.' or '-', starting with a letter or digit")
    return name


def make_key(name: str) -> SigningKey:
    """A new random Ed25519 key named ``name``.

    >>> key = make_key("alice")
    >>> len(key.public), len(key.key_id)
    (32, 16)
    """
    private = Ed25519PrivateKey.generate()
    raw = private.private_bytes(serialization.Encoding.Raw, serialization.PrivateFormat.Raw, serialization.NoEncryption())
    return SigningKey(check_key_name(name), raw, _public_of(raw))


def _public_of(private: bytes) -> bytes:
    return Ed25519PrivateKey.from_private_bytes(private).public_key().public_bytes(serialization.Encoding.Raw, serialization.PublicFormat.Raw)


def sign_block(cells: Any, key: SigningKey) -> list[list[Any]]:
    """The block with a signature by ``key`` over every other row (an older, valid signature is replaced).
    Raises `BlockError` for a block that is damaged, of a format before 3, or changed after it was signed
    (signing it would vouch for a change nobody can account for)."""
    message, found = block_signature(cells)
    if found is not None and check_signature(cells, ()).state == "wrong":
        raise BlockError(
            f"this model was changed after the key {found.key_id} signed it, so signing it again would vouch for that change; "
            "train it again (or get the signed original) and sign that"
        )
    signature = Ed25519PrivateKey.from_private_bytes(key.private).sign(message)
    return with_signature(cells, BlockSignature(key.key_id, key.public, signature))


def check_signature(cells: Any, trusted: Sequence[PublicKey]) -> SignatureCheck:
    """Whether the block is signed, by whom, and whether the signature covers the block as it is now.
    Raises `BlockError` for a damaged block (its checksum, or the shape of its signature row)."""
    message, found = block_signature(cells)
    if found is None:
        return SignatureCheck("unsigned")
    try:
        Ed25519PublicKey.from_public_bytes(found.public_key).verify(found.signature, message)
    except (InvalidSignature, ValueError):
        return SignatureCheck("wrong", found.key_id)
    name = next((key.name for key in trusted if key.public == found.public_key), None)
    return SignatureCheck("unknown", found.key_id) if name is None else SignatureCheck("trusted", found.key_id, name)


_WORDS_CACHE: OrderedDict[str, str] = OrderedDict()  # block content -> words: a recalculated ABOUT is not verified again
_WORDS_CACHE_SIZE = 64


def signature_in_words(cells: Any) -> str:
    """The signature as ABOUT shows it, without the trusted keys (a cell cannot know whom you trust:
    `sheetnet check` does). Raises `BlockError` for a damaged block."""
    key = hashlib.sha256(repr(cells).encode("utf-8")).hexdigest()
    if key not in _WORDS_CACHE:
        _WORDS_CACHE[key] = _signature_words(check_signature(cells, ()))
        while len(_WORDS_CACHE) > _WORDS_CACHE_SIZE:
            _WORDS_CACHE.popitem(last=False)
    return _WORDS_CACHE[key]


def _signature_words(found: SignatureCheck) -> str:
    if found.state == "unsigned":
        return "none: nothing shows who wrote this model (its checksum catches accidental damage, not deliberate edits)"
    if found.state == "wrong":
        return f"WRONG: the block was changed after the key {found.key_id} signed it; do not use it"
    return f"signed by the key {found.key_id}; sheetnet check tells whether it is a key you trust"


# --- key files --------------------------------------------------------------------------------

def public_key_file_text(key: PublicKey | SigningKey) -> str:
    """The public key file's text (safe to give to anyone)."""
    return (
        f"{PUBLIC_KEY_HEADING}\n# give this file to whoever should trust models you sign\n"
        f"name: {key.name}\nkey id: {key.key_id}\npublic: {key.public.hex()}\n"
    )


def key_file_text(key: SigningKey) -> str:
    """The signing key file's text: keep it private (whoever holds it signs models in your name)."""
    return (
        f"{SIGNING_KEY_HEADING}\n# keep this file private: whoever holds it can sign models in your name\n"
        f"name: {key.name}\nkey id: {key.key_id}\npublic: {key.public.hex()}\nprivate: {key.private.hex()}\n"
    )


def read_key_text(text: str, where: str) -> PublicKey | SigningKey:
    """A key read back from a key file's text (``where`` names the file in messages)."""
    lines = [line.strip() for line in text.splitlines() if line.strip() and not line.strip().startswith("#")]
    heading = lines[0] if lines else ""
    if heading not in (SIGNING_KEY_HEADING, PUBLIC_KEY_HEADING):
        raise SigningKeyError(f"{where} is not a sheetnet key file (its first line should be '{PUBLIC_KEY_HEADING}' or '{SIGNING_KEY_HEADING}')")
    wanted = ["name", "key id", "public"] + (["private"] if heading == SIGNING_KEY_HEADING else [])
    fields: dict[str, str] = {}
    for line in lines[1:]:
        field, colon, value = line.partition(":")
        if not colon or field.strip() not in wanted or field.strip() in fields:
            raise SigningKeyError(f"{where} holds a line '{line[:40]}' a key file does not have; use the file sheetnet wrote, unchanged")
        fields[field.strip()] = value.strip()
    missing = [field for field in wanted if field not in fields]
    if missing:
        raise SigningKeyError(f"{where} lacks its {', '.join(missing)} line; use the file sheetnet wrote, unchanged")
    name = check_key_name(fields["name"])
    public = _key_bytes(fields["public"], where, "public key")
    if fields["key id"] != key_id_of(public):
        raise SigningKeyError(f"{where} names the key id {fields['key id'][:20]}, which is not the id of its public key; the file was changed")
    if heading == PUBLIC_KEY_HEADING:
        return PublicKey(name, public)
    private = _key_bytes(fields["private"], where, "private key")
    if _public_of(private) != public:
        raise SigningKeyError(f"{where}: its private and public keys do not belong together; the file was changed")
    return SigningKey(name, private, public)


def _key_bytes(text: str, where: str, what: str) -> bytes:
    if not re.fullmatch(r"[0-9a-f]{64}", text):
        raise SigningKeyError(f"{where}: its {what} is not 64 hex digits (0-9, a-f); use the file sheetnet wrote, unchanged")
    return bytes.fromhex(text)
