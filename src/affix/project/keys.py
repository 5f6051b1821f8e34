"""Every key of the project file ``affix.toml``, declared once: type, default, meaning.

The loader (:mod:`affix.project.file`) checks a parsed file against
:data:`SCHEMA` and fills in the defaults; the README's key table is written
from the same meanings.  A new key is one entry here (and its use in the
build): unknown keys are refused, so a misspelt one never goes unnoticed.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

from affix.arithmetic import ACC_BITS, COEF_BITS, INPUT_CTYPES, OUTPUT_CTYPES, ROUNDINGS
from affix.emit import ARITHS, LANGUAGES, STYLES
from affix.fit.engines import ENGINES
from affix.interface import COEFFICIENT_SOURCES
from affix.targets import DEFAULT_TARGET, TARGETS


class KeyProblem(Exception):
    """A value or a table that breaks the schema; ``path`` locates it (see affix.project.lines)."""

    def __init__(self, path: tuple, message: str):
        super().__init__(message)
        self.path, self.message = path, message


@dataclass(frozen=True)
class Key:
    check: object  # value -> value, raising ValueError with the reason
    doc: str
    required: bool = False
    default: object = None


@dataclass(frozen=True)
class Table:
    keys: dict
    doc: str
    required: bool = False
    many: bool = False  # an array of tables, [[name]]: one table per input or output, in order


# --- value checks: each returns the value as the build uses it -------------------------


def text(value):
    if not isinstance(value, str) or not value:
        raise ValueError("must be a non-empty string")
    return value


def boolean(value):
    if not isinstance(value, bool):
        raise ValueError("must be true or false")
    return value


def integer(lowest: int):
    def check(value):
        if isinstance(value, bool) or not isinstance(value, int) or value < lowest:
            raise ValueError(f"must be an integer >= {lowest}")
        return value

    return check


def number(*, positive: bool):
    def check(value):
        if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
            raise ValueError("must be a finite number")
        if value < 0 or (positive and value == 0):
            raise ValueError("must be a number > 0" if positive else "must be a number >= 0")
        return float(value)

    return check


def choice(options):
    def check(value):
        if isinstance(value, bool) or value not in options:
            raise ValueError("must be one of " + ", ".join(f'"{o}"' if isinstance(o, str) else str(o) for o in options))
        return value

    return check


def choices(options):
    def check(value):
        values = value if isinstance(value, list) else [value]
        if not values or len(set(map(str, values))) != len(values):
            raise ValueError("must name at least one of " + ", ".join(f'"{o}"' for o in options) + ", each once")
        return [choice(options)(v) for v in values]

    return check


def paths(value):
    values = value if isinstance(value, list) else [value]
    if not values or not all(isinstance(v, str) and v for v in values):
        raise ValueError("must be a file name or glob pattern, or a list of them")
    return values


def integer_range(value):
    if not (isinstance(value, list) and len(value) == 2 and all(type(v) is int for v in value)):
        raise ValueError("must be [LO, HI], two integers (counts)")
    if value[0] > value[1]:
        raise ValueError(f"is inverted ({value[0]} > {value[1]}); write [LO, HI] with LO <= HI")
    return (value[0], value[1])


COLUMN = Key(text, "the data column (and the C/MicroPython name)", required=True)
UNIT = Key(text, "unit of the values, for comments and the interface (ASCII; e.g. \"N\", \"N*m\", \"degC\")")

SCHEMA = Table(
    doc="the project",
    keys={
        "name": Key(text, "estimator name: prefix of every emitted symbol and file", required=True),
        "data": Table(
            doc="the calibration data",
            required=True,
            keys={
                "files": Key(paths, "one file, a list of files, or glob patterns (\"runs/*.csv\"), relative to the "
                             "project file; read in the order given, each pattern's matches in name order",
                             required=True),
                "drop_invalid": Key(boolean, "leave out rows holding NaN, infinite or empty values", default=False),
                "unit_column": Key(text, "the column naming each row's unit (text or integer ids): a fleet log, "
                                   "one calibration record per unit"),
                "skip_bad_units": Key(boolean, "go on without the units the data cannot fit (too few rows, a "
                                      "constant input, a singular fit), naming them, instead of stopping",
                                      default=False),
            },
        ),
        "fit": Table(
            doc="the least-squares fit",
            keys={
                "ridge": Key(number(positive=False), "relative ridge, RIDGE * var(y_j) added to each input's variance",
                             default=0.0),
                "folds": Key(integer(0), "k of the k-fold cross-validated RMS; 0 skips it", default=5),
                "engine": Key(choice(ENGINES), "where the pass over the data runs: \"local\" (this machine) or "
                              "\"dask\" (a Dask cluster)", default="local"),
                "scheduler": Key(text, "with engine = \"dask\": the address of a running cluster's scheduler "
                                 "(\"tcp://host:8786\"); without it a cluster of this machine's CPUs is started"),
            },
        ),
        "inputs": Table(
            doc="one table per input column, in the order the firmware passes them",
            required=True,
            many=True,
            keys={
                "name": COLUMN,
                "range": Key(integer_range, "[LO, HI], the declared range in integer counts", required=True),
                "lsb": Key(number(positive=True), "physical size of one count, when the data hold physical values"),
                "unit": UNIT,
            },
        ),
        "outputs": Table(
            doc="one table per output column, in the order the firmware receives them",
            required=True,
            many=True,
            keys={
                "name": COLUMN,
                "budget": Key(number(positive=False), "largest worst-case deviation of the integer code, physical units"),
                "tolerance": Key(number(positive=True), "a fleet's acceptance limit: largest cross-validated RMS "
                                 "error of a unit's own fit, physical units"),
                "lsb": Key(number(positive=True), "physical size of one output count (default: finest power of two)"),
                "unit": UNIT,
            },
        ),
        "fixed_point": Table(
            doc="the integer format",
            keys={
                "coef_bits": Key(choice(COEF_BITS), "coefficient width (default: searched)"),
                "acc_bits": Key(choice(ACC_BITS), "accumulator width (default: searched)"),
                "output_type": Key(choice(tuple(OUTPUT_CTYPES)), "output C type (default: searched)"),
                "input_type": Key(choice(tuple(INPUT_CTYPES)), "C type of every input (default: the smallest "
                                  "holding the box, unsigned where it can)"),
                "target": Key(choice(tuple(TARGETS)), "the core or runtime the widths are chosen for",
                              default=DEFAULT_TARGET),
                "rounding": Key(choice(ROUNDINGS), "output rounding", default="nearest"),
                "coefficient_search": Key(boolean, "error-feedback search of the integer coefficients; false rounds "
                                          "each on its own", default=True),
                "budget_rms_percent": Key(number(positive=False), "instead of per-output budgets: largest growth of "
                                          "the total RMS over the float estimator, percent"),
            },
        ),
        "emit": Table(
            doc="the generated code",
            keys={
                "languages": Key(choices(LANGUAGES), "\"c\", \"micropython\" or both", default=list(LANGUAGES)),
                "style": Key(choice(STYLES), "C layout", default="table"),
                "arith": Key(choice(ARITHS), "integer or float32 C", default="int"),
                "coefficients": Key(choice(COEFFICIENT_SOURCES), "how the firmware gets the coefficients: "
                                    "\"compiled\" into the code, or from each unit's calibration \"record\" "
                                    "(default: \"record\" with a unit column, else \"compiled\")"),
            },
        ),
        "records": Table(
            doc="the calibration records of a fleet build",
            keys={
                "flash_address": Key(integer(0), "where each unit's record goes in flash: the address of its "
                                     "Intel HEX copy (records/UNIT.hex); without it no .hex is written"),
            },
        ),
        "verify": Table(
            doc="the bit-exact verification",
            keys={
                "vectors": Key(integer(1), "random vectors inside the box", default=10**6),
                "seed": Key(integer(0), "seed of the random vectors", default=0),
                "calibration_rows": Key(boolean, "run the calibration rows through the code too", default=True),
            },
        ),
        "build": Table(
            doc="the build",
            keys={
                "out": Key(text, "the build folder, relative to the project file", default="build"),
                "report": Key(boolean, "write report.html (needs matplotlib, the report extra)", default=True),
            },
        ),
    },
)


def validate(data: dict, schema: Table = SCHEMA, path: tuple = ()) -> dict:
    """``data`` checked against ``schema``, with every default filled in; KeyProblem at the first fault."""
    unknown = [key for key in data if key not in schema.keys]
    if unknown:
        raise KeyProblem(path + (unknown[0],), f"unknown key (expected one of: {', '.join(schema.keys)})")
    result = {}
    for key, spec in schema.keys.items():
        where = path + (key,)
        if key not in data:
            if spec.required:
                raise KeyProblem(where, "missing, and required")
            result[key] = _default(spec)
            continue
        value = data[key]
        if isinstance(spec, Table):
            result[key] = _table(value, spec, where)
        else:
            if isinstance(value, dict):
                raise KeyProblem(where, "must be a value, not a table")
            try:
                result[key] = spec.check(value)
            except ValueError as exc:
                raise KeyProblem(where, str(exc)) from None
    return result


def _table(value, spec: Table, where: tuple):
    if spec.many:
        if not isinstance(value, list) or not value or not all(isinstance(v, dict) for v in value):
            raise KeyProblem(where, f"must be one or more [[{where[-1]}]] tables")
        return [validate(item, spec, where + (k,)) for k, item in enumerate(value)]
    if not isinstance(value, dict):
        raise KeyProblem(where, f"must be a table [{'.'.join(map(str, where))}]")
    return validate(value, spec, where)


def _default(spec):
    if isinstance(spec, Table):
        return [] if spec.many else validate({}, spec)
    return list(spec.default) if isinstance(spec.default, list) else spec.default


def key_paths(schema: Table = SCHEMA, prefix: str = "") -> list[tuple[str, str]]:
    """(dotted key, meaning) of every key, for documentation."""
    rows = []
    for key, spec in schema.keys.items():
        name = f"{prefix}{key}"
        if isinstance(spec, Table):
            rows += key_paths(spec, f"{name}[]." if spec.many else f"{name}.")
        else:
            rows.append((name, spec.doc))
    return rows
