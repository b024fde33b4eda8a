"""Checks that never run: a scan of the test sources for statements that look like assertions but assert
nothing (or only half of what they say).

* an expression statement that is a boolean operation or a comparison (a numpy.testing helper call joined
  to a condition by a boolean operator, or ``x == y`` on a line of its own): its value is thrown away, so
  the second half never fails a test;
* an ``assert`` whose condition calls an ``assert_*`` helper (numpy.testing's return None, so such an
  assert can never pass and hides what was meant).
"""

from __future__ import annotations

import ast
from pathlib import Path

TESTS = Path(__file__).resolve().parents[1]


def _problems(source: str, name: str) -> list[str]:
    out = []
    for node in ast.walk(ast.parse(source, name)):
        if isinstance(node, ast.Expr) and isinstance(node.value, ast.BoolOp | ast.Compare):
            out.append(f"{name}:{node.lineno}: expression statement {ast.unparse(node.value)[:60]!r} asserts nothing")
        if isinstance(node, ast.Assert):
            for sub in ast.walk(node.test):
                if isinstance(sub, ast.Call):
                    func = sub.func
                    called = func.attr if isinstance(func, ast.Attribute) else getattr(func, "id", "")
                    if called.startswith("assert_"):
                        out.append(f"{name}:{node.lineno}: assert on the result of {called}(), which returns None")
    return out


def test_the_scan_finds_both_patterns() -> None:
    helper = "assert" + "_allclose(a, b)"  # spelt in two parts, so that a text search for the pattern skips it
    bad = f"{helper} and np.isnan(c)\nx == 1\nassert {helper} and c\nassert a and b\n"
    found = _problems(bad, "example.py")
    assert [p.split(":")[1] for p in found] == ["1", "2", "3"], found


def test_no_test_statement_asserts_only_half() -> None:
    problems = []
    for path in sorted(TESTS.rglob("*.py")):
        problems += _problems(path.read_text(encoding="utf-8"), str(path.relative_to(TESTS)))
    assert not problems, "\n".join(problems)
