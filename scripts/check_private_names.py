"""Fail when a private name (``_x``) of one of our modules is used from another module.

``from campaigns.services import _lock`` and ``services._lock(...)`` (with ``services`` an imported module of
ours) are both reported. Tests and migrations are not checked: tests may reach inside what they test.

Usage: ``python scripts/check_private_names.py`` from the repository root; exit status 1 on findings.
"""

from __future__ import annotations

import ast
import sys
from pathlib import Path

PACKAGES = ("render", "assets", "campaigns", "datasets", "fleet", "teams", "evenframe", "dashboard", "api")
SKIP_PARTS = {"migrations", "tests", ".venv", "data"}


def _ours(module: str) -> bool:
    return module.split(".")[0] in PACKAGES


def _private(name: str) -> bool:
    return name.startswith("_") and not name.startswith("__")


def _is_module(root: Path, dotted: str) -> bool:
    base = root.joinpath(*dotted.split("."))
    return base.with_suffix(".py").is_file() or (base / "__init__.py").is_file()


def findings(path: Path, root: Path) -> list[str]:
    tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
    out: list[str] = []
    module_aliases: dict[str, str] = {}
    for node in ast.walk(tree):
        if isinstance(node, ast.ImportFrom) and node.module and node.level == 0 and _ours(node.module):
            for alias in node.names:
                if _private(alias.name):
                    out.append(f"{path}:{node.lineno}: imports {node.module}.{alias.name}")
                elif _is_module(root, f"{node.module}.{alias.name}"):  # a module, not a class (Model._meta is API)
                    module_aliases[alias.asname or alias.name] = f"{node.module}.{alias.name}"
        elif isinstance(node, ast.ImportFrom) and node.level > 0:
            for alias in node.names:
                if _private(alias.name):
                    out.append(f"{path}:{node.lineno}: imports {'.' * node.level}{node.module or ''}.{alias.name}")
        elif isinstance(node, ast.Import):
            for alias in node.names:
                if _ours(alias.name):
                    module_aliases[alias.asname or alias.name.split(".")[0]] = alias.name
    for node in ast.walk(tree):
        if (
            isinstance(node, ast.Attribute)
            and _private(node.attr)
            and isinstance(node.value, ast.Name)
            and node.value.id in module_aliases
        ):
            out.append(f"{path}:{node.lineno}: uses {module_aliases[node.value.id]}.{node.attr}")
    return out


def main() -> int:
    root = Path(__file__).resolve().parent.parent
    problems: list[str] = []
    for package in PACKAGES:
        for path in sorted((root / package).rglob("*.py")):
            if not SKIP_PARTS.intersection(path.relative_to(root).parts):
                problems += findings(path, root)
    for line in problems:
        print(line)
    print(f"private names used across modules: {len(problems)}")
    return 1 if problems else 0


if __name__ == "__main__":
    sys.exit(main())
