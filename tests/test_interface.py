"""The pinned firmware interface and its fingerprint in the emitted code.

Sources: the C99 standard (ISO/IEC 9899:1999) 6.7.5.2p1, an array size must
be greater than zero (a constraint, so a conforming compiler must reject it);
C11 (ISO/IEC 9899:2011) 6.7.10, _Static_assert; C++11 (ISO/IEC 14882:2011)
[dcl.dcl]p4, static_assert; GCC and G++ as the compilers that apply them; the
MicroPython unix port as the runtime that imports the module.
"""
from __future__ import annotations

import json
import re
import subprocess
from dataclasses import replace

import pytest

from affix.emit.names import INFIXES
from affix.emit.writer import emit
from affix.errors import FileFormatError
from affix.interface import Interface, describe
from conftest import require
from plans import random_plan

STRICT = ["-Wall", "-Wextra", "-Wpedantic", "-Wconversion", "-Wsign-conversion", "-Werror"]
MODES = {  # each language mode takes another branch of NAME_EXPECT_INTERFACE
    "C99": ("gcc", ["-x", "c", "-std=c99"]),
    "C11": ("gcc", ["-x", "c", "-std=c11"]),
    "C++11": ("g++", ["-x", "c++", "-std=c++11"]),
}


def _caller(folder, expected_id: str):
    """Firmware written against one interface: the README's two lines, then a use of the scale."""
    source = folder / "caller.c"
    source.write_text(
        '#include "probe.h"\n'
        f"PROBE_EXPECT_INTERFACE({expected_id}UL);\n"
        "double first_output(const int16_t *y);\n"
        "double first_output(const int16_t *y) {\n"
        "    int16_t x[PROBE_N_OUTPUTS];\n"
        "    probe_estimate(y, x);\n"
        "    return x[probe_out_x0] * PROBE_lsb_x0;\n"
        "}\n"
    )
    return source


def _compiles(mode, source, tmp_path) -> subprocess.CompletedProcess:
    compiler, flags = MODES[mode]
    return subprocess.run([require(compiler), *flags, *STRICT, "-c", str(source), "-o", str(tmp_path / "caller.o")],
                          capture_output=True, text=True)


@pytest.mark.parametrize("mode", MODES)
def test_code_written_against_one_interface_does_not_build_against_another(tmp_path, mode):
    plan = random_plan(11, 3, 2)
    first = emit(plan, lang="c", name="probe", out_dir=tmp_path / "v1")["interface"]["interface_id"]
    done = _compiles(mode, _caller(tmp_path / "v1", first), tmp_path)
    assert done.returncode == 0, done.stderr
    # The recalibration the interface exists for: the same function, an output scale doubled.
    rescaled = replace(plan, output_lsb=(plan.output_lsb[0] * 2, *plan.output_lsb[1:]))
    second = emit(rescaled, lang="c", name="probe", out_dir=tmp_path / "v2")["interface"]["interface_id"]
    assert second != first
    done = _compiles(mode, _caller(tmp_path / "v2", first), tmp_path)
    assert done.returncode != 0
    expected = "probe_interface_differs" if mode == "C99" else "interface changed"
    assert expected in done.stderr


def test_new_coefficients_keep_the_fingerprint_and_the_scale(tmp_path):
    plan = random_plan(12, 3, 2)
    recalibrated = replace(plan, coefficients=tuple(tuple(a // 2 for a in row) for row in plan.coefficients),
                           offsets=tuple(c // 2 for c in plan.offsets))
    recalibrated.validate()
    old = emit(plan, lang="all", name="probe", out_dir=tmp_path / "a")
    new = emit(recalibrated, lang="all", name="probe", out_dir=tmp_path / "b")
    assert old["interface"] == new["interface"]
    assert (tmp_path / "a" / "probe.h").read_text().count(old["interface"]["interface_id"]) >= 2
    assert (tmp_path / "a" / "probe.c").read_text() != (tmp_path / "b" / "probe.c").read_text()


def test_the_interface_lists_every_name_the_header_declares(tmp_path):
    plan = random_plan(13, 4, 3)
    manifest = emit(plan, lang="c", name="probe", out_dir=tmp_path)
    header = re.sub(r"/\*.*?\*/", "", (tmp_path / "probe.h").read_text(), flags=re.S)
    declared = set(re.findall(r"\b(?:probe|PROBE)_\w+", header))
    assert declared == set(manifest["interface"]["c"]["identifiers"])


def test_every_listed_name_is_a_fixed_word_or_an_infix_and_a_users_name():
    # DEVELOPERS.md "Generated identifiers": with prefix-free infixes that no fixed word starts
    # with, no choice of user names can make two generated identifiers equal.
    plan = random_plan(17, 3, 2)
    listed = describe(plan, "probe", languages=("c",)).c["identifiers"]
    users = set(plan.inputs) | set(plan.outputs)
    assert not any(a != b and b.startswith(a) for a in INFIXES for b in INFIXES)
    for identifier in listed:
        word = identifier.split("_", 1)[1]
        infix = next((i for i in INFIXES if word.startswith(i)), None)
        if infix is None:
            assert not any(word.lower().startswith(i) for i in INFIXES), identifier
        else:
            assert word[len(infix):] in users, identifier


def test_changes_are_listed_one_per_line_and_a_reordering_reads_as_such():
    plan = random_plan(14, 3, 2)
    old = describe(plan, "probe", languages=("c",))
    swapped = replace(plan, inputs=(plan.inputs[1], plan.inputs[0], plan.inputs[2]),
                      input_ranges=(plan.input_ranges[1], plan.input_ranges[0], plan.input_ranges[2]),
                      output_lsb=(plan.output_lsb[0], plan.output_lsb[1] / 2))
    changes = old.changes(describe(swapped, "probe", languages=("c",), units={"x0": "N"}))
    assert "inputs[y0].position: 0 -> 1" in changes and "inputs[y1].position: 1 -> 0" in changes
    assert f"outputs[x1].lsb: {plan.output_lsb[1]} -> {plan.output_lsb[1] / 2}" in changes
    assert 'outputs[x0].unit: null -> "N"' in changes
    assert old.changes(describe(plan, "probe", languages=("c",))) == []


def test_a_hand_edited_interface_file_is_refused(tmp_path):
    interface = describe(random_plan(15), "probe", languages=("c", "micropython"))
    path = tmp_path / "probe.interface.json"
    interface.save(path)
    assert Interface.load(path) == interface
    data = json.loads(path.read_text())
    data["outputs"][0]["lsb"] *= 2
    path.write_text(json.dumps(data))
    with pytest.raises(FileFormatError, match="edited by hand"):
        Interface.load(path)
    data["outputs"][0]["lsb"] = -1
    path.write_text(json.dumps(data))
    with pytest.raises(FileFormatError, match=r"field 'outputs\[0\].lsb': must be > 0"):
        Interface.load(path)


def test_micropython_module_carries_the_scale_and_the_fingerprint(tmp_path):
    micropython = require("micropython")
    plan = random_plan(16, 3, 2)
    manifest = emit(plan, lang="micropython", name="probe", out_dir=tmp_path)
    done = subprocess.run([micropython, "-c", "import probe; print(hex(probe.INTERFACE_ID), probe.LSB)"],
                          cwd=tmp_path, capture_output=True, text=True, timeout=60)
    assert done.returncode == 0, done.stderr
    assert int(done.stdout.split()[0], 16) == int(manifest["interface"]["interface_id"], 16)
    assert [float(v) for v in re.findall(r"[\d.e-]+", done.stdout.split(" ", 1)[1])] == list(plan.output_lsb)
