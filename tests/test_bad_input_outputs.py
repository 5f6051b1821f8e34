"""Where affix writes: every bad output is one line and exit 2, and nothing changes on disk.

The promise is the README's ("Exit statuses"): one ``affix: error:`` line,
the documented status, no traceback, no output written when a command fails,
and never an input overwritten.  The references outside the project are
POSIX: rename(2) replaces a file or moves a folder in one step within a file
system, open(2) and mkdir(2) take the umask off the mode asked for (so a file
a tool creates is 0666 less the umask, a folder 0777 less it), setrlimit(2)'s
RLIMIT_FSIZE makes a write past the limit fail with EFBIG once SIGXFSZ is
ignored, and a shell reports a process that SIGPIPE ended as 128 + 13.
Every check compares the whole work folder, byte for byte and mode for mode,
before and after the failed command.
"""
from __future__ import annotations

import ctypes
import json
import os
import resource
import shutil
import stat
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

import affix
from affix import files
from affix.emit.writer import emit
from affix.errors import UsageError, WriteError
from affix.model import Model
from affix.quantize import plan_fixed_point
from affix.workflow.cli import PARAMETER_ARGUMENTS, build_parser
from conftest import require, run_affix
from plans import random_plan

INPUTS, OUTPUTS = ["a", "b", "c"], ["u", "v"]


@pytest.fixture
def work(tmp_path):
    """A work folder with a calibration log, a model fitted elsewhere and a plan, as a user has them."""
    rng = np.random.default_rng(2718)
    y = rng.integers(0, 4096, size=(300, 3))
    x = y @ np.array([[0.01, -0.02], [0.003, 0.01], [-0.005, 0.002]]) + rng.normal(scale=0.05, size=(300, 2))
    lines = [",".join(INPUTS + OUTPUTS)] + [",".join(map(str, row)) + "," + ",".join(f"{v:.5f}" for v in out)
                                            for row, out in zip(y, x)]
    (tmp_path / "data.csv").write_text("\n".join(lines) + "\n")
    Model(inputs=INPUTS, outputs=OUTPUTS, gain=[[0.01, 0.003, -0.005], [-0.02, 0.01, 0.002]], offset=[0.1, -0.2],
          cv_rms=[0.05, 0.05], n_samples=300, input_mean=y.mean(axis=0),
          input_covariance=np.cov(y, rowvar=False)).save(tmp_path / "model.json")
    random_plan(5, 3, 2).save(tmp_path / "plan.json")
    (tmp_path / "folder").mkdir()
    return tmp_path


def snapshot(root: Path) -> dict:
    """Every entry below ``root`` (hidden ones too, so a left-over staging folder shows): content and mode."""
    seen = {}
    for path in sorted(root.rglob("*")):
        status = path.lstat()
        if stat.S_ISLNK(status.st_mode):
            seen[str(path.relative_to(root))] = ("link", os.readlink(path))
        elif stat.S_ISDIR(status.st_mode):
            seen[str(path.relative_to(root))] = ("folder", stat.S_IMODE(status.st_mode))
        else:
            seen[str(path.relative_to(root))] = (path.read_bytes(), stat.S_IMODE(status.st_mode))
    return seen


def without_write_override():
    """For the child of a root test run: drop the capabilities that let root write anywhere
    (CAP_DAC_OVERRIDE, CAP_DAC_READ_SEARCH, CAP_FOWNER; prctl(2) PR_CAPBSET_DROP), so a
    read-only folder is read-only to it as to any user."""
    if os.geteuid() != 0:
        return
    prctl = ctypes.CDLL(None, use_errno=True).prctl
    for capability in (1, 2, 3):
        if prctl(24, capability, 0, 0, 0) != 0:  # PR_CAPBSET_DROP = 24
            raise OSError(ctypes.get_errno(), "prctl(PR_CAPBSET_DROP)")


def read_only(work, name):
    folder = work / name
    folder.mkdir()
    folder.chmod(0o555)
    return folder


def assert_refused(result, fragment, before, work, option="--out"):
    assert result.returncode == 2, result.stdout + result.stderr
    lines = result.stderr.splitlines()
    assert len(lines) == 1 and lines[0].startswith(f"affix: error: {option}: "), result.stderr
    assert fragment in lines[0], lines[0]
    assert snapshot(work) == before, "a refused command changed the work folder"


