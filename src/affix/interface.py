"""The firmware interface: everything code that calls an emitted estimator relies on.

Calling code names the estimator's functions, types and constants, passes
inputs in a fixed order and C type, and multiplies each output by its lsb to
get the physical value.  A recalibration may change the coefficients,
offsets and internal shifts behind that interface, never the interface
itself: an output whose lsb silently doubled would make every caller report
half the value and still compile.  So a build pins the interface in
``NAME.interface.json`` beside the project file, and every emitted file
carries its fingerprint (``NAME_INTERFACE_ID``), which firmware can check at
compile time.

:class:`Interface` is that description as plain data; :func:`describe` derives it
from a plan and the emit options, and :meth:`Interface.changes` lists what
differs between two of them, one line per difference.
"""
from __future__ import annotations

import hashlib
import json
from dataclasses import dataclass, replace

from affix import files, schema
from affix.arithmetic import ACC_BITS, COEF_BITS, INPUT_CTYPES, OUTPUT_CTYPES, ROUNDINGS
from affix.emit.names import INFIX_IN, INFIX_LSB, INFIX_OUT
from affix.errors import FileFormatError
from affix.record import LAYOUT_VERSION, REASONS, record_size

INTERFACE_FORMAT = "affix.interface/1"
# How calling code gets the coefficients: compiled into the emitted source,
# or from a calibration record (affix.record) that the firmware loads at run time.
COEFFICIENT_SOURCES = ("compiled", "record")
# The fingerprint keeps 30 bits of the SHA-256: a small int on every
# MicroPython port (31-bit signed on 32-bit ports), and as a C constant
# exact in any preprocessor; one change in 2**30 would go unnoticed.
_ID_BITS = 30


@dataclass(frozen=True)
class Interface:
    """One estimator's interface.  Every field is plain JSON data.

    inputs:  ({"name", "range": [lo, hi], "lsb": float|None, "unit": str|None}, ...) in y[] order
    outputs: ({"name", "lsb": float|None, "unit": str|None}, ...) in x[] order; lsb None for float32 code
    fixed_point: {"coef_bits", "acc_bits", "rounding"}, None for float32 code
    c: {"header", "function", "identifiers": [...]} when C is emitted, else None
    micropython: {"module", "functions": [...], "constants": [...]} when MicroPython is emitted, else None
    record: {"layout_version", "bytes"} where the coefficients come from a calibration record (the
        widths, shape and scales above are then what every record must match), else None
    """

    name: str | None
    coefficients: str
    arith: str
    input_ctype: str
    output_ctype: str
    inputs: tuple[dict, ...]
    outputs: tuple[dict, ...]
    fixed_point: dict | None
    c: dict | None = None
    micropython: dict | None = None
    record: dict | None = None

    def content(self) -> dict:
        """The fields the fingerprint covers, in file form (``record`` only where there is one, so
        interfaces of compiled coefficients keep the fingerprints they had before records existed)."""
        return {
            "name": self.name,
            "coefficients": self.coefficients,
            "arith": self.arith,
            "input_ctype": self.input_ctype,
            "output_ctype": self.output_ctype,
            "inputs": [dict(port) for port in self.inputs],
            "outputs": [dict(port) for port in self.outputs],
            "fixed_point": None if self.fixed_point is None else dict(self.fixed_point),
            "c": self.c,
            "micropython": self.micropython,
            **({} if self.record is None else {"record": dict(self.record)}),
        }

    @property
    def id(self) -> str:
        """The fingerprint as the header shows it: 0x and eight hex digits."""
        digest = int(hashlib.sha256(_canonical(self.content())).hexdigest()[:8], 16)
        return f"0x{digest & (2**_ID_BITS - 1):08x}"

    def to_dict(self) -> dict:
        return {"format": INTERFACE_FORMAT, "interface_id": self.id, **self.content()}

    def save(self, path) -> None:
        files.write_json(path, self.to_dict())

    @classmethod
    def load(cls, path) -> "Interface":
        return cls.from_dict(files.read_json(path, "interface"), path)

    @classmethod
    def from_dict(cls, data, path=None) -> "Interface":
        """The interface a file (or a manifest's ``interface``) holds, checked by :data:`INTERFACE_SCHEMA`
        and against its own fingerprint."""
        # Through JSON once more: the schema reads lists as tuples, the interface compares as JSON.
        values = json.loads(json.dumps(INTERFACE_SCHEMA.load(data, path)))
        stated = values.pop("interface_id")
        interface = cls(**{key: tuple(v) if key in ("inputs", "outputs") else v for key, v in values.items()})
        if stated != interface.id:
            raise FileFormatError(
                f"its interface_id {stated} is not the fingerprint of its content ({interface.id}): the file "
                "was edited by hand; restore it from version control, or repin the interface the project "
                "describes (affix build --repin)", path)
        return interface

    def changes(self, new: "Interface") -> list[str]:
        """What differs from ``self`` to ``new``, one line each ("outputs[Fx].lsb: 0.0078125 -> 0.015625")."""
        return interface_changes(self.content(), new.content())


