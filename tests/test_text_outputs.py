"""Every text file the program writes names its encoding and its newline handling, so that the
bytes are the same on every desktop (CSV with newline="", JSON/TOML/HTML with "\\n"; Python's
default would be the locale's encoding and the platform's line ending). Common practice, no source.
"""

import ast
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def _text_writes(tree: ast.AST):
    """(line, call) of every ``open(..., "w"/"a"/"x")`` in text mode and every ``.write_text(``."""
    for node in ast.walk(tree):
        if not isinstance(node, ast.Call):
            continue
        f = node.func
        if isinstance(f, ast.Attribute) and f.attr == "write_text":
            if len(node.args) >= 2 and isinstance(node.args[0], ast.Name) and node.args[0].id in ("g", "group"):
                continue   # rigside.core.io.h5safe.write_text(group, name, value): an HDF5 string
            yield node.lineno, node
        elif isinstance(f, ast.Name) and f.id == "open" or isinstance(f, ast.Attribute) and f.attr == "open":
            given = (k.value for k in node.keywords if k.arg == "mode")
            mode = node.args[1] if len(node.args) > 1 else next(given, None)
            if isinstance(mode, ast.Constant) and isinstance(mode.value, str) \
                    and set(mode.value) & set("wax") and "b" not in mode.value:
                yield node.lineno, node


def test_every_text_output_names_encoding_and_newline():
    missing = []
    for folder in ("core", "app"):
        for path in sorted((ROOT / folder).rglob("*.py")):
            for line, call in _text_writes(ast.parse(path.read_text(encoding="utf-8"))):
                given = {k.arg for k in call.keywords}
                if not {"encoding", "newline"} <= given:
                    missing.append(f"{path.relative_to(ROOT)}:{line}")
    assert not missing, "text written without encoding= and newline=: " + ", ".join(missing)


def test_the_check_sees_a_bare_write():
    bad = ast.parse('open(p, "w").write(x)\nPath(p).write_text(x)\nopen(p, "wb")\n')
    assert sorted(line for line, _ in _text_writes(bad)) == [1, 2]