# --- fit and quantize: one output file ------------------------------------------------------------

FIT = ["fit", "data.csv", "--inputs", ",".join(INPUTS), "--outputs", ",".join(OUTPUTS), "--folds", "0"]
QUANTIZE = ["quantize", "model.json", "--range", "0:4095", "--data", "data.csv"]

# case -> (how to set the work folder up, the --out value, what the one line says)
FILE_TARGETS = {
    "the input itself": (None, "{input}", "is an input of this command"),
    "the input as ./": (None, "./{input}", "is an input of this command"),
    "the input by its absolute path": (None, "{work}/{input}", "is an input of this command"),
    "a symbolic link to the input": (lambda w, i: (w / "link").symlink_to(i), "link", "is an input of this command"),
    "a hard link to the input": (lambda w, i: os.link(w / i, w / "hard"), "hard", "is an input of this command"),
    "an empty path": (None, "", "an empty path names no file"),
    "an existing folder": (None, "folder", "is a folder; give a file name"),
    "a path below a file": (None, "{input}/out.json", "is a file, so"),
    "a path below a path below a file": (None, "{input}/deeper/out.json", "is a file, so"),
    "a missing folder": (None, "missing/out.json", "folder 'missing' does not exist"),
    "a read-only folder": (lambda w, i: read_only(w, "locked"), "locked/out.json", "folder 'locked' is not writable"),
    "a name longer than the file system allows": (None, "n" * 300, "cannot be written (File name too long)"),
    "a folder that is a loop of links": (lambda w, i: (w / "loop").symlink_to("loop"), "loop/out.json",
                                         "'loop' is a symbolic link that leads to no folder"),
}
FILE_TARGETS_WITHOUT_INPUT = ("an empty path", "an existing folder", "a missing folder", "a read-only folder",
                              "a name longer than the file system allows", "a folder that is a loop of links")


def _file_target_case(work, case, input_name):
    prepare, out, fragment = FILE_TARGETS[case]
    if prepare:
        prepare(work, input_name)
    return out.format(input=input_name, work=work), fragment


@pytest.mark.bad_input("fit")
@pytest.mark.parametrize("case", FILE_TARGETS)
def test_fit_refuses_a_bad_out(work, case):
    out, fragment = _file_target_case(work, case, "data.csv")
    before = snapshot(work)
    result = run_affix(*FIT, "--out", out, cwd=work, preexec_fn=without_write_override)
    assert_refused(result, fragment, before, work)


# quantize reads two files: each case that involves an input runs for both.
QUANTIZE_CASES = [(case, name) for case in FILE_TARGETS
                  for name in (("model.json",) if case in FILE_TARGETS_WITHOUT_INPUT else ("model.json", "data.csv"))]


@pytest.mark.bad_input("quantize")
@pytest.mark.parametrize("case,input_name", QUANTIZE_CASES)
def test_quantize_refuses_a_bad_out(work, case, input_name):
    out, fragment = _file_target_case(work, case, input_name)
    before = snapshot(work)
    result = run_affix(*QUANTIZE, "--out", out, cwd=work, preexec_fn=without_write_override)
    assert_refused(result, fragment, before, work)


@pytest.mark.bad_input("fit")
def test_fit_reading_through_a_link_may_not_write_the_file_behind_it(work):
    (work / "link.csv").symlink_to("data.csv")
    before = snapshot(work)
    result = run_affix(*["link.csv" if a == "data.csv" else a for a in FIT], "--out", "data.csv", cwd=work)
    assert_refused(result, "is an input of this command", before, work)


@pytest.mark.bad_input("quantize")
def test_a_device_is_written_into_never_replaced(work):
    # Renaming a file over /dev/null (which root may do) would replace the device for the whole machine.
    result = run_affix(*QUANTIZE, "--out", os.devnull, cwd=work)
    assert result.returncode == 0, result.stderr
    assert stat.S_ISCHR(os.stat(os.devnull).st_mode)


def test_a_name_near_the_file_system_limit_is_written(work):
    # The temporary name beside it must not outgrow the 255 bytes the name itself fits in.
    name = "m" * 250
    result = run_affix(*QUANTIZE, "--out", name, cwd=work)
    assert result.returncode == 0, result.stderr
    assert json.loads((work / name).read_text())["format"] == "affix.plan/1"


