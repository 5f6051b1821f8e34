"""Build emitted C for verification: a cffi (API mode) extension with a batch
entry point and the emitted self-test compiled in, and a stand-alone driver
program for sanitizer runs.

The extension is compiled once per distinct source into a cache folder (never
into the user's emit folder): ``$AFFIX_CACHE_DIR``, else
``$XDG_CACHE_HOME/affix/cffi``, else ``~/.cache/affix/cffi`` (one small
module per distinct emitted source; deleting the folder is always safe).  One call of
the batch function evaluates a whole numpy buffer (``ffi.from_buffer``), so
there is no Python call per vector.

Before building, the emitted C is compiled on its own: where that fails the
code is wrong (VerificationError, exit 1), where only the extension fails the
set-up is (ToolError, exit 4).  Either way the compiler's messages go to
``NAME-KEY.log`` in the same cache folder, and the error names that file.
"""
from __future__ import annotations

import hashlib
import importlib.util
import os
import shutil
import subprocess
import sys
import tempfile
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from affix.emit.templates import render
from affix.errors import FileFormatError, ToolError, VerificationError

DTYPES = {
    "int8_t": np.int8,
    "uint8_t": np.uint8,
    "int16_t": np.int16,
    "uint16_t": np.uint16,
    "int32_t": np.int32,
    "uint32_t": np.uint32,
    "float": np.float32,
}
# -ffp-contract=off: the float32 contract has no fused multiply-adds (GCC's
# default outside ISO modes is to fuse where the target can).
COMPILE_FLAGS = ("-O2", "-std=c99", "-ffp-contract=off")


@dataclass(frozen=True)
class Signature:
    """What the emitted function takes and returns, read from a manifest."""

    name: str
    input_ctype: str
    output_ctype: str  # "float" for float32 code
    n_inputs: int
    n_outputs: int
    records: bool = False  # the code loads its coefficients from a calibration record

    @classmethod
    def from_manifest(cls, manifest) -> "Signature":
        return cls(
            name=manifest["name"],
            input_ctype=manifest["input_ctype"],
            output_ctype="float" if manifest["arith"] == "float32" else manifest["output_ctype"],
            n_inputs=len(manifest["inputs"]),
            n_outputs=len(manifest["outputs"]),
            records=manifest.get("interface", {}).get("coefficients") == "record",
        )

    @property
    def template_context(self) -> dict:
        return {"name": self.name, "input_ctype": self.input_ctype, "output_ctype": self.output_ctype,
                "records": self.records}


class CompileFailure(VerificationError):
    """The emitted C does not compile: the code is wrong (the compiler is there)."""


class CEstimator:
    """The emitted C, loaded through cffi: ``evaluate`` takes integer rows, ``selftest`` runs NAME_selftest().

    For code that loads a calibration record, ``evaluate`` needs the record's bytes (``record=``),
    and ``load(data)`` is what NAME_record_load() returns for them."""

    def __init__(self, module, signature: Signature):
        self._ffi, self._lib = module.ffi, module.lib
        self.signature = signature
        batch = "verify_record_batch" if signature.records else "verify_batch"
        self._batch = getattr(self._lib, f"{signature.name}_{batch}")
        self._selftest = getattr(self._lib, f"{signature.name}_selftest")

    def selftest(self) -> int:
        """The number of wrong outputs the emitted self-test reports (0: it passes)."""
        return int(self._selftest())

    def load(self, data: bytes) -> int:
        """NAME_record_load()'s code for ``data`` (0: loaded), read from a buffer of exactly its size."""
        return int(self._batch(self._record(data), len(data), self._ffi.NULL, self._ffi.NULL, 0))

    def evaluate(self, vectors, record: bytes | None = None) -> np.ndarray:
        sig = self.signature
        y = np.ascontiguousarray(vectors, dtype=DTYPES[sig.input_ctype]).reshape(-1, sig.n_inputs)
        x = np.empty((len(y), sig.n_outputs), dtype=DTYPES[sig.output_ctype])
        arguments = (
            self._ffi.cast(f"const {sig.input_ctype} *", self._ffi.from_buffer(y)),
            self._ffi.cast(f"{sig.output_ctype} *", self._ffi.from_buffer(x, require_writable=True)),
            len(y),
        )
        if not sig.records:
            self._batch(*arguments)
            return x
        code = self._batch(self._record(record), len(record), *arguments)
        if code != 0:
            raise VerificationError(f"{sig.name}_record_load() refuses a record the reference accepts (code {code})")
        return x

    def _record(self, data: bytes):
        return self._ffi.cast("const uint8_t *", self._ffi.from_buffer(bytes(data) or b"\0"))


