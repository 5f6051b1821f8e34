"""How much of each input's declared range the calibration data cover.

A fitted estimator is an interpolation inside the data and an extrapolation
outside it; the overflow proof covers the whole declared box either way, the
accuracy figures do not.  Per input: the declared range [lo, hi] in counts,
the calibration data's smallest and largest value in counts (the model's
input_min/max, divided by the input lsb where the data are physical), the
share of the range's width they cover, and the share beyond them.  More than
a quarter of the width beyond the data earns a warning that names the input.
"""
from __future__ import annotations

from dataclasses import dataclass

EXTRAPOLATION_SHARE = 0.25  # of the declared width beyond the data, above which a build warns


@dataclass(frozen=True)
class InputCoverage:
    name: str
    declared: tuple[int, int]  # counts
    seen: tuple[float, float]  # the calibration data's extremes, counts
    covered: float  # share of the declared width inside [seen]
    beyond: float  # share of the declared width outside it: 1 - covered

    @property
    def extrapolated(self) -> bool:
        return self.beyond > EXTRAPOLATION_SHARE

    def to_dict(self) -> dict:
        return {"input": self.name, "declared": list(self.declared), "seen": list(self.seen),
                "covered": self.covered, "beyond": self.beyond, "extrapolated": self.extrapolated}

    def warning(self) -> str:
        lo, hi = self.declared
        return (f"input '{self.name}': the calibration data reach {self.seen[0]:.6g}..{self.seen[1]:.6g}, "
                f"{self.beyond:.0%} of its declared range {lo}..{hi} lies beyond them; outputs there are "
                "extrapolations (see the caution in the emitted files)")


def coverage(model, input_ranges, input_lsb=None) -> list[InputCoverage] | None:
    """Per input, in model order, for a box ``input_ranges`` (pairs in input order); None when the
    model does not know its inputs' extremes (adopted, or written by an older affix)."""
    if model.input_min is None:
        return None
    scales = [1.0 if q is None else q for q in (input_lsb or [None] * model.n_inputs)]
    result = []
    for name, (lo, hi), low, high, scale in zip(model.inputs, input_ranges, model.input_min, model.input_max, scales):
        seen = (float(low) / scale, float(high) / scale)
        inside = max(0.0, min(hi, seen[1]) - max(lo, seen[0]))
        width = hi - lo
        if width > 0:
            covered = inside / width
        else:  # a single declared value: covered when the data include it
            covered = 1.0 if seen[0] <= lo <= seen[1] else 0.0
        result.append(InputCoverage(name, (lo, hi), seen, covered, 1.0 - covered))
    return result


def summary_line(report: list[InputCoverage]) -> str:
    """One line: each input's covered share of its declared range."""
    return "declared ranges covered by the calibration data: " + ", ".join(
        f"{c.name} {c.covered:.0%}" for c in report)
