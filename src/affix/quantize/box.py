"""The input box: one integer range per input, checked, and the per-input scale.

Ranges are in counts, the integers the microcontroller sees.  Where the model
was fitted on physical inputs, an input lsb says how many physical units one
count is (physical = lsb * count).
"""
from __future__ import annotations

import math
from collections.abc import Mapping

import numpy as np

from affix.arithmetic import INPUT_CTYPES, input_ctype, input_reach
from affix.errors import UsageError


def resolve_ranges(inputs, ranges) -> tuple[tuple[int, int], ...]:
    """Ranges in input order from one (lo, hi) for all, a sequence of pairs, or {name: (lo, hi)}.

    A mapping may hold the key None for the inputs it does not name.
    """
    if isinstance(ranges, Mapping):
        _check_names(inputs, ranges, "input_ranges")
        missing = [name for name in inputs if name not in ranges and None not in ranges]
        if missing:
            raise UsageError(f"no range for input(s) {', '.join(map(repr, missing))}", "input_ranges")
        pairs = [ranges.get(name, ranges.get(None)) for name in inputs]
    elif len(ranges) == 2 and all(_is_number(v) for v in ranges):
        pairs = [ranges] * len(inputs)
    else:
        pairs = list(ranges)
        if len(pairs) != len(inputs):
            raise UsageError(f"{len(pairs)} ranges given for {len(inputs)} inputs", "input_ranges")
    box = tuple(_integer_range(name, pair) for name, pair in zip(inputs, pairs))
    if input_ctype(box) is None:
        widest = min(lo for lo, _ in box), max(hi for _, hi in box)
        raise UsageError(
            f"the box spans {widest[0]}..{widest[1]}, which no single input type holds "
            f"(the emitted code passes all inputs in one of {', '.join(INPUT_CTYPES)})",
            "input_ranges",
        )
    return box


def resolve_per_name(names, values, option: str, *, kind: str) -> tuple[float | None, ...]:
    """Positive finite values in name order from one value for all or {name: value}; None where unset."""
    if values is None:
        return (None,) * len(names)
    if not isinstance(values, Mapping):
        values = {None: values}
    _check_names(names, values, option)
    chosen = tuple(values.get(name, values.get(None)) for name in names)
    for name, value in zip(names, chosen):
        if value is not None and not (_is_number(value) and math.isfinite(value) and value > 0):
            raise UsageError(f"{kind} of '{name}' must be a positive finite number, not {value!r}", option)
    return tuple(None if v is None else float(v) for v in chosen)


def reach(box) -> np.ndarray:
    """max(|lo|, |hi|) per input: the largest magnitude a count can have."""
    return np.array(input_reach(box), dtype=float)


def corners(box, limit: int = 2**16) -> np.ndarray | None:
    """Every corner of the box as int64 rows, or None when there are more than ``limit``."""
    if 2 ** len(box) > limit:
        return None
    grid = np.meshgrid(*[np.array(r, dtype=np.int64) for r in box], indexing="ij")
    return np.stack([g.reshape(-1) for g in grid], axis=1)


def _check_names(names, mapping, option):
    unknown = [key for key in mapping if key is not None and key not in names]
    if unknown:
        raise UsageError(
            f"unknown name(s) {', '.join(map(repr, unknown))} (the model has {', '.join(names)})", option
        )


def _integer_range(name, pair) -> tuple[int, int]:
    try:
        lo, hi = pair
    except (TypeError, ValueError):
        raise UsageError(f"range of '{name}' must be a pair LO:HI, not {pair!r}", "input_ranges") from None
    if not all(_is_number(v) and float(v).is_integer() for v in (lo, hi)):
        raise UsageError(f"range of '{name}' must be integer counts, not {lo}:{hi}", "input_ranges")
    lo, hi = int(lo), int(hi)
    if lo > hi:
        raise UsageError(f"range of '{name}' is inverted ({lo}:{hi}); write LO:HI with LO <= HI", "input_ranges")
    return lo, hi


def _is_number(value) -> bool:
    return isinstance(value, (int, float, np.integer, np.floating)) and not isinstance(value, bool)
