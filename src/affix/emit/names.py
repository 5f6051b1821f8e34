"""Which names may reach emitted code.

Every estimator, input and output name becomes part of C identifiers (the
estimator name prefixes every external symbol, input/output names become
enumeration constants) and of a MicroPython module, so a name must be a
plain identifier in both languages and must not collide with anything either
language or its standard headers reserve.  Checking here is what keeps free
text out of the generated files: nothing else from a file or column reaches
a template.
"""
from __future__ import annotations

import builtins
import keyword
import re

from affix.errors import UsageError

# ASCII only: C99 allows universal character names in identifiers only as an
# option (C99 §6.4.2.1), and a leading underscore is reserved at file scope
# (C99 §7.1.3), so neither is worth the portability risk.
_IDENTIFIER = re.compile(r"^[A-Za-z][A-Za-z0-9_]*$")
# An input's or output's name only ever follows an infix (NAME_in_0, below),
# so it may start with a digit, as the columns of a .npy file are named.
_SUFFIX = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_]*$")

# C99 §6.4.1 plus the C11 additions (all underscore-prefixed, refused anyway).
C_KEYWORDS = frozenset(
    "auto break case char const continue default do double else enum extern float for goto if inline int long "
    "register restrict return short signed sizeof static struct switch typedef union unsigned void volatile while".split()
)

# C++11 [lex.key] Table 4 and the alternative tokens of Table 5: the header
# is included from C++ too.
CXX_KEYWORDS = frozenset(
    "alignas alignof asm bool catch char16_t char32_t class constexpr const_cast decltype delete dynamic_cast "
    "explicit export false friend mutable namespace new noexcept nullptr operator private protected public "
    "reinterpret_cast static_assert static_cast template this thread_local throw true try typeid typename using "
    "virtual wchar_t and and_eq bitand bitor compl not not_eq or or_eq xor xor_eq "
    # C++20 keywords, so the header keeps compiling with newer standards.
    "char8_t concept consteval constinit co_await co_return co_yield requires".split()
)

# Names the emitted C uses or that <stdint.h>/<stddef.h> define (C99 §7.17,
# §7.18); macros such as NULL would silently replace an enumeration constant.
C_LIBRARY_NAMES = frozenset(
    "NULL offsetof size_t ptrdiff_t wchar_t max_align_t "
    "int8_t int16_t int32_t int64_t uint8_t uint16_t uint32_t uint64_t intptr_t uintptr_t intmax_t uintmax_t "
    "main".split()
)

# C99 §7.26.8 reserves typedef names int*_t / uint*_t and macros INT*/UINT*
# ending in _MAX, _MIN or _C for future <stdint.h> additions.
_C_RESERVED_PATTERNS = (
    re.compile(r"^u?int\w*_t$"),
    re.compile(r"^U?INT\w*_(MAX|MIN|C)$"),
)

# The MicroPython module uses these; shadowing any builtin would change the
# meaning of the emitted code, so all of Python's builtins are refused too.
MICROPYTHON_NAMES = frozenset({"const", "micropython", "viper", "native", "ptr8", "ptr16", "ptr32"})
# The estimator name is also the MicroPython module's name (NAME.py), and a
# file on the device shadows a built-in module of that name.  The first group
# is what help('modules') lists in the unix port the tests run (1.29); the
# second, modules of common MCU ports, is from memory.
MICROPYTHON_MODULES = frozenset(
    "array argparse asyncio binascii builtins cmath collections cryptolib deflate errno framebuf gc hashlib heapq "
    "io json machine math micropython mip os platform random re requests select socket ssl struct sys termios "
    "time tls uasyncio uctypes vfs websocket".split()
    + "bluetooth btree esp esp32 espnow network neopixel onewire pyb rp2 stm uos utime wipy".split()
)
PYTHON_NAMES = frozenset(keyword.kwlist) | frozenset(getattr(keyword, "softkwlist", ())) | frozenset(dir(builtins))

# C99 §5.2.4.1: 31 significant initial characters in an external identifier,
# 63 in an internal one (and in a macro name).
EXTERNAL_LENGTH = 31
INTERNAL_LENGTH = 63

# Generated identifiers (DEVELOPERS.md, "Generated identifiers"): the
# estimator name, '_', then a fixed word or a category infix and a user's
# name.  The infixes are prefix-free among themselves and no fixed word starts
# with one, so no choice of names makes two identifiers equal; the templates
# take them from the context (infix_in, infix_out, infix_lsb) and tests/test_names.py
# checks the rule on the rendered templates.
INFIX_IN = "in_"  # NAME_in_<input>: an input's position in y[]
INFIX_OUT = "out_"  # NAME_out_<output>: an output's position in x[]
INFIX_LSB = "lsb_"  # NAME_lsb_<output> (a macro, so NAME upper-case): an output's scale
INFIXES = (INFIX_IN, INFIX_OUT, INFIX_LSB)

