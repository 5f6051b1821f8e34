"""The calibration record: one unit's coefficients, loaded by the firmware at run time.

Every unit of a fleet runs the same firmware; what differs, its integer
coefficients, offsets and shifts, travels in a small self-checking binary
record written to the unit's flash or EEPROM on the production line.  The
layout (little-endian, packed, no padding) is :data:`LAYOUT`; the README
and the emitted header render their tables from it.

:func:`encode` writes a record; :func:`decode` reads one with every check
the emitted loaders make, in the same order and with the same reason codes
(:data:`REASONS`), so the verifier can hold the C and MicroPython loaders to
it.  The last checks re-prove the overflow bound of :mod:`affix.arithmetic`
for the record's own integers, so no record, corrupted or crafted, makes the
emitted arithmetic overflow.
"""
from __future__ import annotations

import struct
import zlib
from dataclasses import dataclass

from affix import schema
from affix.arithmetic import ACC_BITS, COEF_BITS, IntegerEstimator, accumulator_bound
from affix.errors import FileFormatError, UsageError
from affix.unit_ids import UNIT_ID_BYTES, unit_id_problem

MAGIC = b"AfxR"
RECORD_FORMAT = "affix.record/1"  # the decoded form, as plain data (Record.to_dict)
LAYOUT_VERSION = 1
HASH_PREFIX_BYTES = 8
CRC_BYTES = 4


@dataclass(frozen=True)
class Part:
    """One field of the layout: its name, size in bytes (a number, or a formula of N outputs, M inputs
    and C = coefficient bytes) and what it holds."""

    name: str
    size: int | str
    content: str


LAYOUT = (
    Part("magic", 4, f"the bytes {MAGIC.decode()!r}"),
    Part("version", 2, f"layout version, uint16 ({LAYOUT_VERSION})"),
    Part("coef_bits", 1, "coefficient width, uint8: 8, 16 or 32"),
    Part("acc_bits", 1, "accumulator width, uint8: 32 or 64"),
    Part("interface", 4, "the firmware interface's fingerprint, uint32 (NAME_INTERFACE_ID)"),
    Part("n_outputs", 2, "N, uint16"),
    Part("n_inputs", 2, "M, uint16"),
    Part("unit", UNIT_ID_BYTES, f"unit id, ASCII, NUL-padded ({UNIT_ID_BYTES} characters at most)"),
    Part("data_hash", HASH_PREFIX_BYTES, f"the first {HASH_PREFIX_BYTES} bytes of the calibration data's SHA-256"),
    Part("offsets", "8N", "c_i per output, int64, at accumulator scale"),
    Part("shifts", "N", "s_i per output, uint8"),
    Part("coefficients", "C*N*M", "a_ij, int8/int16/int32 (C = coef_bits / 8), output by output"),
    Part("crc", CRC_BYTES, "CRC-32 (zlib's, CRC-32/ISO-HDLC), uint32, of every byte before it"),
)
HEADER_BYTES = sum(part.size for part in LAYOUT if isinstance(part.size, int)) - CRC_BYTES

# Why a record is refused: the codes both emitted loaders return (C: the
# negative code; MicroPython: ValueError with the text), in checking order.
REASONS = (
    (-1, "size", "the record is not as long as this interface's records"),
    (-2, "magic", "not a calibration record (magic number)"),
    (-3, "version", "a record layout version this code does not read"),
    (-4, "interface", "made for another firmware interface"),
    (-5, "crc", "damaged: its CRC-32 does not match"),
    (-6, "shape", "its widths or shape are not this interface's"),
    (-7, "unit", "its unit id is not a valid id"),
    (-8, "shift", "a shift beyond the accumulator"),
    (-9, "bound", "its coefficients can overflow the accumulator over the input box"),
)
CODE = {name: code for code, name, _ in REASONS}


class RecordError(FileFormatError):
    """A record the loaders refuse; ``reason`` is the name in REASONS, ``code`` its number."""

    def __init__(self, reason: str, path=None, detail: str = ""):
        text = dict((name, text) for _, name, text in REASONS)[reason]
        super().__init__(f"calibration record refused ({reason}, {CODE[reason]}): {text}" + (f"; {detail}" if detail else ""),
                         path)
        self.reason, self.code = reason, CODE[reason]


def layout_table() -> str:
    """LAYOUT as the Markdown table the README shows (offsets as formulas of N, M and C)."""
    rows = ["| offset | bytes | field | content |", "|---:|---:|---|---|"]
    offset = "0"
    for part in LAYOUT:
        rows.append(f"| {offset} | {part.size} | `{part.name}` | {part.content} |")
        if isinstance(part.size, int) and offset.isdigit():
            offset = str(int(offset) + part.size)
        else:
            offset = f"{offset} + {part.size}"
    return "\n".join(rows)


