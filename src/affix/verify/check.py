"""Verify an emit: check its files against the manifest's hashes, then run
every entry point of every emitted file over the vector sets and compare with
the reference rebuilt from the manifest, bit for bit.

Entry points: in C, ``NAME_estimate()`` (through a batch wrapper) and
``NAME_selftest()``, and, where the plan was made for a core the unicorn
engine emulates (Cortex-M0+, M4, M7), ``NAME_estimate()`` cross-compiled for
it and run there; in MicroPython, ``estimate``, ``estimate_into``,
``estimate_into_viper`` (where the emitter writes it) and ``self_test``, and
the module must cross-compile with mpy-cross.  An entry point that cannot
run (the C does not compile, the module does not import, a function raises)
is a failed result of the report, like a mismatch.

The integer reference is :class:`affix.arithmetic.IntegerEstimator`; float32
code is compared with :class:`affix.float32_arithmetic.Float32Estimator` by
bit pattern (so -0.0 and +0.0 differ, as they do on the wire).
"""
from __future__ import annotations

import tempfile
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from affix.arithmetic import IntegerEstimator
from affix.emit.manifest import generated_files, load_manifest, manifests_in, sha256_of
from affix.errors import FileFormatError, VerificationError
from affix.float32_arithmetic import Float32Estimator
from affix.record import REASONS, Contract, RecordError, decode, nominal_record
from affix.errors import ToolError
from affix.targets import DEFAULT_TARGET, get_target
from affix.targets.figures import SIMAVR
from affix.targets.toolchain import compiler_path, elf_reader, flags_for
from affix.verify.c_build import COMPILE_FLAGS, CompileFailure, load_c
from affix.verify.vectors import calibration_vectors, vector_sets

SHOWN_MISMATCHES = 5
# Each unit's calibration record of a fleet is run over fewer vectors than a
# single build's code (its arithmetic is the same code, verified in full with
# the nominal record): every corner of the box up to this many (a fixed
# sample beyond), this many random box points, and points beyond the box.
RECORD_CORNERS = 256
RECORD_RANDOM = 64
RECORD_BEYOND = 16
MICROPYTHON_VECTORS = 10**4  # per vector set and variant: the runtime is an interpreter
CORE_VECTORS = 10**4  # per vector set on an emulated core: one Python call per vector
DEFAULT_MPY_MARCH = "armv7emsp"  # the native code checked where the plan's target runs no MicroPython
SELF_TEST = "self-test"  # the vector set of a self-test: the known vectors built into the code


@dataclass
class Result:
    """One entry point over one vector set (or its own self-test)."""

    artefact: str  # the entry point: "C probe_estimate() (int, table)", "MicroPython probe.py estimate()"
    vector_set: str
    count: int
    mismatches: int
    examples: list = field(default_factory=list)  # (inputs, expected, actual) of the first mismatches
    error: str | None = None  # why the entry point failed other than by a mismatch

    @property
    def failed(self) -> bool:
        return self.mismatches > 0 or self.error is not None


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

    @property
    def passed(self) -> bool:
        return not any(r.failed for r in self.results)

    def failures(self) -> list[str]:
        """One phrase per failing entry point, in report order."""
        phrases: dict[str, list[str]] = {}
        for r in self.results:
            if r.failed:
                phrases.setdefault(r.artefact, []).append(
                    r.error if r.error is not None else f"{r.mismatches} mismatches ({r.vector_set})"
                )
        return [f"{artefact}: {', '.join(what)}" for artefact, what in phrases.items()]

    def to_dict(self) -> dict:
        """The report as plain data (what a build keeps as verification.json)."""
        return {
            "name": self.name,
            "passed": self.passed,
            "mismatches": self.mismatches,
            "evaluations": self.evaluations,
            "results": [
                {"artefact": r.artefact, "vector_set": r.vector_set, "vectors": r.count,
                 "mismatches": r.mismatches, "examples": [list(e) for e in r.examples], "error": r.error}
                for r in self.results
            ],
            "notes": list(self.notes),
        }

    def text(self) -> str:
        width = max(len(r.artefact) for r in self.results)
        lines = [f"{'entry point':<{width}}  {'vector set':<16} {'vectors':>10} {'mismatches':>10}"]
        for r in self.results:
            lines.append(f"{r.artefact:<{width}}  {r.vector_set:<16} {r.count:>10} {r.mismatches:>10}")
            for y, expected, actual in r.examples:
                lines.append(f"    y = {y}: expected {expected}, got {actual}")
            if r.error is not None:
                lines.append(f"    FAILED: {r.error}")
        lines += self.notes
        verdict = "PASS" if self.passed else "FAIL"
        lines.append(f"{verdict}: {self.mismatches} mismatches in {self.evaluations} evaluations of {self.name}")
        return "\n".join(lines)


