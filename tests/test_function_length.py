"""No function body is longer than 80 lines, docstrings aside (issue 14, "Done when").

The count is the span from a function's first statement after its docstring to its last line,
read with the standard library's ``ast``. Every folder of ecoscan is counted; the few known
exceptions are listed with the reason they stay,
and the list may only shrink: an entry that is no longer too long fails too.
"""

from __future__ import annotations

import ast
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
LIMIT = 80
#: Folders of ecoscan not counted yet (reworked by other branches at the moment).
SKIP: tuple[str, ...] = ()
#: Functions allowed above the limit for now, and why.
KNOWN = {
    "ecoscan/detect/autotune.py:_score_layer": "split on branch speed9c",
}


def long_functions(source: str, limit: int = LIMIT) -> dict[str, int]:
    """Names (``outer.inner`` for nested functions) and body lengths of the functions whose
    body, docstring aside, exceeds ``limit`` lines."""
    found: dict[str, int] = {}

    def visit(node: ast.AST, prefix: str) -> None:
        for child in ast.iter_child_nodes(node):
            if isinstance(child, ast.FunctionDef | ast.AsyncFunctionDef):
                body = child.body
                if (
                    isinstance(body[0], ast.Expr)
                    and isinstance(body[0].value, ast.Constant)
                    and isinstance(body[0].value.value, str)
                    and len(body) > 1
                ):
                    body = body[1:]
                length = body[-1].end_lineno - body[0].lineno + 1
                if length > limit:
                    found[prefix + child.name] = length
                visit(child, f"{prefix}{child.name}.")
            else:
                visit(child, prefix)

    visit(ast.parse(source), "")
    return found


def _package_long_functions() -> dict[str, int]:
    out = {}
    for path in sorted((ROOT / "ecoscan").rglob("*.py")):
        rel = path.relative_to(ROOT)
        if rel.parts[1] in SKIP:
            continue
        for name, length in long_functions(path.read_text(encoding="utf-8")).items():
            out[f"{rel.as_posix()}:{name}"] = length
    return out


def test_no_function_body_exceeds_the_limit():
    found = _package_long_functions()
    new = {k: v for k, v in found.items() if k not in KNOWN}
    assert not new, f"split these functions (body lines > {LIMIT}): {new}"


def test_the_known_exceptions_are_still_exceptions():
    # a function split since it was listed must leave the list, so the list only shrinks
    found = _package_long_functions()
    assert sorted(k for k in KNOWN if k not in found) == []


def test_the_count_skips_the_docstring_and_reads_nested_functions():
    def source(body_lines: int, docstring_lines: int) -> str:
        doc = '    """' + "\n" * docstring_lines + '    """\n'
        body = "".join(f"    x{i} = {i}\n" for i in range(body_lines))
        return "def f():\n" + doc + body

    assert long_functions(source(80, 30)) == {}  # 80 lines of body is allowed
    assert long_functions(source(81, 0)) == {"f": 81}
    nested = "def outer():\n    def inner():\n" + "".join(
        f"        y{i} = {i}\n" for i in range(81)
    )
    assert long_functions(nested) == {"outer": 82, "outer.inner": 81}