@dataclass(frozen=True)
class Contract:
    """What a loader knows of its records: the interface's fingerprint, shape, widths, box and
    accumulator limit (below 2**(acc_bits - 1) where the target caps it)."""

    interface_id: int
    n_outputs: int
    n_inputs: int
    coef_bits: int
    acc_bits: int
    input_ranges: tuple[tuple[int, int], ...]
    output_ctype: str
    rounding: str
    acc_limit: int

    @classmethod
    def of(cls, values: dict) -> "Contract":
        """From a plan or manifest's integer contract (``affix.plan.INTEGER_CONTRACT``) and the interface id."""
        from affix.plan import accumulator_limit

        interface_id = values["interface"]["interface_id"] if "interface" in values else values["interface_id"]
        return cls(int(interface_id, 16), len(values["outputs"]), len(values["inputs"]), values["coef_bits"],
                   values["acc_bits"], tuple(tuple(r) for r in values["input_ranges"]), values["output_ctype"],
                   values["rounding"], accumulator_limit(values))

    @property
    def size(self) -> int:
        return record_size(self.n_outputs, self.n_inputs, self.coef_bits)


def record_size(n_outputs: int, n_inputs: int, coef_bits: int) -> int:
    return HEADER_BYTES + 9 * n_outputs + coef_bits // 8 * n_outputs * n_inputs + CRC_BYTES