def find_manifest(target) -> tuple[Path, dict]:
    """The manifest ``target`` names (a manifest file, or a folder holding exactly one), checked."""
    target = Path(target)
    if target.is_dir():
        found = manifests_in(target)
        if not found:
            raise FileFormatError("holds no *.manifest.json (the file 'affix emit' writes beside the code)", target)
        if len(found) > 1:
            raise FileFormatError(f"holds {len(found)} manifests ({', '.join(p.name for p in found)}): name one "
                                  "of them, or verify the folder from the command line to check each", target)
        target = found[0]
    return target, load_manifest(target)


def check_files(folder: Path, manifest) -> None:
    """The folder holds exactly the files the manifest hashed: none missing or changed,
    and no file an emit of this estimator could write present but unlisted (put there by hand)."""
    hashes = manifest["file_sha256"]
    for filename in generated_files(manifest["name"]):
        path = folder / filename
        if filename not in hashes:
            if path.exists():
                raise VerificationError(f"{path}: not in {manifest['name']}'s manifest, so not what was emitted: "
                                        "remove it, or emit the languages you need again")
        elif not path.is_file():
            raise VerificationError(f"{path}: listed in the manifest but missing")
        elif sha256_of(path.read_bytes()) != hashes[filename]:
            raise VerificationError(f"{path}: its SHA-256 differs from the manifest's (changed after emit): "
                                    "emit again rather than edit")


def verify(
    target, *, vectors: int = 10**6, data=None, seed: int = 0, micropython_vectors: int = MICROPYTHON_VECTORS,
    core_vectors: int = CORE_VECTORS, cache_dir=None, records=None,
) -> Report:
    """Check the emit that ``target`` names (a manifest file, or a folder with one
    manifest); the report, or VerificationError (carrying the report as
    ``.report`` where one was made) at any failure.

    Integer C planned for an emulated core also runs there, cross-compiled, on
    at most ``core_vectors`` of each set; the MicroPython runtime sees at most
    ``micropython_vectors`` of each set.

    Code that loads calibration records runs with a record of the manifest's
    own integers over every set, and its loaders must refuse damaged copies of
    that record for the reasons :func:`affix.record.decode` gives.  ``records``
    ({unit: bytes}) are a fleet's records: each must load, in the reference
    and in both languages, and compute what the reference computes with it
    (RECORD_CORNERS, RECORD_RANDOM and RECORD_BEYOND vectors each).
    """
    path, manifest = find_manifest(target)
    folder = path.parent
    check_files(folder, manifest)
    fleet = _FleetRecords.of(manifest, records, seed) if _loads_records(manifest) else None
    integer = IntegerEstimator.from_mapping(manifest)
    float32 = Float32Estimator.from_mapping(manifest) if manifest["arith"] == "float32" else None
    sets = vector_sets(manifest["input_ranges"], manifest["input_ctype"], n_random=vectors, seed=seed)
    if data is not None:
        sets["calibration"] = calibration_vectors(
            data, manifest["inputs"], manifest["input_ctype"], manifest["input_lsb"]
        )
    results: list[Result] = []
    listed = manifest["files"]
    if "c" in listed:
        results += _check_c(folder, manifest, sets, float32 or integer, cache_dir, fleet)
        if float32 is None and _emulated(manifest) and not _missing_for_core(manifest):
            results += _check_on_core(folder, manifest, sets, integer, core_vectors,
                                      None if fleet is None else fleet.nominal)
    if "micropython" in listed:
        results += _check_micropython(folder, manifest, sets, integer, micropython_vectors, fleet)
    notes = [f"note: {n}" for n in manifest["notes"]]
    if fleet is not None and fleet.units:
        notes.append(f"note: {len(fleet.units)} unit records, each over {len(fleet.vectors)} vectors (corners, "
                     "random and beyond the box)")
    if "c" in listed:
        notes.append(f"note: C built through cffi with {' '.join(COMPILE_FLAGS)}")
        if float32 is None and _emulated(manifest):
            core, missing = get_target(manifest["target"]), _missing_for_core(manifest)
            if missing:  # the host's C is verified in full; the run on the core is what could not be done
                notes.append(f"note: C not run on the emulated {core.name}: {missing}")
            else:
                notes.append(f"note: C for {core.name} built with {core.compiler} {' '.join(flags_for(core))}, "
                             "run in the unicorn engine's model of the core"
                             + (" with the nominal record" if fleet is not None else ""))
    report = Report(manifest["name"], results, notes=notes)
    if not report.passed:
        failures = report.failures()
        more = f" (and {len(failures) - 2} more)" if len(failures) > 2 else ""
        raise VerificationError(f"{path}: " + "; ".join(failures[:2]) + more, report=report)
    return report


