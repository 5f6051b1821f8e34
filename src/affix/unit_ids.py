"""What a unit id may be: the rule shared by the fleet log's reader, the calibration record and its file name.

A unit id is 1 to 32 ASCII letters, digits, '.', '_' or '-', starting with
a letter or a digit.  So it fits the record's fixed 32-byte field (NUL-padded)
and is a safe file name on every common file system as it stands
(``records/UNIT.bin``): no path separator, no '..' of its own, no leading dot,
no space, nothing a shell or a case-insensitive file system would read
otherwise.  Two ids that differ only in case would share a file on a
case-insensitive file system: the fleet refuses such pairs (see
:func:`case_clashes`).
"""
from __future__ import annotations

import re

UNIT_ID_BYTES = 32
_UNIT_ID = re.compile(rf"[A-Za-z0-9][A-Za-z0-9._-]{{0,{UNIT_ID_BYTES - 1}}}")
RULE = f"1 to {UNIT_ID_BYTES} ASCII letters, digits, '.', '_' or '-', starting with a letter or digit"


def unit_id_problem(label: str) -> str | None:
    """Why ``label`` cannot be a unit id, or None when it can."""
    if _UNIT_ID.fullmatch(label):
        return None
    shown = repr(label) if len(label) <= 40 else repr(label[:40]) + f"... ({len(label)} characters)"
    return f"unit id {shown} is not {RULE} (it names the unit's record, a fixed-size field and a file name)"


def case_clashes(labels) -> tuple[str, str] | None:
    """Two labels that differ only in case (their record files would coincide on such a file system), if any."""
    seen: dict[str, str] = {}
    for label in labels:
        other = seen.setdefault(label.lower(), label)
        if other != label:
            return other, label
    return None
