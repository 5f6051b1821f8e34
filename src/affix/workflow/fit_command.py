"""affix fit: calibration data -> model file, with a short accuracy table."""
from __future__ import annotations

import json
import sys
import warnings
from pathlib import Path

import numpy as np

import affix
from affix.errors import UsageError
from affix.fit.engines import ENGINES

LARGEST_GAINS = 3  # how many gains per output the table shows


def register(sub):
    parser = sub.add_parser(
        "fit",
        help="fit the linear estimator x = A*y + b from calibration data",
        description="Fit gain and offset by least squares from CSV (columns by header name), "
        ".npy (columns named 0, 1, ...), .npz or Parquet files, streamed in constant memory, on this machine "
        "or on a Dask cluster.",
    )
    parser.add_argument("data", nargs="+", help="calibration data: files (.csv, .npy, .npz, .parquet), quoted glob "
                        "patterns ('logs/*.csv') or Parquet dataset folders, fitted as one data set")
    parser.add_argument("--inputs", required=True, help="comma-separated input columns (the raw readings y)")
    parser.add_argument("--outputs", required=True, help="comma-separated output columns (the quantities x)")
    parser.add_argument("--out", required=True, help="model file to write (JSON)")
    add_fit_options(parser)
    parser.add_argument("--json", action="store_true", help="print the summary as JSON instead of a table")
    parser.set_defaults(run=run, reads=("data",), writes={"out": "file"})


def add_fit_options(parser) -> None:
    """The options that shape the fit (shared with 'affix init', which writes them to the project)."""
    parser.add_argument("--ridge", type=float, default=0.0, help="relative ridge: adds RIDGE*var(y_j) to each input's variance (default 0)")
    parser.add_argument("--folds", type=int, default=5, help="k for k-fold cross-validation, 0 to skip (default 5)")
    parser.add_argument("--drop-invalid", action="store_true", help="leave out rows holding NaN, infinite or empty values")
    parser.add_argument("--engine", choices=ENGINES, default="local",
                        help="where the pass over the files runs: this machine (default) or a Dask cluster")
    parser.add_argument("--scheduler", metavar="ADDRESS",
                        help="with --engine dask: the scheduler of a running cluster (tcp://host:8786); without it "
                        "a cluster of this machine's CPUs is started for the fit")


def run(args) -> int:
    out = Path(args.out)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        warnings.simplefilter("ignore", ResourceWarning)  # an engine's sockets are its own business
        model = affix.fit(
            args.data,
            column_names(args.inputs, "inputs"),
            column_names(args.outputs, "outputs"),
            ridge=args.ridge,
            folds=args.folds,
            drop_invalid=args.drop_invalid,
            engine=engine(args.engine, args.scheduler),
        )
    for warning in caught:
        print(f"affix: warning: {warning.message}", file=sys.stderr)
    if model.dropped_rows:
        print(f"affix: note: left out {model.dropped_rows} row(s) holding NaN, infinite or empty values", file=sys.stderr)
    model.save(out)
    summary = summarise(model, out)
    print(json.dumps(summary, indent=2) if args.json else format_table(summary))
    return 0


def summarise(model, out) -> dict:
    rows = []
    for i, name in enumerate(model.outputs):
        order = np.argsort(-np.abs(model.gain[i]))[:LARGEST_GAINS]
        rows.append(
            {
                "output": name,
                "rms": float(model.rms[i]),
                "cv_rms": None if model.cv_rms is None else float(model.cv_rms[i]),
                "largest_gains": [{"input": model.inputs[j], "gain": float(model.gain[i, j])} for j in order],
            }
        )
    return {
        "model": str(out),
        "n_samples": model.n_samples,
        "dropped_rows": model.dropped_rows,
        "inputs": list(model.inputs),
        "outputs": list(model.outputs),
        "ridge": model.ridge,
        "folds": model.folds,
        "condition_number": model.condition_number,
        "data_sha256": model.data_sha256,
        "input_min": _list(model.input_min),
        "input_max": _list(model.input_max),
        "per_output": rows,
    }


def _list(values):
    return None if values is None else [float(v) for v in values]


def format_table(summary) -> str:
    width = max(len("output"), *(len(r["output"]) for r in summary["per_output"]))
    condition = summary["condition_number"]
    lines = [
        f"fitted {len(summary['outputs'])} output(s) from {len(summary['inputs'])} input(s) on "
        f"{summary['n_samples']} rows; condition number {'inf' if condition is None else f'{condition:.3g}'}",
        f"{'output':<{width}}  {'rms':>11}  {'cv rms':>11}  largest gains",
    ]
    for r in summary["per_output"]:
        cv = "-" if r["cv_rms"] is None else f"{r['cv_rms']:#.4g}"
        gains = ", ".join(f"{g['input']} {g['gain']:+.4g}" for g in r["largest_gains"])
        lines.append(f"{r['output']:<{width}}  {r['rms']:>#11.4g}  {cv:>11}  {gains}")
    if summary["input_min"] is not None:
        seen = zip(summary["inputs"], summary["input_min"], summary["input_max"])
        lines.append("inputs seen: " + ", ".join(f"{name} {lo:.6g}..{hi:.6g}" for name, lo, hi in seen))
    lines.append(f"model written to {summary['model']}")
    return "\n".join(lines)


def engine(name: str, scheduler: str | None):
    """The fit's engine as the options name it, with a progress bar on a terminal."""
    from affix.fit.engines import named
    from affix.workflow.progress import bar_for

    return named(name, scheduler, bar=bar_for())


def column_names(text: str, parameter: str) -> list[str]:
    names = [name.strip() for name in text.split(",")]
    if not all(names):
        raise UsageError(f"empty column name in '{text}'", parameter)
    return names
