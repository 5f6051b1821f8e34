"""Everything a template of either language needs, as plain names and numbers.

Templates decide all target syntax; this module only works out facts about
the plan: ranges, which clamps and saturations can trigger, the shift that is
actually applied, Q formats, accuracy figures and a few known vectors for the
self-test, computed by the integer reference at emit time.
"""
from __future__ import annotations

import math

import numpy as np

from affix.arithmetic import (
    INPUT_CTYPES, OUTPUT_CTYPES, box_bounds, ctype_bits, input_reach, output_range, rounding_constant,
)
from affix.emit.names import INFIX_IN, INFIX_LSB, INFIX_OUT
from affix.float32_arithmetic import Float32Estimator, error_bound
from affix.targets import get_target

CAUTION = (
    "This estimator is only as valid as the calibration data's coverage of the operating range; "
    "outside that range its outputs are extrapolations.",
    "A sensor whose output drives motion, dosing, heating or any safety function needs validation "
    "under the applicable functional-safety standards and local codes, by qualified people.",
    "The checks made by affix cover the arithmetic, not the sensor.",
)

_ACCURACY_FIELDS = ("float_rms", "predicted_rms_deviation", "predicted_total_rms", "worst_case_deviation")


_PRODUCT_LIMIT = 2**31  # a product whose magnitude stays below this is formed in int32_t
_HALF = (-(2**15), 2**15 - 1)  # what one half of a dual 16-bit multiply-accumulate operand holds


def build_context(plan, name: str, interface, *, arith: str = "int", style: str = "table") -> dict:
    """The template context for ``plan`` emitted as ``name`` with ``interface``
    (:class:`affix.interface.Interface`: its fingerprint and units reach the files;
    where it takes its coefficients from a record, the record's facts too, see
    :func:`record_facts`).

    ``plan`` has passed its schema (``Plan.validate``, or read from a file):
    its text fields, which reach comments, hold no comment delimiters or line
    breaks, and its box fits the input type and the accumulator.
    """
    bounds = plan.integer_estimator().accumulator_bounds()
    in_ctype = plan.input_ctype
    target = get_target(plan.target)
    reach = input_reach(plan.input_ranges)
    records = interface.coefficients == "record"
    # A 64-bit sum whose every shift is 32 or more is floored from its high word
    # alone (floor(floor(v / 2^32) / 2^(s-32)) = floor(v / 2^s)): 32-bit work.
    # A record's shifts are known only at run time (any of 0 .. acc_bits - 1): its
    # code tests each for 32 or more where the nominal unit's all are
    # (runtime_high_shift), and floors the whole sum otherwise.
    applied_shifts = [min(s, plan.acc_bits - 1) for s in plan.shifts]
    by_high_word = plan.acc_bits == 64 and min(applied_shifts, default=0) >= 32
    high_shift = by_high_word and not records
    split = arith == "int" and style == "unrolled" and split_applies(plan, target)
    type_lo, type_hi = INPUT_CTYPES[in_ctype]
    out_lo, out_hi = OUTPUT_CTYPES[plan.output_ctype]
    inputs = [
        {
            "index": j,
            "name": column,
            "lo": lo,
            "hi": hi,
            "clamp_lo": lo > type_lo,  # a test against the type's own limit could never trigger
            "clamp_hi": hi < type_hi,
            # Bits of the product this input's terms are formed in (see _product_bits); a record's
            # coefficient can be any of its width.
            "product_bits": max(_product_bits(plan, target, a, reach[j]) for a in
                                ([-(2 ** (plan.coef_bits - 1))] if records else [row[j] for row in plan.coefficients])),
            "lsb": None if plan.input_lsb is None else plan.input_lsb[j],
            "unit": interface.inputs[j]["unit"],
        }
        for j, (column, (lo, hi)) in enumerate(zip(plan.inputs, plan.input_ranges))
    ]
    outputs = []
    float32_bounds = error_bound(plan.gain, plan.offset, plan.input_ranges)
    for i, column in enumerate(plan.outputs):
        row = plan.coefficients[i]
        shift = plan.shifts[i]
        round_const = rounding_constant(shift, plan.rounding)
        # |acc + r| < 2**(acc_bits-1) over the box, so any shift >= acc_bits-1
        # floors to -1 or 0 exactly like acc_bits-1 does, and a shift by the
        # full width (undefined in C) is never needed.
        applied = min(shift, plan.acc_bits - 1)
        q_min, q_max = output_range(row, plan.offsets[i], shift, plan.input_ranges, plan.rounding)
        frac_bits = _power_of_two_exponent(plan.output_lsb[i])
        outputs.append(
            {
                "index": i,
                "name": column,
                "coefficients": list(row),
                "offset": plan.offsets[i],
                # c_i + r_i: where the sum starts, the rounding constant folded in.
                "constant": plan.offsets[i] + round_const,
                "q_shift": applied - 32 if high_shift else applied,
                "terms": [
                    {"input": j, "coefficient": a, "product_bits": _product_bits(plan, target, a, reach[j])}
                    for j, a in enumerate(row) if a != 0
                ],
                "coef_pairs": _pairs(row),
                # The split path (see split_applies): the high and the low 16-bit halves, in pairs.
                "high_pairs": _pairs([_halves(a)[0] for a in row]) if split else [],
                "low_pairs": _pairs([_halves(a)[1] for a in row]) if split else [],
                "shift": shift,
                "applied_shift": applied,
                "round": round_const,
                "acc_bound": bounds[i],
                "q_min": q_min,
                "q_max": q_max,
                "saturate_lo": q_min < out_lo or records,  # a record's outputs are unknown until it is loaded
                "saturate_hi": q_max > out_hi or records,
                "lsb": plan.output_lsb[i],
                "lsb_literal": repr(float(plan.output_lsb[i])),  # shortest digits that read back exactly
                "unit": interface.outputs[i]["unit"],
                "acc_lsb": plan.output_lsb[i] / 2**shift,
                "frac_bits": frac_bits,  # Qm.n where the lsb is 2**-n, else None
                "float32_error_bound": float(float32_bounds[i]),
                "gain": list(plan.gain[i]),
                "float_offset": plan.offset[i],
                **{key: _figure(plan, key, i) for key in _ACCURACY_FIELDS},
            }
        )
    return {
        "name": name,
        "infix_in": INFIX_IN,  # NAME_<infix><user's name>: DEVELOPERS.md, "Generated identifiers"
        "infix_out": INFIX_OUT,
        "infix_lsb": INFIX_LSB,
        "function": f"{name}_estimate_record" if records else f"{name}_estimate",
        "arith": arith,
        "style": style,
        "n_inputs": len(inputs),
        "n_outputs": len(outputs),
        "inputs": inputs,
        "outputs": outputs,
        "input_ctype": in_ctype,
        "target": target.name,
        "dual_mac": arith == "int" and (dual_mac_applies(plan, target) or split),
        "split_mac": split,
        "input_pairs": [(j, j + 1 if j + 1 < len(inputs) else None) for j in range(0, len(inputs), 2)],
        "input_type_bits": ctype_bits(in_ctype),
        "input_type_min": type_lo,
        "input_type_max": type_hi,
        "input_signed": type_lo < 0,
        "output_ctype": plan.output_ctype,
        "output_bits": ctype_bits(plan.output_ctype),
        "output_min": out_lo,
        "output_max": out_hi,
        "acc_bits": plan.acc_bits,
        "high_shift": high_shift,
        "runtime_high_shift": by_high_word and records,
        "narrow_products": plan.acc_bits == 64 and any(t["product_bits"] == 32 for o in outputs for t in o["terms"]),
        "q_bits": 32 if high_shift else plan.acc_bits,  # width of the floored value q
        "passes": table_passes(len(outputs), target.outputs_per_pass),
        "modular_sums": target.modular_sums and style == "table",
        "floor_by_bias": target.floor_64_by_bias,
        "zero_shift": records or any(o["q_shift"] == 0 for o in outputs),  # a floor by 2^0 among them (a record: any shift)
        "coef_bits": plan.coef_bits,
        "rounding": plan.rounding,
        "accumulator_bound": max(o["acc_bound"] for o in outputs),
        "model_sha256": plan.model_sha256,
        "plan_sha256": plan.sha256,
        "tool_version": plan.tool_version,
        "caution": list(CAUTION),
        "interface_id": interface.id,
        "check_vectors": check_vectors(plan, in_ctype, arith),
        "records": records,
        "record": record_facts(plan, interface) if records else None,
    }


