"""Line numbers of keys in a TOML text, so plan errors can name the line.

`tomllib` returns plain dicts without positions. This scanner reads the text once and maps
every key path (``("limits", "max_voltage")``, ``("steps", 2, "stop")``) to the line where
it is written, and every table to the line of its header. It understands table headers,
arrays of tables, dotted keys and quoted keys; values spanning several lines (arrays,
multi-line strings) are skipped over. It never raises: a key it cannot place simply has no
line, and the message then names the key alone.
"""

from __future__ import annotations

import re

KeyPath = tuple[str | int, ...]

_HEADER = re.compile(r"^\s*(\[\[?)\s*(.+?)\s*(\]\]?)\s*(#.*)?$")
_NAME = r"""(?:[A-Za-z0-9_\-]+|"[^"]*"|'[^']*')"""
_KEY = re.compile(rf"^\s*({_NAME}(?:\s*\.\s*{_NAME})*)\s*=")
_PART = re.compile(r"""[A-Za-z0-9_\-]+|"[^"]*"|'[^']*'""")


def _split_key(text: str) -> tuple[str, ...]:
    return tuple(p.strip("\"'") for p in _PART.findall(text))


def _open_brackets(value: str) -> int:
    """Net count of [ and { outside strings in a value fragment (for multi-line arrays)."""
    depth = 0
    quote = ""
    escaped = False
    for ch in value:
        if quote:
            if escaped:
                escaped = False
            elif ch == "\\" and quote == '"':
                escaped = True
            elif ch == quote:
                quote = ""
        elif ch in "\"'":
            quote = ch
        elif ch == "#":
            break
        elif ch in "[{":
            depth += 1
        elif ch in "]}":
            depth -= 1
    return depth


def key_lines(text: str) -> dict[KeyPath, int]:
    """Map key paths to 1-based line numbers (see the module docstring)."""
    lines: dict[KeyPath, int] = {}
    table: KeyPath = ()
    array_counts: dict[tuple[str, ...], int] = {}
    depth = 0
    in_multiline = ""
    for number, line in enumerate(text.splitlines(), start=1):
        if in_multiline:
            if line.count(in_multiline) % 2 == 1:
                in_multiline = ""
            continue
        if depth > 0:
            depth += _open_brackets(line)
            continue
        header = _HEADER.match(line)
        if header and len(header.group(1)) == len(header.group(3)):
            names = _split_key(header.group(2))
            if header.group(1) == "[[":
                index = array_counts.get(names, 0)
                array_counts[names] = index + 1
                table = (*names, index)
            else:
                table = _resolve(names, array_counts)
            lines.setdefault(table, number)
            continue
        key = _KEY.match(line)
        if not key:
            continue
        path = (*table, *_split_key(key.group(1)))
        lines.setdefault(path, number)
        value = line[key.end():]
        for quote in ('"""', "'''"):
            if value.count(quote) % 2 == 1:
                in_multiline = quote
                break
        else:
            depth = max(0, _open_brackets(value))
    return lines


def _resolve(names: tuple[str, ...], array_counts: dict[tuple[str, ...], int]) -> KeyPath:
    """A sub-table header under an array of tables refers to its last element."""
    path: list[str | int] = []
    for i, name in enumerate(names):
        path.append(name)
        prefix = names[: i + 1]
        if prefix in array_counts and i + 1 < len(names):
            path.append(array_counts[prefix] - 1)
    return tuple(path)


def line_of(lines: dict[KeyPath, int], path: KeyPath) -> int | None:
    """The line of ``path``, or of its nearest enclosing table, or None."""
    for end in range(len(path), 0, -1):
        found = lines.get(tuple(path[:end]))
        if found is not None:
            return found
    return None


def describe(path: KeyPath) -> str:
    """A key path as a person writes it: ``steps[3].stop`` (steps counted from 1)."""
    out = ""
    for part in path:
        if isinstance(part, int):
            out += f"[{part + 1}]"
        else:
            out += f".{part}" if out else str(part)
    return out or "(top level)"
