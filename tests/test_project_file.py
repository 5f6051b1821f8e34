"""The project file affix.toml: every error one line with the key path and the line number.

TOML syntax is judged by tomllib (the reference reader in Python's standard
library); the invalid documents below are the TOML 1.0.0 specification's own
examples (toml.io/en/v1.0.0), quoted from memory: each is marked INVALID or
"DO NOT DO THIS" there.
"""
from __future__ import annotations

from pathlib import Path

import pytest

from affix.errors import FileFormatError
from affix.project import load_project
from affix.project.keys import key_paths
from affix.project.lines import key_lines, line_of
from conftest import run_affix

VALID = """\
name = "probe"

[data]
files = "cal.csv"

[[inputs]]
name = "b1"
range = [-2048, 2047]

[[inputs]]
name = "b2"
range = [0, 4095]
unit = "counts"

[[outputs]]
name = "Fx"
budget = 0.05
unit = "N"
"""


def write(tmp_path, text: str) -> Path:
    (tmp_path / "cal.csv").write_text("b1,b2,Fx\n1,2,3\n")
    path = tmp_path / "affix.toml"
    path.write_text(text)
    return path


def error_of(tmp_path, text: str) -> str:
    with pytest.raises(FileFormatError) as caught:
        load_project(write(tmp_path, text))
    return caught.value.message


def test_a_valid_project_fills_every_default(tmp_path):
    project = load_project(write(tmp_path, VALID))
    assert project.name == "probe" and project.data_files == (tmp_path / "cal.csv",)
    assert [c.range for c in project.inputs] == [(-2048, 2047), (0, 4095)]
    assert project.units == {"b2": "counts", "Fx": "N"}
    assert (project.folds, project.ridge, project.rounding, project.languages) == (5, 0.0, "nearest", ("c", "micropython"))
    assert project.out == tmp_path / "build" and project.interface_path == tmp_path / "probe.interface.json"
    options = project.plan_options()
    assert options["budget"] == {"Fx": 0.05} and options["input_ranges"] == {"b1": (-2048, 2047), "b2": (0, 4095)}


# (the specification's example, the line of it that tomllib reports, 0-based)
SPEC_INVALID = {
    "a key defined twice": ('# DO NOT DO THIS\nname = "Tom"\nname = "Pradyun"\n', 2),
    "a bare and a quoted key the same": ('# THIS WILL NOT WORK\nspelling = "favorite"\n"spelling" = "favourite"\n', 2),
    "an unspecified value": ("key = # INVALID\n", 0),
    "two pairs on one line": ('first = "Tom" last = "Preston-Werner" # INVALID\n', 0),
    "a key without a name": ('= "no key name"  # INVALID\n', 0),
    "float without a leading digit": ("invalid_float_1 = .7\n", 0),
    "float without a trailing digit": ("invalid_float_2 = 7.\n", 0),
    "exponent after a bare point": ("invalid_float_3 = 3.e+20\n", 0),
    "a table defined twice": ('# DO NOT DO THIS\n\n[fruit]\napple = "red"\n\n[fruit]\norange = "orange"\n', 5),
    "an array appended to as tables": ("# INVALID TOML DOC\nfruits = []\n\n[[fruits]] # Not allowed\n", 3),
}


@pytest.mark.bad_input("build")
@pytest.mark.parametrize("case", SPEC_INVALID)
def test_invalid_toml_names_its_line(tmp_path, case):
    snippet, offending = SPEC_INVALID[case]
    message = error_of(tmp_path, snippet + VALID)  # tomllib stops at the first fault, in the snippet
    assert message.startswith(f"{tmp_path / 'affix.toml'}:{offending + 1}: not valid TOML: "), message


