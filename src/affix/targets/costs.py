"""The measured cost of one evaluation on each target, read from ``costs.json``.

For each target and width combination the file holds instruction (or cycle)
counts of the emitted C measured on the core at several shapes, and the
least-squares fit ``k0 + k_out * N + k_in * M + k_mac * N * M`` (N outputs, M
inputs) that the quantize search uses to order configurations.
``tests/benchmarks/measure_target_costs.py`` regenerates the file; its
header says how the figures were measured.
"""
from __future__ import annotations

import json
from functools import lru_cache
from importlib.resources import files

COSTS_FORMAT = "affix.target-costs/1"


@lru_cache(maxsize=1)
def cost_table() -> dict:
    data = json.loads(files("affix.targets").joinpath("costs.json").read_text())
    if data.get("format") != COSTS_FORMAT:
        raise ValueError(f"affix/targets/costs.json is not {COSTS_FORMAT}")
    return data


def widths_key(coef_bits: int, acc_bits: int) -> str:
    return f"{coef_bits}/{acc_bits}"


def evaluation_cost(target: str, coef_bits: int, acc_bits: int, n_inputs: int, n_outputs: int) -> float | None:
    """Predicted instructions (or cycles, see ``cost_unit``) per evaluation; None where unmeasured."""
    entry = cost_table()["targets"].get(target, {}).get("configurations", {}).get(widths_key(coef_bits, acc_bits))
    if entry is None:
        return None
    k0, k_out, k_in, k_mac = entry["model"]
    return k0 + k_out * n_outputs + k_in * n_inputs + k_mac * n_outputs * n_inputs


@lru_cache(maxsize=None)
def cost_resolution(target: str) -> float:
    """The largest relative gap between the target's fitted and measured costs, over every width
    combination and shape measured (0 where unmeasured): two predictions closer than this are
    not told apart by the model."""
    worst = 0.0
    for key, entry in cost_table()["targets"].get(target, {}).get("configurations", {}).items():
        coef_bits, acc_bits = map(int, key.split("/"))
        for n_outputs, n_inputs, counted in entry["measured"]:
            predicted = evaluation_cost(target, coef_bits, acc_bits, n_inputs, n_outputs)
            worst = max(worst, abs(predicted - counted) / counted)
    return worst


def cost_unit(target: str) -> str | None:
    return cost_table()["targets"].get(target, {}).get("unit")
