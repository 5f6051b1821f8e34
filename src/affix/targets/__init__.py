"""Targets: the cores and runtimes affix plans for, each a plain object.

A :class:`Target` says what the core can do (a single-instruction widening
multiply-accumulate, the DSP extension's dual 16-bit one, the small-int range
of a MicroPython port), how to compile for it, and what one evaluation costs
there: a cost model measured on the core itself and stored as data
(``costs.json`` beside this file, written by ``tests/benchmarks/measure_target_costs.py``).
The quantize search orders configurations by that cost; the emitters pick
the code shape the core runs fastest; :func:`affix.targets.figures.target_figures`
measures the emitted code on the target.
"""
from __future__ import annotations

from dataclasses import dataclass

from affix.errors import UsageError

SMALL_INT_32 = (-(2**30), 2**30 - 1)  # small ints of MicroPython's 32-bit ports (see affix.emit.micropython)


@dataclass(frozen=True)
class Target:
    name: str
    summary: str
    # How C is compiled for it: the compiler and its core flags (None: no C toolchain, MicroPython only).
    compiler: str | None
    cpu_flags: tuple[str, ...]
    # What runs its code: a unicorn CPU model that executes it instruction by
    # instruction, "simavr" (cycle-accurate AVR simulator), or None.
    emulator: str | None
    # What the core's multiplier does in one instruction:
    # SMLAL, 32x32 -> 64 bits added to a 64-bit accumulator (ARMv7-M and later).
    widening_mac: bool
    # SMLAD / SMLALD, two 16x16 products added at once (the DSP extension, ARMv7E-M).
    dual_mac: bool
    # mpy-cross -march value for the viper variant (None: no MicroPython native code).
    mpy_march: str | None
    # Largest |acc + r| the plan may reach, below the accumulator's own limit
    # (MicroPython: every intermediate a small int, so the viper variant always exists).
    accumulator_cap: int | None = None
    # The accumulator widths worth searching there.
    accumulator_widths: tuple[int, ...] = (32, 64)
    # Outputs the table-style C sums per pass over the inputs (term by term, without the dual
    # 16-bit path): each clamped input, loaded once, feeds that many multiply-accumulates.  Where
    # the inputs do not all fit the registers beside the sums, more outputs per pass mean fewer
    # reloads; chosen by measuring the emitted code on the core (tests/benchmarks/bench_targets.py).
    outputs_per_pass: int = 1
    # The table style forms each sum modulo 2^N in uintN_t (its signed value recovered at the
    # end) rather than in intN_t: GCC 12 may then reassociate it, which on ARMv6-M frees
    # registers once the inputs outnumber them, but on cores with SMLAL splits the
    # one-instruction chain.  Chosen by measuring the emitted code, like outputs_per_pass.
    modular_sums: bool = False
    # Floor a 64-bit sum through its biased unsigned value rather than the sign-symmetric
    # form that GCC 12 turns into one arithmetic shift: the AVR's compiler (avr-gcc 5) keeps
    # that form's two 64-bit negations.  Measured the same way.
    floor_64_by_bias: bool = False

    def accumulator_limit(self, acc_bits: int) -> int:
        """The proof's limit: every |acc + r| over the box stays below it."""
        limit = 2 ** (acc_bits - 1)
        return limit if self.accumulator_cap is None else min(limit, self.accumulator_cap)


TARGETS = {
    target.name: target
    for target in (
        Target("host", "the machine affix runs on (x86-64 here), C only", "gcc", (), "x86-64",
               widening_mac=True, dual_mac=False, mpy_march=None),
        Target("cortex-m0plus", "Arm Cortex-M0+ (ARMv6-M): 32x32->32 MULS, no long multiply",
               "arm-none-eabi-gcc", ("-mcpu=cortex-m0plus", "-mthumb"), "cortex-m0",
               widening_mac=False, dual_mac=False, mpy_march="armv6m", modular_sums=True),
        Target("cortex-m4", "Arm Cortex-M4 (ARMv7E-M): single-cycle SMLAL, dual 16-bit SMLAD/SMLALD",
               "arm-none-eabi-gcc", ("-mcpu=cortex-m4", "-mthumb"), "cortex-m4",
               widening_mac=True, dual_mac=True, mpy_march="armv7emsp", outputs_per_pass=4),
        Target("cortex-m7", "Arm Cortex-M7 (ARMv7E-M, dual issue): SMLAL, SMLAD/SMLALD",
               "arm-none-eabi-gcc", ("-mcpu=cortex-m7", "-mthumb"), "cortex-m7",
               widening_mac=True, dual_mac=True, mpy_march="armv7emdp", outputs_per_pass=4),
        Target("avr", "8-bit AVR (ATmega2560 here): 8x8 MUL, int is 16 bits",
               "avr-gcc", ("-mmcu=atmega2560",), "simavr",
               widening_mac=False, dual_mac=False, mpy_march=None, floor_64_by_bias=True),
        Target("micropython", "MicroPython on a 32-bit port: small ints end at +-2**30",
               None, (), None, widening_mac=False, dual_mac=False, mpy_march="armv7emsp",
               accumulator_cap=SMALL_INT_32[1] + 1, accumulator_widths=(32,)),
    )
}
DEFAULT_TARGET = "host"


def get_target(name) -> Target:
    """The target called ``name`` (a Target passes through)."""
    if isinstance(name, Target):
        return name
    if name not in TARGETS:
        raise UsageError(f"unknown target {name!r} (choose from {', '.join(TARGETS)})", "target")
    return TARGETS[name]
