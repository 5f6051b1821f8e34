"""One streaming pass over the calibration data for the report.

The files are read through affix's intake, chunk by chunk, so memory stays
bounded however long the log.  The pass keeps:

- a uniform random sample of at most ``SAMPLE_ROWS`` rows (for the residual
  scatter plots).  Each row's sampling key is a hash of its row number, and
  the rows with the smallest keys are kept: the same rows are chosen however
  the file is chunked, and the report is the same on every run;
- per input, row counts in ``FINE_BINS`` equal bins across the declared box
  with the rows below and above it and the exact extremes (coverage); and
  per bin the sum of the input and of each output's residual (the trend
  lines, from every row, not just the sample);
- per output, a histogram of (integer - float) over the rows inside the box,
  on fixed bins across the proven worst-case bound.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from threadpoolctl import threadpool_limits

from affix.errors import AffixError
from affix.intake import column_names, read_chunks
from affix.quantize.measure import calibration_deviation

SAMPLE_ROWS = 10_000
FINE_BINS = 512
DEVIATION_BINS = 61
_SAMPLE_SEED = 0x5EED_AF1C


@dataclass
class FileRead:
    path: str  # as build.json records it
    sha256_recorded: str
    sha256: str | None = None  # of the file as it is now; None when it could not be read
    rows: int = 0
    rows_dropped: int = 0
    problem: str | None = None  # why its rows are not in the scan

    @property
    def matches(self) -> bool:
        return self.sha256 == self.sha256_recorded


@dataclass
class InputCoverage:
    """One input's calibration data against its declared box, in the model's input units."""

    name: str
    lo: float
    hi: float
    counts: np.ndarray  # FINE_BINS rows per bin across [lo, hi]
    input_sums: np.ndarray  # per bin, sum of the input's values
    residual_sums: np.ndarray | None  # (FINE_BINS, n_outputs), None without output columns
    residual_squares: np.ndarray | None  # (n_outputs,), over the rows inside this input's range
    below: int = 0
    above: int = 0
    minimum: float = np.inf
    maximum: float = -np.inf

    @property
    def edges(self) -> np.ndarray:
        return np.linspace(self.lo, self.hi, FINE_BINS + 1)

    @property
    def covered(self) -> tuple[float, float] | None:
        """The part of the box between the data's extremes (None when no row is in the box)."""
        low, high = max(self.minimum, self.lo), min(self.maximum, self.hi)
        return (low, high) if low <= high else None

    @property
    def covered_fraction(self) -> float:
        span = self.covered
        if span is None:
            return 0.0
        return 1.0 if self.hi == self.lo else (span[1] - span[0]) / (self.hi - self.lo)


@dataclass
class DeviationHistogram:
    edges: np.ndarray
    counts: np.ndarray  # (DEVIATION_BINS, n_outputs)
    beyond: np.ndarray  # per output, rows whose deviation falls past the edges
    over_bound: np.ndarray  # per output, rows whose |deviation| exceeds the proven bound (must be none)
    rows: int = 0
    outside_box: int = 0  # rows left out: some input beyond the box, where the integer code clamps
    square_sum: np.ndarray | None = None  # per output, for the RMS over every row

    @property
    def rms(self) -> np.ndarray:
        return np.sqrt(self.square_sum / self.rows) if self.rows else np.full(self.counts.shape[1], np.nan)


@dataclass
class DataScan:
    """What one pass over the calibration files found (see the module docstring)."""

    files: list[FileRead]
    rows: int = 0
    coverage: list[InputCoverage] = field(default_factory=list)
    sample_inputs: np.ndarray | None = None  # (k, n_inputs)
    sample_residuals: np.ndarray | None = None  # (k, n_outputs), measured - estimated
    deviation: DeviationHistogram | None = None
    has_outputs: bool = False

    @property
    def usable(self) -> bool:
        return self.rows > 0


def over_bound(deviation, worst_case) -> np.ndarray:
    """Per output, rows whose |deviation| exceeds the bound (beyond float64 noise in computing it)."""
    return (np.abs(deviation) > np.asarray(worst_case) * (1 + 1e-9)).sum(axis=0)


def histogram(deviation, edges) -> tuple[np.ndarray, np.ndarray]:
    """Per output (column), rows per bin of ``edges`` (bins + 1, n_outputs) and rows past either end."""
    low, high = edges[0], edges[-1]
    bins = len(edges) - 1
    index = np.floor((deviation - low) / (high - low) * bins).astype(np.int64)
    past = (index < 0) | (index >= bins)
    counts = np.stack([np.bincount(index[~past[:, i], i], minlength=bins) for i in range(deviation.shape[1])], axis=1)
    return counts, past.sum(axis=0)