# Repeated values for one name: the last one used to win in silence.
REPEATED = {
    "--range for one name twice": (["--range", "a=0:10", "--range", "a=0:20"], "--range", "'a' is given twice"),
    "--range without a name twice": (["--range", "0:10", "--range", "0:20"], "--range", "without a NAME="),
    "--lsb for one name twice": (["--lsb", "u=0.01", "--lsb", "u=0.02"], "--lsb", "'u' is given twice"),
    "--lsb without a name twice": (["--lsb", "0.01", "--lsb", "0.02"], "--lsb", "without a NAME="),
    "--budget twice in one list": (["--budget", "u=0.1,u=0.2"], "--budget", "'u' is given twice"),
    "--budget twice across options": (["--budget", "u=0.1", "--budget", "v=1,u=0.2"], "--budget", "'u' is given twice"),
    "--input-lsb for one name twice": (["--input-lsb", "b=0.001", "--input-lsb", "b=0.002"], "--input-lsb",
                                       "'b' is given twice"),
}


@pytest.mark.bad_input("quantize")
@pytest.mark.parametrize("case", REPEATED)
def test_a_value_given_twice_for_one_name_is_refused(work, case):
    arguments, option, fragment = REPEATED[case]
    ranges = [] if arguments[0] == "--range" else ["--range", "0:4095"]
    before = snapshot(work)
    result = run_affix("quantize", "model.json", *ranges, *arguments, "--out", "plan2.json", cwd=work)
    assert_refused(result, fragment, before, work, option=option)


# --- emit and demo: a folder of files ---------------------------------------------------------------

def _earlier_emit(work, lang="all", name="old"):
    emit(random_plan(6, 3, 2), lang=lang, name=name, out_dir=work / "fw")


# case -> (set-up of the work folder, returning the plan argument; the --out value; what the line says)
FOLDER_TARGETS = {
    "the plan file": (None, "plan.json", "is a file, not a folder"),
    "an empty path": (None, "", "an empty path names no file"),
    "a path below a file": (None, "plan.json/fw", "is a file, so"),
    "a missing parent folder": (None, "missing/fw", "folder 'missing' does not exist"),
    "a new folder in a read-only folder": (lambda w: read_only(w, "locked"), "locked/fw", "is not writable"),
    "a read-only folder": (lambda w: read_only(w, "fw"), "fw", "folder 'fw' is not writable"),
    "the plan inside, under a name emit writes": (
        lambda w: (w / "fw").mkdir() or shutil.copy(w / "plan.json", w / "fw" / "probe.c"), "fw",
        "'fw/probe.c' is an input of this command"),
    "the plan inside, reached through a link to the folder": (
        lambda w: (w / "fw").mkdir() or (w / "fwlink").symlink_to("fw") or shutil.copy(w / "plan.json", w / "fw" / "probe.h"),
        "fwlink", "'fwlink/probe.h' is an input of this command"),
    "a folder where a file goes": (lambda w: (w / "fw" / "probe.py").mkdir(parents=True), "fw",
                                   "'fw/probe.py' is a folder where affix would write a file"),
    "a name longer than the file system allows": (None, "n" * 300, "cannot be written (File name too long)"),
    "a file of the user's where a file goes": (
        lambda w: (w / "fw").mkdir() or (w / "fw" / "probe.h").write_text("/* mine */\n"), "fw",
        "'fw/probe.h' exists and affix did not write it"),
}


@pytest.mark.bad_input("emit")
@pytest.mark.parametrize("case", FOLDER_TARGETS)
def test_emit_refuses_a_bad_out_and_changes_nothing(work, case):
    prepare, out, fragment = FOLDER_TARGETS[case]
    plan = "plan.json"
    if prepare:
        prepare(work)
    if "the plan inside" in case:
        plan = fragment.split("'")[1]
    before = snapshot(work)
    result = run_affix("emit", plan, "--lang", "all", "--name", "probe", "--out", out, cwd=work,
                       preexec_fn=without_write_override)
    assert_refused(result, fragment, before, work)


