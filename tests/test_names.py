"""Names that reach emitted code: refused unless safe as identifiers in C99, C++ and Python.

Sources: C99 §6.4.1 (keywords), §6.4.2.1 (identifier syntax), §7.1.3 (reserved
identifiers), §7.26.8 (future <stdint.h> names), §5.2.4.1 (31/63 significant
characters); C++11 [lex.key] Tables 4 and 5; Python's own `keyword` module and
`builtins` (the language's definition of its keywords and builtins).
"""
from __future__ import annotations

import builtins
import keyword

import pytest

from affix.emit.names import check_identifier, check_names
from affix.errors import UsageError
from conftest import run_affix
from plans import random_plan


@pytest.mark.parametrize(
    "name",
    [
        "int", "restrict", "inline", "_Bool",  # C99 §6.4.1
        "class", "nullptr", "and", "xor_eq",  # C++11 [lex.key], alternative tokens
        "_x", "_Reserved", "a__b",  # C99 §7.1.3 / C++ [lex.name]: underscores
        "int32_t", "uint8_t", "int_fast16_t", "INT64_MAX", "UINT8_C", "NULL", "size_t",  # C99 §7.17, §7.18, §7.26.8
        "lambda", "None", "match", "case",  # Python keywords and soft keywords
        "print", "len", "const", "micropython",  # builtins the module would shadow, MicroPython's own
    ],
)
def test_reserved_names_are_refused(name):
    with pytest.raises(UsageError, match="--name"):
        check_identifier(name, "--name")


@pytest.mark.parametrize(
    "name", ["", "9lives", "a-b", "a b", "x*/", "a/*b", "tab\there", "line\nbreak", "pi\u00e9", "A\u0301", 7, None]
)
def test_non_identifiers_are_refused(name):
    # C99 §6.4.2.1: identifier = nondigit (nondigit | digit)*; anything else,
    # notably comment delimiters and line breaks, must never reach a template.
    with pytest.raises(UsageError, match="not a plain identifier"):
        check_identifier(name, "--name")


def test_every_python_keyword_and_builtin_is_refused():
    # The definitive lists come from the running Python itself.
    for name in keyword.kwlist + list(getattr(keyword, "softkwlist", [])) + dir(builtins):
        if name.isidentifier() and name.isascii() and name[0].isalpha():
            with pytest.raises(UsageError):
                check_identifier(name, "--name")


def test_plain_names_pass():
    for name in ("bridge1", "Fx", "temp_degC", "x0", "wrist_ft"):
        assert check_identifier(name, "--name") == name


def test_length_limits_follow_c99_5_2_4_1():
    # External identifiers keep 31 significant characters: "NAME_selftest" must fit.
    check_names("a" * 22, ["y"], ["x"])
    with pytest.raises(UsageError, match="longer than 22"):
        check_names("a" * 23, ["y"], ["x"])
    # Internal identifiers (enumeration constants "NAME_out_<output>") keep 63.
    check_names("est", ["y"], ["b" * 55])
    with pytest.raises(UsageError, match="output name"):
        check_names("est", ["y"], ["b" * 56])


def test_estimator_name_may_not_shadow_a_micropython_module():
    # The unix port's own list of built-in modules, read from the runtime
    # (help('modules')); NAME.py on a device would hide the module of that name.
    import subprocess

    from conftest import require

    listing = subprocess.run([require("micropython")], input="help('modules')\n", capture_output=True,
                             text=True, timeout=30).stdout
    table = listing.split("Plus any modules")[0]  # the closing sentence is no module
    modules = {word.split("/")[0] for word in table.split()}
    modules = {m for m in modules if m[0].isalpha()}  # __main__, _thread are refused as reserved anyway
    assert {"time", "struct", "machine"} <= modules
    for module in sorted(modules):
        with pytest.raises(UsageError, match="shadow|reserved|MicroPython|builtin|keyword"):
            check_names(module, ["y"], ["x"])
    check_names("wrist_ft", ["time"], ["x"])  # an input may be called time: it is no module name


def test_duplicate_and_bad_columns_name_the_column():
    with pytest.raises(UsageError, match="input name 'y'.*twice"):
        check_names("est", ["y", "y"], ["x"])
    with pytest.raises(UsageError, match="output name 'class'"):
        check_names("est", ["y"], ["class"])


@pytest.mark.bad_input("emit")
def test_cli_refuses_a_bad_name_and_writes_nothing(tmp_path):
    random_plan(3).save(tmp_path / "plan.json")
    done = run_affix("emit", tmp_path / "plan.json", "--lang", "all", "--name", "static", "--out", tmp_path / "out")
    assert done.returncode == 2
    assert done.stderr.startswith("affix: error: --name: 'static' is a C keyword")
    assert len(done.stderr.strip().splitlines()) == 1
    assert not (tmp_path / "out").exists()
