"""Each passing unit's calibration record as the files a production line uses.

``records/UNIT.bin`` is the record itself (:mod:`affix.record`);
``records/UNIT.c`` the same bytes as a C array for a build of that one unit;
``records/UNIT.hex`` the same bytes as Intel HEX at the project's flash
address, what a programmer writes into the unit's flash.  A unit id is a
safe file name by its rule (:mod:`affix.unit_ids`).
"""
from __future__ import annotations

import io

from affix import record
from affix._version import __version__
from affix.emit.context import CAUTION
from affix.emit.templates import render

FOLDER = "records"


def unit_record(unit: str, plan, interface, data_sha256: str | None) -> bytes:
    """The record of ``unit`` planned as ``plan`` in ``interface`` (an :class:`affix.interface.Interface`)."""
    return record.encode(unit, plan.coefficients, plan.offsets, plan.shifts, coef_bits=plan.coef_bits,
                         acc_bits=plan.acc_bits, interface_id=int(interface.id, 16), data_sha256=data_sha256)


def record_files(name: str, unit: str, data: bytes, interface_id: str, flash_address: int | None) -> dict:
    """{file name: bytes} of one unit's record: .bin, .c and, with a flash address, .hex."""
    from intelhex import IntelHex

    files = {f"{unit}.bin": data}
    files[f"{unit}.c"] = render("c/record_array.c.jinja", name=name, upper_name=name.upper(), unit=unit,
                                data=list(data), size=len(data), interface_id=interface_id,
                                tool_version=__version__, caution=list(CAUTION)).encode()
    if flash_address is not None:
        image = IntelHex()
        image.frombytes(data, offset=flash_address)
        text = io.StringIO()
        image.write_hex_file(text)
        files[f"{unit}.hex"] = text.getvalue().encode()
    return files
