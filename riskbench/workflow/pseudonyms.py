"""Run pseudonyms: the only patient keys that reach a run folder.

The cohort stage replaces every source identifier by ``R00001``-style keys before writing anything. The
order in which the keys are handed out follows a keyed hash, HMAC-SHA-256 (RFC 2104 with SHA-256), of the
source id under a secret key. The key lives in a file outside the run folder (by default
``<configuration stem>.key`` beside the configuration, created on first use with owner-only permissions);
it is never written into the run folder or the manifest. Without the key, a list of candidate ids and
everything in the run folder (seed, configuration, tables) do not give the order back; with the same key a
rerun gives the same pseudonyms.
"""

from __future__ import annotations

import hashlib
import hmac
import os
import secrets
import stat
from collections.abc import Iterable
from pathlib import Path
from typing import Any

import pandas as pd

from riskbench.errors import RiskbenchError

#: Bytes of a new key (256 bits, the output size of SHA-256; RFC 2104 section 3 recommends at least that).
KEY_BYTES = 32
#: The shortest key accepted from a file the user names (128 bits).
MIN_KEY_BYTES = 16


class PseudonymKeyError(RiskbenchError):
    """The pseudonym key file cannot be used (permissions, place, content)."""


def hmac_sha256(key: bytes, message: bytes) -> bytes:
    """HMAC-SHA-256 of ``message`` under ``key`` (RFC 2104 with SHA-256; test vectors in RFC 4231)."""
    return hmac.new(key, message, hashlib.sha256).digest()


def pseudonym_map(ids: Iterable, key: bytes) -> dict:
    """Map each distinct source id to a run pseudonym ``R00001``, ``R00002``, ... (stable given ``key``).

    Parameters
    ----------
    ids
        Source identifiers (any values; compared as text, missing values ignored).
    key
        The secret pseudonym key (see :func:`load_or_create_key`). Pseudonyms are handed out in the order of
        ``HMAC-SHA-256(key, id)``.
    """
    if not isinstance(key, (bytes, bytearray)) or len(key) < MIN_KEY_BYTES:
        raise PseudonymKeyError(f"the pseudonym key must be at least {MIN_KEY_BYTES} bytes (got {type(key).__name__})")
    distinct = sorted({str(i) for i in ids if not pd.isna(i)}, key=lambda s: hmac_sha256(bytes(key), s.encode("utf-8")))
    width = max(5, len(str(len(distinct))))
    return {s: f"R{n:0{width}d}" for n, s in enumerate(distinct, start=1)}


def replace_ids(table: pd.DataFrame, mapping: dict, column: str = "patient_id") -> pd.DataFrame:
    """A copy of ``table`` whose ``column`` holds pseudonyms (missing ids stay missing)."""
    if column not in table.columns:
        return table.copy()
    out = table.copy()
    out[column] = [mapping.get(str(v)) if not pd.isna(v) else None for v in table[column]]
    return out


def key_file_of(config: Any) -> Path:
    """Where the pseudonym key of ``config`` lives.

    ``config.privacy.key_file`` when the configuration has it; otherwise ``<configuration stem>.key`` beside
    the configuration file.
    """
    privacy = getattr(config, "privacy", None)
    key_file = getattr(privacy, "key_file", None)
    if key_file:
        return Path(key_file)
    path = getattr(config, "path", None)
    if path is None:
        raise PseudonymKeyError(
            "the configuration has no file and names no [privacy] key_file: the pseudonym key needs a place "
            "outside the run folder (set [privacy] key_file or load the configuration from a file)"
        )
    return Path(path).with_suffix(".key")


def run_folders(run_dir: str | Path) -> list[Path]:
    """The run folder and, for the runner's staging folder ``.<name>.partial``, the folders it becomes."""
    run_dir = Path(run_dir).resolve()
    folders = [run_dir]
    name = run_dir.name
    if name.startswith(".") and name.endswith(".partial"):
        final = name[1 : -len(".partial")]
        folders += [run_dir.parent / final, run_dir.parent / f"{final}.failed"]
    return folders


def _inside(path: Path, folder: Path) -> bool:
    return path == folder or folder in path.parents


def load_or_create_key(path: str | Path, *, run_dir: str | Path | None = None) -> bytes:
    """Read the pseudonym key at ``path``, creating it (owner-only, 0600) when it does not exist.

    A new key is :data:`KEY_BYTES` random bytes from :mod:`secrets`, written as hexadecimal text. An
    existing file must hold at least :data:`MIN_KEY_BYTES` bytes as hexadecimal text and be readable by its
    owner only.

    Raises
    ------
    PseudonymKeyError
        If the file lies inside the run folder (``run_dir``, or the folder a staging folder becomes), is
        group- or world-accessible, cannot be created, or does not hold a hexadecimal key.
    """
    path = Path(path).expanduser().resolve()
    if run_dir is not None and any(_inside(path, folder) for folder in run_folders(run_dir)):
        raise PseudonymKeyError(
            f"{path}: the pseudonym key file lies inside the run folder, where it would travel with the "
            "results; set [privacy] key_file to a place outside the run folder"
        )
    if not path.exists():
        try:
            fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o600)
        except FileExistsError:  # created meanwhile by another run: read that one
            return load_or_create_key(path, run_dir=run_dir)
        except OSError as exc:
            raise PseudonymKeyError(
                f"{path}: cannot create the pseudonym key file ({exc.strerror}); set [privacy] key_file to "
                "a writable place outside the run folder"
            ) from None
        with os.fdopen(fd, "w", encoding="ascii") as fh:
            fh.write(secrets.token_hex(KEY_BYTES) + "\n")
    if not path.is_file():
        raise PseudonymKeyError(f"{path}: the pseudonym key file is not a regular file")
    mode = stat.S_IMODE(path.stat().st_mode)
    if mode & 0o077:
        raise PseudonymKeyError(
            f"{path}: the pseudonym key file is accessible to others (mode {mode:04o}); "
            f"make it owner-only with: chmod 600 {path}"
        )
    with open(path, "rb") as fh:
        text = fh.read(4096).decode("ascii", errors="replace").strip()  # a key is one short line
    try:
        key = bytes.fromhex(text)
    except ValueError:
        key = b""
    if len(key) < MIN_KEY_BYTES:
        raise PseudonymKeyError(
            f"{path}: not a pseudonym key (expected at least {2 * MIN_KEY_BYTES} hexadecimal digits on one "
            "line); remove the file to have a new key made, or name another with [privacy] key_file"
        )
    return key


def config_key(config: Any, run_dir: str | Path | None = None) -> bytes:
    """The pseudonym key of ``config`` (see :func:`key_file_of`, :func:`load_or_create_key`)."""
    return load_or_create_key(key_file_of(config), run_dir=run_dir)
