"""Shape of the code: no function in reconstruct/ or plan/ longer than 100 lines
or taking more than 10 parameters, unless its docstring says why.

This is a house style rule (short functions that do one thing; a few grouped
arguments), not a check of the main job: the limits are our own choice. A
function may pass them when its docstring holds a line starting with
"Long because" (length) or "Many parameters because" (parameters) giving the
reason. The source is parsed with :mod:`ast`; nothing is imported.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
PACKAGES = ("reconstruct", "plan")
MAX_LINES = 100
MAX_PARAMETERS = 10

EXEMPT: set = set()  # no file is exempt


def _source_files():
    for package in PACKAGES:
        for path in sorted((ROOT / package).rglob("*.py")):
            relative = path.relative_to(ROOT).as_posix()
            if relative not in EXEMPT:
                yield relative


def _functions(tree):
    for node in ast.walk(tree):
        if isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef)):
            yield node


def _parameter_count(node) -> int:
    args = node.args
    names = [a.arg for a in args.posonlyargs + args.args]
    if names and names[0] in ("self", "cls"):
        names = names[1:]
    return (len(names) + len(args.kwonlyargs) + (args.vararg is not None) + (args.kwarg is not None))


def _has_reason(node, opening: str) -> bool:
    doc = ast.get_docstring(node) or ""
    return any(line.strip().startswith(opening) for line in doc.splitlines())


def shape_problems(source: str, name: str) -> list[str]:
    """Functions of ``source`` over the limits without a stated reason."""
    problems = []
    for node in _functions(ast.parse(source, filename=name)):
        lines = node.end_lineno - node.lineno + 1
        if lines > MAX_LINES and not _has_reason(node, "Long because"):
            problems.append(f"{name}:{node.lineno} {node.name} has {lines} lines (at most {MAX_LINES}, "
                            "or a docstring line 'Long because ...')")
        count = _parameter_count(node)
        if count > MAX_PARAMETERS and not _has_reason(node, "Many parameters because"):
            problems.append(f"{name}:{node.lineno} {node.name} takes {count} parameters (at most "
                            f"{MAX_PARAMETERS}, or a docstring line 'Many parameters because ...')")
    return problems


@pytest.mark.parametrize("relative", list(_source_files()))
def test_functions_are_short_and_take_few_parameters(relative):
    assert shape_problems((ROOT / relative).read_text(encoding="utf-8"), relative) == []


def test_the_rule_finds_a_long_function_and_accepts_a_stated_reason():
    body = "\n".join(f"    x{k} = {k}" for k in range(MAX_LINES))
    long_one = f"def f():\n{body}\n"
    assert len(shape_problems(long_one, "long.py")) == 1
    reasoned = f'def f():\n    """Sum.\n\n    Long because a table.\n    """\n{body}\n'
    assert shape_problems(reasoned, "reasoned.py") == []


def test_the_rule_counts_parameters_but_not_self():
    many = ", ".join(f"a{k}" for k in range(MAX_PARAMETERS + 1))
    assert len(shape_problems(f"def f({many}):\n    pass\n", "many.py")) == 1
    assert shape_problems(f"def f(*, {many}):\n    '''Many parameters because ...'''\n", "why.py") == []
    ten = ", ".join(f"a{k}" for k in range(MAX_PARAMETERS))
    assert shape_problems(f"class C:\n    def f(self, {ten}):\n        pass\n", "method.py") == []
