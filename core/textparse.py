"""JSON and TOML parsing that turns every failure, including hostile nesting, into one line.

Python's parsers recurse once per nesting level, so a file of ``[[[[...]]]]`` raises
``RecursionError``; and a value nested just under the interpreter's limit breaks any code that
later walks or re-serialises it. Both parsers here refuse nesting deeper than
:data:`MAX_NESTING` with the caller's error type.
"""

from __future__ import annotations

import json
import tomllib
from typing import Any

from rigside.core.errors import RigsideError

MAX_NESTING = 32
"""Deepest nesting of lists and tables accepted in any file we parse."""


def nesting(value: Any) -> int:
    """Nesting depth of lists, tuples and dicts in ``value`` (a scalar is 0), computed without recursion."""
    deepest = 0
    stack = [(value, 1)]
    while stack:
        v, depth = stack.pop()
        if isinstance(v, dict):
            items = v.values()
        elif isinstance(v, (list, tuple)):
            items = v
        else:
            continue
        deepest = max(deepest, depth)
        if depth > MAX_NESTING:
            break
        stack.extend((x, depth + 1) for x in items)
    return deepest


def _checked(value: Any, what: str, error: type[RigsideError]) -> Any:
    depth = nesting(value)
    if depth > MAX_NESTING:
        raise error(f"{what} must be nested at most {MAX_NESTING} levels deep, got more than {MAX_NESTING}")
    return value


def parse_json(text: str, what: str, error: type[RigsideError] = RigsideError) -> Any:
    """Parse JSON text, raising ``error`` ("<what> must be ...") for syntax or excessive nesting."""
    try:
        value = json.loads(text)
    except RecursionError:
        raise error(f"{what} must be nested at most {MAX_NESTING} levels deep, got deeper nesting") from None
    except (json.JSONDecodeError, UnicodeDecodeError, TypeError) as exc:
        raise error(f"{what} must be JSON, got text that does not parse as JSON: {exc}") from None
    return _checked(value, what, error)


def parse_toml(text: str, what: str, error: type[RigsideError] = RigsideError) -> dict[str, Any]:
    """Parse TOML text, raising ``error`` ("<what> must be ...") for syntax or excessive nesting."""
    try:
        value = tomllib.loads(text)
    except RecursionError:
        raise error(f"{what} must be nested at most {MAX_NESTING} levels deep, got deeper nesting") from None
    except tomllib.TOMLDecodeError as exc:
        raise error(f"{what} must be valid TOML, got an error: {exc}") from None
    return _checked(value, what, error)