@pytest.mark.bad_input("emit")
def test_emit_refuses_to_remove_the_plan_where_an_earlier_emit_of_the_name_wrote(work):
    # An emit of fewer languages removes what the earlier emit of that name
    # wrote: never the plan it reads.
    _earlier_emit(work, lang="all", name="probe")
    shutil.copy(work / "plan.json", work / "fw" / "probe.py")
    before = snapshot(work)
    result = run_affix("emit", "fw/probe.py", "--lang", "c", "--name", "probe", "--out", "fw", cwd=work)
    assert_refused(result, "'fw/probe.py' is an input of this command", before, work)


def _file_size_limit(limit):
    def apply():
        resource.setrlimit(resource.RLIMIT_FSIZE, (limit, limit))
    return apply


@pytest.mark.bad_input("emit")
@pytest.mark.parametrize("earlier", [None, "all", "c"])
def test_a_file_size_limit_midway_leaves_the_folder_as_it_was(work, tmp_path_factory, earlier):
    # The C header is written first; a limit just above its size lets it and the
    # C source through and stops the larger MicroPython module: a failure midway.
    scratch = tmp_path_factory.mktemp("sizes")
    emit(random_plan(5, 3, 2), lang="all", name="probe", out_dir=scratch)
    sizes = {p.name: p.stat().st_size for p in scratch.iterdir()}
    limit = sizes["probe.h"] + 1
    assert sizes["probe.c"] < limit < sizes["probe.py"], sizes
    if earlier:
        _earlier_emit(work, lang=earlier)
    before = snapshot(work)
    result = run_affix("emit", "plan.json", "--lang", "all", "--name", "probe", "--out", "fw", cwd=work,
                       preexec_fn=_file_size_limit(limit))
    assert result.returncode == 2, result.stderr
    assert result.stderr == "affix: error: fw/probe.py: cannot write (File too large)\n"
    assert snapshot(work) == before


@pytest.mark.bad_input("demo")
@pytest.mark.parametrize("case", ["a file", "an empty path", "a path below a file", "a missing parent folder",
                                  "a new folder in a read-only folder", "a read-only folder"])
def test_demo_refuses_a_bad_outdir(work, case):
    prepare, out, fragment = FOLDER_TARGETS[{"a file": "the plan file"}.get(case, case)]
    if prepare:
        prepare(work)
    before = snapshot(work)
    result = run_affix("demo", out, cwd=work, preexec_fn=without_write_override)
    assert_refused(result, fragment, before, work, option="OUTDIR")


# --- what a successful emit leaves -------------------------------------------------------------------

def test_emit_beside_another_estimator_leaves_it_and_other_files_alone(work):
    require("gcc")
    require("micropython")
    _earlier_emit(work, lang="all", name="old")
    (work / "fw" / "README.txt").write_text("the user's own notes\n")
    result = run_affix("emit", "plan.json", "--lang", "c", "--name", "probe", "--out", "fw", cwd=work)
    assert result.returncode == 0, result.stderr
    assert sorted(p.name for p in (work / "fw").iterdir()) == [
        "README.txt", "old.c", "old.h", "old.manifest.json", "old.py", "probe.c", "probe.h", "probe.manifest.json"]
    assert (work / "fw" / "README.txt").read_text() == "the user's own notes\n"
    verified = run_affix("verify", "fw", "--vectors", "1000", cwd=work)  # each manifest in the folder
    assert verified.returncode == 0, verified.stdout + verified.stderr
    assert "evaluations of old" in verified.stdout and "evaluations of probe" in verified.stdout


@pytest.mark.bad_input("emit")
def test_an_edited_manifest_cannot_make_emit_remove_other_files(work):
    _earlier_emit(work, lang="all", name="probe")
    manifest = work / "fw" / "probe.manifest.json"
    data = json.loads(manifest.read_text())
    data["files"]["c"] += ["notes.txt", "../plan.json"]
    manifest.write_text(json.dumps(data))
    (work / "fw" / "notes.txt").write_text("mine\n")
    emit(random_plan(5, 3, 2), lang="c", name="probe", out_dir=work / "fw")
    assert sorted(p.name for p in (work / "fw").iterdir()) == [
        "notes.txt", "probe.c", "probe.h", "probe.manifest.json"]
    assert (work / "plan.json").is_file()


