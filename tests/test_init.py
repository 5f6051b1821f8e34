"""affix init: a starter project file that holds what was given and never replaces one.

The observed extremes in the starter's comments are checked against NumPy's
own reading of the same CSV (numpy.loadtxt, min and max).
"""
from __future__ import annotations

import re

import pytest

import colour_sensor
from affix.project import load_project
from conftest import run_affix

COLUMNS = ("--inputs", ",".join(colour_sensor.INPUTS), "--outputs", ",".join(colour_sensor.OUTPUTS))


def test_the_starter_holds_what_was_given_and_the_data_extent_beside_each_range(tmp_path):
    rows = colour_sensor.write_log(tmp_path / "colour.csv")
    done = run_affix("init", "colour.csv", *COLUMNS, "--name", "tint", "--range", "0:32767", "--range",
                     "blue=100:30000", "--budget", "X=0.05,Z=0.1", "--coef-bits", "16", "--lang", "c",
                     "--folds", "4", "--vectors", "5000", cwd=tmp_path)
    assert done.returncode == 0, done.stderr
    text = (tmp_path / "affix.toml").read_text()
    project = load_project(tmp_path / "affix.toml")
    assert project.name == "tint" and project.data_files == (tmp_path / "colour.csv",)
    assert [c.range for c in project.inputs] == [(0, 32767), (0, 32767), (100, 30000)]
    assert [c.budget for c in project.outputs] == [0.05, None, 0.1]
    assert (project.coef_bits, project.acc_bits, project.languages, project.folds, project.vectors) == \
        (16, None, ("c",), 4, 5000)
    # Each range line says what the data reached: numpy's min and max of the column.
    for j, name in enumerate(colour_sensor.INPUTS):
        block = text.split(f'name = "{name}"', 1)[1]
        comment = re.search(r"^range = .*# the data reach (\S+) \.\. (\S+)$", block, re.M)
        assert (float(comment.group(1)), float(comment.group(2))) == (rows[:, j].min(), rows[:, j].max())
    assert "affix build" in done.stdout


def test_a_range_not_given_is_the_data_extent_and_says_so(tmp_path):
    rows = colour_sensor.write_log(tmp_path / "colour.csv")
    project = tmp_path / "sub" / "colour.toml"
    project.parent.mkdir()
    done = run_affix("init", tmp_path / "colour.csv", *COLUMNS, "--project", project, cwd=tmp_path)
    assert done.returncode == 0, done.stderr
    loaded = load_project(project)
    assert loaded.name == "colour"  # from the data file's name
    assert [c.range for c in loaded.inputs] == [(int(rows[:, j].min()), int(rows[:, j].max())) for j in range(3)]
    assert "No range was given" in project.read_text()
    assert 'files = ["../colour.csv"]' in project.read_text()  # relative to the project file


@pytest.mark.bad_input("init")
def test_init_never_overwrites_a_project_file(tmp_path):
    colour_sensor.write_log(tmp_path / "colour.csv")
    (tmp_path / "affix.toml").write_text("# mine\n")
    done = run_affix("init", "colour.csv", *COLUMNS, cwd=tmp_path)
    assert done.returncode == 2
    assert done.stderr == ("affix: error: --project: 'affix.toml' exists; affix init never overwrites a project "
                           "file\n")
    assert (tmp_path / "affix.toml").read_text() == "# mine\n"


@pytest.mark.bad_input("init")
@pytest.mark.parametrize(
    "arguments, expected",
    [
        (("--inputs", "red,green,cyan"), "no column 'cyan'"),
        (("--range", "cyan=0:10"), "--range: unknown input 'cyan'"),
        (("--name", "class"), "'class' is a C++ keyword"),
        (("--budget", "X=0.1", "--budget-rms", "1"), "give either per-output budgets or an RMS growth"),
        (("--outputs", "X,Yy"), "no column 'Yy'"),
        (("--budget", "0.1", "--unit-column", "serial"), "no column 'serial'"),
        (("--unit-column", "red"), "--budget: a fleet needs a budget"),
        (("--tolerance", "0.1"), "would refuse: outputs[0].tolerance: a tolerance is a fleet unit's acceptance limit"),
    ],
)
def test_bad_options_write_nothing(tmp_path, arguments, expected):
    colour_sensor.write_log(tmp_path / "colour.csv")
    done = run_affix("init", "colour.csv", *COLUMNS, *arguments, cwd=tmp_path)
    assert done.returncode == 2 and expected in done.stderr, done.stderr
    assert len(done.stderr.splitlines()) == 1
    assert "affix.toml:" not in done.stderr  # no line of a file that was never written
    assert not (tmp_path / "affix.toml").exists()


def test_units_given_to_init_reach_the_project_the_header_and_the_report_axes(tmp_path):
    colour_sensor.write_log(tmp_path / "colour.csv")
    done = run_affix("init", "colour.csv", *COLUMNS, "--name", "tint", "--range", "0:32767", "--lang", "c",
                     "--vectors", "2000", "--unit", "X=lux", "--unit", "red=counts", cwd=tmp_path)
    assert done.returncode == 0, done.stderr
    project = load_project(tmp_path / "affix.toml")
    assert project.units == {"X": "lux", "red": "counts"}
    built = run_affix("build", cwd=tmp_path)
    assert built.returncode == 0, built.stderr
    assert re.search(r"#define TINT_lsb_X \S+ /\* lux per count \*/", (tmp_path / "build" / "tint.h").read_text())
    from affix.report.build_folder import read_build_folder
    from affix.report.content import output_units

    # The report labels X's axes with the declared unit, the others as units of their own name.
    assert output_units(read_build_folder(tmp_path / "build")) == ["lux", "units of Y", "units of Z"]


@pytest.mark.bad_input("init")
@pytest.mark.parametrize("unit, message", [
    ("Q=lux", "'Q' names no input or output"),
    ("lux", "give each unit as NAME=TEXT"),
    ("X=*/", "is not one affix writes into code comments"),
])
def test_a_unit_for_no_column_or_unsafe_in_a_comment_is_refused(tmp_path, unit, message):
    colour_sensor.write_log(tmp_path / "colour.csv")
    done = run_affix("init", "colour.csv", *COLUMNS, f"--unit={unit}", cwd=tmp_path)
    assert done.returncode == 2 and message in done.stderr and done.stderr.count("\n") == 1, done.stderr
    assert not (tmp_path / "affix.toml").exists()
