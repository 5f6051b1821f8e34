"""The fitted model: the plain data object the fit stage hands to the quantizer.

x_hat = gain @ y + offset, with ``gain`` of shape (outputs, inputs).

Besides gain and offset it carries what later stages need to judge the
estimator without the raw data: the error covariance and cross-validated RMS
(its own accuracy) and the first and second moments of the calibration inputs
(so the quantizer can evaluate the mean-square effect of coefficient rounding
exactly, as a quadratic form).
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from affix import files
from affix._version import __version__
from affix.errors import FileFormatError

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
        for name in ("error_covariance", "cv_rms", "input_mean", "input_covariance"):
            value = getattr(self, name)
            if value is not None:
                object.__setattr__(self, name, np.asarray(value, dtype=float))
        _check_shapes(self)

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
        files.check_format(data, MODEL_FORMAT, "model", path)
        missing = [k for k in ("inputs", "outputs", "gain", "offset") if k not in data]
        if missing:
            raise FileFormatError(f"model file lacks key(s): {', '.join(missing)}", path)
        try:
            model = cls(
                inputs=_names(data["inputs"], "inputs"),
                outputs=_names(data["outputs"], "outputs"),
                gain=_finite(data["gain"], "gain"),
                offset=_finite(data["offset"], "offset"),
                error_covariance=_finite_or_none(data.get("error_covariance"), "error_covariance"),
                cv_rms=_finite_or_none(data.get("cv_rms"), "cv_rms"),
                n_samples=int(data.get("n_samples", 0)),
                input_mean=_finite_or_none(data.get("input_mean"), "input_mean"),
                input_covariance=_finite_or_none(data.get("input_covariance"), "input_covariance"),
                ridge=float(data.get("ridge", 0.0)),
                folds=int(data.get("folds", 0)),
                condition_number=data.get("condition_number"),
                data_sha256=data.get("data_sha256"),
                source=str(data.get("source", "affix fit")),
                dropped_rows=int(data.get("dropped_rows", 0)),
                tool_version=str(data.get("tool_version", "")),
            )
        except (ValueError, TypeError) as exc:
            raise FileFormatError(str(exc), path) from None
        return model

    @classmethod
    def load(cls, path) -> "Model":
        return cls.from_dict(files.read_json(path, "model"), path)


def _names(value, key):
    if not isinstance(value, list) or not value or not all(isinstance(v, str) and v for v in value):
        raise ValueError(f"'{key}' must be a non-empty list of names")
    if len(set(value)) != len(value):
        raise ValueError(f"'{key}' has duplicate names")
    return value


def _finite(value, key):
    try:
        arr = np.asarray(value, dtype=float)
    except (ValueError, TypeError):
        raise ValueError(f"'{key}' is not numeric") from None
    if not np.all(np.isfinite(arr)):
        raise ValueError(f"'{key}' holds NaN or infinite values")
    return arr


def _finite_or_none(value, key):
    return None if value is None else _finite(value, key)


def _check_shapes(model: Model) -> None:
    m, n = model.n_inputs, model.n_outputs
    expect = {
        "gain": (n, m),
        "offset": (n,),
        "error_covariance": (n, n),
        "cv_rms": (n,),
        "input_mean": (m,),
        "input_covariance": (m, m),
    }
    for name, shape in expect.items():
        value = getattr(model, name)
        if value is not None and value.shape != shape:
            raise ValueError(f"'{name}' has shape {value.shape}, expected {shape} for {m} inputs and {n} outputs")
    if model.condition_number is not None and not (
        isinstance(model.condition_number, (int, float)) and not math.isnan(model.condition_number)
    ):
        raise ValueError("'condition_number' must be a number")
