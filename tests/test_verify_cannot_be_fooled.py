"""affix verify against every way we know to fool it.

Each case breaks one thing in an emitted folder and expects exit status 1
and one `affix: error:` line naming what is wrong: the entry point (C
NAME_estimate/NAME_selftest; MicroPython estimate, estimate_into,
estimate_into_viper, self_test) or the file.  Where the code itself is
corrupted, the manifest is re-hashed (tests/conftest.py: rehash), as a faulty
emitter would have written it, so the fault must be found by running the
code; the hash check is tested on its own.  The references are the exact
integer arithmetic of affix.arithmetic (Python integers) and the real
MicroPython unix port.
"""
from __future__ import annotations

import re
from pathlib import Path

import pytest

from affix.emit.writer import emit
from conftest import rehash, require, run_affix
from plans import random_plan

VECTORS = "300"


def emitted(folder: Path, lang: str = "all", seed: int = 4, name: str = "probe", **options) -> Path:
    """Emit a small plan; the tools that verifying it needs are required."""
    if lang in ("all", "c"):
        require("gcc")
    if lang in ("all", "micropython"):
        require("micropython")
        require("mpy-cross")
    emit(random_plan(seed, 3, 2, ranges="int16"), lang=lang, name=name, out_dir=folder, **options)
    return folder


def tamper(folder: Path, filename: str, change, *, keep_hash: bool = True) -> None:
    """Apply ``change`` (text -> text) to a file; with ``keep_hash`` the manifest is re-hashed to match."""
    path = folder / filename
    text = path.read_text()
    changed = change(text)
    assert changed != text, "the tampering must change the file"
    path.write_text(changed)
    if keep_hash:
        rehash(folder / "probe.manifest.json")


def verify_fails(path, *fragments) -> str:
    """Run the CLI; assert exit 1, one error line holding each fragment; return that line."""
    done = run_affix("verify", path, "--vectors", VECTORS)
    assert done.returncode == 1, done.stdout + done.stderr
    lines = done.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("affix: error: "), done.stderr
    assert "Traceback" not in done.stdout + done.stderr
    for fragment in fragments:
        assert fragment in lines[0], (fragment, lines[0])
    return lines[0]


def _change_number_after(*markers: str, how=lambda v: v ^ 1):
    """A change of the first integer after the markers (found in turn): by
    default its lowest bit flipped, which keeps it within its type."""

    def change(text: str) -> str:
        start = 0
        for marker in markers:
            start = text.index(marker, start) + len(marker)
        match = re.compile(r"-?\d+").search(text, start)
        return text[: match.start()] + str(how(int(match.group()))) + text[match.end():]

    return change


# --- C -------------------------------------------------------------------------


