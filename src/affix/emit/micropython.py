"""MicroPython target: ``NAME.py`` with ``estimate``, ``estimate_into`` and,
where every value fits a 32-bit port's small int, ``estimate_into_viper``.

MicroPython ints are exact at any size, so the plain functions follow the
contract for 64-bit accumulators too; but a value beyond the small-int range
is a heap object, and code that must not allocate needs to know.  Viper code
computes in machine words and takes integer literals only within the
small-int range of the compiler's target, so it is emitted only when every
constant and intermediate fits there.
"""
from __future__ import annotations

from affix.arithmetic import rounding_constant
from affix.emit.context import build_context
from affix.emit.names import check_names
from affix.emit.templates import render

# Small ints of 32-bit ports (the MCUs): 31-bit signed, from memory.  Checked
# against mpy-cross 1.29 for armv7emsp (its .mpy header records 31 small-int
# bits): a viper literal of 2**30 or -2**30 - 1 is an object and fails to
# compile, 2**30 - 1 and -2**30 compile (tests/test_emit_micropython.py).
SMALL_INT_32 = (-(2**30), 2**30 - 1)
# Small ints of 64-bit ports, measured in the unix x64 port with
# micropython.heap_lock(): 2**62 - 1 and -2**62 do not allocate, one beyond does.
SMALL_INT_64 = (-(2**62), 2**62 - 1)
# Viper code shifts by at most this: a 32-bit word's sign position, a valid
# shift on every target, and the same result as any larger shift while
# |acc + r| < 2**31.
_VIPER_MAX_SHIFT = 31
VIPER_WORD_BITS = 32
MODULE_TEMPLATE = "micropython/module.py.jinja"


def render_micropython(plan, name: str, interface=None) -> dict[str, str]:
    """The emitted files: ``{"NAME.py": text}``.  Names are checked here too:
    they reach the file as identifiers and in comments.  ``interface``
    defaults to that of the module alone."""
    check_names(name, plan.inputs, plan.outputs)
    return {f"{name}.py": render(MODULE_TEMPLATE, **micropython_context(plan, name, interface))}


def micropython_context(plan, name: str, interface=None) -> dict:
    """The shared template context plus the MicroPython facts of this module."""
    from affix.interface import describe  # it asks this module which variants exist

    context = build_context(plan, name, interface or describe(plan, name, languages=("micropython",)))
    for output in context["outputs"]:
        output["viper_shift"] = min(output["shift"], _VIPER_MAX_SHIFT)
    estimator = plan.integer_estimator()
    records = context["records"]  # the integers come at run time, held only below the proven limit
    context.update(
        viper=viper_fits(estimator) and not records,
        heap_reach=context["record"]["acc_limit"] - 1 if records else heap_reach(estimator),
        small_int_32_min=SMALL_INT_32[0],
        small_int_32_max=SMALL_INT_32[1],
        small_int_64_max=SMALL_INT_64[1],
        viper_word_bits=VIPER_WORD_BITS,
    )
    return context


# The functions below take the integer part of a plan (an IntegerEstimator),
# so verification can ask them about a manifest as well.


def heap_reach(estimator) -> int:
    """Largest magnitude estimate_into computes at run time: each product,
    partial sum and shifted value is bounded by the box proof's bound (clamped
    inputs and saturation limits are the caller's objects or constants)."""
    return max(estimator.accumulator_bounds(), default=0)


def viper_fits(estimator) -> bool:
    """True when every literal of the viper code and every intermediate fits a 32-bit port's small int."""
    lo, hi = SMALL_INT_32
    literals = [v for r in estimator.input_ranges for v in r]
    literals += [a for row in estimator.coefficients for a in row]
    literals += [c + rounding_constant(s, estimator.rounding) for c, s in zip(estimator.offsets, estimator.shifts)]
    # The bound covers every product, partial sum and shifted value, so an
    # int32 saturation (limits beyond the small ints) can never be needed.
    literals.append(heap_reach(estimator))
    return all(lo <= v <= hi for v in literals)


def variants(estimator) -> tuple[str, ...]:
    """The estimate_into variants NAME.py offers, as run_micropython names them."""
    return ("plain", "viper") if viper_fits(estimator) else ("plain",)


def notes(plan, *, records: bool = False) -> list[str]:
    """Plain-text lines for the emit report and the manifest.  For code that loads records, what holds
    for any record the loader accepts: intermediates below the target's accumulator limit."""
    from affix.targets import get_target

    estimator = plan.integer_estimator()
    lines = []
    reach = get_target(plan.target).accumulator_limit(plan.acc_bits) - 1 if records else heap_reach(estimator)
    function = "estimate_record_into" if records else "estimate_into"
    if reach > SMALL_INT_32[1]:
        ports = "32-bit and 64-bit ports" if reach > SMALL_INT_64[1] else "32-bit ports"
        lines.append(
            f"micropython: intermediates {'may ' if records else ''}reach {reach}, beyond the small-int range on "
            f"{ports}; {function} allocates long ints there and must not run with the heap locked"
        )
    if records:
        lines.append("micropython: no viper variant (a record's integers are known only when it is loaded)")
    elif not viper_fits(estimator):
        lines.append("micropython: no viper variant (a constant or intermediate exceeds a 32-bit port's small int)")
    return lines
