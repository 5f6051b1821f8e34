"""Declarative schemas: what each file affix reads may contain, checked in one place.

A file type declares its fields once, as a :class:`Schema` of :class:`Field`
objects, beside the object it becomes (``affix.model``, ``affix.plan``,
``affix.emit.manifest``).  Reading a file is then one call,
``SCHEMA.read(path)``, which returns the fields as plain Python values or
raises one :class:`~affix.errors.FileFormatError` that names the file and
the field (``plan.json: field 'coefficients[1][0]': expected an integer,
got 1.5``).  Nothing downstream re-checks what a schema has checked.

A field's spec says everything about its value:

- scalars: :class:`Integer` and :class:`Number` (finite, with ranges; a
  bool is neither), :class:`Flag`, :class:`Text` (no control characters, a
  length limit, an optional pattern), :class:`Choice` (with old spellings
  read as their new names);
- containers: :class:`List` (a length that may be the size of another field,
  unique items), :func:`Array` (nested lists of a shape named by sizes),
  :class:`Covariance` (symmetric and positive semi-definite, or definite),
  :class:`Record` (named fields, nested), :class:`Mapping` (keys of one
  spec, values of another); :class:`OrNone` allows null.

Shapes tie fields together through *sizes*: a field declared with
``size=True`` (such as ``inputs``) names a size, its length, that later
fields use (``Array(("outputs", "inputs"), Number())``).  Rules that involve
several fields are plain functions of the parsed values, given as
``rules=``; they raise :class:`FieldError` through :func:`fail`.

Unknown keys are refused, with the closest declared name as a hint: a
misspelt optional key would otherwise be silently ignored, and a file from a
newer affix may carry a field this one cannot honour.  So a field must be
declared here before anything writes it (the round-trip tests fail
otherwise).  Integers and numbers are bounded, so a hand-edited huge value
is refused before any arithmetic sees it.
"""
from __future__ import annotations

import difflib
import math
import re
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Callable

import numpy as np

from affix.errors import FileFormatError

REQUIRED = object()  # Field default: the key must be present
OMITTED = object()  # Field default: an absent key stays absent (nested records that grew a key)
_CONTROL = re.compile(r"[\x00-\x1f\x7f-\x9f\u2028\u2029]")


class FieldError(Exception):
    """A value that breaks its spec; ``field`` is the path to it ("gain[1][0]")."""

    def __init__(self, field: str, message: str):
        super().__init__(f"field '{field}': {message}")
        self.field, self.message = field, message


def fail(field: str, message: str):
    """Raise the FieldError of a rule that spans fields."""
    raise FieldError(field, message)


@dataclass
class At:
    """Where a value sits (its field path) and the sizes shapes may refer to."""

    field: str
    sizes: dict

    def item(self, key) -> "At":
        if isinstance(key, int):
            return At(f"{self.field}[{key}]", self.sizes)
        return At(f"{self.field}.{key}" if self.field else str(key), self.sizes)

    def error(self, message: str) -> FieldError:
        return FieldError(self.field, message)

    def size(self, length) -> int:
        return self.sizes[length] if isinstance(length, str) else length


class Spec:
    """What one value may be; ``parse`` returns it as a plain Python value or raises FieldError."""

    def parse(self, value, at: At):
        raise NotImplementedError


def _shown(value) -> str:
    text = repr(value)
    return text if len(text) <= 40 else text[:37] + "..."


def _kind(value) -> str:
    return {dict: "an object", list: "a list", str: "a string", bool: "true/false", type(None): "null"}.get(
        type(value), _shown(value)
    )


class Integer(Spec):
    def __init__(self, min: int | None = None, max: int | None = None):
        self.min, self.max = min, max

    def parse(self, value, at):
        if isinstance(value, bool) or not isinstance(value, int):
            raise at.error(f"expected an integer, got {_kind(value)}")
        _check_range(value, self.min, self.max, at)
        return value


class Number(Spec):
    """A finite number (an integer is read as a float); ``positive`` excludes zero."""

    def __init__(self, min: float | None = None, max: float | None = None, positive: bool = False):
        self.min, self.max, self.positive = min, max, positive

    def parse(self, value, at):
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise at.error(f"expected a number, got {_kind(value)}")
        try:
            number = float(value)
        except OverflowError:
            raise at.error("is beyond the range of a double") from None
        if not math.isfinite(number):
            raise at.error(f"expected a finite number, got {number}")
        if self.positive and not number > 0:
            raise at.error(f"must be > 0, got {number:g}")
        _check_range(number, self.min, self.max, at)
        return number


