"""The fixed-point plan: the plain data object the quantizer hands to the emitter.

It holds the integer estimator (see :mod:`affix.arithmetic` for the exact
arithmetic), the float model it approximates, and the accuracy analysis the
quantizer made of it, all per output in physical units.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

from affix import files
from affix._version import __version__
from affix.arithmetic import (
    ACC_BITS, COEF_BITS, INPUT_CTYPES, OUTPUT_CTYPES, ROUNDINGS, IntegerEstimator, ctype_holds, input_ctype,
    rounding_name,
)
from affix.errors import FileFormatError
from affix.targets import DEFAULT_TARGET, TARGETS

PLAN_FORMAT = "affix.plan/1"


@dataclass(frozen=True)
class Plan:
    inputs: tuple[str, ...]
    outputs: tuple[str, ...]
    input_ranges: tuple[tuple[int, int], ...]
    coefficients: tuple[tuple[int, ...], ...]
    offsets: tuple[int, ...]
    shifts: tuple[int, ...]
    output_lsb: tuple[float, ...]
    output_ctype: str
    coef_bits: int
    acc_bits: int
    rounding: str
    # The float estimator the integers approximate, per integer input count:
    # x = gain @ y + offset.  The float32 emitter uses these.
    gain: tuple[tuple[float, ...], ...]
    offset: tuple[float, ...]
    model_sha256: str
    # The C type of every input (None: the default of affix.arithmetic.input_ctype for the box).
    input_ctype: str | None = None
    # The core or runtime the widths were chosen for (affix.targets).
    target: str = DEFAULT_TARGET
    # Physical size of one input count, where the model's inputs were physical.
    input_lsb: tuple[float | None, ...] | None = None
    # Accuracy analysis, per output, physical units.
    float_rms: tuple[float, ...] | None = None
    predicted_rms_deviation: tuple[float, ...] | None = None
    predicted_total_rms: tuple[float, ...] | None = None
    worst_case_deviation: tuple[float, ...] | None = None
    # RMS of each independent part of the deviation, adding in quadrature:
    # {"coefficients", "output_rounding", "input_quantization"}, plus
    # "coefficients_plain_rounding" (what rounding each coefficient alone would give).
    deviation_parts: dict | None = None
    accumulator_bound: tuple[int, ...] | None = None
    accumulator_headroom_bits: tuple[float, ...] | None = None
    # {"kind": "worst-case"|"rms-growth", "limits": [...], "margins": [...], "met": bool,
    #  "growth_percent": p|None, "default": bool}; limits and margins None where unconstrained.
    budget: dict | None = None
    # Measured deviation figures, keyed by data set ("random", "corners", "calibration"),
    # each {"rows", "rms_deviation", "max_deviation"} (+ "predicted_rms_deviation", "rows_outside_box").
    measured: dict | None = None
    # Where the second moments of the coefficient-error form came from:
    # "calibration" (the model's input moments) or "uniform-box" (none known).
    moments_source: str | None = None
    coefficient_method: str | None = None  # "plain" (round each) or "error-feedback" (searched)
    tool_version: str = __version__

    def __post_init__(self):
        if self.input_ctype is None:
            object.__setattr__(self, "input_ctype", input_ctype(self.input_ranges))

    def integer_estimator(self) -> IntegerEstimator:
        return IntegerEstimator.from_mapping(self.to_dict())

    def to_dict(self) -> dict:
        return {
            "format": PLAN_FORMAT,
            "tool_version": self.tool_version,
            "model_sha256": self.model_sha256,
            "inputs": list(self.inputs),
            "outputs": list(self.outputs),
            "input_ranges": [list(r) for r in self.input_ranges],
            "input_lsb": None if self.input_lsb is None else list(self.input_lsb),
            "input_ctype": self.input_ctype,
            "target": self.target,
            "coefficients": [list(row) for row in self.coefficients],
            "offsets": list(self.offsets),
            "shifts": list(self.shifts),
            "output_lsb": list(self.output_lsb),
            "output_ctype": self.output_ctype,
            "coef_bits": self.coef_bits,
            "acc_bits": self.acc_bits,
            "rounding": self.rounding,
            "gain": [list(row) for row in self.gain],
            "offset": list(self.offset),
            "float_rms": _list(self.float_rms),
            "predicted_rms_deviation": _list(self.predicted_rms_deviation),
            "predicted_total_rms": _list(self.predicted_total_rms),
            "worst_case_deviation": _list(self.worst_case_deviation),
            "deviation_parts": self.deviation_parts,
            "accumulator_bound": _list(self.accumulator_bound),
            "accumulator_headroom_bits": _list(self.accumulator_headroom_bits),
            "budget": self.budget,
            "measured": self.measured,
            "moments_source": self.moments_source,
            "coefficient_method": self.coefficient_method,
        }

    @property
    def sha256(self) -> str:
        return files.content_sha256(self.to_dict())

    def save(self, path) -> None:
        files.write_json(path, self.to_dict())

    @classmethod
    def from_dict(cls, data, path=None) -> "Plan":
        files.check_format(data, PLAN_FORMAT, "plan", path)
        required = (
            "inputs outputs input_ranges coefficients offsets shifts output_lsb output_ctype "
            "coef_bits acc_bits rounding gain offset model_sha256"
        ).split()
        missing = [k for k in required if k not in data]
        if missing:
            raise FileFormatError(f"plan file lacks key(s): {', '.join(missing)}", path)
        try:
            plan = cls(
                inputs=tuple(data["inputs"]),
                outputs=tuple(data["outputs"]),
                input_ranges=tuple((int(lo), int(hi)) for lo, hi in data["input_ranges"]),
                coefficients=tuple(tuple(_int(a) for a in row) for row in data["coefficients"]),
                offsets=tuple(_int(c) for c in data["offsets"]),
                shifts=tuple(_int(s) for s in data["shifts"]),
                output_lsb=tuple(float(v) for v in data["output_lsb"]),
                output_ctype=data["output_ctype"],
                coef_bits=_int(data["coef_bits"]),
                acc_bits=_int(data["acc_bits"]),
                rounding=rounding_name(data["rounding"]),
                gain=tuple(tuple(float(v) for v in row) for row in data["gain"]),
                offset=tuple(float(v) for v in data["offset"]),
                model_sha256=str(data["model_sha256"]),
                input_lsb=None if data.get("input_lsb") is None else tuple(data["input_lsb"]),
                input_ctype=data.get("input_ctype"),
                target=data.get("target", DEFAULT_TARGET),
                float_rms=_tuple(data.get("float_rms")),
                predicted_rms_deviation=_tuple(data.get("predicted_rms_deviation")),
                predicted_total_rms=_tuple(data.get("predicted_total_rms")),
                worst_case_deviation=_tuple(data.get("worst_case_deviation")),
                deviation_parts=data.get("deviation_parts"),
                accumulator_bound=_tuple(data.get("accumulator_bound")),
                accumulator_headroom_bits=_tuple(data.get("accumulator_headroom_bits")),
                budget=data.get("budget"),
                measured=data.get("measured"),
                moments_source=data.get("moments_source"),
                coefficient_method=data.get("coefficient_method"),
                tool_version=str(data.get("tool_version", "")),
            )
            plan.validate()
        except (ValueError, TypeError) as exc:
            raise FileFormatError(str(exc), path) from None
        return plan

    def validate(self) -> None:
        """Raise ValueError where the plan is inconsistent with itself."""
        n, m = len(self.outputs), len(self.inputs)
        if len(self.input_ranges) != m or len(self.coefficients) != n or len(self.gain) != n:
            raise ValueError("names, ranges, coefficients and gain disagree in shape")
        for lo, hi in self.input_ranges:
            if lo > hi:
                raise ValueError(f"input range {lo}:{hi} is inverted")
        if self.input_ctype not in INPUT_CTYPES:
            raise ValueError(f"input_ctype must be one of {', '.join(INPUT_CTYPES)} holding the input box")
        if not ctype_holds(self.input_ctype, self.input_ranges):
            raise ValueError(f"an input range lies outside input_ctype {self.input_ctype}")
        if self.target not in TARGETS:
            raise ValueError(f"target must be one of {', '.join(TARGETS)}")
        if self.output_ctype not in OUTPUT_CTYPES:
            raise ValueError(f"output_ctype must be one of {', '.join(OUTPUT_CTYPES)}")
        if self.rounding not in ROUNDINGS:
            raise ValueError(f"rounding must be one of {', '.join(ROUNDINGS)}")
        if self.coef_bits not in COEF_BITS or self.acc_bits not in ACC_BITS:
            raise ValueError("coef_bits must be 8, 16 or 32 and acc_bits 32 or 64")
        if len(self.output_lsb) != n or not all(math.isfinite(v) and v > 0 for v in self.output_lsb):
            raise ValueError("output_lsb must hold one positive finite value per output")
        limit = 2 ** (self.coef_bits - 1)
        if any(not -limit <= a < limit for row in self.coefficients for a in row):
            raise ValueError(f"a coefficient does not fit {self.coef_bits} bits")
        estimator = self.integer_estimator()
        if max(estimator.accumulator_bounds()) >= 2 ** (self.acc_bits - 1):
            raise ValueError(f"the accumulator bound over the input box does not fit {self.acc_bits} bits")

    @classmethod
    def load(cls, path) -> "Plan":
        return cls.from_dict(files.read_json(path, "plan"), path)


def _int(value) -> int:
    if isinstance(value, bool) or not isinstance(value, int):
        raise ValueError(f"expected an integer, got {value!r}")
    return value


def _list(value):
    return None if value is None else list(value)


def _tuple(value):
    return None if value is None else tuple(value)
