"""Accuracy budgets: a worst-case deviation limit per output, or an allowed RMS growth.

rms-growth p%: the integer estimator's predicted total RMS may be at most
(1 + p/100) times the float estimator's own RMS.
"""
from __future__ import annotations

from dataclasses import dataclass

from affix.plan import RMS_GROWTH, WORST_CASE

DEFAULT_GROWTH_PERCENT = 1.0  # used, best effort, when the user names no budget


@dataclass(frozen=True)
class Budget:
    kind: str
    limits: tuple[float | None, ...]  # per output; None leaves an output unconstrained
    growth_percent: float | None = None
    default: bool = False  # chosen by the tool, not the user: missing it is not an error

    @classmethod
    def worst_case(cls, limits) -> "Budget":
        return cls(WORST_CASE, tuple(limits))

    @classmethod
    def rms_growth(cls, percent: float, float_rms, *, default=False) -> "Budget":
        factor = 1 + percent / 100
        return cls(RMS_GROWTH, tuple(float(f) * factor for f in float_rms), percent, default)

    def figures(self, accuracy) -> tuple[float, ...]:
        """What the limits are compared with."""
        return accuracy.worst_case if self.kind == WORST_CASE else accuracy.total

    def margins(self, accuracy) -> tuple[float | None, ...]:
        return tuple(None if lim is None else lim - fig for lim, fig in zip(self.limits, self.figures(accuracy)))

    def met(self, accuracy) -> bool:
        return all(m is None or m >= 0 for m in self.margins(accuracy))

    def shortfall(self, accuracy) -> float:
        """Largest figure-to-limit ratio: below 1 when met; the search minimises it when nothing meets."""
        ratios = [fig / lim if lim > 0 else float("inf") for lim, fig in zip(self.limits, self.figures(accuracy))
                  if lim is not None]
        return max(ratios, default=0.0)

    def to_dict(self, accuracy) -> dict:
        return {
            "kind": self.kind,
            "limits": list(self.limits),
            "margins": list(self.margins(accuracy)),
            "met": self.met(accuracy),
            "growth_percent": self.growth_percent,
            "default": self.default,
        }