def field_sizes(n_outputs: int, n_inputs: int, coef_bits: int) -> list[tuple[Part, int, int]]:
    """(part, offset, size) of every field of LAYOUT for this shape."""
    sizes = {"8N": 8 * n_outputs, "N": n_outputs, "C*N*M": coef_bits // 8 * n_outputs * n_inputs}
    fields, offset = [], 0
    for part in LAYOUT:
        size = sizes.get(part.size, part.size)
        fields.append((part, offset, size))
        offset += size
    return fields


@dataclass(frozen=True)
class Record:
    """A decoded record: plain values (see LAYOUT)."""

    unit: str
    interface_id: int
    coef_bits: int
    acc_bits: int
    offsets: tuple[int, ...]
    shifts: tuple[int, ...]
    coefficients: tuple[tuple[int, ...], ...]
    data_hash: str  # hex of the data hash prefix

    def integer_estimator(self, contract: Contract) -> IntegerEstimator:
        """The exact reference of what the emitted code computes with this record."""
        return IntegerEstimator(self.coefficients, self.offsets, self.shifts, contract.input_ranges,
                                contract.output_ctype, contract.rounding, contract.acc_bits)

    def to_dict(self) -> dict:
        return {"format": RECORD_FORMAT, "unit": self.unit, "interface_id": f"0x{self.interface_id:08x}", "coef_bits": self.coef_bits,
                "acc_bits": self.acc_bits, "offsets": list(self.offsets), "shifts": list(self.shifts),
                "coefficients": [list(row) for row in self.coefficients], "data_hash": self.data_hash}


_COEF_FORMAT = {8: "b", 16: "h", 32: "i"}


def encode(unit: str, coefficients, offsets, shifts, *, coef_bits: int, acc_bits: int, interface_id: int,
           data_sha256: str | None) -> bytes:
    """The record of one unit.  ``interface_id`` is the fingerprint as an integer; ``data_sha256`` the hex
    SHA-256 of the calibration data (None: zeros).  The integers must already pass the box proof."""
    problem = unit_id_problem(unit)
    if problem:
        raise UsageError(problem, parameter="unit")
    if coef_bits not in COEF_BITS or acc_bits not in ACC_BITS:
        raise UsageError(f"widths {coef_bits}/{acc_bits} are not plan widths", parameter="coef_bits")
    n, m = len(coefficients), len(coefficients[0]) if coefficients else 0
    if not (0 < n < 2**16 and 0 < m < 2**16) or len(offsets) != n or len(shifts) != n:
        raise UsageError("a record holds 1 to 65535 outputs and inputs, one offset and shift per output",
                         parameter="coefficients")
    digest = bytes.fromhex(data_sha256)[:HASH_PREFIX_BYTES] if data_sha256 else bytes(HASH_PREFIX_BYTES)
    body = MAGIC + struct.pack("<HBBIHH", LAYOUT_VERSION, coef_bits, acc_bits, interface_id, n, m)
    body += unit.encode("ascii").ljust(UNIT_ID_BYTES, b"\0") + digest
    body += struct.pack(f"<{n}q{n}B", *offsets, *shifts)
    body += struct.pack(f"<{n * m}{_COEF_FORMAT[coef_bits]}", *(a for row in coefficients for a in row))
    return body + struct.pack("<I", zlib.crc32(body))


def nominal_record(values: dict) -> bytes:
    """The record of a manifest's own integers (unit "nominal", no data hash): what verification and
    the target's figures run code that loads records with."""
    return encode("nominal", values["coefficients"], values["offsets"], values["shifts"],
                  coef_bits=values["coef_bits"], acc_bits=values["acc_bits"],
                  interface_id=Contract.of(values).interface_id, data_sha256=None)


def decode(data: bytes, contract: Contract, path=None) -> Record:
    """The record in ``data``, checked as the emitted loaders check it (REASONS, in that order);
    RecordError names the first check that fails."""
    data = bytes(data)
    if len(data) != contract.size:
        raise RecordError("size", path, f"{len(data)} bytes, expected {contract.size}")
    if data[:4] != MAGIC:
        raise RecordError("magic", path)
    version, coef_bits, acc_bits, interface_id, n, m = struct.unpack_from("<HBBIHH", data, 4)
    if version != LAYOUT_VERSION:
        raise RecordError("version", path, f"version {version}, this code reads {LAYOUT_VERSION}")
    if interface_id != contract.interface_id:
        raise RecordError("interface", path, f"0x{interface_id:08x}, this firmware is 0x{contract.interface_id:08x}")
    (crc,) = struct.unpack_from("<I", data, len(data) - CRC_BYTES)
    if crc != zlib.crc32(data[:-CRC_BYTES]):
        raise RecordError("crc", path)
    if (coef_bits, acc_bits, n, m) != (contract.coef_bits, contract.acc_bits, contract.n_outputs, contract.n_inputs):
        raise RecordError("shape", path)
    start = 4 + struct.calcsize("<HBBIHH")
    unit_bytes = data[start : start + UNIT_ID_BYTES]
    unit = unit_bytes.rstrip(b"\0")
    if b"\0" in unit or not unit.isascii() or unit_id_problem(unit.decode("ascii")):
        raise RecordError("unit", path)
    digest = data[start + UNIT_ID_BYTES : HEADER_BYTES]
    offsets = struct.unpack_from(f"<{n}q", data, HEADER_BYTES)
    shifts = struct.unpack_from(f"<{n}B", data, HEADER_BYTES + 8 * n)
    flat = struct.unpack_from(f"<{n * m}{_COEF_FORMAT[coef_bits]}", data, HEADER_BYTES + 9 * n)
    coefficients = tuple(flat[i * m : (i + 1) * m] for i in range(n))
    # Every coefficient is stored in exactly coef_bits, so it fits them; what remains of the proof:
    for shift in shifts:
        if shift > acc_bits - 1:
            raise RecordError("shift", path, f"{shift} > {acc_bits - 1}")
    for row, offset, shift in zip(coefficients, offsets, shifts):
        if accumulator_bound(row, offset, shift, contract.input_ranges, contract.rounding) >= contract.acc_limit:
            raise RecordError("bound", path)
    decoded = Record(unit.decode("ascii"), interface_id, coef_bits, acc_bits, offsets, shifts, coefficients,
                     digest.hex())
    RECORD_SCHEMA.load(decoded.to_dict(), path)  # the decoded form's declaration: every check above in one place
    return decoded


def _shape_agrees(values) -> None:
    n, m = len(values["offsets"]), len(values["coefficients"][0])
    if len(values["shifts"]) != n or len(values["coefficients"]) != n:
        schema.fail("coefficients", "needs one row, offset and shift per output")
    if any(len(row) != m for row in values["coefficients"]):
        schema.fail("coefficients", "rows of unequal length")
    limit = 2 ** (values["coef_bits"] - 1)
    if any(not -limit <= a < limit for row in values["coefficients"] for a in row):
        schema.fail("coefficients", f"a coefficient beyond coef_bits = {values['coef_bits']}")
    if any(s > values["acc_bits"] - 1 for s in values["shifts"]):
        schema.fail("shifts", "a shift beyond the accumulator")


# The decoded form (Record.to_dict): what decode returns, declared like every file affix reads.
RECORD_SCHEMA = schema.Schema(
    "calibration record",
    RECORD_FORMAT,
    schema.Field("unit", schema.Text(r"[A-Za-z0-9][A-Za-z0-9._-]*", "a unit id", min_length=1,
                                     max_length=UNIT_ID_BYTES)),
    schema.Field("interface_id", schema.Text(r"0x[0-9a-f]{8}", "an interface fingerprint (0x and 8 hex digits)")),
    schema.Field("coef_bits", schema.Choice(COEF_BITS)),
    schema.Field("acc_bits", schema.Choice(ACC_BITS)),
    schema.Field("offsets", schema.List(schema.Integer(-(2**63), 2**63 - 1), min_length=1)),
    schema.Field("shifts", schema.List(schema.Integer(0, 63), min_length=1)),
    schema.Field("coefficients", schema.List(schema.List(schema.Integer(-(2**31), 2**31 - 1), min_length=1),
                                             min_length=1)),
    schema.Field("data_hash", schema.Text(r"[0-9a-f]{16}", "16 hex digits")),
    rules=(_shape_agrees,),
)
