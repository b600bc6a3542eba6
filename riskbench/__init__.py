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

__all__ = ["__version__"]