def interface_changes(old: dict, new: dict) -> list[str]:
    """The differences of two interfaces in file form (ports keyed by name), one line each."""
    return _differences(_keyed(old), _keyed(new), "")


def describe(plan, name=None, *, languages=(), arith: str = "int", units=None, coefficients: str = "compiled") -> Interface:
    """The interface of ``plan`` emitted as ``name`` in ``languages`` ("c", "micropython").

    ``units`` maps input and output names to a unit text (documentation that
    travels with the scale).  Without a name and languages it is the plan's
    own part: order, types, box, scales and arithmetic.
    """
    from affix.emit.micropython import variants  # the emitters import this module

    units = units or {}
    integer = arith == "int"
    records = coefficients == "record"
    interface = Interface(
        name=name,
        coefficients=coefficients,
        arith=arith,
        input_ctype=plan.input_ctype,
        output_ctype=plan.output_ctype if integer else "float",
        inputs=tuple(
            {"name": n, "range": [lo, hi], "lsb": None if plan.input_lsb is None else plan.input_lsb[j],
             "unit": units.get(n)}
            for j, (n, (lo, hi)) in enumerate(zip(plan.inputs, plan.input_ranges))
        ),
        outputs=tuple({"name": n, "lsb": lsb if integer else None, "unit": units.get(n)}
                      for n, lsb in zip(plan.outputs, plan.output_lsb)),
        fixed_point={"coef_bits": plan.coef_bits, "acc_bits": plan.acc_bits, "rounding": plan.rounding} if integer else None,
        record={"layout_version": LAYOUT_VERSION, "bytes": record_size(len(plan.outputs), len(plan.inputs),
                                                                      plan.coef_bits)} if records else None,
    )
    if "c" in languages:
        interface = replace(interface, c=_c_section(name, plan, integer, records))
    if "micropython" in languages:
        if records:
            functions = ["load_record", "estimate_record", "estimate_record_into"]
        else:
            functions = ["estimate", "estimate_into"]
            functions += ["estimate_into_viper"] if "viper" in variants(plan.integer_estimator()) else []
        interface = replace(interface, micropython={
            "module": name,
            "functions": functions + ["self_test"],
            "constants": ["INPUTS", "OUTPUTS", "LSB", "INTERFACE_ID"] + (["RECORD_BYTES"] if records else []),
        })
    return interface


def _c_section(name, plan, integer, records=False) -> dict:
    """The header's external names: every one starts with the estimator name (see DEVELOPERS.md)."""
    macro = name.upper()
    identifiers = [f"{macro}_H", f"{macro}_N_INPUTS", f"{macro}_N_OUTPUTS", f"{macro}_INTERFACE_ID",
                   f"{macro}_EXPECT_INTERFACE", f"{name}_selftest",
                   f"{name}_input", f"{name}_output", f"{name}_interface_differs"]
    if records:
        function = f"{name}_estimate_record"
        identifiers += [function, f"{name}_record_load", f"{name}_record", f"{name}_record_row",
                        f"{macro}_RECORD_BYTES", f"{macro}_RECORD_LAYOUT_VERSION", f"{macro}_UNIT_ID_BYTES"]
        identifiers += [f"{macro}_RECORD_E_{reason.upper()}" for _, reason, _ in REASONS]
    else:
        function = f"{name}_estimate"
        identifiers.append(function)
    identifiers += [f"{name}_{INFIX_IN}{n}" for n in plan.inputs] + [f"{name}_{INFIX_OUT}{n}" for n in plan.outputs]
    if integer:
        identifiers += [f"{macro}_{INFIX_LSB}{n}" for n in plan.outputs]
    return {"header": f"{name}.h", "function": function, "identifiers": identifiers}


def _canonical(data) -> bytes:
    return json.dumps(data, sort_keys=True, separators=(",", ":"), allow_nan=False).encode()


def _keyed(content: dict) -> dict:
    """Ports keyed by name, so a reordering reads as such rather than as every field changing."""
    keyed = dict(content)
    for key in ("inputs", "outputs"):
        keyed[key] = {port["name"]: {**port, "position": k} for k, port in enumerate(content[key])}
    return keyed


def _differences(old, new, where: str) -> list[str]:
    if isinstance(old, dict) and isinstance(new, dict):
        lines = []
        for key in list(old) + [k for k in new if k not in old]:
            inner = f"{where}[{key}]" if where in ("inputs", "outputs") else (f"{where}.{key}" if where else key)
            if key not in new:
                lines.append(f"{inner}: removed")
            elif key not in old:
                lines.append(f"{inner}: added")
            else:
                lines += _differences(old[key], new[key], inner)
        return lines
    return [] if old == new else [f"{where}: {_shown(old)} -> {_shown(new)}"]


