"""The calibration record: its layout, its CRC and both emitted loaders against the reference decoder.

Every check is made three ways: affix.record.decode (the reference), the
emitted C through cffi and the emitted MicroPython in the real unix port.
"""
from __future__ import annotations

import struct
import subprocess
import zlib
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest

from affix import record
from affix.arithmetic import INPUT_CTYPES
from affix.emit.writer import emit
from affix.emit.templates import render
from affix.interface import Interface
from affix.record import CODE, Contract, RecordError, decode, encode
from affix.verify.c_build import COMPILE_FLAGS, load_c
from affix.verify.micropython_run import run_micropython, tool
from conftest import require
from plans import random_plan

# Plans of every coefficient width, both accumulators, signed and unsigned boxes, both roundings.
PLANS = {
    "16-bit, acc32": dict(seed=21, n_inputs=4, n_outputs=3),
    "32-bit, acc64, uint16 box": dict(seed=22, n_inputs=5, n_outputs=2, ranges="uint16", coef_bits=32, acc_bits=64,
                                      output_ctype="int32_t"),
    "8-bit, acc32, floor": dict(seed=23, n_inputs=2, n_outputs=2, ranges="uint8", coef_bits=8, rounding="floor"),
    # Every nominal shift 32 or more: the code tests each loaded shift and floors the high word alone.
    "32-bit, acc64, shifts from 32": dict(seed=24, n_inputs=4, n_outputs=3, ranges="int16", coef_bits=32,
                                          acc_bits=64, gain_scale=1e3),
}
TYPE_LIMITS = {"int8_t": ("INT8_MIN", "INT8_MAX"), "uint8_t": ("0", "UINT8_MAX"), "int16_t": ("INT16_MIN", "INT16_MAX"),
               "uint16_t": ("0", "UINT16_MAX"), "int32_t": ("INT32_MIN", "INT32_MAX"), "uint32_t": ("0", "UINT32_MAX")}


class Emitted:
    """A plan emitted as code that loads records, and the three ways of loading one."""

    def __init__(self, folder: Path, kind: str):
        seed = PLANS[kind].pop("seed") if "seed" in PLANS[kind] else 0
        options = dict(PLANS[kind])
        PLANS[kind]["seed"] = seed
        self.plan = random_plan(seed, **options)
        self.folder = folder
        self.manifest = emit(self.plan, lang="all", name="probe", out_dir=folder, coefficients="record")
        self.contract = Contract.of(self.manifest)
        self.record = self.unit_record("SN-0001")

    def unit_record(self, unit: str, plan=None) -> bytes:
        plan = plan or self.plan
        return encode(unit, plan.coefficients, plan.offsets, plan.shifts, coef_bits=plan.coef_bits,
                      acc_bits=plan.acc_bits, interface_id=self.contract.interface_id, data_sha256="ab" * 32)

    def reference(self, data: bytes) -> str:
        try:
            decode(data, self.contract)
        except RecordError as exc:
            return exc.reason
        return "ok"

    def c_codes(self, records) -> list[str]:
        code = load_c(self.folder, self.manifest)
        names = {value: name for name, value in CODE.items()}
        return [names.get(code.load(data), "ok") for data in records]

    def micropython_codes(self, records) -> list[str]:
        codes, _ = run_micropython(self.folder / "probe.py", np.zeros((1, len(self.plan.inputs)), np.int64),
                                   variant="record", records=list(records))
        return codes


@pytest.fixture(scope="module", params=list(PLANS))
def emitted(request, tmp_path_factory):
    return Emitted(tmp_path_factory.mktemp("record"), request.param)


def with_crc(body: bytes) -> bytes:
    """A record's bytes with a CRC recomputed over the rest: a crafted record, not a damaged one."""
    return body[:-4] + struct.pack("<I", zlib.crc32(body[:-4]))


def test_crc_is_crc32_iso_hdlc():
    # CRC-32/ISO-HDLC (the zlib and PNG CRC) of the ASCII digits "123456789" is 0xCBF43926: the check value of
    # the catalogue of parametrised CRC algorithms (CRC RevEng) and of ITU-T V.42's CRC-32 (from memory).
    assert zlib.crc32(b"123456789") == 0xCBF43926
    data = encode("A", [[1]], [0], [0], coef_bits=8, acc_bits=32, interface_id=1, data_sha256=None)
    assert struct.unpack("<I", data[-4:])[0] == zlib.crc32(data[:-4])


