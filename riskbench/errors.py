"""The base of every error meant for the user as it stands (a configuration or data problem).

The command line shows a :class:`RiskbenchError` as one line and exits with status 2; anything else is an
internal error (status 1), shown as one line too, with the traceback only under ``--debug``. Every
user-facing error class of the stages (configuration, cohort input, model input, validation input, run
folder) derives from this class, so the command line never has to catch a bare ``ValueError`` raised deep
inside a library.
"""

from __future__ import annotations


class RiskbenchError(ValueError):
    """A configuration or data problem; the message names what is wrong, where, and what fixes it."""
