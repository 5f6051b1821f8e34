"""The fitted model: the plain data object the fit stage hands to the quantizer.

x_hat = gain @ y + offset, with ``gain`` of shape (outputs, inputs).

Besides gain and offset it carries what later stages need to judge the
estimator without the raw data: the error covariance and cross-validated RMS
(its own accuracy) and the first and second moments of the calibration inputs
(so the quantizer can evaluate the mean-square effect of coefficient rounding
exactly, as a quadratic form) and their extremes (so a declared input range
can be compared with what the calibration covered).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from affix import files, schema
from affix._version import __version__

MODEL_FORMAT = "affix.model/1"


@dataclass(frozen=True, eq=False)
class Model:
    inputs: tuple[str, ...]
    outputs: tuple[str, ...]
    gain: np.ndarray  # (n_outputs, n_inputs)
    offset: np.ndarray  # (n_outputs,)
    error_covariance: np.ndarray | None = None  # (n_outputs, n_outputs), 1/(n-1) scaling
    cv_rms: np.ndarray | None = None  # (n_outputs,), k-fold cross-validated
    n_samples: int = 0
    input_mean: np.ndarray | None = None  # (n_inputs,)
    input_covariance: np.ndarray | None = None  # (n_inputs, n_inputs), 1/(n-1)
    input_min: np.ndarray | None = None  # (n_inputs,), smallest value of each input in the calibration data
    input_max: np.ndarray | None = None  # (n_inputs,), largest
    ridge: float = 0.0
    folds: int = 0
    condition_number: float | None = None
    data_sha256: str | None = None
    source: str = "affix fit"
    dropped_rows: int = 0  # rows left out for NaN, infinite or empty values (drop_invalid)
    tool_version: str = __version__

    def __post_init__(self):
        gain = np.asarray(self.gain, dtype=float)
        object.__setattr__(self, "gain", gain)
        object.__setattr__(self, "offset", np.asarray(self.offset, dtype=float).reshape(-1))
        object.__setattr__(self, "inputs", tuple(self.inputs))
        object.__setattr__(self, "outputs", tuple(self.outputs))
        for name in ("error_covariance", "cv_rms", "input_mean", "input_covariance", "input_min", "input_max"):
            value = getattr(self, name)
            if value is not None:
                object.__setattr__(self, name, np.asarray(value, dtype=float))

    @property
    def n_inputs(self) -> int:
        return len(self.inputs)

    @property
    def n_outputs(self) -> int:
        return len(self.outputs)

    @property
    def rms(self) -> np.ndarray | None:
        """Per-output RMS error on the fitting data (sqrt of the error covariance diagonal)."""
        if self.error_covariance is None:
            return None
        return np.sqrt(np.clip(np.diag(self.error_covariance), 0.0, None))

    def predict(self, y) -> np.ndarray:
        """Float estimate for one vector (n_inputs,) or many rows (k, n_inputs)."""
        y = np.asarray(y, dtype=float)
        if y.shape[-1] != self.n_inputs:
            raise ValueError(f"expected {self.n_inputs} inputs per vector, got {y.shape[-1]}")
        return y @ self.gain.T + self.offset

    # --- file form -------------------------------------------------------

    def to_dict(self) -> dict:
        def arr(a):
            return None if a is None else np.asarray(a).tolist()

        return {
            "format": MODEL_FORMAT,
            "tool_version": self.tool_version,
            "source": self.source,
            "inputs": list(self.inputs),
            "outputs": list(self.outputs),
            "gain": arr(self.gain),
            "offset": arr(self.offset),
            "error_covariance": arr(self.error_covariance),
            "rms": arr(self.rms),
            "cv_rms": arr(self.cv_rms),
            "n_samples": int(self.n_samples),
            "input_mean": arr(self.input_mean),
            "input_covariance": arr(self.input_covariance),
            "input_min": arr(self.input_min),
            "input_max": arr(self.input_max),
            "ridge": float(self.ridge),
            "folds": int(self.folds),
            "condition_number": self.condition_number,
            "data_sha256": self.data_sha256,
            "dropped_rows": int(self.dropped_rows),
        }

    @property
    def sha256(self) -> str:
        """Content hash of the model file form; plans and emitted code cite it."""
        return files.content_sha256(self.to_dict())

    def save(self, path) -> None:
        files.write_json(path, self.to_dict())

    @classmethod
    def from_dict(cls, data, path=None) -> "Model":
        values = MODEL_SCHEMA.load(data, path)
        del values["rms"]  # derived from error_covariance; the schema checked that they agree
        return cls(**values)

    @classmethod
    def load(cls, path) -> "Model":
        return cls.from_dict(files.read_json(path, "model"), path)

    def validate(self) -> None:
        """Raise FileFormatError where this model breaks its file schema (for models built in Python)."""
        MODEL_SCHEMA.load(self.to_dict())


# --- the model file's schema -------------------------------------------------

COUNT = schema.Integer(0, 2**63 - 1)
# Double-precision rounding a fitted matrix may carry, relative to its scale
# (common practice: about 10**4 ulps leaves room for sums of many products).
_FIT_ROUNDING = 1e-12


def _error_covariance_is_a_covariance(values) -> None:
    """PSD up to the fit's rounding.  The error covariance is a difference,
    S_xx - A S_yx, of terms of the size of the outputs' own variance (about
    diag(A S_yy A') when the input covariance is known), so its rounding is
    relative to that, not to its own (possibly tiny) entries."""
    matrix = values["error_covariance"]
    if matrix is None:
        return
    matrix = np.array(matrix)
    scale = float(np.max(np.abs(matrix), initial=0.0))
    if values["input_covariance"] is not None:
        gain = np.array(values["gain"])
        with np.errstate(over="ignore", invalid="ignore"):
            explained = float(np.max(np.abs(np.diag(gain @ np.array(values["input_covariance"]) @ gain.T)),
                                     initial=0.0))
        if np.isfinite(explained):
            scale = max(scale, explained)
    schema.check_covariance(matrix, "error_covariance", scale * _FIT_ROUNDING * len(matrix))


def _rms_agrees(values) -> None:
    if values["rms"] is None:
        return
    if values["error_covariance"] is None:
        schema.fail("rms", "is given without the error_covariance it derives from")
    derived = np.sqrt(np.clip(np.diag(np.array(values["error_covariance"])), 0.0, None))
    if not np.allclose(values["rms"], derived, rtol=1e-9, atol=0.0):
        schema.fail("rms", "disagrees with the square root of the error_covariance diagonal")


def _extremes_are_a_range(values) -> None:
    low, high = values["input_min"], values["input_max"]
    if (low is None) != (high is None):
        schema.fail("input_min" if low is None else "input_max", "must come with input_min and input_max both")
    if low is not None and any(lo > hi for lo, hi in zip(low, high)):
        schema.fail("input_min", "exceeds input_max")


def _folds_are_a_split(values) -> None:
    if values["folds"] == 1:
        schema.fail("folds", "must be 0 (no cross-validation) or at least 2, got 1")


MODEL_SCHEMA = schema.Schema(
    "model",
    MODEL_FORMAT,
    schema.Field("tool_version", schema.VERSION),
    schema.Field("source", schema.Text(min_length=1), default="affix fit"),
    schema.Field("inputs", schema.NAMES, size=True),
    schema.Field("outputs", schema.NAMES, size=True),
    schema.Field("gain", schema.Array(("outputs", "inputs"), schema.Number())),
    schema.Field("offset", schema.Array(("outputs",), schema.Number())),
    schema.Field("error_covariance", schema.OrNone(schema.Covariance("outputs", sign=None)), default=None),
    schema.Field("rms", schema.OrNone(schema.Array(("outputs",), schema.Number(min=0.0))), default=None),
    schema.Field("cv_rms", schema.OrNone(schema.Array(("outputs",), schema.Number(min=0.0))), default=None),
    schema.Field("n_samples", COUNT, default=0),
    schema.Field("input_mean", schema.OrNone(schema.Array(("inputs",), schema.Number())), default=None),
    schema.Field("input_covariance", schema.OrNone(schema.Covariance("inputs")), default=None),
    schema.Field("input_min", schema.OrNone(schema.Array(("inputs",), schema.Number())), default=None),
    schema.Field("input_max", schema.OrNone(schema.Array(("inputs",), schema.Number())), default=None),
    schema.Field("ridge", schema.Number(min=0.0), default=0.0),
    schema.Field("folds", COUNT, default=0),
    # The condition number of a correlation matrix is at least 1 (up to rounding).
    schema.Field("condition_number", schema.OrNone(schema.Number(min=1.0 - 1e-9)), default=None),
    schema.Field("data_sha256", schema.OrNone(schema.SHA256), default=None),
    schema.Field("dropped_rows", COUNT, default=0),
    rules=(_error_covariance_is_a_covariance, _rms_agrees, _extremes_are_a_range, _folds_are_a_split),
)