def test_emitted_crcs_give_the_check_value_and_zlibs(emitted, tmp_path):
    """The loaders' own CRC routines, called directly: C from a program that includes the emitted source
    (its functions are static), MicroPython's _crc32 in the unix port; both against zlib.crc32."""
    require("gcc")
    require("micropython")
    rng = np.random.default_rng(5)
    samples = [b"123456789", b"", bytes(range(256)), rng.integers(0, 256, 1000, dtype=np.uint8).tobytes()]
    expected = [zlib.crc32(s) for s in samples]
    assert expected[0] == 0xCBF43926
    program = tmp_path / "crc.c"
    arrays = "".join(f"static const uint8_t s{k}[] = {{{', '.join(map(str, s or b'0'))}}};\n"
                     for k, s in enumerate(samples))
    calls = "".join(f'    printf("%lu\\n", (unsigned long)probe_crc32(s{k}, {len(s)}u));\n' for k, s in enumerate(samples))
    program.write_text(f'#include <stdio.h>\n#include "probe.c"\n{arrays}int main(void)\n{{\n{calls}    return 0;\n}}\n')
    exe = tmp_path / "crc"
    subprocess.run(["gcc", *COMPILE_FLAGS, f"-I{emitted.folder}", str(program), "-o", str(exe)], check=True)
    assert [int(v) for v in subprocess.run([str(exe)], capture_output=True, text=True, check=True).stdout.split()] \
        == expected
    script = tmp_path / "crc.py"
    script.write_text("import probe\n" + "".join(f"print(probe._crc32({s!r}, {len(s)}))\n" for s in samples))
    (tmp_path / "probe.py").write_bytes((emitted.folder / "probe.py").read_bytes())
    done = subprocess.run([tool("micropython"), str(script)], capture_output=True, text=True, cwd=tmp_path, check=True)
    assert [int(v) for v in done.stdout.split()] == expected


def test_layout_against_struct(emitted):
    """The record read back field by field with Python's struct module, as README's table lays it out."""
    plan, data = emitted.plan, emitted.record
    n, m, c = len(plan.outputs), len(plan.inputs), plan.coef_bits // 8
    code = {1: "b", 2: "h", 4: "i"}[c]
    layout = f"<4sHBBIHH32s8s{n}q{n}B{n * m}{code}I"
    assert struct.calcsize(layout) == len(data) == emitted.contract.size == emitted.manifest["interface"]["record"]["bytes"]
    magic, version, coef_bits, acc_bits, interface, n_out, n_in, unit, digest, *rest = struct.unpack(layout, data)
    assert (magic, version, coef_bits, acc_bits) == (b"AfxR", 1, plan.coef_bits, plan.acc_bits)
    assert f"0x{interface:08x}" == emitted.manifest["interface"]["interface_id"]
    assert (n_out, n_in, unit, digest) == (n, m, b"SN-0001".ljust(32, b"\0"), bytes.fromhex("ab" * 8))
    assert tuple(rest[:n]) == plan.offsets and tuple(rest[n:2 * n]) == plan.shifts
    assert tuple(rest[2 * n:-1]) == tuple(a for row in plan.coefficients for a in row)
    assert rest[-1] == zlib.crc32(data[:-4])
    # The offsets the table in the emitted header gives are the same.
    header = (emitted.folder / "probe.h").read_text()
    assert f"{len(data) - 4:6d}      4  crc" in header


def test_the_record_decodes_to_the_plans_integers(emitted):
    decoded = decode(emitted.record, emitted.contract)
    assert (decoded.coefficients, decoded.offsets, decoded.shifts) == \
        (emitted.plan.coefficients, emitted.plan.offsets, emitted.plan.shifts)
    assert decoded.unit == "SN-0001" and decoded.data_hash == "ab" * 8


