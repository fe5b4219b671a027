"""Signing keys and trusted keys on disk.

The key folder is ``~/.sheetnet/keys`` (the variable ``SHEETNET_KEYS`` or a
``folder`` argument replaces it, for tests and for shared set-ups):

- ``NAME.key``: your signing key (`sheetnet.signing` describes the text), readable by you only (0600,
  in a 0700 folder); a key file that others can read is refused.
- ``NAME.pub``: its public half, to give to whoever should trust models you sign.
- ``trusted/NAME.pub``: the public keys whose signatures `sheetnet check` reports as trusted.
"""

from __future__ import annotations

import os
import stat
from pathlib import Path

from .signing import PublicKey, SigningKey, SigningKeyError, check_key_name, key_file_text, public_key_file_text, read_key_text

KEY_FOLDER_VARIABLE = "SHEETNET_KEYS"
TRUSTED = "trusted"
LARGEST_KEY_FILE = 4096  # bytes; a key file is a few lines


def key_folder(folder: Path | None = None) -> Path:
    """``folder``, else ``$SHEETNET_KEYS``, else ``~/.sheetnet/keys``."""
    if folder is not None:
        return Path(folder)
    chosen = os.environ.get(KEY_FOLDER_VARIABLE)
    return Path(chosen) if chosen else Path.home() / ".sheetnet" / "keys"


def _write_new(path: Path, text: str, mode: int) -> None:
    """Create the file with ``mode`` from the start (never briefly readable by others); refuse one that exists."""
    try:
        descriptor = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL, mode)
    except FileExistsError:
        raise SigningKeyError(f"{path} exists already; choose another key name, or remove that file yourself if you mean to replace it") from None
    with os.fdopen(descriptor, "w", encoding="utf-8") as handle:
        handle.write(text)
    os.chmod(path, mode)  # the process's umask may have narrowed the mode


def _folder_made(folder: Path) -> Path:
    try:
        folder.mkdir(mode=0o700, parents=True, exist_ok=True)
    except OSError as error:
        raise SigningKeyError(f"the key folder {folder} cannot be made ({error.strerror}); choose another with --keys") from None
    return folder


def save_signing_key(key: SigningKey, folder: Path | None = None, trust: bool = True) -> tuple[Path, Path]:
    """Write ``NAME.key`` (0600) and ``NAME.pub`` into the key folder, and trust the key there unless ``trust`` is
    False; returns both paths. Refuses a name whose files exist."""
    home = _folder_made(key_folder(folder))
    private, public = home / f"{key.name}.key", home / f"{key.name}.pub"
    for path in (private, public):
        if path.exists():
            raise SigningKeyError(f"{path} exists already; choose another key name, or remove that file yourself if you mean to replace it")
    _write_new(private, key_file_text(key), 0o600)
    _write_new(public, public_key_file_text(key), 0o644)
    if trust:
        trust_key(key.public_key(), folder)
    return private, public


def read_key_file(path: Path) -> PublicKey | SigningKey:
    """The key in a key file; a signing key must be readable by its owner only."""
    try:
        if path.stat().st_size > LARGEST_KEY_FILE:
            raise SigningKeyError(f"{path} is too large to be a sheetnet key file; give the .pub or .key file sheetnet wrote")
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise SigningKeyError(f"there is no key file {path}; check the name, or make a key first (sheetnet keys make NAME)") from None
    except (OSError, UnicodeDecodeError) as error:
        raise SigningKeyError(f"the key file {path} cannot be read ({getattr(error, 'strerror', None) or 'not a text file'})") from None
    key = read_key_text(text, str(path))
    if isinstance(key, SigningKey) and os.name == "posix" and path.stat().st_mode & (stat.S_IRWXG | stat.S_IRWXO):
        raise SigningKeyError(f"the signing key {path} can be read by other users of this computer; run chmod 600 '{path}' and try again")
    return key


def signing_key(name_or_path: str | None, folder: Path | None = None) -> SigningKey:
    """The signing key given by a name in the key folder or by a file path; with none given, the folder's only key."""
    home = key_folder(folder)
    if name_or_path is None:
        found = sorted(home.glob("*.key")) if home.is_dir() else []
        if len(found) != 1:
            listed = f" ({', '.join(p.stem for p in found)})" if found else ""
            raise SigningKeyError(
                f"the key folder {home} holds {len(found)} signing keys{listed}; name one with --key, or make one (sheetnet keys make NAME)"
            )
        path = found[0]
    elif "/" in name_or_path or os.sep in name_or_path or name_or_path.endswith(".key"):
        path = Path(name_or_path)
    else:
        path = home / f"{check_key_name(name_or_path)}.key"
    key = read_key_file(path)
    if not isinstance(key, SigningKey):
        raise SigningKeyError(f"{path} is a public key, which cannot sign; give the .key file (sheetnet keys make NAME writes one)")
    return key


def trusted_keys(folder: Path | None = None) -> list[PublicKey]:
    """Every key in the trusted folder, by name (none when the folder does not exist)."""
    trusted = key_folder(folder) / TRUSTED
    if not trusted.is_dir():
        return []
    keys = []
    for path in sorted(trusted.glob("*.pub")):
        key = read_key_file(path)
        keys.append(PublicKey(path.stem, key.public))  # the file's name is the name you trusted it under
    return keys


def trust_key(key: PublicKey | SigningKey, folder: Path | None = None, name: str | None = None) -> tuple[PublicKey, Path | None]:
    """Add a public key to the trusted keys under ``name`` (default: the key's own name); returns the key as
    trusted and its file (None when that very key was trusted already)."""
    public = PublicKey(check_key_name(name or key.name), key.public)
    for known in trusted_keys(folder):
        if known.public == public.public:
            return known, None
        if known.name.casefold() == public.name.casefold():
            raise SigningKeyError(
                f"another key ({known.key_id}) is trusted as '{known.name}' already; give this one another name (--name) or forget that one first"
            )
    trusted = _folder_made(key_folder(folder) / TRUSTED)
    path = trusted / f"{public.name}.pub"
    _write_new(path, public_key_file_text(public), 0o644)
    return public, path


def forget_key(name: str, folder: Path | None = None) -> Path:
    """Stop trusting the key trusted as ``name``; returns the file removed."""
    for known in trusted_keys(folder):
        if known.name.casefold() == check_key_name(name).casefold():
            path = key_folder(folder) / TRUSTED / f"{known.name}.pub"
            path.unlink()
            return path
    raise SigningKeyError(f"no key is trusted as '{name}'; sheetnet keys list shows the trusted keys")