def deviation_edges(worst_case) -> np.ndarray:
    """Per output, DEVIATION_BINS equal bins over +-1.1 times the proven bound: (bins + 1, n_outputs)."""
    reach = np.asarray(worst_case, dtype=float) * 1.1
    reach = np.where(reach > 0, reach, 1.0)
    return np.linspace(-reach, reach, DEVIATION_BINS + 1)


def scan(paths, records, model, plan) -> DataScan:
    """Read each file of ``paths`` (its build.json record alongside in ``records``) once.

    A file that is missing, unreadable or changed since the build (its SHA-256
    differs from the record) contributes no rows; its FileRead says why.
    """
    estimator = plan.integer_estimator()
    scale = np.array([1.0 if q is None else float(q) for q in (plan.input_lsb or [None] * model.n_inputs)])
    lsb = np.array(plan.output_lsb)
    lo_counts = np.array([r[0] for r in plan.input_ranges], dtype=float)
    hi_counts = np.array([r[1] for r in plan.input_ranges], dtype=float)
    worst = plan.worst_case_deviation or plan.output_lsb  # a plan without the analysis: the lsb sets the scale
    state = _State(model, lo_counts * scale, hi_counts * scale, np.asarray(worst, dtype=float))
    reads = []
    # The products here are skinny (rows x a few columns): one BLAS thread does them at memory speed,
    # while more spin against the thread that hashes the file (measured: 20x slower on 2 cores).
    with threadpool_limits(limits=1, user_api="blas"):
        for path, record in zip(paths, records):
            reads.append(_read_file(path, record, state, estimator, scale, lsb, plan.input_ranges))
    return state.result(reads)


def _read_file(path, record, state, estimator, scale, lsb, box) -> FileRead:
    """One file's pass, merged into ``state`` only when the file is the one the build recorded."""
    read = FileRead(record.path, record.sha256)
    try:
        available = set(column_names(path))
        with_outputs = set(state.model.outputs) <= available
        columns = list(state.model.inputs) + (list(state.model.outputs) if with_outputs else [])
        stream = read_chunks(path, columns, drop_invalid=True)
        partial = state.fork(with_outputs)
        for chunk in stream:
            partial.add(chunk, estimator, scale, lsb, box)
    except AffixError as exc:
        read.problem = exc.message
        return read
    read.sha256, read.rows, read.rows_dropped = stream.sha256, stream.rows_read, stream.rows_dropped
    if read.matches:
        state.merge(partial)
    else:
        read.problem = "changed since the build (its SHA-256 differs from build.json's)"
    return read