def _check_range(value, low, high, at):
    if low is not None and value < low:
        raise at.error(f"must be >= {low:g}, got {value:g}" if isinstance(value, float) else f"must be >= {low}, got {value}")
    if high is not None and value > high:
        raise at.error(f"must be <= {high:g}, got {value:g}" if isinstance(value, float) else f"must be <= {high}, got {value}")


class Flag(Spec):
    def parse(self, value, at):
        if not isinstance(value, bool):
            raise at.error(f"expected true or false, got {_kind(value)}")
        return value


class Text(Spec):
    """One line of text: no control characters, at most ``max_length`` characters, matching ``pattern``."""

    def __init__(self, pattern: str | None = None, meaning: str = "text", max_length: int = 200, min_length: int = 0):
        self.pattern = re.compile(pattern) if pattern else None
        self.meaning, self.max_length, self.min_length = meaning, max_length, min_length

    def parse(self, value, at):
        if not isinstance(value, str):
            raise at.error(f"expected {self.meaning}, got {_kind(value)}")
        if _CONTROL.search(value):
            raise at.error(f"holds a control character: {_shown(value)}")
        if not self.min_length <= len(value) <= self.max_length:
            raise at.error(f"must have {self.min_length} to {self.max_length} characters, got {len(value)}")
        if self.pattern and not self.pattern.fullmatch(value):
            raise at.error(f"expected {self.meaning}, got {_shown(value)}")
        return value


SHA256 = Text(r"[0-9a-f]{64}", "a SHA-256 digest (64 lower-case hex digits)", max_length=64)
VERSION = Text(r"[0-9A-Za-z][0-9A-Za-z.+-]{0,39}", "a version number", max_length=40)  # PEP 440 and local labels


class Choice(Spec):
    """One of ``values`` (same type: 16.0 is not 16, true is not 1); ``aliases`` maps old spellings."""

    def __init__(self, values, aliases: dict | None = None):
        self.values, self.aliases = tuple(values), dict(aliases or {})

    def parse(self, value, at):
        for accepted in (*self.values, *self.aliases):
            if type(value) is type(accepted) and value == accepted:
                return self.aliases.get(value, value)
        raise at.error(f"expected one of {', '.join(map(str, self.values))}, got {_shown(value)}")


class OrNone(Spec):
    def __init__(self, spec: Spec):
        self.spec = spec

    def parse(self, value, at):
        return None if value is None else self.spec.parse(value, at)


class List(Spec):
    """A list, returned as a tuple; ``length`` is a number or the name of a size."""

    def __init__(self, item: Spec, length=None, *, min_length: int = 0, max_length: int = 10**6, unique: bool = False):
        self.item, self.length, self.unique = item, length, unique
        self.min_length, self.max_length = min_length, max_length

    def parse(self, value, at):
        if not isinstance(value, (list, tuple)):  # tuples: objects built in Python, checked before writing
            raise at.error(f"expected a list, got {_kind(value)}")
        if self.length is not None:
            expected = at.size(self.length)
            if len(value) != expected:
                per = f" (one per entry of '{self.length}')" if isinstance(self.length, str) else ""
                raise at.error(f"expected {expected} items{per}, got {len(value)}")
        elif not self.min_length <= len(value) <= self.max_length:
            raise at.error(f"expected {self.min_length} to {self.max_length} items, got {len(value)}")
        items = tuple(self.item.parse(v, at.item(k)) for k, v in enumerate(value))
        if self.unique:
            seen = set()
            for k, v in enumerate(items):
                if v in seen:
                    raise at.item(k).error(f"repeats {_shown(v)}")
                seen.add(v)
        return items


# Column names as the data file had them: one line of text each, none twice
# (the emitter checks that they make identifiers).
NAMES = List(Text(min_length=1), min_length=1, max_length=10_000, unique=True)


def Array(dims, item: Spec) -> List:  # noqa: N802 -- reads as a type in declarations
    """Nested lists of shape ``dims`` (numbers or size names), outermost first."""
    spec = item
    for length in reversed(tuple(dims)):
        spec = List(spec, length)
    return spec


def check_symmetric(matrix: np.ndarray, field: str, tolerance: float) -> None:
    asymmetry = np.abs(matrix - matrix.T)
    if asymmetry.size and asymmetry.max() > tolerance:
        i, j = np.unravel_index(np.argmax(asymmetry), matrix.shape)
        fail(f"{field}[{i}][{j}]", f"breaks symmetry: {matrix[i, j]:g} against {matrix[j, i]:g} at [{j}][{i}]")


