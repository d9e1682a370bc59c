"""Fail when a function in auditor/ is longer than MAX_LINES lines without a reason.

A reason is a comment starting with "# size:" on the line of the ``def`` or directly above
it (decorators included). Complexity is checked by ruff (C901, max-complexity in
pyproject.toml); this script checks length, which ruff does not.
"""

from __future__ import annotations

import ast
import sys
from pathlib import Path

MAX_LINES = 60


def long_functions(root: Path):
    for path in sorted(root.rglob("*.py")):
        lines = path.read_text(encoding="utf-8").splitlines()
        for node in ast.walk(ast.parse("\n".join(lines))):
            if not isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef)):
                continue
            first = min([node.lineno] + [d.lineno for d in node.decorator_list])
            size = (node.end_lineno or node.lineno) - node.lineno + 1
            context = lines[max(0, first - 2) : node.lineno]
            if size > MAX_LINES and not any("# size:" in line for line in context):
                yield f"{path}:{node.lineno}: {node.name} has {size} lines (limit {MAX_LINES}; add '# size: <reason>')"


def main() -> int:
    problems = list(long_functions(Path(__file__).resolve().parents[1] / "auditor"))
    print("\n".join(problems) or f"every function within {MAX_LINES} lines or with a written reason")
    return 1 if problems else 0


if __name__ == "__main__":
    sys.exit(main())
