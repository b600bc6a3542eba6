"""User text inside Markdown: shown as plain words, never as markup, links, HTML or a broken table."""

from __future__ import annotations

import re
from collections.abc import Sequence

__all__ = ["md_table", "md_text"]

_SPECIAL = re.compile(r"([\\`*_{}\[\]()#+\-.!|~>])")


def md_text(value: object) -> str:
    """``value`` as literal Markdown text: HTML characters as entities, Markdown characters escaped, line
    breaks and control characters as spaces (so a value cannot end a table row or start a heading)."""
    text = "".join(" " if (ord(ch) < 32 or ord(ch) == 127) else ch for ch in str(value))
    text = text.replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")
    return _SPECIAL.sub(r"\\\1", text)


def md_table(header: Sequence[str], rows: Sequence[Sequence[object]]) -> list[str]:
    """A Markdown pipe table; cells are written as given (escape user text with :func:`md_text` first)."""
    lines = ["| " + " | ".join(header) + " |", "|" + "|".join("---" for _ in header) + "|"]
    lines += ["| " + " | ".join(str(c) for c in row) + " |" for row in rows]
    return lines
