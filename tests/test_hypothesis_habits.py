"""Property tests skip an example with ``assume()``, never with an early ``return``: hypothesis counts an assumed-away
example as rejected (and warns when most are), while a ``return`` passes it silently as if it had been checked."""

from __future__ import annotations

import ast
from pathlib import Path

TESTS = Path(__file__).resolve().parent


def early_returns(source: str) -> list[str]:
    """``name:line`` of each ``if ...: return`` (a body of a bare return only) directly inside a ``@given`` test."""
    found = []
    for node in ast.walk(ast.parse(source)):
        if not isinstance(node, ast.FunctionDef) or not any("given" in ast.unparse(d) for d in node.decorator_list):
            continue
        for inner in ast.walk(node):
            if (
                isinstance(inner, ast.If)
                and len(inner.body) == 1
                and isinstance(inner.body[0], ast.Return)
                and inner.body[0].value is None
            ):
                found.append(f"{node.name}:{inner.lineno}")
    return found


def test_property_tests_use_assume() -> None:
    offenders = {p.relative_to(TESTS).as_posix(): early_returns(p.read_text()) for p in sorted(TESTS.rglob("*.py"))}
    offenders = {k: v for k, v in offenders.items() if v}
    assert not offenders, f"replace `if ...: return` by `assume(not ...)` in: {offenders}"


def test_the_check_sees_an_early_return() -> None:
    source = (
        "@given(st.integers())\ndef test_a(x):\n    if x < 0:\n        return\n    assert x >= 0\n"
        "def test_b(x):\n    if x:\n        return\n"
    )
    assert early_returns(source) == ["test_a:3"]