def load_c(emit_dir, manifest, *, cache_dir=None) -> CEstimator:
    """Compile (or reuse from the cache) and load the emitted C of ``manifest``, self-test included."""
    import cffi

    signature = Signature.from_manifest(manifest)
    source, header = _emitted_sources(Path(emit_dir), manifest)
    batch = render("c/verify_batch.c.jinja", declaration_only=False, **signature.template_context)
    cdef = render("c/verify_batch.c.jinja", declaration_only=True, **signature.template_context)
    flags = [*COMPILE_FLAGS, f"-D{signature.name.upper()}_SELFTEST"]
    key = hashlib.sha256(
        "\0".join(
            [source.read_text(), header.read_text(), batch, cdef, " ".join(flags), sys.version, cffi.__version__]
        ).encode()
    ).hexdigest()[:20]
    module_name = f"_affix_verify_{key}"
    cache = Path(cache_dir) if cache_dir is not None else default_cache_dir()
    cache.mkdir(parents=True, exist_ok=True)
    built = next(cache.glob(f"{module_name}.*.so"), None) or next(cache.glob(f"{module_name}.so"), None)
    if built is None:
        log = cache / f"{signature.name}-{key}.log"
        _check_compiles(source, header, flags, log)
        built = _compile(cffi, module_name, cdef, batch, source, header, flags, cache, log)
    spec = importlib.util.spec_from_file_location(module_name, built)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return CEstimator(module, signature)


def default_cache_dir() -> Path:
    if os.environ.get("AFFIX_CACHE_DIR"):
        return Path(os.environ["AFFIX_CACHE_DIR"])
    base = Path(os.environ.get("XDG_CACHE_HOME") or Path.home() / ".cache")
    return base / "affix" / "cffi"


def build_driver(emit_dir, manifest, out_dir, *, extra_flags=(), selftest: bool = False) -> Path:
    """Compile the emitted C with a stand-alone vector driver (for sanitizer
    runs); with ``selftest`` the emitted self-test is compiled in and
    ``DRIVER selftest`` runs it."""
    signature = Signature.from_manifest(manifest)
    source, header = _emitted_sources(Path(emit_dir), manifest)
    out_dir = Path(out_dir)
    driver = out_dir / f"{signature.name}_driver.c"
    driver.write_text(render("c/vector_driver.c.jinja", selftest=selftest, **signature.template_context))
    exe = out_dir / f"{signature.name}_driver"
    defines = [f"-D{signature.name.upper()}_SELFTEST"] if selftest else []
    _run_compiler(
        [_compiler(), *COMPILE_FLAGS, *defines, *extra_flags, f"-I{header.parent}", str(source), str(driver), "-o", str(exe)]
    )
    return exe


def run_driver(exe, manifest, vectors) -> np.ndarray:
    signature = Signature.from_manifest(manifest)
    with tempfile.TemporaryDirectory(prefix="affix-driver-") as tmp:
        vin, vout = Path(tmp) / "in.bin", Path(tmp) / "out.bin"
        np.ascontiguousarray(vectors, dtype=DTYPES[signature.input_ctype]).tofile(vin)
        done = subprocess.run([str(exe), str(vin), str(vout)], capture_output=True, text=True, timeout=600)
        if done.returncode != 0:
            raise ToolError(f"{Path(exe).name} exited with status {done.returncode}: {done.stderr.strip()[-2000:]}")
        return np.fromfile(vout, dtype=DTYPES[signature.output_ctype]).reshape(-1, signature.n_outputs)


