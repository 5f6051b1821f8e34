"""The project file ``affix.toml``: read, checked completely, as a plain :class:`Project`.

Every error is one line ``affix.toml:LINE: key.path: reason`` (exit status 2):
TOML syntax from tomllib's own position, everything else from the line where
the offending key or table starts (:mod:`affix.project.lines`).
"""
from __future__ import annotations

import os
import re
from dataclasses import dataclass
from pathlib import Path

from affix.arithmetic import input_ctype
from affix.emit.names import check_names, check_units
from affix.errors import DataError, FileFormatError, UsageError
from affix.intake.sources import data_files
from affix.project.keys import KeyProblem, validate
from affix.project.lines import key_lines, line_of
from affix.project.toml import tomllib

PROJECT_FILE = "affix.toml"
_TOML_POSITION = re.compile(r"\s*\(at (?:line (\d+), column (\d+)|end of document)\)$")


@dataclass(frozen=True)
class InputColumn:
    name: str
    range: tuple[int, int]  # declared, counts
    lsb: float | None  # physical size of one count, where the data are physical
    unit: str | None


@dataclass(frozen=True)
class OutputColumn:
    name: str
    budget: float | None  # worst-case deviation limit, physical units
    lsb: float | None  # None: the quantizer's rule chooses
    unit: str | None
    tolerance: float | None = None  # a fleet unit's largest cross-validated RMS, physical units


@dataclass(frozen=True)
class Project:
    """A checked project file; paths resolved against its folder (see keys.SCHEMA for each field's meaning)."""

    path: Path
    name: str
    data_files: tuple[Path, ...]
    drop_invalid: bool
    unit_column: str | None
    skip_bad_units: bool
    ridge: float
    folds: int
    engine: str
    scheduler: str | None
    inputs: tuple[InputColumn, ...]
    outputs: tuple[OutputColumn, ...]
    coef_bits: int | None
    acc_bits: int | None
    output_type: str | None
    input_type: str | None
    target: str
    rounding: str
    coefficient_search: bool
    budget_rms_percent: float | None
    languages: tuple[str, ...]
    style: str
    arith: str
    coefficients: str
    flash_address: int | None
    vectors: int
    seed: int
    calibration_rows: bool
    out: Path
    report: bool

    @property
    def folder(self) -> Path:
        return self.path.parent

    @property
    def interface_path(self) -> Path:
        """Where the pinned interface lives: beside the project file, committed with the firmware."""
        return self.folder / f"{self.name}.interface.json"

    def relative(self, path) -> str:
        """``path`` relative to the project folder, with '/' on every system (for files affix writes)."""
        return Path(os.path.relpath(path, self.folder)).as_posix()

    @property
    def units(self) -> dict:
        return {c.name: c.unit for c in self.inputs + self.outputs if c.unit is not None}

    def plan_options(self) -> dict:
        """Keyword arguments of :func:`affix.quantize.plan_fixed_point` (besides the model and the calibration)."""
        budgets = {c.name: c.budget for c in self.outputs if c.budget is not None}
        lsbs = {c.name: c.lsb for c in self.outputs if c.lsb is not None}
        input_lsbs = {c.name: c.lsb for c in self.inputs if c.lsb is not None}
        return {
            "input_ranges": {c.name: c.range for c in self.inputs},
            "coef_bits": self.coef_bits,
            "acc_bits": self.acc_bits,
            "output_ctype": self.output_type,
            "output_lsb": lsbs or None,
            "input_lsb": input_lsbs or None,
            "budget": budgets or None,
            "budget_rms": self.budget_rms_percent,
            "rounding": self.rounding,
            "target": self.target,
            "input_ctype": self.input_type,
            "search": self.coefficient_search,
        }


def load_project(path) -> Project:
    path = Path(path)
    if path.is_dir():
        path = path / PROJECT_FILE
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise FileFormatError("no project file (write one with 'affix init')", path) from None
    except (OSError, UnicodeDecodeError) as exc:
        raise FileFormatError(f"not readable as a text file ({exc})", path) from None
    return parse_project(text, path)


def parse_project(text: str, path) -> Project:
    """The project that ``text`` describes, as if read from ``path`` (which places its relative paths)."""
    path = Path(path)
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        message, line = _toml_error(str(exc))
        raise FileFormatError(f"not valid TOML: {message}", path, line) from None
    lines = key_lines(text)

    def fail(where: tuple, message: str):
        raise FileFormatError(f"{dotted(where)}: {message}", path, line_of(lines, where))

    try:
        values = validate(data)
    except KeyProblem as problem:
        fail(problem.path, problem.message)
    return _project(path, values, fail)


def dotted(path: tuple) -> str:
    """("inputs", 2, "range") -> "inputs[2].range"."""
    text = ""
    for part in path:
        text += f"[{part}]" if isinstance(part, int) else (f".{part}" if text else str(part))
    return text


def _toml_error(message: str) -> tuple[str, int | None]:
    """tomllib's message without its position, and the line (None at the end of the document)."""
    match = _TOML_POSITION.search(message)
    if not match:
        return message, None
    text = message[: match.start()]
    if match.group(1) is None:
        return f"{text} at the end of the file", None
    return f"{text} (column {match.group(2)})", int(match.group(1))


