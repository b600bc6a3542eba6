"""Problems found in a configuration, as one-line messages that name the key, the value and the fix.

A :class:`Problem` is an error (the configuration cannot run) or a warning (it runs, but probably not as
meant). :func:`schema_problems` turns a pydantic ``ValidationError`` into problems: the TOML table and key
(``[cohort.variables.vol] range``), the value as written, what is allowed and, for a near miss, a
"did you mean" from :mod:`difflib`.
"""

from __future__ import annotations

import difflib
import re
import types
import typing
from collections.abc import Callable, Iterable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any

from pydantic import BaseModel, ValidationError

ERROR = "error"
WARNING = "warning"


@dataclass(frozen=True)
class Problem:
    """One thing wrong with (or doubtful in) a configuration.

    Attributes
    ----------
    key : str
        The TOML table and key, e.g. ``"[validation] folds"``.
    message : str
        One line naming the key, the value, what is allowed and how to fix it.
    severity : {"error", "warning"}
    """

    key: str
    message: str
    severity: str = ERROR

    def __str__(self) -> str:
        return self.message

    @property
    def is_error(self) -> bool:
        """True for an error (the run would fail or be wrong)."""
        return self.severity == ERROR


def did_you_mean(word: object, choices: Iterable[str]) -> str:
    """``" (did you mean 'x'?)"`` for the closest of ``choices`` to ``word``, or ``""``."""
    if not isinstance(word, str):
        return ""
    lowered = {c.lower(): c for c in choices}
    close = difflib.get_close_matches(word.lower(), list(lowered), n=1, cutoff=0.6)
    return f" (did you mean {lowered[close[0]]!r}?)" if close else ""


def show(value: Any, limit: int = 80) -> str:
    """``repr`` of a user value, shortened to ``limit`` characters."""
    text = repr(value)
    return text if len(text) <= limit else text[: limit - 3] + "..."


def problem(
    where: str, key: str | None, value: Any, allowed: str, *, choices: Iterable[str] = (), severity: str = ERROR
) -> Problem:
    """A problem ``<where> <key> = <value> is not allowed: <allowed>`` (+ did you mean)."""
    full = f"{where} {key}".strip() if key else where
    verdict = "is not allowed" if severity == ERROR else "is doubtful"
    return Problem(full, f"{full} = {show(value)} {verdict}: {allowed}{did_you_mean(value, choices)}", severity)


# --------------------------------------------------------------------------------------------------
# pydantic errors -> problems


def _unwrap(annotation: Any) -> tuple[type[BaseModel] | None, str | None]:
    """(model class, container) of a field annotation: container is "model", "dict", "list" or None."""
    origin = typing.get_origin(annotation)
    if origin in (typing.Union, types.UnionType):
        args = [a for a in typing.get_args(annotation) if a is not type(None)]
        return _unwrap(args[0]) if len(args) == 1 else (None, None)
    if origin is typing.Annotated:
        return _unwrap(typing.get_args(annotation)[0])
    if isinstance(annotation, type) and issubclass(annotation, BaseModel):
        return annotation, "model"
    if origin in (dict, Mapping) and len(typing.get_args(annotation)) == 2:
        inner, _ = _unwrap(typing.get_args(annotation)[1])
        return (inner, "dict") if inner else (None, None)
    if origin in (list, tuple, Sequence):
        params = typing.get_args(annotation)
        inner, _ = _unwrap(params[0]) if params else (None, None)
        return (inner, "list") if inner else (None, None)
    return None, None


def _split(root: type[BaseModel], loc: Sequence[Any]) -> tuple[list[Any], type[BaseModel] | None, Any]:
    """Split a pydantic error location into (table path, model of that table, key)."""
    model: type[BaseModel] | None = root
    table: list[Any] = []
    i = 0
    while i < len(loc):
        name = loc[i]
        if model is None or name not in model.model_fields:
            return table, model, name
        sub, container = _unwrap(model.model_fields[name].annotation)
        if container == "model":
            table.append(name)
            model, i = sub, i + 1
        elif container in ("dict", "list") and i + 1 < len(loc):
            table += [name, loc[i + 1]]
            model, i = sub, i + 2
        else:
            return table, model, name
    return table, model, None


def _value_at(data: Any, path: Sequence[Any]) -> Any:
    for part in path:
        try:
            data = data[part]
        except (KeyError, IndexError, TypeError):
            return None
    return data


def default_where(prefix: str) -> Callable[[list[Any]], str]:
    """TOML table names ``[prefix.a.b]``; list items as ``#n``."""

    def where(table: list[Any]) -> str:
        parts = [prefix, *(f"#{p + 1}" if isinstance(p, int) else str(p) for p in table)]
        return "[" + ".".join(p for p in parts if p) + "]"

    return where


def _allowed_text(model: type[BaseModel] | None, key: Any, err: Mapping[str, Any]) -> tuple[str, list[str]]:
    """What is allowed for the key (our words), and the choices for a did-you-mean."""
    kind = err["type"]
    if kind == "value_error":
        return re.sub(r"^Value error, ", "", err["msg"]), []
    if kind == "literal_error":
        choices = re.findall(r"'([^']*)'", str(err.get("ctx", {}).get("expected", "")))
        return "expected one of " + ", ".join(repr(c) for c in choices), choices
    field = model.model_fields.get(key) if model is not None and isinstance(key, str) else None
    if field is not None and field.description:
        return f"expected {field.description}", []
    if kind in ("model_type", "dict_type"):
        return "expected a table (key = value lines)", []
    text = err["msg"].replace("Input should be ", "")
    return "expected " + text[0].lower() + text[1:], []


def schema_problems(
    error: ValidationError, root: type[BaseModel], data: Any, where: Callable[[list[Any]], str]
) -> list[Problem]:
    """One :class:`Problem` per distinct key in a pydantic ``ValidationError`` of ``root`` on ``data``."""
    out: dict[str, Problem] = {}
    for err in error.errors(include_url=False):
        loc = list(err["loc"])
        table, model, key = _split(root, loc)
        place = where(table)
        if err["type"] == "extra_forbidden":
            keys = list(model.model_fields) if model is not None else []
            full = f"{place} {key}"
            found = Problem(
                full,
                f"{place} has unknown key {key!r} = {show(err['input'])}; allowed keys: "
                f"{', '.join(keys)}{did_you_mean(key, keys)}",
            )
        elif err["type"] == "missing":
            if key is None and table:  # a whole table is missing
                table, model, _ = _split(root, loc[:-1])
                key, place = loc[-1], where(table)
            field = model.model_fields.get(key) if model is not None else None
            hint = f" ({field.description})" if field is not None and field.description else ""
            found = Problem(f"{place} {key}", f"{place} needs {key!r}{hint}")
        else:
            allowed, choices = _allowed_text(model, key, err)
            if key is None:  # a rule across the keys of one table, or the table itself
                if err["type"] in ("model_type", "dict_type"):
                    allowed += f", got {show(_value_at(data, table))}"
                out.setdefault(place + allowed, Problem(place, f"{place}: {allowed}"))
                continue
            value = _value_at(data, [*table, key])
            item = loc[len(table) + 1] if len(loc) > len(table) + 1 else None
            if isinstance(item, int):
                allowed += f" (item {item + 1})"
            found = problem(place, key, value, allowed, choices=choices)
        out.setdefault(found.key + err["type"], found)
    return list(out.values())
