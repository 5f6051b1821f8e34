"""The fixed-point plan: the plain data object the quantizer hands to the emitter.

It holds the integer estimator (see :mod:`affix.arithmetic` for the exact
arithmetic), the float model it approximates, and the accuracy analysis the
quantizer made of it, all per output in physical units.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

from affix import files, schema
from affix._version import __version__
from affix.arithmetic import (
    ACC_BITS, COEF_BITS, INPUT_CTYPES, OUTPUT_CTYPES, ROUNDING_ALIASES, ROUNDINGS, IntegerEstimator, ctype_holds,
    input_ctype,
)
from affix.targets import DEFAULT_TARGET, TARGETS

PLAN_FORMAT = "affix.plan/1"
# The kinds of accuracy budget a plan records (see affix.quantize.budget).
WORST_CASE = "worst-case"
RMS_GROWTH = "rms-growth"


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
        return cls(**PLAN_SCHEMA.load(data, path))

    @classmethod
    def load(cls, path) -> "Plan":
        return cls.from_dict(files.read_json(path, "plan"), path)

    def validate(self) -> None:
        """Raise FileFormatError where this plan breaks its file schema, the
        box proof included (for plans built in Python rather than read)."""
        PLAN_SCHEMA.load(self.to_dict())


# --- the integer contract's fields, shared by plan and manifest --------------

_INPUT_LIMITS = (min(lo for lo, _ in INPUT_CTYPES.values()), max(hi for _, hi in INPUT_CTYPES.values()))
# Beyond the accumulator's width every shift floors to the same -1 or 0, so no
# plan needs more; the limit keeps 2**shift cheap for any file.
MAX_SHIFT = 255


def prove_integer_contract(values) -> None:
    """The box proof of :mod:`affix.arithmetic`, re-made from the fields:
    every range ordered and held by one input type and by the accumulator,
    every coefficient within coef_bits, |acc + r| within acc_bits over the box."""
    ranges, acc_bits, coef_bits = values["input_ranges"], values["acc_bits"], values["coef_bits"]
    acc_limit = 2 ** (acc_bits - 1)
    for j, (lo, hi) in enumerate(ranges):
        if lo > hi:
            schema.fail(f"input_ranges[{j}]", f"is inverted: {lo} > {hi}")
        if hi >= acc_limit:  # widening to the accumulator must keep the value
            schema.fail(f"input_ranges[{j}]", f"reaches {hi}, beyond the {acc_bits}-bit accumulator (acc_bits)")
    if input_ctype(ranges) is None:
        schema.fail("input_ranges", "no one input type of " + ", ".join(INPUT_CTYPES) + " holds every range")
    limit = 2 ** (coef_bits - 1)
    for i, row in enumerate(values["coefficients"]):
        for j, a in enumerate(row):
            if not -limit <= a < limit:
                schema.fail(f"coefficients[{i}][{j}]", f"{a} does not fit coef_bits = {coef_bits}")
    estimator = IntegerEstimator(values["coefficients"], values["offsets"], values["shifts"], ranges,
                                 values["output_ctype"], values["rounding"], acc_bits)
    limit = accumulator_limit(values)
    for name, bound in zip(values["outputs"], estimator.accumulator_bounds()):
        if bound >= limit:
            beyond = (f"the {acc_bits}-bit accumulator" if limit == acc_limit
                      else f"{limit}, target {values['target']}'s accumulator limit")
            schema.fail("acc_bits", f"output '{name}' reaches |acc + r| = {bound} over the input box (from its "
                        f"coefficients, offsets, shifts and the input_ranges), beyond {beyond}")


def accumulator_limit(values) -> int:
    """What every |acc + r| must stay below: 2**(acc_bits - 1), or less where the target caps it."""
    return TARGETS[values["target"]].accumulator_limit(values["acc_bits"])


INTEGER_CONTRACT = (
    schema.Field("inputs", schema.NAMES, size=True),
    schema.Field("outputs", schema.NAMES, size=True),
    schema.Field("input_ranges", schema.Array(("inputs", 2), schema.Integer(*_INPUT_LIMITS))),
    schema.Field("coefficients", schema.Array(("outputs", "inputs"), schema.Integer(-(2**31), 2**31 - 1))),
    schema.Field("offsets", schema.Array(("outputs",), schema.Integer(-(2**63), 2**63 - 1))),
    schema.Field("shifts", schema.Array(("outputs",), schema.Integer(0, MAX_SHIFT))),
    schema.Field("output_lsb", schema.Array(("outputs",), schema.Number(positive=True))),
    schema.Field("output_ctype", schema.Choice(OUTPUT_CTYPES)),
    schema.Field("coef_bits", schema.Choice(COEF_BITS)),
    schema.Field("acc_bits", schema.Choice(ACC_BITS)),
    schema.Field("rounding", schema.Choice(ROUNDINGS, aliases=ROUNDING_ALIASES)),
    schema.Field("input_lsb", schema.OrNone(schema.Array(("inputs",), schema.OrNone(schema.Number(positive=True))))),
    # The core the proof's accumulator limit is for (MicroPython caps it at its small ints).
    schema.Field("target", schema.Choice(TARGETS), default=DEFAULT_TARGET),
)

# --- the rest of the plan file ------------------------------------------------

_PER_OUTPUT = schema.Array(("outputs",), schema.Number())
_PER_OUTPUT_SIZE = schema.Array(("outputs",), schema.Number(min=0.0))  # an RMS or a largest |deviation|
_COUNT = schema.Integer(0, 2**63 - 1)


def _budget_agrees(values) -> None:
    if (values["kind"] == RMS_GROWTH) != (values["growth_percent"] is not None):
        schema.fail("budget.growth_percent", f"must be given exactly for a {RMS_GROWTH} budget")
    for i, (limit, margin) in enumerate(zip(values["limits"], values["margins"])):
        if (limit is None) != (margin is None):
            schema.fail(f"budget.margins[{i}]", "must be null exactly where the limit is")
    if values["met"] != all(m is None or m >= 0 for m in values["margins"]):
        schema.fail("budget.met", "disagrees with the margins")


_BUDGET = schema.Record(
    schema.Field("kind", schema.Choice((WORST_CASE, RMS_GROWTH))),
    schema.Field("limits", schema.Array(("outputs",), schema.OrNone(schema.Number(min=0.0)))),
    schema.Field("margins", schema.Array(("outputs",), schema.OrNone(schema.Number()))),
    schema.Field("met", schema.Flag()),
    schema.Field("growth_percent", schema.OrNone(schema.Number(min=0.0))),
    schema.Field("default", schema.Flag()),
    # The cheaper configuration the search passed over, and the outputs that missed the budget there.
    schema.Field("passed_over", schema.Record(
        schema.Field("coef_bits", schema.Choice(COEF_BITS)),
        schema.Field("acc_bits", schema.Choice(ACC_BITS)),
        schema.Field("output_ctype", schema.Choice(OUTPUT_CTYPES)),
        schema.Field("missed", schema.List(schema.Record(
            schema.Field("output", schema.Text(min_length=1)),
            schema.Field("figure", schema.Number(min=0.0)),
            schema.Field("limit", schema.Number(min=0.0)),
            schema.Field("excess_percent", schema.Number(min=0.0)),
        ), min_length=1)),
    ), default=schema.OMITTED),
    rules=(_budget_agrees,),
)
def _figures_where_rows(values) -> None:
    for key in ("rms_deviation", "max_deviation"):
        if (values[key] is None) != (values["rows"] == 0):
            schema.fail(f"measured.{key}", "must be null exactly where no row was measured (rows)")


_MEASURED = schema.Mapping(
    schema.Choice(("random", "corners", "calibration")),
    schema.Record(
        schema.Field("rows", _COUNT),
        # null where no row was measured (every calibration row outside the box)
        schema.Field("rms_deviation", schema.OrNone(_PER_OUTPUT_SIZE)),
        schema.Field("max_deviation", schema.OrNone(_PER_OUTPUT_SIZE)),
        schema.Field("predicted_rms_deviation", _PER_OUTPUT_SIZE, default=schema.OMITTED),
        schema.Field("rows_outside_box", _COUNT, default=schema.OMITTED),
        rules=(_figures_where_rows,),
    ),
)
_DEVIATION_PARTS = schema.Record(
    *(schema.Field(part, _PER_OUTPUT_SIZE)
      for part in ("coefficients", "coefficients_plain_rounding", "output_rounding", "input_quantization"))
)


def _input_ctype_holds_the_box(values) -> None:
    """An explicit input type (None: the smallest that holds the box) must hold every range."""
    if values["input_ctype"] is not None and not ctype_holds(values["input_ctype"], values["input_ranges"]):
        schema.fail("input_ctype", f"{values['input_ctype']} does not hold every one of the input_ranges")


def _recorded_bounds_agree(values) -> None:
    """accumulator_bound and its headroom are derived: an edited copy would mislead a reader."""
    bounds = IntegerEstimator.from_mapping(values).accumulator_bounds()
    recorded = values["accumulator_bound"]
    if recorded is not None and list(recorded) != bounds:
        schema.fail("accumulator_bound", f"disagrees with the bound the integers give, {bounds}")
    headroom = values["accumulator_headroom_bits"]
    if headroom is not None:
        room = math.log2(accumulator_limit(values))
        exact = [room - (math.log2(b) if b else 0.0) for b in bounds]
        if not all(math.isclose(h, e, rel_tol=1e-9, abs_tol=1e-9) for h, e in zip(headroom, exact)):
            schema.fail("accumulator_headroom_bits", "disagrees with the accumulator bound and the limit of "
                        "acc_bits on the target")


PLAN_SCHEMA = schema.Schema(
    "plan",
    PLAN_FORMAT,
    schema.Field("tool_version", schema.VERSION),
    schema.Field("model_sha256", schema.SHA256),
    *INTEGER_CONTRACT,
    schema.Field("gain", schema.Array(("outputs", "inputs"), schema.Number())),
    schema.Field("offset", _PER_OUTPUT),
    *(schema.Field(key, schema.OrNone(_PER_OUTPUT_SIZE), default=None)
      for key in ("float_rms", "predicted_rms_deviation", "predicted_total_rms", "worst_case_deviation")),
    schema.Field("deviation_parts", schema.OrNone(_DEVIATION_PARTS), default=None),
    schema.Field("accumulator_bound", schema.OrNone(schema.Array(("outputs",), schema.Integer(0, 2**64))), default=None),
    schema.Field("accumulator_headroom_bits", schema.OrNone(_PER_OUTPUT), default=None),
    schema.Field("budget", schema.OrNone(_BUDGET), default=None),
    schema.Field("measured", schema.OrNone(_MEASURED), default=None),
    schema.Field("moments_source", schema.OrNone(schema.Choice(("calibration", "uniform-box"))), default=None),
    schema.Field("coefficient_method", schema.OrNone(schema.Choice(("plain", "error-feedback"))), default=None),
    schema.Field("input_ctype", schema.OrNone(schema.Choice(INPUT_CTYPES)), default=None),
    rules=(prove_integer_contract, _input_ctype_holds_the_box, _recorded_bounds_agree),
)


def _list(value):
    return None if value is None else list(value)