@pytest.mark.bad_input("verify")
@pytest.mark.parametrize("style", ["table", "unrolled"])
def test_a_wrong_c_estimator_is_named(tmp_path, style):
    require("gcc")
    folder = emitted(tmp_path, "c", style=style)
    # The first coefficient, as the table lists it or the unrolled code writes it.
    first = random_plan(4, 3, 2, ranges="int16").coefficients[0][0]
    written = f"{{ {first}, " if style == "table" else f"INT32_C({first})"
    tamper(folder, "probe.c", lambda text: text.replace(written, written.replace(str(first), str(first // 2 + 77)), 1))
    verify_fails(folder, "C probe_estimate()", "mismatches")


@pytest.mark.bad_input("verify")
@pytest.mark.parametrize("arith", ["int", "float32"])
def test_a_wrong_c_self_test_table_is_named(tmp_path, arith):
    require("gcc")
    folder = emitted(tmp_path, "c", arith=arith)
    if arith == "int":
        change = _change_number_after("expected[8][PROBE_N_OUTPUTS] = {")
    else:  # the first expected float, its first decimal changed: another float32 by far
        change = lambda text: re.sub(r"(expected\[8\]\[PROBE_N_OUTPUTS\] = \{\s*\{ -?\d\.)(\d)",  # noqa: E731
                                     lambda m: m.group(1) + str((int(m.group(2)) + 1) % 10), text, count=1)
    tamper(folder, "probe.c", change)
    line = verify_fails(folder, "C probe_selftest()", "wrong outputs")
    assert "probe_estimate" not in line  # the estimator itself is right


@pytest.mark.bad_input("verify")
def test_c_that_does_not_compile_is_exit_1_with_the_compiler_log_outside_the_folder(tmp_path):
    require("gcc")
    folder = emitted(tmp_path / "out", "c")
    tamper(folder, "probe.c", lambda text: text.replace('#include "probe.h"', '#include "probe.h"\nint probe_broken = ;', 1))
    line = verify_fails(folder, "does not compile", "probe.c")
    log = Path(re.search(r"messages are in (\S+\.log)", line).group(1))
    assert log.is_file() and "error" in log.read_text()
    assert folder.resolve() not in log.resolve().parents  # nothing written into the user's folder
    assert sorted(p.name for p in folder.iterdir()) == ["probe.c", "probe.h", "probe.manifest.json"]


@pytest.mark.bad_input("verify")
def test_a_header_that_breaks_the_build_is_exit_1(tmp_path):
    require("gcc")
    folder = emitted(tmp_path, "c")
    tamper(folder, "probe.h", lambda text: text.replace("#include <stdint.h>", "#include <stdint.h>\n#error broken", 1))
    verify_fails(folder, "does not compile")


# --- MicroPython -----------------------------------------------------------------


def _in_function(function: str, old: str, new: str):
    """A change of the first ``old`` inside ``def function(`` only."""

    def change(text: str) -> str:
        start = text.index(f"def {function}(")
        end = text.index("\ndef ", start + 1) if "\ndef " in text[start + 1:] else len(text)
        body = text[start:end]
        assert old in body
        return text[:start] + body.replace(old, new, 1) + text[end:]

    return change


@pytest.mark.bad_input("verify")
def test_a_wrong_list_returning_estimate_is_named(tmp_path):
    require("micropython")
    folder = emitted(tmp_path)
    tamper(folder, "probe.py", _in_function("estimate", "    return out", "    out[0] += 1\n    return out"))
    line = verify_fails(folder, "MicroPython probe.py estimate():", "mismatches")
    assert "estimate_into()" not in line and "self_test" not in line


@pytest.mark.bad_input("verify")
def test_a_wrong_estimate_into_is_named(tmp_path):
    require("micropython")
    folder = emitted(tmp_path)
    tamper(folder, "probe.py", _in_function("estimate_into", "out[0] = x", "out[0] = x ^ 1"))
    verify_fails(folder, "MicroPython probe.py estimate_into():")


@pytest.mark.bad_input("verify")
def test_a_wrong_viper_variant_is_named(tmp_path):
    require("micropython")
    folder = emitted(tmp_path)
    assert "def estimate_into_viper(" in (folder / "probe.py").read_text()
    tamper(folder, "probe.py", _in_function("estimate_into_viper", "out[0] = x", "out[0] = x ^ 1"))
    line = verify_fails(folder, "MicroPython probe.py estimate_into_viper():")
    assert "estimate_into()" not in line and "estimate()" not in line


@pytest.mark.bad_input("verify")
def test_a_wrong_micropython_self_test_table_is_named(tmp_path):
    require("micropython")
    folder = emitted(tmp_path)
    tamper(folder, "probe.py", _change_number_after("_CHECKS = (", "), ("))  # an expected output
    line = verify_fails(folder, "MicroPython probe.py self_test(): returns False")
    assert "mismatches" not in line


@pytest.mark.bad_input("verify")
@pytest.mark.parametrize("fault, fragment", [
    ("def estimate(y)\n", "SyntaxError"),  # the colon lost
    ("_N_OUTPUTS = const(2)\nundefined_name()\n", "NameError"),  # raises at import
])
def test_a_module_that_does_not_import_is_one_line(tmp_path, fault, fragment):
    require("micropython")
    folder = emitted(tmp_path)
    target = "def estimate(y):\n" if fault.startswith("def") else "_N_OUTPUTS = const(2)\n"
    tamper(folder, "probe.py", lambda text: text.replace(target, fault, 1))
    verify_fails(folder, "probe.py does not import in MicroPython", fragment)


@pytest.mark.bad_input("verify")
@pytest.mark.parametrize("function, line, raising, fragments", [
    ("estimate_into", "    out[0] = x", "    out[0] = x // 0", ("MicroPython probe.py estimate_into():", "ZeroDivisionError")),
    ("self_test", "    return True", "    return _CHECKS[99]", ("self_test() raised", "IndexError")),
])
def test_a_function_that_raises_is_one_line(tmp_path, function, line, raising, fragments):
    folder = emitted(tmp_path)
    tamper(folder, "probe.py", _in_function(function, line, raising))
    verify_fails(folder, *fragments)


@pytest.mark.bad_input("verify")
def test_a_module_mpy_cross_refuses_is_named(tmp_path):
    require("micropython")
    require("mpy-cross")
    folder = emitted(tmp_path)
    # Runs in the unix port (64-bit viper words) but is no 32-bit viper code:
    # a literal beyond the 32-bit ports' small ints meets a machine word.
    tamper(folder, "probe.py", _in_function("estimate_into_viper", "    # x0", "    z = 1099511627776 + y0\n    # x0"))
    verify_fails(folder, "(mpy-cross)", "refuses probe.py")


# --- the files against the manifest ----------------------------------------------


@pytest.mark.bad_input("verify")
@pytest.mark.parametrize("filename", ["probe.c", "probe.h", "probe.py"])
def test_a_file_changed_after_emit_is_named(tmp_path, filename):
    folder = emitted(tmp_path)
    # Only a comment changes: the code would still pass, the hash must not.
    tamper(folder, filename, lambda text: text.replace("Generated by affix", "Written by hand", 1)
           if "Generated by affix" in text else text.replace("generated by affix", "written by hand", 1),
           keep_hash=False)
    verify_fails(folder, f"{filename}: its SHA-256 differs from the manifest's")


@pytest.mark.bad_input("verify")
@pytest.mark.parametrize("filename", ["probe.h", "probe.py"])
def test_a_missing_file_is_named(tmp_path, filename):
    folder = emitted(tmp_path)
    (folder / filename).unlink()
    verify_fails(folder, f"{filename}: listed in the manifest but missing")


def test_c_then_micropython_leaves_no_c_to_skip(tmp_path):
    # An emit replaces what the earlier emit of the name wrote: the folder
    # holds exactly what the manifest lists, so nothing in it goes unchecked.
    require("micropython")
    emitted(tmp_path, "c")
    emitted(tmp_path, "micropython")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["probe.manifest.json", "probe.py"]
    done = run_affix("verify", tmp_path, "--vectors", VECTORS)
    assert done.returncode == 0, done.stdout + done.stderr


@pytest.mark.bad_input("verify")
def test_a_generated_file_the_manifest_does_not_list_is_not_skipped(tmp_path):
    # The C of another plan, copied in beside a MicroPython-only emit: the
    # manifest describes none of it, so it must not pass unseen.
    emitted(tmp_path / "other", "c", seed=5)
    emitted(tmp_path / "fw", "micropython")
    for name in ("probe.c", "probe.h"):
        (tmp_path / "fw" / name).write_bytes((tmp_path / "other" / name).read_bytes())
    verify_fails(tmp_path / "fw", "probe.c: not in probe's manifest")


# --- several estimators in one folder ---------------------------------------------


def test_each_manifest_in_a_folder_is_verified(tmp_path):
    require("gcc")
    emitted(tmp_path, "c", name="left")
    emitted(tmp_path, "c", seed=6, name="right")
    done = run_affix("verify", tmp_path, "--vectors", VECTORS)
    assert done.returncode == 0, done.stdout + done.stderr
    verdicts = [line for line in done.stdout.splitlines() if line.startswith("PASS")]
    assert [v.split()[-1] for v in verdicts] == ["left", "right"]
    # One manifest named alone: only that estimator.
    done = run_affix("verify", tmp_path / "right.manifest.json", "--vectors", VECTORS)
    assert done.returncode == 0 and "of right" in done.stdout and "of left" not in done.stdout


@pytest.mark.bad_input("verify")
def test_one_failing_estimator_among_several_is_named(tmp_path):
    require("gcc")
    emitted(tmp_path, "c", name="left")
    emitted(tmp_path, "c", seed=6, name="right")
    (tmp_path / "left.h").write_text((tmp_path / "left.h").read_text() + "\n")
    line = verify_fails(tmp_path, "left.h: its SHA-256 differs")
    assert "right" not in line
    done = run_affix("verify", tmp_path, "--vectors", VECTORS)
    assert "PASS: 0 mismatches" in done.stdout and "of right" in done.stdout  # the other was still checked
