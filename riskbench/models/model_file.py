"""The JSON envelope shared by saved models: a format tag and version, the constructor parameters, the
package versions that wrote the file, and the checks made when a file is read back."""

from __future__ import annotations

import json
import platform
from importlib import metadata
from pathlib import Path
from typing import Any

from riskbench.models.risk_contract import ModelInputError

_PACKAGES = ("riskbench", "numpy", "pandas", "scipy")


def package_versions() -> dict[str, str]:
    """Python and package versions, written into every saved model for the reader to judge it."""
    out = {"python": platform.python_version()}
    for name in _PACKAGES:
        try:
            out[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            out[name] = "unknown"
    return out


def write_model_file(path: str | Path, fmt: str, version: int, model: Any, body: dict[str, Any]) -> Path:
    """Write ``body`` with the envelope (``format``, ``format_version``, ``params``, ``versions``) as JSON.

    Floats are written with ``repr`` precision, so reading them back gives the same numbers.
    """
    params = model.get_params()
    params["covariates"] = list(params["covariates"])
    doc = {"format": fmt, "format_version": version, "params": params, **body, "versions": package_versions()}
    path = Path(path)
    path.write_text(json.dumps(doc, indent=1, allow_nan=True))
    return path


def read_model_file(path: str | Path, fmt: str, version: int, what: str) -> dict[str, Any]:
    """Read a file written by :func:`write_model_file` for format ``fmt`` (``what`` names it in messages).

    Raises
    ------
    ModelInputError
        If the file cannot be read, holds another format or a newer format version.
    """
    path = Path(path)
    try:
        doc = json.loads(path.read_text())
    except (OSError, json.JSONDecodeError) as exc:
        raise ModelInputError(f"cannot read a {what} from {path}: {exc}") from exc
    if not isinstance(doc, dict) or doc.get("format") != fmt:
        raise ModelInputError(f"{path} is not a riskbench {what} file (format {fmt!r} expected).")
    if int(doc.get("format_version", 0)) > version:
        raise ModelInputError(
            f"{path} has format version {doc['format_version']}, newer than this riskbench reads "
            f"({version}); upgrade riskbench."
        )
    return doc
