"""What the report shows: numbers with the file field they came from, and the data for each plot.

Every number the page prints is a :class:`Number` carrying its source, a
JSON pointer (RFC 6901) into the build folder's file it was read from
(``plan.json#/float_rms/0``), a line and column of fleet.csv
(``fleet.csv#L4/Fx.margin``), or ``data:...`` for figures the report itself
computed from the calibration data.  The page writes the source and the
exact value into data attributes, so a test can check each shown number
against its file.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from affix.report.build_folder import BuildFolder
from affix.report.scan import DataScan, InputCoverage

TREND_POINTS = 24  # groups of about equal row count along each input
COVERAGE_BINS = 64  # display bins across the declared box (the scan keeps finer ones)
RESIDUAL_POINTS = 420_000  # drawn over all residual panels together
# Inputs the residual matrix has a column for: beyond eight the panels are too
# small to read, and every column adds a panel per output to the page.
RESIDUAL_COLUMNS = 8


@dataclass(frozen=True)
class Number:
    value: float | int | None
    source: str

    @property
    def text(self) -> str:
        if self.value is None:
            return "–"
        if isinstance(self.value, bool):
            return "yes" if self.value else "no"
        value = self.value
        if isinstance(value, float) and value.is_integer() and abs(value) < 1e15:
            value = int(value)  # counts read as floats (data extremes) show as the integers they are
        if isinstance(value, (int, np.integer)):
            return f"{int(value):,}".replace(",", "\u2009")  # thin space: readable, never a decimal comma
        if 1e-4 <= abs(value) < 1e7:  # four significant digits, positional
            return np.format_float_positional(value, precision=4, unique=False, fractional=False, trim="-")
        return f"{value:.4g}"

    @property
    def exact(self) -> str:
        """The value as the file holds it (shortest repr that reads back identically)."""
        if self.value is None:
            return ""
        if isinstance(self.value, bool):
            return "true" if self.value else "false"
        return str(int(self.value)) if isinstance(self.value, (int, np.integer)) else repr(float(self.value))


def pointer(file: str, *parts) -> str:
    """A JSON pointer into ``file``: '~' and '/' in a part are escaped as RFC 6901 says."""
    return file + "#/" + "/".join(str(p).replace("~", "~0").replace("/", "~1") for p in parts)


def numbers(values, file: str, *parts) -> list[Number] | None:
    """One Number per element of a list field (None when the field is absent)."""
    if values is None:
        return None
    return [Number(v, pointer(file, *parts, k)) for k, v in enumerate(values)]


@dataclass(frozen=True)
class CoveragePanel:
    name: str
    unit: str
    edges: np.ndarray
    counts: np.ndarray
    lo: float
    hi: float
    span: tuple[float, float] | None


def input_units(folder: BuildFolder) -> list[str]:
    """Each input's axis unit: the model's input values are counts unless the plan gives an input lsb."""
    lsb = folder.plan.input_lsb
    named = _declared_units(folder, "inputs")
    units = []
    for j, name in enumerate(folder.model.inputs):
        if lsb is None or lsb[j] is None:
            units.append("counts")
        else:
            units.append(f"{named.get(name) or f'units of {name}'} (1 count = {lsb[j]:g})")
    return units


def output_units(folder: BuildFolder) -> list[str]:
    named = _declared_units(folder, "outputs")
    return [named.get(name) or f"units of {name}" for name in folder.model.outputs]


def _declared_units(folder: BuildFolder, side: str) -> dict:
    """{name: unit} as the project declared them (the manifest's interface carries them)."""
    interface = folder.manifest.get("interface") or {}
    return {item["name"]: item.get("unit") for item in interface.get(side, ())}


def budget_parts(folder: BuildFolder) -> dict:
    """The series of the accuracy-budget plot, each a per-output list (or None where the plan lacks it)."""
    plan = folder.plan
    parts = dict(plan.deviation_parts or {})
    return {
        "float_rms": plan.float_rms,
        "coefficients": parts.get("coefficients"),
        "output_rounding": parts.get("output_rounding"),
        "input_quantization": parts.get("input_quantization"),
        "total": plan.predicted_total_rms,
        "worst_case": plan.worst_case_deviation,
    }


def budget_rows(folder: BuildFolder) -> list[dict]:
    plan, budget = folder.plan, folder.plan.budget or {}
    parts = plan.deviation_parts or {}
    series = {
        "float_rms": numbers(plan.float_rms, "plan.json", "float_rms"),
        "coefficients": numbers(parts.get("coefficients"), "plan.json", "deviation_parts", "coefficients"),
        "output_rounding": numbers(parts.get("output_rounding"), "plan.json", "deviation_parts", "output_rounding"),
        "input_quantization": numbers(parts.get("input_quantization"), "plan.json", "deviation_parts",
                                      "input_quantization"),
        "deviation": numbers(plan.predicted_rms_deviation, "plan.json", "predicted_rms_deviation"),
        "total": numbers(plan.predicted_total_rms, "plan.json", "predicted_total_rms"),
        "worst_case": numbers(plan.worst_case_deviation, "plan.json", "worst_case_deviation"),
        "limit": numbers(budget.get("limits"), "plan.json", "budget", "limits"),
        "margin": numbers(budget.get("margins"), "plan.json", "budget", "margins"),
    }
    rows = []
    for i, name in enumerate(plan.outputs):
        row = {"output": name}
        for key, values in series.items():
            row[key] = values[i] if values is not None else Number(None, "")
        margin = row["margin"].value
        row["met"] = None if margin is None else margin >= 0
        rows.append(row)
    return rows


def budget_terms(plan) -> dict | None:
    """What the budget limits, for the sentence above the budget plot (None: no budget was set)."""
    budget = plan.budget
    if not budget:
        return None
    growth = budget.get("growth_percent")
    return {
        "kind": budget.get("kind"),
        "growth": None if growth is None else Number(growth, pointer("plan.json", "budget", "growth_percent")),
        "default": bool(budget.get("default")),
        "met": bool(budget.get("met")),
    }


def trend(panel: InputCoverage, output: int) -> tuple[np.ndarray, np.ndarray, float]:
    """The residual's trend along one input from every row: fine bins merged into TREND_POINTS groups of
    about equal row count; and the share of the residual mean square the trend carries, in percent."""
    counts = panel.counts
    total = counts.sum()
    if not total:
        return np.empty(0), np.empty(0), 0.0
    before = np.cumsum(counts) - counts
    group = np.minimum((before / total * TREND_POINTS).astype(np.int64), TREND_POINTS - 1)
    used = counts > 0
    n = np.bincount(group[used], weights=counts[used], minlength=TREND_POINTS)
    x = np.bincount(group[used], weights=panel.input_sums[used], minlength=TREND_POINTS)
    r = np.bincount(group[used], weights=panel.residual_sums[used, output], minlength=TREND_POINTS)
    keep = n > 0
    mean = r[keep] / n[keep]
    squares = panel.residual_squares[output]
    share = float((n[keep] * mean**2).sum() / squares * 100) if squares > 0 else 0.0
    return x[keep] / n[keep], mean, share


def coverage_panels(folder: BuildFolder, scan: DataScan) -> list[CoveragePanel]:
    from affix.report.scan import FINE_BINS

    units = input_units(folder)
    panels = []
    for j, item in enumerate(scan.coverage):
        merged = item.counts.reshape(COVERAGE_BINS, FINE_BINS // COVERAGE_BINS).sum(axis=1)
        edges = np.linspace(item.lo, item.hi, COVERAGE_BINS + 1)
        panels.append(CoveragePanel(item.name, units[j], edges, merged, item.lo, item.hi, item.covered))
    return panels


def coverage_rows(folder: BuildFolder, scan: DataScan) -> list[dict]:
    rows = []
    for j, item in enumerate(scan.coverage):
        name = item.name
        rows.append({
            "input": name,
            "lo": Number(folder.plan.input_ranges[j][0], pointer("plan.json", "input_ranges", j, 0)),
            "hi": Number(folder.plan.input_ranges[j][1], pointer("plan.json", "input_ranges", j, 1)),
            "minimum": Number(item.minimum, f"data:coverage/{name}/minimum"),
            "maximum": Number(item.maximum, f"data:coverage/{name}/maximum"),
            "covered": Number(item.covered_fraction * 100, f"data:coverage/{name}/covered_percent"),
            "below": Number(item.below, f"data:coverage/{name}/below"),
            "above": Number(item.above, f"data:coverage/{name}/above"),
        })
    return rows


def gain_shares(folder: BuildFolder) -> np.ndarray:
    """|a_ij| times input j's typical spread, per output row divided by its largest: which inputs drive each
    output.  The spread is the calibration standard deviation, or (without one) the box's half width."""
    model = folder.model
    if model.input_covariance is not None:
        spread = np.sqrt(np.clip(np.diag(model.input_covariance), 0, None))
    else:
        scale = np.array([1.0 if q is None else q for q in (folder.plan.input_lsb or [None] * model.n_inputs)])
        spread = np.array([(hi - lo) / 2 for lo, hi in folder.plan.input_ranges]) * scale
    contribution = np.abs(model.gain) * spread
    largest = contribution.max(axis=1, keepdims=True)
    return np.divide(contribution, largest, out=np.zeros_like(contribution), where=largest > 0)


def headroom_bits(plan) -> tuple[np.ndarray, np.ndarray]:
    """(bits the worst-case sum needs, headroom) per output; they add up to acc_bits - 1."""
    headroom = np.array(plan.accumulator_headroom_bits if plan.accumulator_headroom_bits is not None else
                        [plan.acc_bits - 1 - math.log2(max(b, 1)) for b in plan.integer_estimator().accumulator_bounds()])
    return plan.acc_bits - 1 - headroom, headroom


def residual_columns(trends) -> list[int]:
    """The inputs the residual matrix shows, in input order: all of them up to RESIDUAL_COLUMNS, else those
    along which some output's trend carries the largest share of its residual mean square (the likeliest
    missing terms).  ``trends[i][j]`` as :func:`trend` returns it for output i along input j."""
    inputs = len(trends[0]) if trends else 0
    if inputs <= RESIDUAL_COLUMNS:
        return list(range(inputs))
    largest = [max(output[j][2] for output in trends) for j in range(inputs)]
    return sorted(sorted(range(inputs), key=lambda j: -largest[j])[:RESIDUAL_COLUMNS])


def points_per_panel(panels: int, sampled: int) -> int:
    """Points drawn in each residual panel: the whole sample (at most SAMPLE_ROWS) for a few panels,
    fewer for many, so the page stays a few megabytes whatever the model's size."""
    return min(sampled, max(1000, RESIDUAL_POINTS // max(panels, 1)))


def sample_note(scan: DataScan, shown: int) -> str:
    if shown < scan.rows:
        return f"Points: {shown:,} of {scan.rows:,} rows per panel, sampled at random; trend lines: every row."
    return f"Points and trend lines: all {scan.rows:,} rows."