def test_emit_of_fewer_languages_removes_what_the_earlier_emit_wrote(work):
    _earlier_emit(work, lang="all", name="probe")
    emit(random_plan(5, 3, 2), lang="c", name="probe", out_dir=work / "fw")
    assert sorted(p.name for p in (work / "fw").iterdir()) == ["probe.c", "probe.h", "probe.manifest.json"]


def test_emit_writes_through_a_link_to_the_folder_and_into_the_current_folder(work):
    (work / "fw").mkdir()
    (work / "fwlink").symlink_to("fw")
    result = run_affix("emit", "plan.json", "--lang", "c", "--name", "probe", "--out", "fwlink", cwd=work)
    assert result.returncode == 0, result.stderr
    assert (work / "fwlink").is_symlink() and (work / "fw" / "probe.manifest.json").is_file()
    again = run_affix("emit", "../plan.json", "--lang", "micropython", "--name", "probe", "--out", ".", cwd=work / "fw")
    assert again.returncode == 0, again.stderr
    assert sorted(p.name for p in (work / "fw").iterdir()) == ["probe.manifest.json", "probe.py"]


# --- the file set itself -----------------------------------------------------------------------------

@pytest.mark.bad_input("emit")
def test_a_failed_rename_while_swapping_puts_everything_back(work, monkeypatch):
    _earlier_emit(work, lang="all", name="probe")
    before = snapshot(work)
    real_rename = os.rename
    calls = []

    def failing_rename(source, target):
        calls.append(target)
        if len(calls) == 6:  # the four earlier files moved aside, one new file in, then the next fails
            raise OSError(5, "Input/output error")
        real_rename(source, target)

    monkeypatch.setattr(files.os, "rename", failing_rename)
    with pytest.raises(WriteError, match="Input/output error"):
        emit(random_plan(5, 3, 2), lang="all", name="probe", out_dir=work / "fw")
    assert len(calls) > 6, "the rollback renames too"
    assert snapshot(work) == before


@pytest.mark.bad_input("emit")
@pytest.mark.parametrize("existing", [False, True])
def test_an_interrupt_while_writing_leaves_nothing(work, existing):
    if existing:
        _earlier_emit(work, lang="c", name="probe")
    before = snapshot(work)
    with pytest.raises(KeyboardInterrupt):
        with files.FileSet(work / "fw", parameter="out_dir") as staged:
            staged.write_text("probe.c", "int x;\n")
            raise KeyboardInterrupt
    assert snapshot(work) == before


# --- modes: 0666 and 0777 less the umask -------------------------------------------------------------

def _umask(mask):
    return lambda: os.umask(mask)


@pytest.mark.parametrize("umask", [0o022, 0o077, 0o002])
def test_every_file_affix_writes_has_the_usual_mode(work, umask):
    (work / "model2.json").write_text("{}")
    (work / "model2.json").chmod(0o600)  # replaced: the new file gets the usual mode, not this one
    commands = [
        [*FIT, "--out", "model2.json"],
        [*QUANTIZE, "--out", "plan2.json"],
        ["emit", "plan2.json", "--lang", "all", "--name", "probe", "--out", "fw"],
        ["emit", "plan2.json", "--lang", "c", "--name", "probe", "--out", "fw"],  # into the existing folder
    ]
    for command in commands:
        result = run_affix(*command, cwd=work, preexec_fn=_umask(umask))
        assert result.returncode == 0, result.stderr
    written = [work / "model2.json", work / "plan2.json", *(work / "fw").iterdir()]
    assert len(written) == 5
    for path in written:
        assert stat.S_IMODE(path.stat().st_mode) == 0o666 & ~umask, path
    assert stat.S_IMODE((work / "fw").stat().st_mode) == 0o777 & ~umask


def test_the_library_writes_with_the_usual_mode_too(tmp_path):
    old = os.umask(0o027)
    try:
        files.write_text(tmp_path / "a.txt", "x")
        with files.FileSet(tmp_path / "set", parameter="out_dir") as staged:
            staged.write_text("b.txt", "y")
    finally:
        os.umask(old)
    assert stat.S_IMODE((tmp_path / "a.txt").stat().st_mode) == 0o640
    assert stat.S_IMODE((tmp_path / "set" / "b.txt").stat().st_mode) == 0o640
    assert stat.S_IMODE((tmp_path / "set").stat().st_mode) == 0o750


