"""What an emitted estimator costs on its target: instructions per evaluation, flash and stack.

``target_figures(emit_dir, target)`` compiles the emitted C for the target
(its cross compiler, -O2), measures flash (.text + .rodata + .data of an
image holding only the estimator and the libgcc helpers it calls) and
worst-case stack (-fstack-usage), and, on cores the unicorn engine emulates,
runs the estimator over corners and random points of the input box counting
every instruction.  :class:`EmulatedEstimator` is the same build used to run
vectors bit for bit on the emulated core.
"""
from __future__ import annotations

import re
import shutil
import subprocess
import tempfile
from pathlib import Path

import numpy as np

from affix.arithmetic import ctype_bits
from affix.errors import ToolError
from affix.record import nominal_record, record_size
from affix.unit_ids import UNIT_ID_BYTES
from affix.targets import get_target
from affix.targets.emulator import SCRATCH, SCRATCH_SIZE, Emulator
from affix.targets.toolchain import OPTIMIZE, build_image, compiler_path

SIMAVR = "simavr"

COUNTED_VECTORS = 24  # corners first, then random points of the box
_DTYPES = {"int8_t": "<i1", "uint8_t": "<u1", "int16_t": "<i2", "uint16_t": "<u2", "int32_t": "<i4",
           "uint32_t": "<u4"}


class EmulatedEstimator:
    """The emitted C of ``emit_dir`` built for ``target`` and loaded into its emulated core.

    For code that loads a calibration record, ``evaluate`` needs the record's bytes (``record=``),
    which NAME_record_load() unpacks on the core before the calls, and ``load(data)`` is what it
    returns for them."""

    def __init__(self, emit_dir, manifest, target, work_dir):
        self.target = get_target(target)
        self.manifest = manifest
        name = manifest["name"]
        self.records = manifest.get("interface", {}).get("coefficients") == "record"
        self.function = f"{name}_estimate_record" if self.records else f"{name}_estimate"
        self._loader = f"{name}_record_load"
        emit_dir = Path(emit_dir).resolve()
        self.image = build_image(self.target, [emit_dir / f"{name}.c"], self.function, work_dir,
                                 include_dirs=[emit_dir], keep=[self._loader] if self.records else [])
        emulated = self.target.emulator not in (None, SIMAVR)
        self.emulator = Emulator(self.image.elf, self.target.emulator) if emulated else None
        self._in = np.dtype(_DTYPES[manifest["input_ctype"]])
        self._out = np.dtype(_DTYPES[manifest["output_ctype"]])
        self._n_in, self._n_out = len(manifest["inputs"]), len(manifest["outputs"])
        # Scratch memory: the inputs, the outputs, then (code that loads records) the record's bytes
        # and the struct the loader fills (per row at most 16 bytes of start and shift and 8 per coefficient,
        # then the unit id).
        self._x_at = SCRATCH + _rounded(self._n_in * self._in.itemsize)
        self._data_at = self._x_at + _rounded(self._n_out * self._out.itemsize)
        self._rec_at = self._data_at + _rounded(record_size(self._n_out, self._n_in, manifest["coef_bits"])
                                                if self.records else 0)
        end = self._rec_at + (self._n_out * (16 + 8 * self._n_in) + UNIT_ID_BYTES + 8 if self.records else 0)
        if end > SCRATCH + SCRATCH_SIZE:
            raise ValueError("the estimator's arguments do not fit the emulator's scratch memory")

    def load(self, data: bytes) -> int:
        """NAME_record_load()'s code for ``data`` on the core (0: loaded)."""
        self._require_emulator()
        if len(data) > self._rec_at - self._data_at:
            raise ValueError("the record does not fit the emulator's scratch memory")
        self.emulator.write(self._data_at, data)
        self.emulator.call(self._loader, self._rec_at, self._data_at, len(data))
        return self.emulator.result(signed=True)

    def evaluate(self, vectors, *, count: bool = False, record: bytes | None = None
                 ) -> tuple[np.ndarray, list[int], int]:
        """Outputs for each row of ``vectors``; instructions per call (with ``count``); deepest stack."""
        self._require_emulator()
        if self.records != (record is not None):
            raise ValueError("code that loads records needs one (record=), other code takes none")
        if self.records and self.load(record) != 0:
            raise ToolError(f"{self._loader}() refuses the record on the emulated {self.target.name}")
        before = (self._rec_at,) if self.records else ()
        rows = np.asarray(vectors)
        outputs = np.empty((len(rows), self._n_out), dtype=np.int64)
        counts, deepest = [], 0
        for k, row in enumerate(rows):
            self.emulator.write(SCRATCH, np.asarray(row).astype(self._in).tobytes())
            executed, stack = self.emulator.call(self.function, *before, SCRATCH, self._x_at, count=count)
            outputs[k] = np.frombuffer(self.emulator.read(self._x_at, self._n_out * self._out.itemsize),
                                       dtype=self._out)
            counts.append(executed)
            deepest = max(deepest, stack)
        return outputs, counts, deepest

    def _require_emulator(self) -> None:
        if self.emulator is None:
            raise ValueError(f"target {self.target.name} is not emulated")