def _shown(value) -> str:
    return json.dumps(value, separators=(", ", ": "))


# --- the interface file's schema -------------------------------------------------


def _ranges_are_ordered(values) -> None:
    for k, port in enumerate(values["inputs"]):
        if port["range"][0] > port["range"][1]:
            schema.fail(f"inputs[{k}].range", "is inverted (lo > hi)")
    if (values["coefficients"] == "record") != ("record" in values):
        schema.fail("record", "must be given exactly where the coefficients come from a record")


def agrees_with_manifest(values) -> None:
    """A manifest's rule: the interface it holds is the one its own fields describe, fingerprint included."""
    if "interface" not in values:
        return
    data = json.loads(json.dumps(values["interface"]))
    stated = data.pop("interface_id")
    del data["format"]
    interface = Interface(**{key: tuple(v) if key in ("inputs", "outputs") else v for key, v in data.items()})
    if stated != interface.id:
        schema.fail("interface", f"its interface_id {stated} is not the fingerprint of its content ({interface.id})")
    integer = values["arith"] == "int"
    pairs = (
        ("inputs", [p["name"] for p in interface.inputs], list(values["inputs"])),
        ("input_ranges", [p["range"] for p in interface.inputs], [list(r) for r in values["input_ranges"]]),
        ("input_ctype", interface.input_ctype, values["input_ctype"]),
        ("outputs", [p["name"] for p in interface.outputs], list(values["outputs"])),
        ("output_lsb", [p["lsb"] for p in interface.outputs],
         list(values["output_lsb"]) if integer else [None] * len(values["outputs"])),
        ("output_ctype", interface.output_ctype, values["output_ctype"] if integer else "float"),
    )
    for key, described, stated_here in pairs:
        if described != stated_here:
            schema.fail("interface", f"disagrees with the manifest's field '{key}'")


_LSB = schema.OrNone(schema.Number(positive=True))
_UNIT = schema.OrNone(schema.Text(min_length=1, max_length=24))
_IDENTIFIER = schema.Text(r"[A-Za-z][A-Za-z0-9_]*", "an identifier", min_length=1, max_length=80)
INTERFACE_FIELDS = (
    schema.Field("interface_id", schema.Text(r"0x[0-9a-f]{8}", "an interface fingerprint (0x and 8 hex digits)")),
    schema.Field("name", schema.OrNone(_IDENTIFIER)),
    schema.Field("coefficients", schema.Choice(COEFFICIENT_SOURCES)),
    schema.Field("arith", schema.Choice(("int", "float32"))),
    schema.Field("input_ctype", schema.Choice(tuple(INPUT_CTYPES))),
    schema.Field("output_ctype", schema.Choice((*OUTPUT_CTYPES, "float"))),
    schema.Field("inputs", schema.List(schema.Record(
        schema.Field("name", schema.Text(min_length=1)),
        schema.Field("range", schema.List(schema.Integer(-(2**32), 2**32), length=2)),
        schema.Field("lsb", _LSB),
        schema.Field("unit", _UNIT)), min_length=1)),
    schema.Field("outputs", schema.List(schema.Record(
        schema.Field("name", schema.Text(min_length=1)),
        schema.Field("lsb", _LSB),
        schema.Field("unit", _UNIT)), min_length=1)),
    schema.Field("fixed_point", schema.OrNone(schema.Record(
        schema.Field("coef_bits", schema.Choice(COEF_BITS)),
        schema.Field("acc_bits", schema.Choice(ACC_BITS)),
        schema.Field("rounding", schema.Choice(ROUNDINGS))))),
    schema.Field("c", schema.OrNone(schema.Record(
        schema.Field("header", schema.Text(min_length=1)),
        schema.Field("function", _IDENTIFIER),
        schema.Field("identifiers", schema.List(_IDENTIFIER, unique=True))))),
    schema.Field("micropython", schema.OrNone(schema.Record(
        schema.Field("module", _IDENTIFIER),
        schema.Field("functions", schema.List(_IDENTIFIER, unique=True)),
        schema.Field("constants", schema.List(_IDENTIFIER, unique=True))))),
    # Absent for compiled coefficients (so their fingerprints stay as they were).
    schema.Field("record", schema.Record(
        schema.Field("layout_version", schema.Integer(1, 2**16 - 1)),
        schema.Field("bytes", schema.Integer(1, 2**40))), default=schema.OMITTED),
)
INTERFACE_SCHEMA = schema.Schema("interface", INTERFACE_FORMAT, *INTERFACE_FIELDS, rules=(_ranges_are_ordered,))
# The same, as a field of another file (the manifest holds the interface it emitted).
INTERFACE_RECORD = schema.Record(schema.Field("format", schema.Choice((INTERFACE_FORMAT,))), *INTERFACE_FIELDS)