# --- manners: a closed pipe, bare affix --------------------------------------------------------------

def _with_closed_stdout(*args, cwd):
    """Run affix with its stdout a pipe whose reading end is already closed, as in 'affix ... | head -0'."""
    read_end, write_end = os.pipe()
    os.close(read_end)
    try:
        return subprocess.run([sys.executable, "-m", "affix", *args], stdout=write_end, stderr=subprocess.PIPE,
                              text=True, cwd=cwd)
    finally:
        os.close(write_end)


@pytest.mark.parametrize("args", [["--help"], ["quantize", "--help"], [*QUANTIZE, "--out", "plan2.json", "--json"]])
def test_a_closed_pipe_ends_quietly_with_status_141(work, args):
    result = _with_closed_stdout(*args, cwd=work)
    assert result.stderr == "" and result.returncode == 141


def test_bare_affix_lists_the_commands_and_exits_2():
    result = run_affix()
    assert result.returncode == 2 and result.stdout == ""
    for command in ("fit", "quantize", "emit", "verify", "demo"):
        assert f"\n    {command} " in result.stderr


# --- parameters in library errors, options in the CLI's ----------------------------------------------

def _model():
    return Model(inputs=INPUTS, outputs=OUTPUTS, gain=[[0.01, 0.003, -0.005], [-0.02, 0.01, 0.002]], offset=[0, 0],
                 cv_rms=[0.05, 0.05])


LIBRARY_CALLS = {  # case -> (command, call, the parameter the error names)
    "unknown input in input_ranges": ("quantize", lambda p: plan_fixed_point(_model(), {"z": (0, 1)}), "input_ranges"),
    "inverted input range": ("quantize", lambda p: plan_fixed_point(_model(), (9, 1)), "input_ranges"),
    "zero output_lsb": ("quantize", lambda p: plan_fixed_point(_model(), (0, 9), output_lsb=0), "output_lsb"),
    "negative input_lsb": ("quantize", lambda p: plan_fixed_point(_model(), (0, 9), input_lsb=-1), "input_lsb"),
    "coef_bits 12": ("quantize", lambda p: plan_fixed_point(_model(), (0, 9), coef_bits=12), "coef_bits"),
    "acc_bits 48": ("quantize", lambda p: plan_fixed_point(_model(), (0, 9), acc_bits=48), "acc_bits"),
    "output_ctype int8_t": ("quantize", lambda p: plan_fixed_point(_model(), (0, 9), output_ctype="int8_t"),
                            "output_ctype"),
    "rounding up": ("quantize", lambda p: plan_fixed_point(_model(), (0, 9), rounding="up"), "rounding"),
    "budget for an unknown output": ("quantize", lambda p: plan_fixed_point(_model(), (0, 9), budget={"z": 1}),
                                     "budget"),
    "negative budget_rms": ("quantize", lambda p: plan_fixed_point(_model(), (0, 9), budget_rms=-1), "budget_rms"),
    "negative ridge": ("fit", lambda p: affix.fit((np.ones((9, 1)), np.ones((9, 1))), ridge=-1), "ridge"),
    "one fold": ("fit", lambda p: affix.fit((np.ones((9, 1)), np.ones((9, 1))), folds=1), "folds"),
    "lang rust": ("emit", lambda p: emit(random_plan(1), lang="rust", name="probe", out_dir=p), "lang"),
    "float32 MicroPython": ("emit", lambda p: emit(random_plan(1), lang="all", arith="float32", name="probe",
                                                   out_dir=p), "arith"),
    "style fancy": ("emit", lambda p: emit(random_plan(1), lang="c", style="fancy", name="probe", out_dir=p), "style"),
    "name int": ("emit", lambda p: emit(random_plan(1), lang="c", name="int", out_dir=p), "name"),
    "out_dir a file": ("emit", lambda p: emit(random_plan(1), lang="c", name="probe", out_dir=p / "f.txt"), "out_dir"),
    "path a folder": ("quantize", lambda p: _model().save(p), "path"),
}


