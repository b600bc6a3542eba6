"""Save and load fitted forests with joblib, guarded by a SHA-256 digest recorded beside the file.

A joblib/pickle file runs code when loaded, so a forest is only loaded if its bytes match the digest written
when it was saved: ``<path>`` holds the model and ``<path>.sha256`` one line ``<hex digest>  <file name>``
(the format of ``sha256sum``, so the file can also be checked from a shell). A missing or mismatching digest
is refused with :class:`ModelIntegrityError` before anything is unpickled.
"""

from __future__ import annotations

import hashlib
from pathlib import Path

import joblib

from riskbench.models.forest import SurvivalForest
from riskbench.models.risk_contract import ModelInputError

__all__ = ["ModelIntegrityError", "digest_path", "file_sha256", "load_forest", "save_forest"]

_BLOCK = 1 << 20


class ModelIntegrityError(ModelInputError):
    """A saved model's bytes do not match the SHA-256 recorded beside it (or the record is missing)."""


def digest_path(path: str | Path) -> Path:
    """Where the SHA-256 of the model file at ``path`` is recorded: ``<path>.sha256``."""
    path = Path(path)
    return path.with_name(path.name + ".sha256")


def file_sha256(path: str | Path) -> str:
    """Hex SHA-256 of a file's bytes."""
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        for block in iter(lambda: handle.read(_BLOCK), b""):
            digest.update(block)
    return digest.hexdigest()


def save_forest(model: SurvivalForest, path: str | Path, *, compress: int = 3) -> str:
    """Write a fitted forest to ``path`` (joblib) and its SHA-256 to ``<path>.sha256``; return the digest."""
    if not isinstance(model, SurvivalForest) or not hasattr(model, "forest_"):
        raise ModelInputError("save_forest expects a fitted SurvivalForest; call fit(stack) first")
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    joblib.dump(model, path, compress=compress)
    digest = file_sha256(path)
    digest_path(path).write_text(f"{digest}  {path.name}\n", encoding="utf-8")
    return digest


def load_forest(path: str | Path) -> SurvivalForest:
    """Load a forest written by :func:`save_forest`, after checking its SHA-256.

    Raises
    ------
    ModelIntegrityError
        If ``<path>.sha256`` is missing or unreadable, or the file's digest differs from it.
    """
    path = Path(path)
    if not path.is_file():
        raise ModelInputError(f"no saved forest at {path}")
    record = digest_path(path)
    if not record.is_file():
        raise ModelIntegrityError(
            f"{record} is missing, so {path} cannot be verified; refusing to load it. "
            "Re-save the model with save_forest from a trusted copy."
        )
    fields = record.read_text(encoding="utf-8").split()
    expected = fields[0].lower() if fields else ""
    actual = file_sha256(path)
    if expected != actual:
        raise ModelIntegrityError(
            f"{path} has SHA-256 {actual}, but {record} records {expected or '(nothing)'}: the file was "
            "changed or replaced after saving; refusing to load it. Re-save the model from a trusted copy."
        )
    model = joblib.load(path)
    if not isinstance(model, SurvivalForest):
        raise ModelIntegrityError(f"{path} holds a {type(model).__name__}, not a SurvivalForest")
    return model
