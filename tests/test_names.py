"""Names that reach emitted code: refused unless safe as identifiers in C99, C++ and Python.

Sources: C99 §6.4.1 (keywords), §6.4.2.1 (identifier syntax), §7.1.3 (reserved
identifiers), §7.26.8 (future <stdint.h> names), §5.2.4.1 (31/63 significant
characters); C++11 [lex.key] Tables 4 and 5; Python's own `keyword` module and
`builtins` (the language's definition of its keywords and builtins).
"""
from __future__ import annotations

import builtins
import keyword
import re
import subprocess
import tempfile
from dataclasses import replace
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings, strategies as st

from affix.emit.c import render_c
from affix.emit.micropython import render_micropython
from affix.emit.names import INFIX_IN, INFIX_LSB, INFIX_OUT, INFIXES, check_identifier, check_names, names_could_clash
from affix.emit.templates import render
from affix.emit.writer import emit
from affix.errors import UsageError
from affix.interface import describe
from conftest import require, run_affix
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


def test_input_and_output_names_may_start_with_a_digit_but_not_the_estimators():
    # A .npy file's columns are named "0", "1", ...; a column's name only ever
    # follows an infix (est_in_0, EST_lsb_12), so it stays an identifier there
    # (C99 §6.4.2.1), while the estimator's name starts every identifier.
    check_names("est", ["0", "1", "2b"], ["12"])
    with pytest.raises(UsageError, match="not a plain identifier"):
        check_names("9est", ["y"], ["x"])
    for bad in ("_0", "0-1", "0 1", ""):
        with pytest.raises(UsageError, match="not a plain identifier"):
            check_names("est", [bad], ["x"])


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


# --- generated identifiers: the rule of DEVELOPERS.md, checked on the rendered templates ----------------

RULE_PLAN = random_plan(3, 2, 2)  # inputs y0, y1; outputs x0, x1
VARIANTS = [(arith, style) for arith in ("int", "float32") for style in ("table", "unrolled")]
_TOKEN = re.compile(r"[A-Za-z_][A-Za-z0-9_]*")


def _rendered(plan, name: str) -> dict[str, str]:
    """Every file emit writes for ``plan`` as ``name``, each C variant, plus the
    verification build's wrapper (its symbol is linked with the emitted code)."""
    texts = {}
    for arith, style in VARIANTS:
        for filename, text in render_c(plan, name, arith=arith, style=style).items():
            texts[f"{arith}-{style}/{filename}"] = text
    texts.update(render_micropython(plan, name))
    # Code that loads calibration records (affix.record) instead of compiled coefficients.
    records = describe(plan, name, languages=("c", "micropython"), coefficients="record")
    for filename, text in render_c(plan, name, interface=records).items():
        texts[f"record/{filename}"] = text
    texts.update({f"record/{f}": text for f, text in render_micropython(plan, name, records).items()})
    for declaration_only in (True, False):
        for loads in (False, True):
            texts[f"verify_batch {declaration_only} {loads}"] = render(
                "c/verify_batch.c.jinja", declaration_only=declaration_only, name=name,
                input_ctype="int16_t", output_ctype="int16_t", records=loads)
    return texts


def _code(filename: str, text: str) -> str:
    """The text without comments: identifiers are what the code defines and uses."""
    if filename.endswith(".py"):
        return re.sub(r"#[^\n]*", "", text)
    return re.sub(r"/\*.*?\*/|//[^\n]*", "", text, flags=re.S)


RULE_TEXTS = _rendered(RULE_PLAN, "probe")
RULE_TOKENS = sorted({t for filename, text in RULE_TEXTS.items() for t in _TOKEN.findall(_code(filename, text))})


def test_infixes_are_prefix_free():
    for a in INFIXES:
        for b in INFIXES:
            assert a == b or not b.lower().startswith(a.lower()), (a, b)


def test_every_generated_identifier_is_a_fixed_word_or_an_infix_and_a_users_name():
    users = {INFIX_IN: set(RULE_PLAN.inputs), INFIX_OUT: set(RULE_PLAN.outputs), INFIX_LSB: set(RULE_PLAN.outputs)}
    fixed, derived = set(), set()
    for token in RULE_TOKENS:
        if not token.startswith(("probe_", "PROBE_")):
            continue
        word = token[len("probe_"):]
        infix = next((i for i in INFIXES if word.lower().startswith(i.lower())), None)
        if infix is None:
            fixed.add(word)
        else:  # a user-derived identifier: the infix exactly, then one of that family's names
            assert word.startswith(infix) and word[len(infix):] in users[infix], token
            derived.add(word)
    # The rule is about something: both kinds occur, every name is used.
    assert {"estimate", "selftest", "N_INPUTS", "N_OUTPUTS", "SELFTEST", "H", "verify_batch"} <= fixed
    assert derived == ({INFIX_IN + n for n in RULE_PLAN.inputs} | {INFIX_OUT + n for n in RULE_PLAN.outputs}
                       | {INFIX_LSB + n for n in RULE_PLAN.outputs})


def test_the_old_box_table_name_would_break_the_rule():
    # NAME_in_lo (the box table before it became NAME_box_lo) collided with
    # the enumeration constant of an input named lo; the rule's check sees it.
    word = "in_lo"
    assert word.startswith(INFIX_IN) and word[len(INFIX_IN):] not in RULE_PLAN.inputs


def _candidate_names() -> list[str]:
    """User names most likely to collide: every identifier the rendered
    templates contain, and every tail of one after a '_' (probe_in_y0 gives
    in_y0 and y0), so each fixed word with its prefix and infix stripped."""
    names = set()
    for token in RULE_TOKENS:
        parts = token.split("_")
        names.update("_".join(parts[k:]) for k in range(len(parts)))
    return sorted(n for n in names if re.fullmatch(r"[A-Za-z][A-Za-z0-9_]*", n))