@pytest.mark.parametrize("case", [pytest.param(case, marks=pytest.mark.bad_input(command))
                                  for case, (command, _, _) in LIBRARY_CALLS.items()])
def test_library_errors_name_the_parameter_never_an_option(tmp_path, case):
    command, call, parameter = LIBRARY_CALLS[case]
    (tmp_path / "f.txt").write_text("")
    with pytest.raises(UsageError) as caught:
        call(tmp_path)
    assert caught.value.parameter == parameter
    assert caught.value.message.startswith(f"{parameter}: ") and "--" not in caught.value.message


CLI_SPELLINGS = {  # the same kind of mistakes through the CLI: the parameter spelt as the command's option
    "--range": ["quantize", "model.json", "--range", "z=0:1", "--range", "0:9", "--out", "p.json"],
    "--lsb": ["quantize", "model.json", "--range", "0:9", "--lsb", "0", "--out", "p.json"],
    "--input-lsb": ["quantize", "model.json", "--range", "0:9", "--input-lsb", "0", "--out", "p.json"],
    "--budget": ["quantize", "model.json", "--range", "0:9", "--budget", "z=1", "--out", "p.json"],
    "--budget-rms": ["quantize", "model.json", "--range", "0:9", "--budget-rms", "-1", "--out", "p.json"],
    "--ridge": [*FIT, "--ridge", "-1", "--out", "m.json"],
    "--folds": [*FIT[:-2], "--folds", "1", "--out", "m.json"],
    "--name": ["emit", "plan.json", "--lang", "c", "--name", "int", "--out", "fw"],
    "--arith": ["emit", "plan.json", "--lang", "all", "--arith", "float32", "--name", "probe", "--out", "fw"],
}


@pytest.mark.parametrize("option", [pytest.param(option, marks=pytest.mark.bad_input(arguments[0]))
                                    for option, arguments in CLI_SPELLINGS.items()])
def test_the_cli_spells_the_parameter_as_its_option(work, option):
    arguments = CLI_SPELLINGS[option]
    before = snapshot(work)
    result = run_affix(*arguments, cwd=work)
    assert_refused(result, "", before, work, option=option)


def test_every_parameter_in_the_spelling_table_is_an_argument_of_some_command():
    parser = build_parser()
    commands = parser.commands.values()
    dests = {action.dest for command in commands for action in command._actions}
    assert set(PARAMETER_ARGUMENTS.values()) <= dests


@pytest.mark.bad_input("fit")
def test_messages_that_suggest_a_parameter_name_it_for_python_and_the_option_for_the_cli(work):
    rows = np.random.default_rng(3).normal(size=(40, 2))
    rows = np.column_stack([rows, rows[:, 0] + rows[:, 1], rows[:, 0]])  # a third input the first two determine
    with pytest.raises(affix.errors.FitError) as caught:
        affix.fit((rows[:, :3], rows[:, 3:]), ["p", "q", "r"], ["s"])
    assert "pass ridge=" in caught.value.message and "--" not in caught.value.message
    (work / "collinear.csv").write_text("p,q,r,s\n" + "\n".join(",".join(map(str, r)) for r in rows) + "\n")
    result = run_affix("fit", "collinear.csv", "--inputs", "p,q,r", "--outputs", "s", "--out", "m.json", cwd=work)
    assert result.returncode == 2 and "pass --ridge=" in result.stderr, result.stderr
    assert not (work / "m.json").exists()


@pytest.mark.bad_input("demo")
@pytest.mark.parametrize("outdir_exists", [False, True])
def test_a_demo_whose_last_step_fails_leaves_outdir_as_it_was(work, monkeypatch, capsys, outdir_exists):
    # Fit, quantize and emit run for real; verify reports a missing tool (status 4), as it would without gcc.
    from affix.workflow import cli, demo_command

    real_main = cli.main
    monkeypatch.setattr(cli, "main", lambda argv: 4 if argv[0] == "verify" else real_main(argv))
    if outdir_exists:
        (work / "demo").mkdir()
        (work / "demo" / "notes.txt").write_text("mine\n")
    before = snapshot(work)
    assert demo_command.run_demo(work / "demo") == 4
    assert "$ affix emit" in capsys.readouterr().out  # the steps before verify did run
    assert snapshot(work) == before
