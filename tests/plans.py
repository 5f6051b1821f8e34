"""Plans built directly from random integers that satisfy the box proof.

The quantizer is a separate stage; the code generators are tested on plans
made here so every corner of the plan space (signed and unsigned ranges,
8/16/32-bit coefficients, 32/64-bit accumulators, tiny and huge gains) is
reachable on purpose.
"""
from __future__ import annotations

import numpy as np

from affix.arithmetic import INPUT_CTYPES, rounding_constant
from affix.plan import Plan

LSB = 2.0**-8  # every output's lsb: Q7.8 in int16_t

RANGE_KINDS = {  # name -> (lo, hi) of a type the inputs are drawn within
    "int8": INPUT_CTYPES["int8_t"],
    "uint8": INPUT_CTYPES["uint8_t"],
    "int16": INPUT_CTYPES["int16_t"],
    "uint16": INPUT_CTYPES["uint16_t"],
    "int32": INPUT_CTYPES["int32_t"],
    "uint32": INPUT_CTYPES["uint32_t"],
}


def random_plan(
    seed: int,
    n_inputs: int = 3,
    n_outputs: int = 2,
    *,
    ranges: str = "int16",
    coef_bits: int = 16,
    acc_bits: int = 32,
    output_ctype: str = "int16_t",
    rounding: str = "nearest",
    gain_scale: float = 1.0,
    fill: float = 0.9,
) -> Plan:
    """A valid plan: coefficients fill about ``fill`` of the accumulator over the box.

    ``gain_scale`` moves the shifts (large gain: small shift, outputs that
    saturate; tiny gain: large shifts, outputs near zero).
    """
    rng = np.random.default_rng(seed)
    t_lo, t_hi = RANGE_KINDS[ranges]
    t_hi = min(t_hi, 2 ** (acc_bits - 1) - 1)  # a wider input could not be widened to the accumulator
    ends = np.sort(rng.integers(t_lo, t_hi, size=(n_inputs, 2), endpoint=True), axis=1)
    input_ranges = tuple((int(lo), int(hi)) for lo, hi in ends)
    reach = np.array([max(abs(lo), abs(hi), 1) for lo, hi in input_ranges], dtype=float)
    acc_room = 2.0 ** (acc_bits - 1) * fill
    coef_limit = 2 ** (coef_bits - 1)
    coefficients, offsets, shifts = [], [], []
    for _ in range(n_outputs):
        # Largest coefficient magnitude the accumulator allows, shared by the terms and the offset.
        per_term = acc_room / (n_inputs + 1) / reach
        cap = np.minimum(per_term, coef_limit - 1).astype(np.int64)
        row = [int(rng.integers(-c, c, endpoint=True)) if c > 0 else 0 for c in cap]
        offset_cap = int(acc_room / (n_inputs + 1))
        offset = int(rng.integers(-offset_cap, offset_cap, endpoint=True))
        span = abs(offset) + sum(abs(a) * r for a, r in zip(row, reach))
        out_bits = 15 if output_ctype == "int16_t" else 31
        # Shift that brings the accumulator span to the output range, moved by gain_scale.
        shift = max(0, int(np.ceil(np.log2(max(span, 1.0)))) - out_bits + int(round(-np.log2(gain_scale))))
        while shift > 0 and span + rounding_constant(shift, rounding) >= 2.0 ** (acc_bits - 1):
            shift -= 1  # the rounding constant is part of the box proof too
        coefficients.append(tuple(row))
        offsets.append(offset)
        shifts.append(shift)
    plan = Plan(
        inputs=tuple(f"y{j}" for j in range(n_inputs)),
        outputs=tuple(f"x{i}" for i in range(n_outputs)),
        input_ranges=input_ranges,
        coefficients=tuple(coefficients),
        offsets=tuple(offsets),
        shifts=tuple(shifts),
        output_lsb=(LSB,) * n_outputs,
        output_ctype=output_ctype,
        coef_bits=coef_bits,
        acc_bits=acc_bits,
        rounding=rounding,
        # physical = count * lsb, and a count is acc / 2**s: so gain = a / 2**s * lsb, with lsb = 2**-8.
        gain=tuple(tuple(a / 2.0**s * LSB for a in row) for row, s in zip(coefficients, shifts)),
        offset=tuple(c / 2.0**s * LSB for c, s in zip(offsets, shifts)),
        model_sha256="0" * 64,
    )
    plan.validate()
    return plan
