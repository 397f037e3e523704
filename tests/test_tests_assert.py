"""Every test checks something: no test function passes merely by running without an error.

A test counts as checking when its body holds an ``assert`` statement, a
``pytest.raises`` / ``pytest.warns`` / ``pytest.fail`` / ``pytest.deprecated_call``
call, a call to a function whose name starts with ``assert`` (``np.testing.assert_allclose``,
``assert_frame_equal``, a helper ``assert_placed``), or a call to a function of its own
file that checks, by the same rule (helpers calling helpers are followed). Every file
of tests/ is read with ``ast``; nothing is imported or run.
"""

from __future__ import annotations

import ast

from conftest import ROOT

TESTS = ROOT / "tests"
PYTEST_CHECKS = {"raises", "warns", "fail", "deprecated_call"}


def _called_name(call: ast.Call) -> str:
    func = call.func
    if isinstance(func, ast.Attribute):
        return func.attr
    return func.id if isinstance(func, ast.Name) else ""


def _checks(function: ast.AST, helpers: dict[str, ast.AST], seen: set[str]) -> bool:
    for node in ast.walk(function):
        if isinstance(node, ast.Assert):
            return True
        if isinstance(node, ast.Call):
            name = _called_name(node)
            if name.lstrip("_").startswith("assert"):
                return True
            if isinstance(node.func, ast.Attribute) and name in PYTEST_CHECKS:
                return True
            if isinstance(node.func, ast.Name) and name in helpers and name not in seen:
                seen.add(name)
                if _checks(helpers[name], helpers, seen):
                    return True
    return False


def silent_tests(source: str) -> list[str]:
    """Return the names of the test functions in source (named test..., as pytest collects them)
    that check nothing."""
    tree = ast.parse(source)
    functions = [node for node in ast.walk(tree) if isinstance(node, ast.FunctionDef | ast.AsyncFunctionDef)]
    helpers = {node.name: node for node in tree.body if isinstance(node, ast.FunctionDef | ast.AsyncFunctionDef)}
    return [f.name for f in functions if f.name.startswith("test") and not _checks(f, helpers, {f.name})]


def test_every_test_function_checks_something():
    silent = [f"{path.relative_to(ROOT)}::{name}"
              for path in sorted(TESTS.rglob("test_*.py")) if "data" not in path.relative_to(TESTS).parts
              for name in silent_tests(path.read_text(encoding="utf-8"))]
    assert silent == [], "tests that check nothing:\n" + "\n".join(silent)


def test_the_scan_sees_a_test_that_checks_nothing():
    source = '''
import pytest
import numpy as np

def helper(x):
    assert x

def quiet_helper(x):
    return x

def test_runs_only():
    quiet_helper(1)

def test_calls_a_checking_helper():
    helper(1)

def test_raises():
    with pytest.raises(ValueError):
        int("x")

def test_numpy():
    np.testing.assert_array_equal([1], [1])
'''
    assert silent_tests(source) == ["test_runs_only"]
