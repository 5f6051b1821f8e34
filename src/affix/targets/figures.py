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

import tempfile
from pathlib import Path

import numpy as np

from affix.targets import get_target
from affix.targets.emulator import SCRATCH, SCRATCH_SIZE, Emulator
from affix.targets.toolchain import build_image

COUNTED_VECTORS = 24  # corners first, then random points of the box
_DTYPES = {"int8_t": "<i1", "uint8_t": "<u1", "int16_t": "<i2", "uint16_t": "<u2", "int32_t": "<i4",
           "uint32_t": "<u4"}


class EmulatedEstimator:
    """The emitted C of ``emit_dir`` built for ``target`` and loaded into its emulated core."""

    def __init__(self, emit_dir, manifest, target, work_dir):
        self.target = get_target(target)
        self.manifest = manifest
        name = manifest["name"]
        self.function = f"{name}_estimate"
        emit_dir = Path(emit_dir).resolve()
        self.image = build_image(self.target, [emit_dir / f"{name}.c"], self.function, work_dir,
                                 include_dirs=[emit_dir])
        self.emulator = Emulator(self.image.elf, self.target.emulator) if self.target.emulator else None
        self._in = np.dtype(_DTYPES[manifest["input_ctype"]])
        self._out = np.dtype(_DTYPES[manifest["output_ctype"]])
        self._n_in, self._n_out = len(manifest["inputs"]), len(manifest["outputs"])
        if self._n_in * self._in.itemsize + self._n_out * self._out.itemsize + 8 > SCRATCH_SIZE:
            raise ValueError("the estimator's arguments do not fit the emulator's scratch memory")

    def evaluate(self, vectors, *, count: bool = False) -> tuple[np.ndarray, list[int], int]:
        """Outputs for each row of ``vectors``; instructions per call (with ``count``); deepest stack."""
        if self.emulator is None:
            raise ValueError(f"target {self.target.name} is not emulated")
        y_at = SCRATCH
        x_at = SCRATCH + -(-self._n_in * self._in.itemsize // 8) * 8
        rows = np.asarray(vectors)
        outputs = np.empty((len(rows), self._n_out), dtype=np.int64)
        counts, deepest = [], 0
        for k, row in enumerate(rows):
            self.emulator.write(y_at, np.asarray(row).astype(self._in).tobytes())
            executed, stack = self.emulator.call(self.function, y_at, x_at, count=count)
            outputs[k] = np.frombuffer(self.emulator.read(x_at, self._n_out * self._out.itemsize), dtype=self._out)
            counts.append(executed)
            deepest = max(deepest, stack)
        return outputs, counts, deepest


def measurement_vectors(input_ranges, count: int = COUNTED_VECTORS, seed: int = 0) -> np.ndarray:
    """Up to half of ``count`` corners of the box (alternating ends), the rest random box points."""
    lo = np.array([r[0] for r in input_ranges], dtype=np.int64)
    hi = np.array([r[1] for r in input_ranges], dtype=np.int64)
    rng = np.random.default_rng(seed)
    corners = [np.where(rng.integers(0, 2, size=len(lo)) == 1, hi, lo) for _ in range(count // 2)]
    inside = rng.integers(lo, hi, size=(count - len(corners), len(lo)), endpoint=True)
    return np.vstack([np.array(corners).reshape(-1, len(lo)), inside])


def target_figures(emit_dir, target) -> dict:
    """Instructions per evaluation (where emulated), flash and stack of the estimator in ``emit_dir`` on ``target``.

    Plain figures: {"target", "compiler", "flags", "instructions_per_evaluation",
    "instructions_max", "flash_bytes", "stack_bytes", "stack_bytes_measured"};
    the instruction and measured-stack figures are None where the target is not
    emulated.  Raises ToolError (exit 4) when the cross compiler is missing.
    """
    from affix.verify.check import find_manifest

    target = get_target(target)
    _, manifest = find_manifest(emit_dir)
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
            "flash_bytes": code.image.flash_bytes,
            "stack_bytes": code.image.stack_bytes,
            "stack_bytes_measured": None,
        }
        if code.emulator is not None:
            _, counts, stack = code.evaluate(measurement_vectors(manifest["input_ranges"]), count=True)
            figures.update(instructions_per_evaluation=float(np.mean(counts)), instructions_max=max(counts),
                           stack_bytes_measured=stack)
    return figures