def _check_c(folder, manifest, sets, reference, cache_dir, fleet=None) -> list[Result]:
    name = manifest["name"]
    estimate = f"C {manifest['function']}() ({manifest['arith']}, {manifest['style']})"
    try:
        code = load_c(folder, manifest, cache_dir=cache_dir)
    except CompileFailure as exc:
        return [Result(estimate, "build", 0, 0, error=exc.message)]
    results = []
    record = None if fleet is None else {"record": fleet.nominal}
    for vector_set in sets.values():
        parts = [compare(estimate, vector_set.name, y, reference.evaluate(y), code.evaluate(y, **(record or {})))
                 for y in vector_set.chunks()]
        results.append(_merged(estimate, vector_set.name, parts))
    if fleet is not None:
        loader = f"C {name}_record_load()"
        results.append(fleet.compare_codes(loader, [CODE_NAMES.get(code.load(r), "ok") for r in fleet.damaged]))
        if fleet.units:
            codes = [CODE_NAMES.get(code.load(r), "ok") for r in fleet.units.values()]
            results.append(fleet.compare_loads(loader, codes))
            outputs = [code.evaluate(fleet.vectors, record=r) for r, c in zip(fleet.units.values(), codes) if c == "ok"]
            results.append(fleet.compare_outputs(estimate, codes, outputs))
    failures = code.selftest()
    error = None if failures == 0 else f"returns {failures}: that many wrong outputs on its built-in vectors"
    results.append(Result(f"C {name}_selftest()", SELF_TEST, 1, 0, error=error))
    return results


def _emulated(manifest) -> bool:
    """Whether the plan's target is a core unicorn runs (the host's own C runs natively through cffi)."""
    target = get_target(manifest["target"])
    return target.name != DEFAULT_TARGET and target.emulator not in (None, SIMAVR)


def _missing_for_core(manifest) -> str | None:
    """Why the C cannot run on the plan's emulated core here (a missing cross compiler or
    library), or None."""
    from affix.targets.emulator import engine

    try:
        compiler_path(get_target(manifest["target"]))
        engine()
        elf_reader()
    except ToolError as exc:
        return exc.message
    return None


def _check_on_core(folder, manifest, sets, reference, limit: int, record: bytes | None) -> list[Result]:
    """The C built for the plan's core and run in its emulator over each vector set (code that loads
    records, with ``record`` loaded on the core)."""
    from affix.targets.figures import EmulatedEstimator

    target = get_target(manifest["target"])
    function = f"{manifest['name']}_estimate{'_record' if record is not None else ''}()"
    estimate = f"C {function} on the emulated {target.name} ({manifest['style']})"
    results = []
    with tempfile.TemporaryDirectory(prefix="affix-core-") as tmp:
        try:
            code = EmulatedEstimator(folder, manifest, target, tmp)
        except ToolError as exc:  # the compiler is there: the code does not build for this core
            return [Result(estimate, "build", 0, 0, error=exc.message)]
        for vector_set in sets.values():
            y = vector_set.sample(limit)
            try:
                actual = code.evaluate(y, record=record)[0]
            except ToolError as exc:  # the loader refused the record the reference accepts
                return results + [Result(estimate, "records", 0, 0, error=exc.message)]
            results.append(compare(estimate, vector_set.name, y, reference.evaluate(y), actual))
    return results


def _check_micropython(folder, manifest, sets, reference, limit: int, fleet=None) -> list[Result]:
    from affix.emit.micropython import variants
    from affix.verify.micropython_run import VARIANTS, ImportFailure, cross_compile, run_micropython, run_self_test

    module = folder / f"{manifest['name']}.py"
    label = f"MicroPython {module.name}"
    try:
        passed = run_self_test(module)
        self_test = Result(f"{label} self_test()", SELF_TEST, 1, 0, error=None if passed else "returns False")
    except ImportFailure as exc:  # nothing in it can run
        return [Result(label, "import", 0, 0, error=exc.message)]
    except VerificationError as exc:
        self_test = Result(f"{label} self_test()", SELF_TEST, 1, 0, error=exc.message)
    results = []
    for variant in ("record_list", "record") if fleet is not None else ("list", *variants(reference)):
        entry = f"{label} {VARIANTS[variant][0]}()"
        for vector_set in sets.values():
            y = vector_set.sample(limit)
            try:
                if fleet is None:
                    actual = run_micropython(module, y, variant=variant)
                else:
                    codes, (actual,) = run_micropython(module, y, variant=variant, records=[fleet.nominal])
            except (VerificationError, ValueError) as exc:  # it raised (or refused the record): the other sets would too
                results.append(Result(entry, vector_set.name, len(y), 0, error=str(exc)))
                break
            results.append(compare(entry, vector_set.name, y, reference.evaluate(y), actual))
    if fleet is not None:
        results += _micropython_records(module, label, fleet)
    results.append(self_test)
    march = get_target(manifest["target"]).mpy_march or DEFAULT_MPY_MARCH
    with tempfile.TemporaryDirectory(prefix="affix-mpy-") as tmp:  # the .mpy is a check, not an output
        try:
            cross_compile(module, march=march, out=Path(tmp) / f"{manifest['name']}.mpy")
        except VerificationError as exc:
            results.append(Result(f"{label} (mpy-cross)", "compile", 0, 0, error=exc.message))
    return results


