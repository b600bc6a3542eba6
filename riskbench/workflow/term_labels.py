"""A model term in words, for tables and figures: the covariate's label, and for a landmark interaction what it
multiplies."""

from __future__ import annotations

from collections.abc import Callable

__all__ = ["term_label"]


def term_label(term: str, label_of: Callable[[str], str] | None) -> str:
    """A coefficient term in words: the covariate's label (with unit), and for a landmark interaction
    ``<covariate>:s`` / ``:s2`` what it multiplies (s = landmark scaled to the last landmark)."""
    base, _, power = str(term).partition(":")
    text = label_of(base) if label_of is not None else base
    if power == "s":
        return f"{text} × landmark (s)"
    if power == "s2":
        return f"{text} × landmark squared (s²)"
    return text