def record_facts(plan, interface) -> dict:
    """What the loader and the header need of the record layout (affix.record) for this interface:
    each field's offset and size here, the reason codes, the proof's constants, and the bytes of a
    record of the plan's own integers, which the self-test loads."""
    from affix import record

    fields = [{"name": part.name, "offset": offset, "size": size, "formula": str(part.size), "content": part.content}
              for part, offset, size in record.field_sizes(len(plan.outputs), len(plan.inputs), plan.coef_bits)]
    where = {f["name"]: f["offset"] for f in fields}
    sample = record.encode("selftest", plan.coefficients, plan.offsets, plan.shifts, coef_bits=plan.coef_bits,
                           acc_bits=plan.acc_bits, interface_id=int(interface.id, 16), data_sha256=None)
    return {
        "bytes": fields[-1]["offset"] + fields[-1]["size"],
        "fields": fields,
        "offset": where,
        "magic": list(record.MAGIC),
        "version": record.LAYOUT_VERSION,
        "unit_id_bytes": record.UNIT_ID_BYTES,
        "coef_bytes": plan.coef_bits // 8,
        "reasons": [{"code": code, "name": name, "text": text} for code, name, text in record.REASONS],
        "reach": input_reach(plan.input_ranges),
        "acc_limit": get_target(plan.target).accumulator_limit(plan.acc_bits),
        "sample": list(sample),
    }