def _project(path: Path, v: dict, fail) -> Project:
    inputs = tuple(InputColumn(c["name"], c["range"], c["lsb"], c["unit"]) for c in v["inputs"])
    outputs = tuple(OutputColumn(c["name"], c["budget"], c["lsb"], c["unit"], c["tolerance"]) for c in v["outputs"])
    _check_names(v["name"], inputs, outputs, fail)
    if input_ctype([c.range for c in inputs]) is None:
        fail(("inputs",), "the ranges together fit no single input type (int8_t .. uint32_t); the firmware "
                          "passes every input in one type")
    for kind, columns in (("inputs", inputs), ("outputs", outputs)):
        for k, column in enumerate(columns):
            if column.unit is not None:
                try:
                    check_units({column.name: column.unit}, [column.name])
                except UsageError as exc:
                    fail((kind, k, "unit"), exc.reason)
    fixed, emit, verify = v["fixed_point"], v["emit"], v["verify"]
    if fixed["budget_rms_percent"] is not None and any(c.budget is not None for c in outputs):
        fail(("fixed_point", "budget_rms_percent"), "give either per-output budgets or an RMS growth, not both")
    if emit["arith"] == "float32" and "micropython" in emit["languages"]:
        fail(("emit", "arith"), 'float32 is a C target only: set languages = ["c"] with it')
    unit_column = v["data"]["unit_column"]
    coefficients = emit["coefficients"] or ("record" if unit_column else "compiled")
    if unit_column in [c.name for c in inputs + outputs]:
        fail(("data", "unit_column"), f"'{unit_column}' is an input or output column; the unit column names units")
    if (coefficients == "record") != (unit_column is not None):
        fail(("emit", "coefficients"), 'a fleet (data.unit_column) takes its coefficients from records: '
             'coefficients = "record" goes with a unit column, and only with one')
    if coefficients == "record":
        if emit["arith"] != "int":
            fail(("emit", "arith"), 'a calibration record holds integers: records need arith = "int"')
        if emit["style"] != "table":
            fail(("emit", "style"), 'code that loads records reads them as a table: records need style = "table"')
        if fixed["budget_rms_percent"] is None and not any(c.budget is not None for c in outputs):
            fail(("outputs",), "a fleet needs a budget, each unit's pass/fail criterion: give each output a "
                               "budget, or fixed_point.budget_rms_percent")
    for k, column in enumerate(outputs):
        if column.tolerance is not None and unit_column is None:
            fail(("outputs", k, "tolerance"), "a tolerance is a fleet unit's acceptance limit: it needs "
                                              "data.unit_column")
    if v["records"]["flash_address"] is not None and coefficients != "record":
        fail(("records", "flash_address"), "only a fleet build (data.unit_column) writes records")
    if v["records"]["flash_address"] is not None and v["records"]["flash_address"] >= 2**32:
        fail(("records", "flash_address"), "Intel HEX addresses are 32 bits: must be below 0x100000000")
    folder = path.parent
    return Project(
        path=path,
        name=v["name"],
        data_files=_located(lambda: data_files(v["data"]["files"], folder), ("data", "files"), fail),
        drop_invalid=v["data"]["drop_invalid"],
        unit_column=unit_column,
        skip_bad_units=v["data"]["skip_bad_units"],
        ridge=v["fit"]["ridge"],
        folds=_folds(v["fit"]["folds"], fail),
        engine=v["fit"]["engine"],
        scheduler=_scheduler(v["fit"], fail),
        inputs=inputs,
        outputs=outputs,
        coef_bits=fixed["coef_bits"],
        acc_bits=fixed["acc_bits"],
        output_type=fixed["output_type"],
        input_type=fixed["input_type"],
        target=fixed["target"],
        rounding=fixed["rounding"],
        coefficient_search=fixed["coefficient_search"],
        budget_rms_percent=fixed["budget_rms_percent"],
        languages=tuple(emit["languages"]),
        style=emit["style"],
        arith=emit["arith"],
        coefficients=coefficients,
        flash_address=v["records"]["flash_address"],
        vectors=verify["vectors"],
        seed=verify["seed"],
        calibration_rows=verify["calibration_rows"],
        out=folder / v["build"]["out"],
        report=v["build"]["report"],
    )


def _check_names(name, inputs, outputs, fail) -> None:
    """The rules emitted code puts on names, each fault located at its key."""
    checks = [(("name",), name, [], [])]
    checks += [(("inputs", k, "name"), name, [c.name], []) for k, c in enumerate(inputs)]
    checks += [(("outputs", k, "name"), name, [], [c.name]) for k, c in enumerate(outputs)]
    for where, *arguments in checks:
        try:
            check_names(*arguments)
        except UsageError as exc:
            fail(where, exc.reason)
    seen = set()
    for kind, columns in (("inputs", inputs), ("outputs", outputs)):
        for k, column in enumerate(columns):
            if column.name in seen:
                fail((kind, k, "name"), f"'{column.name}' is named twice among the inputs and outputs")
            seen.add(column.name)


def _located(read, where, fail):
    try:
        return read()
    except DataError as exc:
        fail(where, exc.message)


def _scheduler(fit: dict, fail) -> str | None:
    if fit["scheduler"] is not None and fit["engine"] != "dask":
        fail(("fit", "scheduler"), 'names a Dask scheduler, which only engine = "dask" uses')
    return fit["scheduler"]


def _folds(folds: int, fail) -> int:
    if folds == 1:
        fail(("fit", "folds"), "must be 0 (no cross-validation) or at least 2")
    return folds