class _State:
    """Running totals of the pass; ``fork``/``merge`` keep a file's rows out until its hash is confirmed."""

    def __init__(self, model, lo, hi, worst, with_outputs=True):
        self.model, self.lo, self.hi, self.worst = model, lo, hi, worst
        self.edges = deviation_edges(worst)
        self.with_outputs = with_outputs
        m, n = model.n_inputs, model.n_outputs
        self.rows = 0
        self.counts = np.zeros((m, FINE_BINS))
        self.input_sums = np.zeros((m, FINE_BINS))
        self.residual_sums = np.zeros((m, FINE_BINS, n))
        self.residual_squares = np.zeros((m, n))
        self.below, self.above = np.zeros(m, dtype=np.int64), np.zeros(m, dtype=np.int64)
        self.minimum, self.maximum = np.full(m, np.inf), np.full(m, -np.inf)
        self.dev_counts = np.zeros((DEVIATION_BINS, n), dtype=np.int64)
        self.dev_beyond = np.zeros(n, dtype=np.int64)
        self.dev_over = np.zeros(n, dtype=np.int64)
        self.dev_rows = self.dev_outside = 0
        self.dev_squares = np.zeros(n)
        self.keys = np.empty(0, dtype=np.uint64)
        self.sample = np.empty((0, m + n))
        self.row_offset = 0  # rows of earlier files, so sampling keys stay distinct across files

    def fork(self, with_outputs: bool) -> "_State":
        part = _State(self.model, self.lo, self.hi, self.worst, with_outputs)
        part.row_offset = self.row_offset + self.rows
        return part

    def add(self, chunk, estimator, scale, lsb, box) -> None:
        model, m = self.model, self.model.n_inputs
        y = chunk[:, :m]
        residual = chunk[:, m:] - model.predict(y) if self.with_outputs else None
        self._coverage(y, residual)
        deviation, outside = calibration_deviation(estimator, model, scale, lsb, box, y)
        self._deviation(deviation, outside)
        full = np.hstack([y, residual]) if residual is not None else np.hstack([y, np.full((len(y), model.n_outputs), np.nan)])
        self._sample(full)
        self.rows += len(chunk)

    def _coverage(self, y, residual) -> None:
        width = np.where(self.hi > self.lo, self.hi - self.lo, 1.0)
        position = ((y - self.lo) / width * FINE_BINS).T.copy()  # one contiguous row per input
        columns = y.T.copy()
        residual_rows = None if residual is None else residual.T.copy()  # bincount wants contiguous weights
        for j in range(self.model.n_inputs):
            column = columns[j]
            low, high = column.min(initial=np.inf), column.max(initial=-np.inf)
            self.minimum[j], self.maximum[j] = min(self.minimum[j], low), max(self.maximum[j], high)
            index, values, weights = position[j], column, residual_rows
            if low < self.lo[j] or high > self.hi[j]:  # the usual chunk lies inside and needs no mask
                below, above = column < self.lo[j], column > self.hi[j]
                self.below[j] += int(below.sum())
                self.above[j] += int(above.sum())
                inside = ~(below | above)
                index, values = index[inside], column[inside]
                weights = None if residual_rows is None else residual_rows[:, inside]
            index = np.minimum(index.astype(np.int64), FINE_BINS - 1)
            self.counts[j] += np.bincount(index, minlength=FINE_BINS)
            self.input_sums[j] += np.bincount(index, weights=values, minlength=FINE_BINS)
            if weights is not None:
                self.residual_squares[j] += (weights**2).sum(axis=1)
                for i in range(self.model.n_outputs):
                    self.residual_sums[j, :, i] += np.bincount(index, weights=weights[i], minlength=FINE_BINS)

    def _deviation(self, deviation, outside) -> None:
        self.dev_rows += len(deviation)
        self.dev_outside += outside
        self.dev_squares += (deviation**2).sum(axis=0)
        self.dev_over += over_bound(deviation, self.worst)
        counts, beyond = histogram(deviation, self.edges)
        self.dev_counts += counts
        self.dev_beyond += beyond

    def _sample(self, rows) -> None:
        keys = _sampling_keys(self.row_offset + self.rows + np.arange(len(rows), dtype=np.uint64))
        if len(self.keys) >= SAMPLE_ROWS:  # only rows that beat the current largest key can enter
            better = keys < self.keys.max()
            keys, rows = keys[better], rows[better]
        self._keep(np.concatenate([self.keys, keys]), np.vstack([self.sample, rows]))

    def _keep(self, keys, rows) -> None:
        if len(keys) > SAMPLE_ROWS:
            chosen = np.argpartition(keys, SAMPLE_ROWS - 1)[:SAMPLE_ROWS]
            keys, rows = keys[chosen], rows[chosen]
        self.keys, self.sample = keys, rows

    def merge(self, part: "_State") -> None:
        self.rows += part.rows
        self.with_outputs = self.with_outputs and part.with_outputs
        for name in ("counts", "input_sums", "residual_sums", "residual_squares", "below", "above", "dev_counts", "dev_beyond", "dev_over",
                     "dev_squares"):
            setattr(self, name, getattr(self, name) + getattr(part, name))
        self.minimum = np.minimum(self.minimum, part.minimum)
        self.maximum = np.maximum(self.maximum, part.maximum)
        self.dev_rows += part.dev_rows
        self.dev_outside += part.dev_outside
        self._keep(np.concatenate([self.keys, part.keys]), np.vstack([self.sample, part.sample]))

    def result(self, reads) -> DataScan:
        model, m = self.model, self.model.n_inputs
        result = DataScan(files=reads, rows=self.rows, has_outputs=self.with_outputs and self.rows > 0)
        if not self.rows:
            return result
        order = np.argsort(self.keys, kind="stable")  # a fixed order: the page is the same on every run
        sample = self.sample[order]
        result.sample_inputs = sample[:, :m]
        result.sample_residuals = sample[:, m:] if result.has_outputs else None
        result.coverage = [
            InputCoverage(
                name=name, lo=float(self.lo[j]), hi=float(self.hi[j]), counts=self.counts[j],
                input_sums=self.input_sums[j], residual_sums=self.residual_sums[j] if result.has_outputs else None,
                residual_squares=self.residual_squares[j] if result.has_outputs else None,
                below=int(self.below[j]), above=int(self.above[j]),
                minimum=float(self.minimum[j]), maximum=float(self.maximum[j]),
            )
            for j, name in enumerate(model.inputs)
        ]
        result.deviation = DeviationHistogram(
            edges=self.edges, counts=self.dev_counts, beyond=self.dev_beyond, over_bound=self.dev_over,
            rows=self.dev_rows,
            outside_box=self.dev_outside, square_sum=self.dev_squares,
        )
        return result


def _sampling_keys(row_numbers: np.ndarray) -> np.ndarray:
    """A fixed pseudo-random 64-bit key per row number (the SplitMix64 finaliser, a published mixer)."""
    with np.errstate(over="ignore"):
        z = row_numbers.astype(np.uint64) + np.uint64(_SAMPLE_SEED)
        z = (z ^ (z >> np.uint64(30))) * np.uint64(0xBF58476D1CE4E5B9)
        z = (z ^ (z >> np.uint64(27))) * np.uint64(0x94D049BB133111EB)
        return z ^ (z >> np.uint64(31))