def _micropython_records(module, label, fleet) -> list[Result]:
    """load_record over the damaged copies of the nominal record, then every unit's record with its vectors."""
    from affix.verify.micropython_run import run_micropython

    loader, estimate = f"{label} load_record()", f"{label} estimate_record_into()"
    try:
        codes, _ = run_micropython(module, fleet.vectors[:1], variant="record", records=fleet.damaged)
        results = [fleet.compare_codes(loader, codes)]
        if fleet.units:
            codes, outputs = run_micropython(module, fleet.vectors, variant="record", records=list(fleet.units.values()))
            results += [fleet.compare_loads(loader, codes), fleet.compare_outputs(estimate, codes, list(outputs))]
    except VerificationError as exc:
        return [Result(loader, "records", 0, 0, error=exc.message)]
    return results


def _loads_records(manifest) -> bool:
    return manifest.get("interface", {}).get("coefficients") == "record"


CODE_NAMES = {code: name for code, name, _ in REASONS}


@dataclass
class _FleetRecords:
    """The records a verification runs: a record of the manifest's own integers (``nominal``), damaged
    copies of it (every truncation, and one bit flipped in every byte), and the fleet's ``units``,
    with the ``vectors`` each unit record is run over."""

    contract: Contract
    nominal: bytes
    damaged: list
    expected_codes: list
    units: dict
    vectors: np.ndarray

    @classmethod
    def of(cls, manifest, units, seed) -> "_FleetRecords":
        contract = Contract.of(manifest)
        nominal = nominal_record(manifest)
        damaged = [nominal[:size] for size in range(len(nominal))]
        damaged += [nominal[:k] + bytes([nominal[k] ^ (1 << (k % 8))]) + nominal[k + 1:] for k in range(len(nominal))]
        sets = vector_sets(manifest["input_ranges"], manifest["input_ctype"], n_random=RECORD_RANDOM, seed=seed)
        vectors = np.vstack([sets["corners"].sample(RECORD_CORNERS), sets["random"].chunk(0),
                             sets["beyond the box"].sample(RECORD_BEYOND)])
        return cls(contract, nominal, damaged, [cls._code(contract, r) for r in damaged], dict(units or {}), vectors)

    @staticmethod
    def _code(contract, data) -> str:
        try:
            decode(data, contract)
        except RecordError as exc:
            return exc.reason
        return "ok"

    def compare_codes(self, artefact, codes) -> Result:
        """The loader's verdict on each damaged record against the reference's."""
        bad = [k for k, (want, got) in enumerate(zip(self.expected_codes, codes)) if want != got]
        bad += list(range(len(codes), len(self.expected_codes)))
        examples = [(f"damaged record {k} ({len(self.damaged[k])} bytes)", self.expected_codes[k],
                     codes[k] if k < len(codes) else None) for k in bad[:SHOWN_MISMATCHES]]
        return Result(artefact, "damaged records", len(self.damaged), len(bad), examples)

    def compare_loads(self, artefact, codes) -> Result:
        """Every unit's record must load ("ok"), as the reference loads it."""
        refused = [(unit, "ok", code) for unit, code in zip(self.units, codes) if code != "ok"]
        refused += [(unit, "ok", None) for unit in list(self.units)[len(codes):]]
        return Result(artefact, "unit records", len(self.units), len(refused), refused[:SHOWN_MISMATCHES])

    def compare_outputs(self, artefact, codes, outputs) -> Result:
        """Each loaded unit record's outputs against the reference computed with that record."""
        loaded = [unit for unit, code in zip(self.units, codes) if code == "ok"]
        count, bad, examples = 0, 0, []
        for unit, actual in zip(loaded, outputs):
            expected = decode(self.units[unit], self.contract).integer_estimator(self.contract).evaluate(self.vectors)
            result = compare(artefact, unit, self.vectors, expected, actual)
            count, bad = count + result.count, bad + result.mismatches
            examples += [(f"unit {unit}: {y}", e, a) for y, e, a in result.examples]
        return Result(artefact, "unit records", count, bad, examples[:SHOWN_MISMATCHES])


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