# The longest suffix the C target appends to the estimator name for an
# external symbol ("NAME_selftest"), and the longest before a user's name.
_EXTERNAL_SUFFIX = len("_selftest")
_INFIX_LENGTH = 1 + max(len(infix) for infix in INFIXES)


def check_identifier(name, what: str, max_length: int = INTERNAL_LENGTH, suffix: bool = False) -> str:
    """Return ``name`` if it is safe as an identifier in C99, C++ and (Micro)Python,
    or with ``suffix`` as the end of one, after an infix (it may then start with a digit).

    ``what`` says where the name came from (an option or a column) and opens
    the error message.
    """
    if not isinstance(name, str) or not (_SUFFIX if suffix else _IDENTIFIER).match(name):
        first = "ASCII letter or digit" if suffix else "ASCII letter"
        raise UsageError(f"{_shown(name)} is not a plain identifier ({first} first, then letters, digits or '_')", what)
    reason = _reserved_by(name)
    if reason:
        raise UsageError(f"'{name}' is {reason}; choose another name", what)
    if len(name) > max_length:
        raise UsageError(f"'{name}' is longer than {max_length} characters (C99 §5.2.4.1 limits)", what)
    return name


def check_names(name: str, inputs, outputs) -> None:
    """Check the estimator name and every input/output name, as emitted together."""
    check_identifier(name, "name", EXTERNAL_LENGTH - _EXTERNAL_SUFFIX)
    if name in MICROPYTHON_MODULES:
        raise UsageError(f"'{name}.py' would shadow MicroPython's built-in module '{name}'; choose another name", "name")
    for kind, names in (("input", inputs), ("output", outputs)):
        seen = set()
        for column in names:
            what = f"{kind} name {_shown(column)}"
            check_identifier(column, what, INTERNAL_LENGTH - len(name) - _INFIX_LENGTH, suffix=True)
            if column in seen:
                raise UsageError(f"appears twice among the {kind}s", what)
            seen.add(column)


def names_could_clash(name: str, other: str) -> bool:
    """True when two estimators' generated identifiers could coincide.

    Every identifier of estimator ``a`` starts with ``a_`` (or ``A_``), so
    two estimators can clash only when one name followed by '_' starts the
    other's, ignoring case ('est' and 'est_in': est's input 'estimate' gives
    est_in_estimate, est_in's function; 'est' and 'EST': both define
    EST_N_INPUTS, and their files coincide on a case-insensitive file system).
    """
    a, b = name.lower() + "_", other.lower() + "_"
    return name != other and (a.startswith(b) or b.startswith(a))


# A unit reaches comments of both languages and the interface file: plain
# ASCII that can neither end a C comment ('*/'), open one, nor break a line.
_UNIT = re.compile(r"^[A-Za-z0-9 %/.^()_+*-]{1,24}$")


def check_units(units, names) -> dict:
    """``units`` ({name: unit text}) if every key is one of ``names`` and every text is a safe unit."""
    for name, unit in units.items():
        if name not in names:
            raise UsageError(f"{_shown(name)} names no input or output (they are {', '.join(names)})", "units")
        if not isinstance(unit, str) or not _UNIT.match(unit) or "*/" in unit or "/*" in unit or unit.strip() != unit:
            raise UsageError(
                f"the unit of {_shown(name)}, {_shown(unit)}, is not one affix writes into code comments: up to "
                "24 ASCII letters, digits, spaces and % / . ^ ( ) _ + * - (no '/*' or '*/')", "units")
    return dict(units)


def _reserved_by(name: str) -> str | None:
    if name in C_KEYWORDS:
        return "a C keyword"
    if name in CXX_KEYWORDS:
        return "a C++ keyword (the header is usable from C++)"
    if name in C_LIBRARY_NAMES or any(p.match(name) for p in _C_RESERVED_PATTERNS):
        return "reserved by the C standard library"
    if "__" in name:
        return "reserved in C++ (double underscore)"
    if name in MICROPYTHON_NAMES:
        return "used by MicroPython"
    if name in PYTHON_NAMES:
        return "a Python keyword or builtin"
    return None


def _shown(name) -> str:
    """A name for an error message: repr keeps control characters and quotes harmless."""
    text = repr(name)
    return text if len(text) <= 40 else text[:37] + "..."