def _emitted_sources(emit_dir: Path, manifest) -> tuple[Path, Path]:
    name = manifest["name"]
    emit_dir = emit_dir.resolve()  # cffi compiles from its own working folder
    source, header = emit_dir / f"{name}.c", emit_dir / f"{name}.h"
    for path in (source, header):
        if not path.is_file():
            raise FileFormatError("listed in the manifest but missing", path)
    return source, header


def _check_compiles(source: Path, header: Path, flags, log: Path) -> None:
    """Compile the emitted C alone; CompileFailure (messages in ``log``) where it does not."""
    with tempfile.TemporaryDirectory(prefix="affix-cc-") as tmp:
        command = [_compiler(), *flags, f"-I{header.parent}", "-c", str(source), "-o", str(Path(tmp) / "check.o")]
        done = subprocess.run(command, capture_output=True, text=True, timeout=600)
    if done.returncode != 0:
        log.write_text(f"$ {' '.join(command)}\n{done.stdout}{done.stderr}")
        raise CompileFailure(f"{source} does not compile ({Path(command[0]).name} {' '.join(flags)}); "
                             f"the compiler's messages are in {log}")


def _compile(cffi, module_name, cdef, batch, source: Path, header: Path, flags, cache: Path, log: Path) -> Path:
    ffi = cffi.FFI()
    ffi.cdef(cdef)
    ffi.set_source(
        module_name,
        batch,
        sources=[str(source)],
        include_dirs=[str(header.parent)],
        extra_compile_args=list(flags),
    )
    with tempfile.TemporaryDirectory(prefix="affix-cffi-", dir=cache) as tmp:
        try:
            with _output_to(log):  # the compiler writes to the inherited stdout/stderr
                built = Path(ffi.compile(tmpdir=tmp, verbose=False))
        except Exception as exc:  # distutils reports compiler failures as its own error types
            raise ToolError(f"building the cffi test module for {source.name} failed ({type(exc).__name__}; "
                            f"the emitted C itself compiles, so look at Python's headers and the compiler "
                            f"set-up): the messages are in {log}") from None
        target = cache / built.name
        os.replace(built, target)  # atomic: a concurrent build of the same source is harmless
    return target


@contextmanager
def _output_to(path: Path):
    """Point file descriptors 1 and 2, which child processes inherit, at ``path`` for a while."""
    sys.stdout.flush()
    sys.stderr.flush()
    saved = os.dup(1), os.dup(2)
    try:
        with open(path, "ab") as log:
            os.dup2(log.fileno(), 1)
            os.dup2(log.fileno(), 2)
            yield
    finally:
        sys.stdout.flush()
        sys.stderr.flush()
        for fd, original in zip((1, 2), saved):
            os.dup2(original, fd)
            os.close(original)


def _compiler() -> str:
    cc = os.environ.get("CC") or shutil.which("cc") or shutil.which("gcc")
    if not cc:
        raise ToolError("no C compiler found (install gcc, or set CC)")
    return cc


def _run_compiler(command: list[str]) -> None:
    done = subprocess.run(command, capture_output=True, text=True, timeout=600)
    if done.returncode != 0:
        raise ToolError(f"compiling failed: {' '.join(command)}: {done.stderr.strip()[-2000:]}")


def run_selftest(exe) -> int:
    """The failure count of the emitted self-test, from a driver built with ``selftest=True``."""
    done = subprocess.run([str(exe), "selftest"], capture_output=True, text=True, timeout=60)
    words = done.stdout.split()
    if done.returncode not in (0, 1) or len(words) != 1 or not words[0].isdigit():
        raise ToolError(f"{Path(exe).name} selftest exited with status {done.returncode}: {done.stderr.strip()[-2000:]}")
    return int(words[0])