def table_passes(n_outputs: int, outputs_per_pass: int) -> list[dict]:
    """The table style's loops over the outputs (term by term): each sums ``outputs`` rows per
    pass, over rows ``first`` to ``end``.

    Every loop makes two passes or more (a lone output apart): a compiler unrolls a loop
    that runs once and folds that row's coefficients into constants, which GCC 12 then
    multiplies 64 x 64 bits instead of one SMLAL per term.  So the wide loop leaves no
    rows or two and more for the one-output loop, never exactly one.
    """
    passes, first = [], 0
    for width in sorted({outputs_per_pass, 1}, reverse=True):
        count = (n_outputs - first) // width
        if width > 1 and n_outputs - first - count * width == 1:
            count -= 1
        if count >= 2 or (width == 1 and count == n_outputs - first > 0):
            passes.append({"outputs": width, "first": first, "end": first + count * width})
            first += count * width
    return passes


def _product_bits(plan, target, coefficient: int, reach: int) -> int:
    """32 where the product a_ij * y_j is formed in int32_t, else the accumulator width.

    With a 64-bit accumulator on a core without a widening multiply-accumulate
    (Cortex-M0+, AVR), a 64-bit product is a library call; a term whose
    magnitude the box bounds below 2**31 multiplies in 32 bits and only its
    sum is widened.  Cores with SMLAL (and the host) take the 64-bit product
    in one instruction.
    """
    if plan.acc_bits == 32 or (not target.widening_mac and abs(coefficient) * reach < _PRODUCT_LIMIT):
        return 32
    return plan.acc_bits


def dual_mac_applies(plan, target) -> bool:
    """Pairs of terms go through one SMLAD / SMLALD: the core has it, and every
    coefficient and clamped input fits a signed 16-bit half."""
    lo, hi = _HALF
    return (target.dual_mac and plan.coef_bits <= 16
            and all(lo <= r_lo and r_hi <= hi for r_lo, r_hi in plan.input_ranges))


def _halves(coefficient: int) -> tuple[int, int]:
    """(high, low) with coefficient = high * 65536 + low and low in [-32768, 32767]."""
    low = ((coefficient + 0x8000) & 0xFFFF) - 0x8000
    return (coefficient - low) >> 16, low


def split_applies(plan, target) -> bool:
    """Unrolled 32-bit coefficients with a 64-bit sum on a DSP core go through SMLALD in
    16-bit halves: sum_j a_j y_j = 65536 * sum_j high_j y_j + sum_j low_j y_j.

    GCC 12 turns an immediate 32-bit constant times a 16-bit input into a
    64 x 64-bit multiply instead of one SMLAL; two SMLALD per pair of terms
    cost less.  Every half and clamped input must fit 16 bits, and 65536 times
    the high sum (below 2**46 * M) stays far inside int64_t.
    """
    lo, hi = _HALF
    return (target.dual_mac and plan.coef_bits == 32 and plan.acc_bits == 64 and len(plan.inputs) < 2**16
            and all(lo <= r_lo and r_hi <= hi for r_lo, r_hi in plan.input_ranges)
            and all(lo <= _halves(a)[0] <= hi for row in plan.coefficients for a in row))


def _pairs(row) -> list[int]:
    """Coefficients two by two as the int32_t a dual multiply-accumulate reads, the first in
    the low half (a_0 + 65536 * a_1, which has exactly those two halves); an odd last one
    is paired with 0."""
    padded = list(row) + [0] * (len(row) % 2)
    return [padded[k + 1] * 65536 + (padded[k] & 0xFFFF) for k in range(0, len(padded), 2)]


def check_vectors(plan, in_ctype: str, arith: str) -> list[dict]:
    """A few known vectors for the emitted self-test: two opposite corners,
    the centre, a point beyond the box (to exercise clamping) and random
    points, with the outputs the reference computes for them."""
    lo, hi = box_bounds(plan.input_ranges, np.int64)
    type_lo, type_hi = INPUT_CTYPES[in_ctype]
    rng = np.random.default_rng(int(plan.sha256[:8], 16))  # same plan, same vectors
    alternating = np.where(np.arange(len(lo)) % 2 == 0, lo, hi)
    beyond = np.clip(np.where(np.arange(len(lo)) % 2 == 0, lo - 1, hi + 1), type_lo, type_hi)
    rows = [lo, hi, alternating, lo + (hi - lo) // 2, beyond]
    rows += [rng.integers(lo, hi, endpoint=True) for _ in range(3)]
    y = np.array(rows, dtype=np.int64)
    if arith == "float32":
        reference = Float32Estimator(plan.gain, plan.offset, plan.input_ranges).evaluate(y)
        expected = [[float(v) for v in out] for out in reference]
    else:
        expected = plan.integer_estimator().evaluate(y).tolist()
    return [{"inputs": row.tolist(), "expected": out} for row, out in zip(y, expected)]


def _power_of_two_exponent(lsb: float) -> int | None:
    mantissa, exponent = math.frexp(lsb)
    return 1 - exponent if mantissa == 0.5 else None


def _figure(plan, key: str, i: int):
    values = getattr(plan, key)
    return None if values is None else float(values[i])
