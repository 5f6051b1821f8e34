"""Quantize: the fixed-point plan, its overflow proof and accuracy budget.

``plan_fixed_point(model, input_ranges, ...)`` is the whole stage; the
modules below it each hold one idea: the box, the moments, the shift proof,
the coefficient search, the lsb rule, the accuracy figures, the budget, the
configuration search and the measurement.
"""
from affix.quantize.planner import plan_fixed_point

__all__ = ["plan_fixed_point"]
