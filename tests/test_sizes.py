"""Size rules of the contributor guide: no file of the program over 400 lines, no function over 80
(common practice, no source). Line length (120) is ruff's E501, checked by ``ruff check .``."""

import ast
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
MAX_FILE_LINES = 400
MAX_FUNCTION_LINES = 80


def program_files() -> list[Path]:
    return sorted(p for folder in ("core", "app") for p in (ROOT / folder).rglob("*.py"))


def test_no_file_over_the_line_limit():
    lines = {p.relative_to(ROOT).as_posix(): len(p.read_text(encoding="utf-8").splitlines())
             for p in program_files()}
    over = {name: n for name, n in lines.items() if n > MAX_FILE_LINES}
    assert over == {}


def test_no_function_over_the_line_limit():
    long = []
    for path in program_files():
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef)):
                n = node.end_lineno - node.lineno + 1
                if n > MAX_FUNCTION_LINES:
                    long.append(f"{path.relative_to(ROOT).as_posix()}:{node.lineno} {node.name} ({n} lines)")
    assert long == []