@pytest.mark.bad_input("verify")
def test_every_bit_flip_and_every_truncation_is_refused_by_both_loaders(emitted):
    require("gcc")
    require("micropython")
    data = emitted.record
    flips = [data[:k // 8] + bytes([data[k // 8] ^ (1 << (k % 8))]) + data[k // 8 + 1:] for k in range(8 * len(data))]
    cuts = [data[:size] for size in range(len(data))] + [data + b"\0"]
    damaged = flips + cuts
    expected = [emitted.reference(d) for d in damaged]
    assert "ok" not in expected
    # A flip in the CRC's own bytes or anywhere before them is a CRC failure unless an earlier check catches it.
    assert set(expected[:8 * len(data)]) <= {"magic", "version", "interface", "crc"}
    assert set(expected[8 * len(data):]) == {"size"}
    assert emitted.c_codes(damaged) == expected
    assert emitted.micropython_codes(damaged) == expected


def crafted(emitted, **change) -> bytes:
    """The record with a field changed and its CRC made valid again."""
    plan = emitted.plan
    fields = dict(coefficients=plan.coefficients, offsets=plan.offsets, shifts=plan.shifts)
    fields.update(change)
    body = bytearray(encode("SN-0001", fields["coefficients"], fields["offsets"], fields["shifts"],
                            coef_bits=plan.coef_bits, acc_bits=plan.acc_bits,
                            interface_id=emitted.contract.interface_id, data_sha256=None))
    return with_crc(bytes(body))


def patched(data: bytes, offset: int, new: bytes) -> bytes:
    return with_crc(data[:offset] + new + data[offset + len(new):])


@pytest.mark.bad_input("verify")
def test_records_with_a_valid_crc_that_break_the_proof_are_refused(emitted):
    """Crafted records, CRC and all: each is refused for the right reason by all three readers."""
    require("gcc")
    require("micropython")
    plan, data = emitted.plan, emitted.record
    where = {part.name: offset for part, offset, _ in record.field_sizes(len(plan.outputs), len(plan.inputs),
                                                                          plan.coef_bits)}
    limit = 2 ** (plan.coef_bits - 1) - 1
    n = len(plan.outputs)
    cases = {
        # the offset one count below the accumulator's limit, and every coefficient at its width's largest
        # value: each term alone breaks the bound
        "bound": crafted(emitted, coefficients=[[limit] * len(plan.inputs)] * n,
                         offsets=[emitted.contract.acc_limit - 1] * n),
        "shift": crafted(emitted, shifts=[plan.acc_bits] + list(plan.shifts[1:])),
        "unit": patched(data, where["unit"], b"../etc".ljust(32, b"\0")),
        "shape": patched(data, where["n_outputs"], struct.pack("<H", n + 1)),
        "version": patched(data, where["version"], struct.pack("<H", 2)),
        "interface": patched(data, where["interface"], struct.pack("<I", emitted.contract.interface_id ^ 1)),
    }
    # The offset alone at the accumulator's limit (|c| = 2^(acc-1)): refused before any term is added.
    offset_only = crafted(emitted, offsets=[-(2 ** (plan.acc_bits - 1))] + list(plan.offsets[1:]))
    records = list(cases.values()) + [offset_only]
    expected = list(cases) + ["bound"]
    assert [emitted.reference(r) for r in records] == expected
    assert emitted.c_codes(records) == expected
    assert emitted.micropython_codes(records) == expected


@pytest.mark.bad_input("verify")
def test_a_record_of_another_interface_is_refused(emitted):
    """Same shape and widths, another scale: the fingerprint differs, and so does the verdict."""
    other = Interface.from_dict(emitted.manifest["interface"])
    changed = replace(other, outputs=({**other.outputs[0], "lsb": other.outputs[0]["lsb"] * 2},) + other.outputs[1:])
    assert changed.id != other.id
    plan = emitted.plan
    data = encode("SN-0001", plan.coefficients, plan.offsets, plan.shifts, coef_bits=plan.coef_bits,
                  acc_bits=plan.acc_bits, interface_id=int(changed.id, 16), data_sha256=None)
    assert emitted.reference(data) == "interface"
    assert emitted.c_codes([data]) == ["interface"]
    assert emitted.micropython_codes([data]) == ["interface"]


def test_a_record_at_the_bound_loads_and_computes_what_the_reference_does(emitted):
    """The largest record the proof allows: every term and the offset filling the accumulator to its last
    count; it loads everywhere, and both languages compute the reference's outputs on the box's corners."""
    require("gcc")
    require("micropython")
    plan = emitted.plan
    reach = [max(abs(lo), abs(hi)) for lo, hi in plan.input_ranges]
    room = emitted.contract.acc_limit - 1 - (2 ** (plan.shifts[0] - 1) if plan.shifts[0] and plan.rounding == "nearest" else 0)
    first = [min(2 ** (plan.coef_bits - 1) - 1, room // (len(reach) + 1) // r) for r in reach]
    offset = room - sum(a * r for a, r in zip(first, reach))
    data = crafted(emitted, coefficients=[first] + list(plan.coefficients[1:]),
                   offsets=[-offset] + list(plan.offsets[1:]))
    decoded = decode(data, emitted.contract)
    assert record.accumulator_bound(decoded.coefficients[0], decoded.offsets[0], decoded.shifts[0],
                                    plan.input_ranges, plan.rounding) == emitted.contract.acc_limit - 1
    lo, hi = np.array(plan.input_ranges).T
    corners = np.array([np.where((np.arange(len(lo)) >> 0) & (1 << k), hi, lo) for k in range(len(lo))] + [lo, hi])
    expected = decoded.integer_estimator(emitted.contract).evaluate(corners)
    c = load_c(emitted.folder, emitted.manifest)
    assert np.array_equal(c.evaluate(corners, record=data), expected)
    codes, (outputs,) = run_micropython(emitted.folder / "probe.py", corners, variant="record", records=[data])
    assert codes == ["ok"] and np.array_equal(outputs, expected)


def test_estimate_record_into_allocates_nothing(tmp_path):
    """On a MicroPython target every intermediate is a small int, so the loaded record's estimator runs
    with the heap locked (micropython.heap_lock) and leaves mem_total unchanged."""
    require("micropython")
    plan = random_plan(31, 4, 3, fill=0.45)  # |acc + r| < 2^30: the small ints of a 32-bit port
    plan = replace(plan, target="micropython")
    manifest = emit(plan, lang="micropython", name="probe", out_dir=tmp_path, coefficients="record")
    contract = Contract.of(manifest)
    data = encode("SN-9", plan.coefficients, plan.offsets, plan.shifts, coef_bits=plan.coef_bits,
                  acc_bits=plan.acc_bits, interface_id=contract.interface_id, data_sha256=None)
    y = np.array([[lo for lo, _ in plan.input_ranges], [hi for _, hi in plan.input_ranges]], dtype=np.int64)
    codes, (outputs,) = run_micropython(tmp_path / "probe.py", y, variant="record", records=[data], check_alloc=True)
    assert codes == ["ok"]
    assert np.array_equal(outputs, decode(data, contract).integer_estimator(contract).evaluate(y))


@pytest.mark.bad_input("verify")
def test_sanitizers_over_the_loader_fed_random_bytes(emitted, tmp_path):
    """Random byte strings of random sizes, and the record with random bytes changed and its CRC made
    valid again (so the checks after the CRC and the estimator see crafted values): under UBSan and ASan
    (C99 §6.5p5 overflow, §6.5.7p3 shifts, reads past the buffer) every one runs clean and gets the
    reference's verdict."""
    require("gcc")
    from test_sanitizers import SANITIZE

    rng = np.random.default_rng(17)
    data = emitted.record
    records = [rng.integers(0, 256, int(rng.integers(0, 2 * len(data))), dtype=np.uint8).tobytes() for _ in range(200)]
    records += [rng.integers(0, 256, len(data), dtype=np.uint8).tobytes() for _ in range(100)]
    for _ in range(1500):
        body = bytearray(data)
        for k in rng.integers(0, len(data) - 4, int(rng.integers(1, 4))):
            body[k] = int(rng.integers(0, 256))
        records.append(with_crc(bytes(body)))
    limit, n = 2 ** (emitted.plan.coef_bits - 1) - 1, len(emitted.plan.outputs)
    records += [crafted(emitted, coefficients=[[limit] * len(emitted.plan.inputs)] * n,
                        offsets=[emitted.contract.acc_limit - 1] * n),
                crafted(emitted, offsets=[-emitted.contract.acc_limit] * n)]
    expected = [emitted.reference(r) for r in records]
    assert {"magic", "size", "bound", "ok"} <= set(expected) and len(set(expected)) >= 6
    source = tmp_path / "driver.c"
    low, high = TYPE_LIMITS[emitted.plan.input_ctype]
    source.write_text(render("c/record_fuzz_driver.c.jinja", name="probe", input_ctype=emitted.plan.input_ctype,
                             output_ctype=emitted.plan.output_ctype, input_min=low, input_max=high))
    exe = tmp_path / "driver"
    subprocess.run(["gcc", *COMPILE_FLAGS, *SANITIZE, f"-I{emitted.folder}", str(emitted.folder / "probe.c"),
                    str(source), "-o", str(exe)], check=True)
    stored = tmp_path / "records.bin"
    stored.write_bytes(b"".join(struct.pack("<I", len(r)) + r for r in records))
    done = subprocess.run([str(exe), str(stored)], capture_output=True, text=True)
    assert done.returncode == 0, done.stderr[-3000:]  # a sanitizer report ends the run with an error
    names = {value: name for name, value in CODE.items()}
    lines = done.stdout.splitlines()
    assert [names.get(int(line.split()[0]), "ok") for line in lines] == expected
    type_lo, type_hi = INPUT_CTYPES[emitted.plan.input_ctype]
    ends = np.array([[type_lo] * len(emitted.plan.inputs), [type_hi] * len(emitted.plan.inputs)], dtype=np.int64)
    loaded = [(line, r) for line, r in zip(lines, records) if line.split()[0] == "0"]
    assert loaded  # the crafted records that pass the proof ran through the estimator too
    for line, data_k in loaded:
        expected_outputs = decode(data_k, emitted.contract).integer_estimator(emitted.contract).evaluate(ends)
        assert [int(v) for v in line.split()[1:]] == expected_outputs.ravel().tolist()


def test_the_readme_shows_the_layout_the_code_reads():
    """The README's table is rendered from the same definition as the header's and the codec's."""
    readme = (Path(__file__).parent.parent / "README.md").read_text()
    assert record.layout_table() in readme
    for code, name, text in record.REASONS:
        assert f"| {code} | `NAME_RECORD_E_{name.upper()}` | `{name}` | {text} |" in readme