def _rounded(size: int) -> int:
    """``size`` rounded up to a multiple of 8 bytes (every argument 8-byte aligned)."""
    return -(-size // 8) * 8


def measurement_vectors(input_ranges, count: int = COUNTED_VECTORS, seed: int = 0) -> np.ndarray:
    """Up to half of ``count`` corners of the box (alternating ends), the rest random box points."""
    lo = np.array([r[0] for r in input_ranges], dtype=np.int64)
    hi = np.array([r[1] for r in input_ranges], dtype=np.int64)
    rng = np.random.default_rng(seed)
    corners = [np.where(rng.integers(0, 2, size=len(lo)) == 1, hi, lo) for _ in range(count // 2)]
    inside = rng.integers(lo, hi, size=(count - len(corners), len(lo)), endpoint=True)
    return np.vstack([np.array(corners).reshape(-1, len(lo)), inside])


def figures_text(figures: dict) -> str:
    """The figures of :func:`target_figures` as one line."""
    counted, cycles = figures["instructions_per_evaluation"], figures["cycles_per_evaluation"]
    instructions = "" if counted is None else f"{counted:.0f} instructions per evaluation (emulated), "
    if cycles is not None:
        instructions = f"{cycles:.0f} cycles per evaluation (simavr), "
    return (f"{figures['target']}: {instructions}flash {figures['flash_bytes']} bytes, stack {figures['stack_bytes']} "
            f"bytes ({figures['compiler']} -O2)")


def target_figures(emit_dir, target) -> dict:
    """Instructions (or AVR cycles) per evaluation, flash and stack of the estimator in ``emit_dir``
    (a folder holding one manifest, or a manifest file) on ``target``.

    Plain figures: {"target", "compiler", "flags", "instructions_per_evaluation",
    "instructions_max", "cycles_per_evaluation", "flash_bytes", "stack_bytes",
    "stack_bytes_measured"}; instructions where unicorn emulates the core,
    cycles where simavr simulates it, None otherwise.  Raises ToolError
    (exit 4) when the cross compiler or simulator is missing.
    """
    from affix.verify.check import find_manifest

    target = get_target(target)
    manifest_path, manifest = find_manifest(emit_dir)
    emit_dir = manifest_path.parent
    if manifest["arith"] != "int":
        raise ValueError("target figures are measured for the integer C (emit --arith int)")
    with tempfile.TemporaryDirectory(prefix="affix-target-") as work:
        code = EmulatedEstimator(emit_dir, manifest, target, work)
        figures = {
            "target": target.name,
            "compiler": code.image.compiler,
            "flags": " ".join(code.image.flags),
            "instructions_per_evaluation": None,
            "instructions_max": None,
            "cycles_per_evaluation": None,
            "flash_bytes": code.image.flash_bytes,
            "stack_bytes": code.image.stack_bytes,
            "stack_bytes_measured": None,
        }
        vectors = measurement_vectors(manifest["input_ranges"])
        if code.emulator is not None:
            _, counts, stack = code.evaluate(vectors, count=True,
                                             record=nominal_record(manifest) if code.records else None)
            figures.update(instructions_per_evaluation=float(np.mean(counts)), instructions_max=max(counts),
                           stack_bytes_measured=stack)
        elif target.emulator == SIMAVR:
            figures["cycles_per_evaluation"] = avr_cycles(emit_dir, manifest, vectors, Path(work) / "cycles")
    return figures


def avr_cycles(emit_dir, manifest, vectors, work_dir) -> float:
    """Mean CPU cycles of one call on an ATmega2560 in simavr, counted by its Timer1 (prescaler 1)."""
    from affix.emit.templates import render

    simavr = shutil.which(SIMAVR)
    if simavr is None:
        raise ToolError("'simavr' not found: the avr figures need it (see DEVELOPERS.md)")
    target = get_target("avr")
    name = manifest["name"]
    emit_dir, work_dir = Path(emit_dir).resolve(), Path(work_dir)
    work_dir.mkdir()
    main = work_dir / "timing_main.c"
    main.write_text(render("c/avr_cycles_main.c.jinja", name=name, input_ctype=manifest["input_ctype"],
                           output_ctype=manifest["output_ctype"], input_bits=ctype_bits(manifest["input_ctype"]),
                           vectors=np.asarray(vectors).tolist()))
    elf = work_dir / "timing.elf"
    cc = compiler_path(target)
    done = subprocess.run([cc, *target.cpu_flags, "-std=c99", OPTIMIZE, f"-I{emit_dir}", str(main),
                           str(emit_dir / f"{name}.c"), "-o", str(elf)], capture_output=True, text=True)
    if done.returncode != 0:
        raise ToolError(f"avr-gcc failed: {done.stderr.strip()[-1500:]}")
    run = subprocess.run([simavr, "-m", "atmega2560", "-f", "16000000", str(elf)], capture_output=True, text=True,
                         timeout=600)
    found = re.search(r"cycles=(\d+) calls=(\d+)", run.stdout + run.stderr)
    if not found:
        raise ToolError(f"simavr gave no cycle count: {(run.stderr or run.stdout).strip()[-500:]}")
    return int(found.group(1)) / int(found.group(2))

