"""Compile C for a target: a bare image whose entry is the estimator, and its flash and stack.

The image links nothing but the sources and libgcc (the helpers a core
without some instruction calls, such as ``__aeabi_lmul`` on ARMv6-M), with
unused sections dropped, so its allocated read-only size is what the
estimator costs in flash.  ``-fstack-usage`` gives each function's frame.
"""
from __future__ import annotations

import shutil
import subprocess
from dataclasses import dataclass
from pathlib import Path

from affix.errors import ToolError
from affix.targets import Target

OPTIMIZE = "-O2"
BASE_FLAGS = (
    "-std=c99", OPTIMIZE, "-ffunction-sections", "-fdata-sections", "-fstack-usage",
    # No unwind tables: an estimator never unwinds, and they are not code.
    "-fno-asynchronous-unwind-tables", "-fno-unwind-tables",
)
HOST_FLAGS = ("-fno-pic", "-no-pie", "-fcf-protection=none")  # plain absolute code the emulator can load anywhere
_FLASH_SECTIONS = (".text", ".rodata", ".data")  # .data is initialised from flash at start-up


@dataclass(frozen=True)
class Image:
    elf: Path
    flash_bytes: int
    stack_bytes: int  # the entry's frame plus the largest frame of the other functions in the sources
    compiler: str
    flags: tuple[str, ...]


def compiler_path(target: Target) -> str:
    if target.compiler is None:
        raise ToolError(f"target {target.name} has no C compiler")
    path = shutil.which(target.compiler)
    if path is None:
        raise ToolError(f"'{target.compiler}' not found: the {target.name} figures need it (see DEVELOPERS.md)")
    return path


def flags_for(target: Target) -> tuple[str, ...]:
    return (*target.cpu_flags, *BASE_FLAGS, *(HOST_FLAGS if target.name == "host" else ()))


def build_image(target: Target, sources, entry: str, out_dir, *, include_dirs=(), extra_flags=(),
                keep=()) -> Image:
    """Compile and link ``sources`` for ``target`` with ``entry`` as the entry point.

    ``keep`` names further functions to keep in the image (other entry points
    a caller will emulate).
    """
    cc = compiler_path(target)
    out_dir = Path(out_dir)
    elf = out_dir / f"{entry}.elf"
    flags = (*flags_for(target), *extra_flags)
    includes = [f"-I{d}" for d in include_dirs]
    objects = []
    for source in map(Path, sources):
        obj = out_dir / f"{source.stem}.o"
        _run([cc, *flags, *includes, "-c", str(source), "-o", str(obj)], out_dir)
        objects.append(obj)
    link = ["-nostdlib", "-nostartfiles", "-static", f"-Wl,-e,{entry}", "-Wl,--gc-sections", "-Wl,--build-id=none"]
    link += [f"-Wl,-u,{name}" for name in keep]
    _run([cc, *flags, *link, *map(str, objects), "-lgcc", "-o", str(elf)], out_dir)
    return Image(
        elf=elf,
        flash_bytes=flash_size(elf),
        stack_bytes=stack_usage([out_dir / f"{Path(s).stem}.su" for s in sources], entry),
        compiler=f"{Path(cc).name} {_version(cc)}",
        flags=flags,
    )


def flash_size(elf: Path) -> int:
    ELFFile = elf_reader()

    with open(elf, "rb") as handle:
        sections = list(ELFFile(handle).iter_sections())
        return sum(s["sh_size"] for s in sections if s.name.startswith(_FLASH_SECTIONS) and s["sh_flags"] & 2)


def elf_reader():
    """pyelftools' ELFFile, or ToolError naming the package to install."""
    try:
        from elftools.elf.elffile import ELFFile
    except ImportError:
        raise ToolError("pyelftools is not installed (pip install 'affix[verify]')") from None
    return ELFFile


def stack_usage(su_files, entry: str) -> int:
    """Worst-case stack from GCC's .su files: the entry's frame plus the largest other frame.

    The estimator calls at most one of its own helpers at a time (none when
    they are inlined), so this bounds the depth; libgcc's helpers are leaf
    functions that the figure does not include.
    """
    frames = {}
    for su in su_files:
        for line in Path(su).read_text().splitlines():
            where, size, _kind = line.rsplit("\t", 2)
            frames[where.rsplit(":", 1)[-1]] = int(size)
    if entry not in frames:
        raise ToolError(f"the compiler reported no stack usage for {entry}")
    own = frames.pop(entry)
    return own + max(frames.values(), default=0)


def _run(command, cwd) -> None:
    try:
        done = subprocess.run(command, cwd=cwd, capture_output=True, text=True, timeout=600)
    except OSError as exc:
        raise ToolError(f"cannot run {command[0]}: {exc.strerror}") from None
    if done.returncode != 0:
        raise ToolError(f"{Path(command[0]).name} failed: {(done.stderr.strip() or done.stdout.strip())[-1500:]}")


def _version(cc: str) -> str:
    done = subprocess.run([cc, "-dumpversion"], capture_output=True, text=True)
    return done.stdout.strip()
