"""Verify an emit folder: run every emitted artefact over the vector sets and
compare with the reference rebuilt from the manifest, bit for bit.

The integer reference is :class:`affix.arithmetic.IntegerEstimator`; float32
code is compared with :class:`affix.float32_arithmetic.Float32Estimator` by
bit pattern (so -0.0 and +0.0 differ, as they do on the wire).
"""
from __future__ import annotations

import tempfile
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from affix import files
from affix.arithmetic import IntegerEstimator
from affix.emit import MANIFEST_FORMAT
from affix.errors import FileFormatError, VerificationError
from affix.float32_arithmetic import Float32Estimator
from affix.targets import DEFAULT_TARGET, get_target
from affix.verify.c_build import COMPILE_FLAGS, load_c
from affix.verify.vectors import calibration_vectors, vector_sets

SHOWN_MISMATCHES = 5
MICROPYTHON_VECTORS = 10**4
DEFAULT_MPY_MARCH = "armv7emsp"  # the native code checked where the plan's target runs no MicroPython  # per vector set and variant: the runtime is an interpreter


@dataclass
class Result:
    """One artefact over one vector set."""

    artefact: str
    vector_set: str
    count: int
    mismatches: int
    examples: list = field(default_factory=list)  # (inputs, expected, actual) of the first mismatches


@dataclass
class Report:
    name: str
    results: list[Result]
    notes: list[str] = field(default_factory=list)

    @property
    def mismatches(self) -> int:
        return sum(r.mismatches for r in self.results)

    @property
    def evaluations(self) -> int:
        return sum(r.count for r in self.results)

    def to_dict(self) -> dict:
        """The report as plain data (what a build keeps as verification.json)."""
        return {
            "name": self.name,
            "passed": self.mismatches == 0,
            "mismatches": self.mismatches,
            "evaluations": self.evaluations,
            "results": [
                {"artefact": r.artefact, "vector_set": r.vector_set, "vectors": r.count,
                 "mismatches": r.mismatches, "examples": [list(e) for e in r.examples]}
                for r in self.results
            ],
            "notes": list(self.notes),
        }

    def text(self) -> str:
        width = max(len(r.artefact) for r in self.results)
        lines = [f"{'artefact':<{width}}  {'vector set':<16} {'vectors':>10} {'mismatches':>10}"]
        for r in self.results:
            lines.append(f"{r.artefact:<{width}}  {r.vector_set:<16} {r.count:>10} {r.mismatches:>10}")
            for y, expected, actual in r.examples:
                lines.append(f"    y = {y}: expected {expected}, got {actual}")
        lines += self.notes
        verdict = "PASS" if self.mismatches == 0 else "FAIL"
        lines.append(f"{verdict}: {self.mismatches} mismatches in {self.evaluations} evaluations of {self.name}")
        return "\n".join(lines)


def find_manifest(out_dir) -> tuple[Path, dict]:
    out_dir = Path(out_dir)
    found = sorted(out_dir.glob("*.manifest.json"))
    if len(found) != 1:
        what = "no" if not found else f"{len(found)}"
        raise FileFormatError(f"{what} *.manifest.json files (expected exactly one; run 'affix emit')", out_dir)
    manifest = files.read_json(found[0], "manifest")
    files.check_format(manifest, MANIFEST_FORMAT, "manifest", found[0])
    return found[0], manifest


def verify(
    out_dir, *, vectors: int = 10**6, data=None, seed: int = 0, micropython_vectors: int = MICROPYTHON_VECTORS,
    cache_dir=None,
) -> Report:
    """Check every artefact in ``out_dir``; the report, or VerificationError
    (carrying the report as ``.report``) at any mismatch.

    The MicroPython runtime sees at most ``micropython_vectors`` of each set.
    """
    _, manifest = find_manifest(out_dir)
    try:
        integer = IntegerEstimator.from_mapping(manifest)
        float32 = Float32Estimator.from_mapping(manifest) if manifest["arith"] == "float32" else None
    except (KeyError, TypeError, ValueError) as exc:
        raise FileFormatError(f"manifest lacks or garbles {exc}", out_dir) from None
    sets = vector_sets(manifest["input_ranges"], manifest["input_ctype"], n_random=vectors, seed=seed)
    if data is not None:
        sets["calibration"] = calibration_vectors(
            data, manifest["inputs"], manifest["input_ctype"], manifest.get("input_lsb")
        )
    results: list[Result] = []
    files = manifest["files"]
    if "c" in files:
        results += _check_c(out_dir, manifest, sets, float32 or integer, cache_dir)
    if "micropython" in files:
        results += _check_micropython(out_dir, manifest, sets, integer, micropython_vectors)
    notes = [f"note: {n}" for n in manifest.get("notes", [])]
    if "c" in files:
        notes.append(f"note: C built through cffi with {' '.join(COMPILE_FLAGS)}")
    report = Report(manifest["name"], results, notes=notes)
    if report.mismatches:
        error = VerificationError(
            f"{out_dir}: {report.mismatches} mismatches in {report.evaluations} evaluations of {report.name}"
        )
        error.report = report
        raise error
    return report


def _check_c(out_dir, manifest, sets, reference, cache_dir) -> list[Result]:
    code = load_c(out_dir, manifest, cache_dir=cache_dir)
    label = f"C {manifest['name']}.c ({manifest['arith']}, {manifest['style']})"
    results = []
    for vector_set in sets.values():
        parts = [compare(label, vector_set.name, y, reference.evaluate(y), code.evaluate(y)) for y in vector_set.chunks()]
        results.append(_merged(label, vector_set.name, parts))
    return results


def _check_micropython(out_dir, manifest, sets, reference, limit: int) -> list[Result]:
    from affix.emit.micropython import variants
    from affix.verify.micropython_run import cross_compile, run_micropython

    module = Path(out_dir) / f"{manifest['name']}.py"
    if not module.is_file():
        raise FileFormatError("listed in the manifest but missing", module)
    results = []
    for variant in variants(reference):
        label = f"MicroPython {module.name} ({variant})"
        for vector_set in sets.values():
            y = vector_set.sample(limit)
            results.append(compare(label, vector_set.name, y, reference.evaluate(y), run_micropython(module, y, variant=variant)))
    march = get_target(manifest.get("target", DEFAULT_TARGET)).mpy_march or DEFAULT_MPY_MARCH
    with tempfile.TemporaryDirectory(prefix="affix-mpy-") as tmp:  # the .mpy is a check, not an output
        cross_compile(module, march=march, out=Path(tmp) / f"{manifest['name']}.mpy")
    return results


def compare(artefact: str, vector_set: str, y, expected, actual) -> Result:
    expected, actual = np.asarray(expected), np.asarray(actual)
    if expected.dtype == np.float32:  # bit patterns: == would equate -0.0 and +0.0
        differs = expected.view(np.uint32) != np.asarray(actual, dtype=np.float32).view(np.uint32)
    else:
        differs = expected != actual
    bad = np.flatnonzero(differs.any(axis=1)) if differs.size else np.array([], dtype=int)
    examples = [(y[k].tolist(), expected[k].tolist(), actual[k].tolist()) for k in bad[:SHOWN_MISMATCHES]]
    return Result(artefact, vector_set, len(y), int(bad.size), examples)


def _merged(artefact: str, vector_set: str, parts: list[Result]) -> Result:
    examples = [e for part in parts for e in part.examples][:SHOWN_MISMATCHES]
    return Result(artefact, vector_set, sum(p.count for p in parts), sum(p.mismatches for p in parts), examples)