@pytest.mark.bad_input("build")
@pytest.mark.parametrize(
    "edit, line, expected",
    [
        # Unknown keys, at any depth.
        (("name = \"probe\"", "name = \"probe\"\ncolour = 3"), 2, "colour: unknown key (expected one of: name, data, fit,"),
        ((VALID, VALID + "\n[emit]\nlanguage = [\"c\"]\n"), 21, "emit.language: unknown key (expected one of: languages,"),
        (("unit = \"N\"", "unit = \"N\"\nbugdet = 1"), 19, "outputs[0].bugdet: unknown key"),
        (("unit = \"counts\"", "unit = \"counts\"\ncolour = 3"), 14, "inputs[1].colour: unknown key (expected one of: name,"),
        # Wrong types.
        (("range = [0, 4095]", "range = [0, \"4095\"]"), 12, "inputs[1].range: must be [LO, HI], two integers"),
        (("range = [0, 4095]", "range = [4095, 0]"), 12, "inputs[1].range: is inverted (4095 > 0)"),
        (("budget = 0.05", "budget = true"), 17, "outputs[0].budget: must be a finite number"),
        (("budget = 0.05", "budget = -1"), 17, "outputs[0].budget: must be a number >= 0"),
        (("[data]\nfiles = \"cal.csv\"", "data = \"cal.csv\""), 3, "data: must be a table [data]"),
        ((VALID, VALID + "\n[fit]\nfolds = 1\n"), 21, "fit.folds: must be 0 (no cross-validation) or at least 2"),
        ((VALID, VALID + "\n[emit]\nlanguages = [\"c\", \"c\"]\n"), 21, "emit.languages: must name at least one"),
        # Missing required keys: the line of the table that lacks them.
        (("range = [-2048, 2047]\n", ""), 6, "inputs[0].range: missing, and required"),
        (("name = \"probe\"\n", ""), 1, "name: missing, and required"),
        # Values that are well typed but unusable.
        (("name = \"probe\"", "name = \"class\""), 1, "name: 'class' is a C++ keyword"),
        (("name = \"b2\"", "name = \"b1\""), 11, "inputs[1].name: 'b1' is named twice"),
        (("unit = \"N\"", "unit = \"N */ x\""), 18, "outputs[0].unit: the unit of 'Fx', 'N */ x', is not one"),
        (("files = \"cal.csv\"", "files = \"runs/*.csv\""), 4, "data.files: 'runs/*.csv' matches no file"),
        (("files = \"cal.csv\"", "files = [\"cal.csv\", \"other.csv\"]"), 4, "data.files: 'other.csv': no such file"),
        ((VALID, VALID + "\n[fixed_point]\nbudget_rms_percent = 1\n"), 21, "fixed_point.budget_rms_percent: give either"),
        ((VALID, VALID + "\n[emit]\narith = \"float32\"\n"), 21, "emit.arith: float32 is a C target only"),
    ],
)
def test_schema_errors_name_the_key_path_and_its_line(tmp_path, edit, line, expected):
    old, new = edit
    assert old in VALID
    message = error_of(tmp_path, VALID.replace(old, new, 1))
    prefix = f"{tmp_path / 'affix.toml'}:{line}: "
    assert message.startswith(prefix) and message[len(prefix):].startswith(expected), message


@pytest.mark.bad_input("build")
def test_the_command_line_shows_one_error_line_and_exits_2(tmp_path):
    write(tmp_path, VALID.replace("range = [0, 4095]", "range = 4095"))
    done = run_affix("build", cwd=tmp_path)
    assert done.returncode == 2 and not done.stdout
    assert done.stderr == "affix: error: affix.toml:12: inputs[1].range: must be [LO, HI], two integers (counts)\n"
    done = run_affix("build", tmp_path / "missing.toml")
    assert done.returncode == 2 and "no project file (write one with 'affix init')" in done.stderr


def test_globs_read_their_matches_in_name_order(tmp_path):
    runs = tmp_path / "runs"
    runs.mkdir()
    for name in ("b.csv", "a.csv", "c.txt"):
        (runs / name).write_text("b1,b2,Fx\n1,2,3\n")
    project = load_project(write(tmp_path, VALID.replace('files = "cal.csv"', 'files = ["cal.csv", "runs/*.csv", "runs/a.csv"]')))
    assert project.data_files == (tmp_path / "cal.csv", runs / "a.csv", runs / "b.csv")  # each file once
    assert [project.relative(p) for p in project.data_files] == ["cal.csv", "runs/a.csv", "runs/b.csv"]


def test_the_locator_steps_over_strings_comments_and_values_that_span_lines():
    text = '''\
# a comment = not a key
title = """
fake = "inside a multi-line string"
"""
"quoted.key" = 1 # [not a table]
a.b.c = [
  "x = ]",  # a bracket in a string
  2,
]
points = [ { x = 1 }, { x = 2 } ]

[[inputs]]
name = 'first'

[[inputs]]
name = "second"

[inputs.detail]
depth = 'third \\' quote'
'''
    lines = key_lines(text)
    assert lines[("title",)] == 2 and ("fake",) not in lines
    assert lines[("quoted.key",)] == 5 and lines[("a", "b", "c")] == 6 and lines[("a",)] == 6
    assert lines[("points",)] == 10
    assert lines[("inputs", 0)] == 12 and lines[("inputs", 1, "name")] == 16
    assert lines[("inputs", 1, "detail")] == 18 and lines[("inputs", 1, "detail", "depth")] == 19
    # A path with no line of its own falls back to its nearest enclosing one.
    assert line_of(lines, ("inputs", 1, "range")) == 15 and line_of(lines, ("points", 1, "x")) == 10
    assert line_of(lines, ("nowhere",)) == 1


def test_the_readme_documents_every_key():
    readme = (Path(__file__).parent.parent / "README.md").read_text()
    section = readme.split("### The project file", 1)[1].split("\n## ", 1)[0]
    for key, meaning in key_paths():
        assert f"`{key}`" in section, key
