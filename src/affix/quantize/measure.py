"""Measured deviation of the integer reference, to set beside the prediction.

Two data sets: random points of the box (integer against the plan's float
estimator on the same counts; the prediction for them uses uniform moments),
and, when given, the calibration rows (integer on the rows' counts against
the model on the rows as they are, so input quantization is included).
Calibration rows outside the box are counted and left out: there the
integer estimator clamps and the float one extrapolates.
"""
from __future__ import annotations

import numpy as np

from affix.arithmetic import box_bounds
from affix.errors import DataError
from affix.quantize.box import corners


class _Deviation:
    """Running RMS and maximum of |deviation| per output."""

    def __init__(self, n_outputs):
        self.rows, self.square = 0, np.zeros(n_outputs)
        self.largest = np.zeros(n_outputs)

    def add(self, deviation):
        self.rows += len(deviation)
        self.square += (deviation**2).sum(axis=0)
        self.largest = np.maximum(self.largest, np.abs(deviation).max(axis=0, initial=0.0))

    def summary(self) -> dict:
        """The figures; with no rows (every calibration row outside the box) there are none: None, not NaN."""
        if not self.rows:
            return {"rows": 0, "rms_deviation": None, "max_deviation": None}
        rms = np.sqrt(self.square / self.rows)
        return {"rows": self.rows, "rms_deviation": rms.tolist(), "max_deviation": self.largest.tolist()}


def random_box_points(box, points: int, seed) -> np.ndarray:
    """``points`` integer input vectors drawn uniformly from the box."""
    lo, hi = box_bounds(box, np.int64)
    return np.random.default_rng(seed).integers(lo, hi, size=(points, len(box)), endpoint=True)


def deviation_on_counts(estimator, gain, offset, lsb, y) -> np.ndarray:
    """Integer estimate minus the float estimate on the same counts, physical units, (rows, outputs)."""
    return estimator.evaluate(y) * lsb - (y @ gain.T + offset)


def calibration_deviation(estimator, model, input_scale, lsb, box, chunk) -> tuple[np.ndarray, int]:
    """Integer estimate on the chunk's counts minus the model on its rows as they are (so input
    quantization is included), for the rows inside the box; and how many rows were left out."""
    lo, hi = box_bounds(box, float)
    chunk = np.asarray(chunk, dtype=float).reshape(-1, model.n_inputs)
    counts = np.rint(chunk / input_scale if np.any(input_scale != 1) else chunk)
    outside = 0
    # Column extremes first: the usual chunk lies wholly inside and needs
    # no row mask (NaN fails these comparisons and takes the slow path).
    if not (np.all(counts.min(axis=0, initial=np.inf) >= lo) and np.all(counts.max(axis=0, initial=-np.inf) <= hi)):
        inside = np.all((counts >= lo) & (counts <= hi), axis=1)
        outside = int((~inside).sum())
        chunk, counts = chunk[inside], counts[inside]
    return estimator.evaluate(counts.astype(np.int64)) * lsb - model.predict(chunk), outside


def measure_box(estimator, gain, offset, lsb, box, *, points, seed) -> dict:
    y = random_box_points(box, points, seed)
    result = {"random": _summary(deviation_on_counts(estimator, gain, offset, lsb, y))}
    box_corners = corners(box)
    if box_corners is not None:
        result["corners"] = _summary(deviation_on_counts(estimator, gain, offset, lsb, box_corners))
    return result


def measure_calibration(estimator, model, input_scale, lsb, box, chunks) -> dict:
    tally, outside = _Deviation(model.n_outputs), 0
    for chunk in chunks:
        deviation, left_out = calibration_deviation(estimator, model, input_scale, lsb, box, chunk)
        tally.add(deviation)
        outside += left_out
    if not tally.rows + outside:
        raise DataError("the calibration data hold no usable rows to measure on", getattr(chunks, "path", None))
    return {**tally.summary(), "rows_outside_box": outside}


def _summary(deviation) -> dict:
    tally = _Deviation(deviation.shape[1])
    tally.add(deviation)
    return tally.summary()
