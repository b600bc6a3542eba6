"""One error hierarchy: every error class of ``riskbench`` a user can trigger derives from
:class:`riskbench.errors.RiskbenchError`, and the command line treats only that base (and ``OSError``, a file it
cannot use) as the user's problem; any other exception is an internal error with exit status 1.

The classes are found twice: by importing every module and collecting the exception classes defined there, and
by reading every module's source with :mod:`ast` (so a class defined inside a function is not missed).
"""

from __future__ import annotations

import ast
import importlib
import inspect
import pkgutil
from pathlib import Path

import pytest

import riskbench
from riskbench.errors import RiskbenchError
from riskbench.workflow.cli import describe_failure

ROOT = Path(riskbench.__file__).resolve().parent

# Exception classes that never reach a user as a configuration or data problem, each with the reason.
INTERNAL = {
    # Control flow inside the Cox engine's Newton loop: caught a few lines below where it is raised.
    "riskbench.models.cox_engine._BreakDown",
    # Ctrl-C / SIGTERM during a run (a KeyboardInterrupt): exit status 130 / 143, not an error of the input.
    "riskbench.workflow.runner.RunInterrupted",
    # A stage notebook failed inside riskbench (exit status 1 with the notebook's traceback under --debug); its
    # user-facing subclass StageInputError derives from RiskbenchError.
    "riskbench.workflow.runner.StageFailed",
}


def _imported_exception_classes() -> dict[str, type[BaseException]]:
    found: dict[str, type[BaseException]] = {}
    for info in pkgutil.walk_packages(riskbench.__path__, "riskbench."):
        if info.name.endswith("__main__"):  # running it starts the command line
            continue
        module = importlib.import_module(info.name)
        for obj in vars(module).values():
            if (
                inspect.isclass(obj)
                and issubclass(obj, BaseException)
                and not issubclass(obj, Warning)
                and obj.__module__ == info.name
            ):
                found[f"{obj.__module__}.{obj.__qualname__}"] = obj
    return found


CLASSES = _imported_exception_classes()


def _class_definitions() -> dict[str, set[str]]:
    """Module -> names of every class defined in its source (at any depth) that has at least one base."""
    out: dict[str, set[str]] = {}
    for path in sorted(ROOT.rglob("*.py")):
        parts = path.relative_to(ROOT.parent).with_suffix("").parts
        module = ".".join(parts[:-1] if parts[-1] == "__init__" else parts)
        tree = ast.parse(path.read_text(), filename=str(path))
        out[module] = {node.name for node in ast.walk(tree) if isinstance(node, ast.ClassDef) and node.bases}
    return out


def test_the_walk_finds_the_stage_errors() -> None:
    """The search is not empty-handed: the base and one error of each stage are among the classes found."""
    expected = {
        "riskbench.errors.RiskbenchError",
        "riskbench.workflow.config.ConfigError",
        "riskbench.cohort.errors.CohortInputError",
        "riskbench.models.risk_contract.ModelInputError",
        "riskbench.metrics.inputs.MetricInputError",
        "riskbench.validation.errors.ValidationInputError",
    }
    assert expected <= set(CLASSES)


def test_every_error_class_derives_from_the_package_base() -> None:
    outside = sorted(
        name for name, cls in CLASSES.items() if not issubclass(cls, RiskbenchError) and name not in INTERNAL
    )
    assert not outside, (
        f"{outside} do not derive from riskbench.errors.RiskbenchError; derive them from it (or "
        "from a stage's error class), or list them in INTERNAL with the reason"
    )


def test_internal_list_is_current() -> None:
    stale = sorted(INTERNAL - set(CLASSES))
    assert not stale, f"INTERNAL names classes that no longer exist: {stale}"
    assert not [n for n in INTERNAL if issubclass(CLASSES[n], RiskbenchError)]


def test_no_exception_class_hides_inside_a_function() -> None:
    """Every class with an exception-like name defined anywhere in the source is one the import walk found
    (a class defined inside a function would escape the hierarchy check)."""
    known = {name.rsplit(".", 1)[1] for name in CLASSES}
    hidden = sorted(
        f"{module}.{cls}"
        for module, names in _class_definitions().items()
        for cls in names
        if cls.endswith(("Error", "Exception", "Failed", "Interrupted")) and cls not in known
    )
    assert not hidden, f"exception classes not defined at module level: {hidden}"


def _source_text() -> str:
    return "\n".join(p.read_text() for p in sorted(ROOT.rglob("*.py")))


def test_every_user_facing_error_class_is_used() -> None:
    """A declared error class nobody raises, catches or derives from is a promise the code does not keep."""
    text = _source_text()
    unused = sorted(
        name for name, cls in CLASSES.items() if text.count(cls.__name__) < 2
    )  # the definition itself is one occurrence
    assert not unused, f"error classes never used outside their definition: {unused}"


def _instance(cls: type[BaseException]) -> BaseException:
    """An instance with a message, without knowing the class's own constructor arguments."""
    exc = cls.__new__(cls)
    exc.args = ("the message",)
    return exc


@pytest.mark.parametrize("name", sorted(n for n, c in CLASSES.items() if issubclass(c, RiskbenchError)))
def test_cli_reports_each_user_facing_error_as_the_users_problem(name) -> None:
    status, line = describe_failure(_instance(CLASSES[name]), "run-analysis")
    assert status == 2
    assert "internal error" not in line and line.startswith("riskbench run-analysis: error:")


@pytest.mark.parametrize("exc", [ValueError("bad value"), TypeError("bad type"), KeyError("k"), ZeroDivisionError()])
def test_cli_reports_other_exceptions_as_internal(exc) -> None:
    """A bare ValueError from deep inside a library is a bug to report, not a user error (issue 17)."""
    status, line = describe_failure(exc, "run-analysis")
    assert status == 1
    assert "internal error" in line and type(exc).__name__ in line


def test_cli_names_only_the_base_class() -> None:
    """Read the command line's source: the classes it names in ``except`` clauses and ``isinstance`` checks are
    the package base, ``OSError`` (a file it cannot use) and the catch-all that turns the rest into one line."""
    tree = ast.parse((ROOT / "workflow" / "cli.py").read_text())
    named: set[str] = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.ExceptHandler) and node.type is not None:
            types = node.type.elts if isinstance(node.type, ast.Tuple) else [node.type]
            named.update(ast.unparse(t) for t in types)
        elif isinstance(node, ast.Call) and ast.unparse(node.func) == "isinstance":
            target = node.args[1]
            types = target.elts if isinstance(target, ast.Tuple) else [target]
            named.update(ast.unparse(t) for t in types)
    # ModuleNotFoundError: a stage without a command module is skipped while the parser is built.
    assert named <= {"RiskbenchError", "OSError", "KeyboardInterrupt", "Exception", "ModuleNotFoundError"}, named
    assert "RiskbenchError" in named
