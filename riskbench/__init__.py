"""riskbench: from dated surveillance records to validated dynamic risk models.

Research software, not a medical device. Not for clinical decisions without proper validation.

Stages (each reads only the one above it): ``cohort`` -> ``models`` -> ``metrics`` ->
``validation`` -> ``report`` -> ``workflow``; ``demo`` makes a synthetic cohort with a known truth.
"""

from importlib.metadata import PackageNotFoundError, version

try:
    __version__ = version("riskbench")
except PackageNotFoundError:  # running from a source tree that was not installed
    __version__ = "0.0.0+unknown"

__all__ = ["SavedModel", "__version__", "load_model"]

#: Names imported on first use (the model bundle pulls in the model and cohort stages).
_LAZY = {"load_model": "riskbench.workflow.model_bundle", "SavedModel": "riskbench.workflow.model_bundle"}


def __getattr__(name: str) -> object:
    """``riskbench.load_model`` and ``riskbench.SavedModel`` (:mod:`riskbench.workflow.model_bundle`)."""
    if name in _LAZY:
        import importlib

        return getattr(importlib.import_module(_LAZY[name]), name)
    raise AttributeError(f"module 'riskbench' has no attribute {name!r}")