def check_covariance(matrix: np.ndarray, field: str, tolerance: float, *, definite: bool = False) -> None:
    """Symmetric and positive semi-definite (``definite``: definite), both up to ``tolerance``."""
    check_symmetric(matrix, field, tolerance)
    if len(matrix):
        smallest = float(np.linalg.eigvalsh((matrix + matrix.T) / 2)[0])
        if smallest < -tolerance or (definite and smallest <= tolerance):
            kind = "definite" if definite else "semi-definite"
            fail(field, f"is not positive {kind} (smallest eigenvalue {smallest:.3g}), so it is no covariance")


class Covariance(List):
    """A symmetric matrix of size ``dim`` whose ``sign`` is "semi-definite", "definite" or None
    (symmetric only: a rule judges the sign where the rounding to allow depends on other fields).

    Both are judged up to the rounding of a matrix computed in double
    precision from products of data (common practice: allow a few thousand
    ulps of the largest entry per dimension).
    """

    ROUNDING = 1e-12

    def __init__(self, dim: str, *, sign: str | None = "semi-definite"):
        super().__init__(List(Number(), dim), dim)
        self.sign = sign

    def parse(self, value, at):
        rows = super().parse(value, at)
        matrix = np.array(rows, dtype=float).reshape(len(rows), len(rows))
        tolerance = self.ROUNDING * len(rows) * float(np.max(np.abs(matrix), initial=0.0))
        if self.sign is None:
            check_symmetric(matrix, at.field, tolerance)
        else:
            check_covariance(matrix, at.field, tolerance, definite=self.sign == "definite")
        return rows


@dataclass(frozen=True)
class Field:
    """One key of a record: its spec, its default (REQUIRED: must be present) and
    whether its length is a size that other fields' shapes name (``size``)."""

    name: str
    spec: Spec
    default: Any = REQUIRED
    size: bool = False


class Record(Spec):
    """An object with declared fields, parsed in order; ``rules`` check several fields together."""

    def __init__(self, *fields: Field, rules: tuple[Callable[[dict], None], ...] = ()):
        self.fields, self.rules = tuple(fields), tuple(rules)
        names = [f.name for f in self.fields]
        if len(set(names)) != len(names):
            raise ValueError(f"a field is declared twice among {names}")

    @property
    def names(self) -> tuple[str, ...]:
        return tuple(f.name for f in self.fields)

    def parse(self, value, at):
        if not isinstance(value, dict):
            raise at.error(f"expected an object, got {_kind(value)}")
        unknown = [k for k in value if k not in self.names]
        if unknown:
            hint = difflib.get_close_matches(str(unknown[0]), self.names, n=1)
            raise at.item(str(unknown[0])).error(
                "is not a field of this file" + (f" (did you mean '{hint[0]}'?)" if hint else "")
            )
        values = {}
        for field in self.fields:
            where = at.item(field.name)
            if field.name in value:
                values[field.name] = field.spec.parse(value[field.name], where)
            elif field.default is REQUIRED:
                raise where.error("is missing")
            elif field.default is OMITTED:
                continue
            else:
                values[field.name] = field.default
            if field.size:
                at.sizes[field.name] = len(values[field.name])
        for rule in self.rules:
            rule(values)
        return values


class Mapping(Spec):
    """An object whose keys follow ``keys`` (a Text or Choice) and whose values follow ``values``."""

    def __init__(self, keys: Spec, values: Spec):
        self.keys, self.values = keys, values

    def parse(self, value, at):
        if not isinstance(value, dict):
            raise at.error(f"expected an object, got {_kind(value)}")
        parsed = {}
        for key, item in value.items():
            where = at.item(str(key))
            parsed[self.keys.parse(key, where)] = self.values.parse(item, where)
        return parsed


class Schema:
    """A file type: its ``"format"`` tag, its fields and its cross-field rules.

    ``what`` ("model", "plan", ...) words the messages.  The ``format`` key
    is checked first, so a file of another type is named as such rather
    than for its first odd field.
    """

    def __init__(self, what: str, format: str, *fields: Field, rules=()):
        self.what, self.format = what, format
        self.record = Record(Field("format", Choice((format,))), *fields, rules=rules)

    @property
    def field_names(self) -> tuple[str, ...]:
        return self.record.names

    def load(self, data, path=None) -> dict:
        """The parsed fields of ``data`` (a file's JSON content), ``format`` left out."""
        from affix.files import check_format

        check_format(data, self.format, self.what, path)
        try:
            values = self.record.parse(data, At("", {}))
        except FieldError as exc:
            if path is None:
                raise FileFormatError(f"{self.what} {exc}") from None
            raise FileFormatError(str(exc), path) from None
        del values["format"]
        return values

    def read(self, path) -> dict:
        """Read and parse the JSON file at ``path``."""
        from affix.files import read_json

        return self.load(read_json(Path(path), self.what), path)
