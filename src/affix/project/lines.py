"""Where each table and key of a TOML file starts, for error messages.

tomllib returns values without positions, and a project-file error should say
``affix.toml:14:`` like a compiler does.  This is a small scan of the file's
own lines, not a parser: it runs only on text tomllib has already accepted,
and it recognises what starts a line (a ``[table]`` or ``[[array]]`` header,
a possibly dotted and quoted key before ``=``) while stepping over strings,
comments and values that span lines.

Paths are tuples of keys, with the index of an array-of-tables element where
one is crossed: ``("inputs", 2, "range")`` is the ``range`` key of the third
``[[inputs]]`` table.
"""
from __future__ import annotations

import re

from affix.project.toml import tomllib

_BARE = re.compile(r"[A-Za-z0-9_-]+")
_ESCAPED = re.compile(r"\\.")


def key_lines(text: str) -> dict[tuple, int]:
    """{path: line number (from 1)} of every header and of every key that starts a line."""
    found: dict[tuple, int] = {}
    arrays: dict[tuple, int] = {}  # array-of-tables path -> elements so far
    table: tuple = ()
    scanner = _ValueScanner()
    for number, line in enumerate(text.splitlines(), start=1):
        if scanner.inside:  # a string or an array still open from an earlier line
            scanner.feed(line)
            continue
        stripped = line.lstrip()
        if stripped.startswith("["):
            is_array = stripped.startswith("[[")
            parts, _ = _key(stripped[2 if is_array else 1 :])
            table = _resolve(parts, arrays, new_element=is_array)
            found.setdefault(table, number)
            if is_array:
                found.setdefault(table[:-1], number)
            continue
        if not stripped or stripped.startswith("#"):
            continue
        parts, rest = _key(stripped)
        for depth in range(1, len(parts) + 1):
            found.setdefault(table + parts[:depth], number)
        scanner.feed(rest.partition("=")[2])
    return found


def line_of(lines: dict[tuple, int], path: tuple) -> int:
    """The line of ``path``, or of its nearest enclosing key or table that has one; 1 if none does."""
    for end in range(len(path), 0, -1):
        if path[:end] in lines:
            return lines[path[:end]]
    return 1


def _resolve(parts: tuple, arrays: dict, new_element: bool) -> tuple:
    """A header's path, with the current element of every array of tables it crosses."""
    path: tuple = ()
    for k, part in enumerate(parts):
        path += (part,)
        if k == len(parts) - 1 and new_element:
            arrays[path] = arrays.get(path, 0) + 1
        if path in arrays:
            path += (arrays[path] - 1,)
    return path


def _key(text: str) -> tuple[tuple, str]:
    """The parts of a (dotted, quoted) key at the start of ``text``, and what follows it."""
    parts = []
    rest = text
    while True:
        rest = rest.lstrip()
        if rest[:1] in ('"', "'"):
            quote = rest[0]
            body = _ESCAPED.sub("..", rest[1:]) if quote == '"' else rest[1:]  # same length, no quote inside
            end = body.index(quote) + 1
            parts.append(_unescape(rest[1:end]) if quote == '"' else rest[1:end])
            rest = rest[end + 1 :]
        else:
            match = _BARE.match(rest)
            if not match:
                return tuple(parts), rest
            parts.append(match.group())
            rest = rest[match.end() :]
        rest = rest.lstrip()
        if not rest.startswith("."):
            return tuple(parts), rest
        rest = rest[1:]


def _unescape(text: str) -> str:
    """A basic-string key's value, its escapes resolved by tomllib itself."""
    return next(iter(tomllib.loads(f'"{text}" = 0'))) if "\\" in text else text


class _ValueScanner:
    """Tracks, across lines, whether a value is still open: a multi-line
    string, or brackets/braces not yet closed."""

    def __init__(self):
        self.string = None  # the open multi-line string's delimiter
        self.depth = 0

    @property
    def inside(self) -> bool:
        return self.string is not None or self.depth > 0

    def feed(self, line: str) -> None:
        k = 0
        while k < len(line):
            if self.string:
                end = self._close(line, k, self.string)
                if end is None:
                    return
                self.string, k = None, end
                continue
            ch = line[k]
            if ch == "#":
                return
            if line.startswith(('"""', "'''"), k):
                self.string, k = line[k : k + 3], k + 3
            elif ch in "\"'":
                end = self._close(line, k + 1, ch)
                k = len(line) if end is None else end
            elif ch in "[{":
                self.depth, k = self.depth + 1, k + 1
            elif ch in "]}":
                self.depth, k = self.depth - 1, k + 1
            else:
                k += 1

    @staticmethod
    def _close(line: str, k: int, delimiter: str):
        """Index just past the closing ``delimiter`` from ``k``, or None if the line has none."""
        while k < len(line):
            if delimiter[0] == '"' and line[k] == "\\":
                k += 2
            elif line.startswith(delimiter, k):
                return k + len(delimiter)
            else:
                k += 1
        return None
