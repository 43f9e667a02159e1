"""Fail when an import of one of our modules inside a function has no ``# deferred:`` reason.

The project rule: a function-level import of our own modules is allowed only with a one-line reason, written as a
comment starting with ``# deferred:`` and the reason, on the import's line or on the line directly above it (for an import spread over
several lines, the line above the statement or any line of it). Imports of third-party packages inside functions are
not checked. Tests and migrations are not checked.

Usage: ``python scripts/check_deferred_imports.py`` from the repository root; exit status 1 on findings.
"""

from __future__ import annotations

import ast
import io
import sys
import tokenize
from pathlib import Path

PACKAGES = ("render", "assets", "campaigns", "datasets", "fleet", "teams", "evenframe", "dashboard", "api")
SKIP_PARTS = {"migrations", "tests", ".venv", "data"}
MARKER = "# deferred:"


def _ours(node: ast.Import | ast.ImportFrom) -> bool:
    """An import of one of our packages, absolute or relative."""
    if isinstance(node, ast.ImportFrom):
        return node.level > 0 or (node.module or "").split(".")[0] in PACKAGES
    return any(alias.name.split(".")[0] in PACKAGES for alias in node.names)


def _reason_comments(source: str) -> tuple[set[int], set[int]]:
    """Lines with a ``# deferred: <reason>`` comment (real comments, not text in strings), and those of them that
    hold nothing but the comment (only such a line gives its reason to the statement below it)."""
    anywhere: set[int] = set()
    alone: set[int] = set()
    lines = source.splitlines()
    for token in tokenize.generate_tokens(io.StringIO(source).readline):
        if token.type == tokenize.COMMENT and token.string.startswith(MARKER) and token.string[len(MARKER) :].strip():
            row, col = token.start
            anywhere.add(row)
            if not lines[row - 1][:col].strip():
                alone.add(row)
    return anywhere, alone


def _function_imports(tree: ast.AST) -> list[ast.Import | ast.ImportFrom]:
    """Imports of our modules anywhere in the body of a function or method (also under if, try, with, loops)."""
    found: list[ast.Import | ast.ImportFrom] = []
    for func in ast.walk(tree):
        if isinstance(func, ast.FunctionDef | ast.AsyncFunctionDef):
            for stmt in func.body:
                for node in ast.walk(stmt):
                    if isinstance(node, ast.Import | ast.ImportFrom) and _ours(node):
                        found.append(node)
    # A nested function's imports are reached from each enclosing function: count every statement once.
    return list({id(node): node for node in found}.values())


def findings(path: Path, root: Path) -> tuple[int, list[str]]:
    """(function-level imports of our modules in ``path``, those without a reason as ``file:line: message``)."""
    source = path.read_text(encoding="utf-8")
    anywhere, alone = _reason_comments(source)
    imports = _function_imports(ast.parse(source, filename=str(path)))
    out: list[str] = []
    for node in sorted(imports, key=lambda n: n.lineno):
        statement = set(range(node.lineno, (node.end_lineno or node.lineno) + 1))
        if node.lineno - 1 not in alone and not anywhere & statement:
            out.append(
                f"{path.relative_to(root)}:{node.lineno}: import of our module inside a function, no '{MARKER}' reason"
            )
    return len(imports), out


def main() -> int:
    root = Path(__file__).resolve().parent.parent
    total = 0
    problems: list[str] = []
    for package in PACKAGES:
        for path in sorted((root / package).rglob("*.py")):
            if not SKIP_PARTS.intersection(path.relative_to(root).parts):
                count, found = findings(path, root)
                total += count
                problems += found
    for line in problems:
        print(line)
    if problems:
        print(f"deferred first-party imports: {total}, {len(problems)} without a reason")
        return 1
    print(f"deferred first-party imports: {total}, all with a reason")
    return 0


if __name__ == "__main__":
    sys.exit(main())