CANDIDATES = _candidate_names()
identifiers = st.one_of(st.sampled_from(CANDIDATES), st.from_regex(r"[A-Za-z][A-Za-z0-9_]{0,10}", fullmatch=True))
C_STRICT = ["-std=c99", "-Wall", "-Wextra", "-Wpedantic", "-Wconversion", "-Wsign-conversion", "-Werror"]
CXX_STRICT = ["-x", "c++", "-std=c++11", "-Wall", "-Wextra", "-Wpedantic", "-Werror"]


def _compiles(compiler: str, flags: list[str], sources: list[Path], name: str) -> None:
    done = subprocess.run([compiler, *flags, f"-D{name.upper()}_SELFTEST", "-fsyntax-only", *map(str, sources)],
                          capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr[-3000:]


@settings(max_examples=10, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(name=identifiers, inputs=st.lists(identifiers, min_size=1, max_size=4),
       outputs=st.lists(identifiers, min_size=1, max_size=3), seed=st.integers(0, 2**16))
def test_any_names_are_refused_in_one_line_or_compile_and_run(name, inputs, outputs, seed):
    # Either check_names refuses them (one line), or the code builds and runs
    # as C99 and C++11 under the strict flags (GCC as the reference compiler)
    # in every arithmetic and style, and the MicroPython module imports under
    # its own name and passes its self-test in the real unix port.
    gcc, gxx, micropython = require("gcc"), require("g++"), require("micropython")
    try:
        check_names(name, inputs, outputs)
    except UsageError as refused:
        assert "\n" not in refused.message and refused.parameter
        return
    plan = replace(random_plan(seed, len(inputs), len(outputs)), inputs=tuple(inputs), outputs=tuple(outputs))
    with tempfile.TemporaryDirectory() as tmp:
        sources = []
        for arith, style in VARIANTS:
            folder = Path(tmp) / f"{arith}-{style}"
            folder.mkdir()
            for filename, text in render_c(plan, name, arith=arith, style=style).items():
                (folder / filename).write_text(text)
            sources.append(folder / f"{name}.c")
        _compiles(gcc, C_STRICT, sources, name)
        _compiles(gxx, CXX_STRICT, sources, name)
        for filename, text in render_micropython(plan, name).items():
            (Path(tmp) / filename).write_text(text)
        done = subprocess.run([micropython, "-c", f"import {name}\nprint({name}.self_test())"], cwd=tmp,
                              capture_output=True, text=True, timeout=60)
        assert done.stdout.split() == ["True"], done.stdout + done.stderr


def test_inputs_named_like_the_old_box_tables_compile(tmp_path):
    # The collision that broke the build once: inputs lo and hi.
    gcc = require("gcc")
    plan = replace(random_plan(3, 2, 2), inputs=("lo", "hi"), outputs=("box_lo", "in_lo"))
    for arith, style in VARIANTS:
        folder = tmp_path / f"{arith}-{style}"
        emit(plan, lang="c", arith=arith, style=style, name="probe", out_dir=folder)
    _compiles(gcc, C_STRICT, [tmp_path / f"{a}-{s}" / "probe.c" for a, s in VARIANTS], "probe")


# --- two estimators in one folder --------------------------------------------------------------------------

@pytest.mark.parametrize("a, b, clash", [
    ("est", "est_in", True),  # est's input 'estimate' -> est_in_estimate, est_in's function
    ("est", "EST", True),  # both define EST_N_INPUTS; est.py and EST.py on a case-insensitive file system
    ("Est", "est_x", True),
    ("est", "est", False),  # the same estimator emitted again
    ("est", "estimator", False),  # est_... and estimator_... part at the fourth character
    ("left", "right", False),
])
def test_names_that_could_clash(a, b, clash):
    assert names_could_clash(a, b) is clash and names_could_clash(b, a) is clash


def test_a_clash_would_be_real(tmp_path):
    # est with an input named 'estimate' and the estimator est_in, in one C++ build: redefinition.
    gxx = require("g++")
    one = replace(random_plan(3, 2, 1), inputs=("estimate", "y1"))
    other = random_plan(4, 2, 1)
    (tmp_path / "est.h").write_text(render_c(one, "est")["est.h"])
    (tmp_path / "est_in.h").write_text(render_c(other, "est_in")["est_in.h"])
    (tmp_path / "both.c").write_text('#include "est.h"\n#include "est_in.h"\n')
    done = subprocess.run([gxx, *CXX_STRICT, "-fsyntax-only", str(tmp_path / "both.c")], capture_output=True, text=True)
    assert done.returncode != 0 and "est_in_estimate" in done.stderr


@pytest.mark.bad_input("emit")
@pytest.mark.parametrize("first, second", [("est", "est_in"), ("est_in", "est"), ("est", "EST")])
def test_emit_refuses_a_name_that_could_clash_in_the_folder(tmp_path, first, second):
    random_plan(3).save(tmp_path / "plan.json")
    assert run_affix("emit", tmp_path / "plan.json", "--lang", "c", "--name", first, "--out", tmp_path / "fw").returncode == 0
    before = sorted(p.name for p in (tmp_path / "fw").iterdir())
    done = run_affix("emit", tmp_path / "plan.json", "--lang", "c", "--name", second, "--out", tmp_path / "fw")
    assert done.returncode == 2
    assert done.stderr.startswith(f"affix: error: --name: '{second}' and the estimator '{first}'")
    assert len(done.stderr.strip().splitlines()) == 1
    assert sorted(p.name for p in (tmp_path / "fw").iterdir()) == before
