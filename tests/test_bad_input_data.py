"""Bad calibration data and absurd sizes, as a hostile but realistic user gives them to the CLI.

The contract is affix's own (README, "Exit statuses"): one ``affix: error:``
line on stderr naming the file and, where there is one, the line (CSV, as an
editor numbers it: the header is line 1) or row (.npy/.npz, counted from 1)
and column; exit status 2; nothing on stdout; no output file and no temporary
file left behind; no traceback and no NumPy warning.  Each child runs under
a 1.5 GB address-space limit, so a size taken on trust from a file or an
option (which once made affix try to allocate terabytes) fails the case
instead of swapping, and under a timeout, so one that loops fails too.
"""
from __future__ import annotations

import io
import json
import re
import resource
import subprocess
import sys
import zipfile

import numpy as np
import pytest

from affix.model import Model

HEADER = "b1,b2,b3,Fx,Fz"
MEMORY_LIMIT = 3 << 29  # 1.5 GB of address space: plenty for affix, far from any absurd claim
TIMEOUT = 60  # seconds: a guard against unbounded work, not a measure of speed


def good_rows(count=60):
    rng = np.random.default_rng(1)
    y = rng.integers(-2000, 2000, size=(count, 3))
    x = y @ [[0.01, 0.0], [0.002, -0.03], [0.0, 0.5]] + rng.normal(size=(count, 2)) * 0.1
    return [f"{a},{b},{c},{u:.6f},{v:.6f}" for (a, b, c), (u, v) in zip(y, x)]


def csv_bytes(lines) -> bytes:
    return ("\n".join(lines) + "\n").encode()


def edited(edits: dict, insert: dict | None = None) -> bytes:
    """The good log with lines replaced ({editor line: text}) or inserted before a line."""
    lines = [HEADER] + good_rows()
    for number, text in (insert or {}).items():
        lines.insert(number - 1, text)
    for number, text in edits.items():
        lines[number - 1] = text
    return csv_bytes(lines)


def npy_header(shape, dtype="<f8") -> bytes:
    buffer = io.BytesIO()
    header = {"descr": dtype, "fortran_order": False, "shape": shape}
    np.lib.format.write_array_header_1_0(buffer, header)
    return buffer.getvalue()


def npz_with(members: dict) -> bytes:
    buffer = io.BytesIO()
    with zipfile.ZipFile(buffer, "w", zipfile.ZIP_DEFLATED) as archive:
        for name, data in members.items():
            archive.writestr(name + ".npy", data)
    return buffer.getvalue()


def npy_of(array) -> bytes:
    buffer = io.BytesIO()
    np.save(buffer, array)
    return buffer.getvalue()


def corrupt_member() -> bytes:
    """A .npz whose one member's compressed bytes were damaged: zip's CRC-32 (or inflate) catches it."""
    data = bytearray(npz_with({"table": npy_of(np.arange(5000.0).reshape(1000, 5))}))
    data[200:260] = bytes(60)  # inside the member's deflate stream, past its local header
    return bytes(data)


# name: (file name, file content, extra arguments, what the one line must say)
FIT_CASES = {
    "missing file": ("absent.csv", None, [], r"absent.csv: no such file"),
    "missing column": ("log.csv", edited({}), ["--inputs", "b1,b9"], r"no column 'b9' \(available: b1, b2, b3, Fx, Fz\)"),
    "missing column among thousands": ("wide.csv", csv_bytes([",".join(f"c{j}" for j in range(5000)), ",".join("1" * 5000)]), [], r"no column 'b1' \(available: c0, c1, .*, c19, \.\.\. \(5000 columns\)\)$"),
    "semicolon-separated file": ("semi.csv", csv_bytes(["b1;b2;b3;Fx;Fz"] + ["1;2;3;4;5"] * 9), [], r"no column 'b1' \(available: b1;b2;b3;Fx;Fz\); the header is one column holding ';': affix reads values separated by commas$"),
    "tab-separated file": ("tabs.csv", csv_bytes(["b1\tb2\tb3\tFx\tFz"] + ["1\t2\t3\t4\t5"] * 9), [], r"the header is one column holding tabs: affix reads values separated by commas$"),
    "non-numeric cell": ("log.csv", edited({8: "1,2,x3,4,5"}), [], r"log.csv, line 8, column 'b3': not a number: 'x3'"),
    "nan and inf": ("log.csv", edited({5: "1,2,3,nan,5", 9: "1,2,inf,4,5"}), [], r"log.csv, line 5: 2 row\(s\) hold NaN, infinite or empty values, the first in column 'Fx'; .*--drop-invalid"),
    "too few rows": ("short.csv", csv_bytes([HEADER, "1,2,3,4,5", "2,3,1,5,6", "3,1,2,6,7"]), [], r"only 3 usable row\(s\); fitting 3 input\(s\) needs at least 5"),
    "constant input": ("flat.csv", csv_bytes([HEADER] + [f"{i},{i * i % 7},4,{i},{-i}" for i in range(20)]), [], r"flat.csv, column 'b3': input column is constant \(4 in every row\)"),
    "duplicate header name": ("dup.csv", csv_bytes(["b1,b2,b1,Fx,Fz"] + ["1,2,3,4,5"] * 9), [], r"names column 'b1' 2 times"),
    "input listed twice": ("log.csv", edited({}), ["--inputs", "b1,b2,b1"], r"column 'b1' is listed twice in the inputs"),
    "output also an input": ("log.csv", edited({}), ["--outputs", "Fx,b2"], r"column 'b2' is both an input and an output"),
    "singular inputs": ("twin.csv", csv_bytes([HEADER] + [f"{i},{2 * i},{i * i % 5},{i},{-i}" for i in range(20)]), [], r"inputs b1, b2 are nearly collinear .* pass --ridge=1e-05"),
    "--folds 1": ("log.csv", edited({}), ["--folds", "1"], r"folds: must be 0 \(no cross-validation\) or a whole number from 2"),
    "negative ridge": ("log.csv", edited({}), ["--ridge", "-0.5"], r"ridge: must be a finite number >= 0"),
    ".npz of unequal columns": ("cols.npz", npz_with({n: npy_of(np.ones(8 if n == "b3" else 9)) for n in ("b1", "b2", "b3", "Fx", "Fz")}), [], r"the column arrays differ in length"),
    "short first data row": ("log.csv", edited({2: "1,2,3"}), [], r"log.csv, line 2: 1 row\(s\) hold NaN, infinite or empty values, the first in column 'Fx'"),
    "blank line after the header": ("log.csv", edited({}, insert={2: ""}), [], r"log.csv, line 2: 1 row\(s\) hold NaN, infinite or empty values, the first in column 'b1'"),
    "NUL bytes after the header": ("log.csv", (HEADER + "\n").encode() + bytes(4096), [], r"log.csv, line 2: holds NUL bytes"),
    "NUL bytes inside a row": ("log.csv", edited({30: "1,2,\0\0,4,5"}), [], r"log.csv, line 30, column 'b3': holds NUL bytes"),
    "NUL bytes in the header": ("log.csv", b"b1,b2,b3,\0Fx,Fz\n1,2,3,4,5\n", [], r"log.csv, line 1: holds NUL bytes"),
    "a line that is not UTF-8": ("log.csv", edited({12: "1,2,3,4,5"}).replace(b"1,2,3,4,5", b"1,2,\xff3,4,5"), [], r"log.csv, line 12: not a text CSV file \(it is not UTF-8\)"),
    "an unterminated quote": ("log.csv", edited({20: '1,2,"3,4,5'}), [], r"log.csv, line 20: malformed CSV \(.*EOF inside string"),
    "a first line of 2 MB and no line break": ("log.csv", b"b" * (2 << 20), [], r"log.csv, line 1: the first line is longer than 1048576 bytes"),
    "a cell of a megabyte": ("log.csv", edited({9: "1,2," + "7" * 50 + "x" * (1 << 20) + ",4,5"}), [], r"line 9, column 'b3': not a number: '7{40}'\.\.\. \(1048626 characters\)$"),
    "header only": ("empty.csv", csv_bytes([HEADER]), [], r"only 0 usable row\(s\)"),
    "every row invalid and dropped": ("holes.csv", csv_bytes([HEADER] + ["1,2,,4,5"] * 9), ["--drop-invalid"], r"only 0 usable row\(s\)"),
    "+inf and -inf in one row": ("log.csv", edited({7: "inf,-inf,3,4,5"}), [], r"log.csv, line 7: 1 row\(s\) hold NaN, infinite or empty values, the first in column 'b1'"),
    "values near 1e160, whose squares overflow": ("log.csv", edited({14: "1e160,2,3,4,5"}), [], r"log.csv, line 14, column 'b1': 1e\+160 is beyond ±1e\+150"),
    "an output of -1e300": ("log.csv", edited({3: "1,2,3,4,-1e300"}), [], r"log.csv, line 3, column 'Fz': -1e\+300 is beyond ±1e\+150"),
    "an input of values near 1e-200, whose squares underflow": ("log.csv", csv_bytes([HEADER] + [f"{i}e-200,{i % 7},{i * i % 5},{i},{-i}" for i in range(1, 40)]), [], r"log.csv, column 'b1': values near 2e-199 are too small to square in double precision"),
    ".npy whose header declares 10^12 rows": ("big.npy", npy_header((10**12, 5)) + bytes(80), ["--inputs", "0,1,2", "--outputs", "3,4"], r"big.npy: array declares the shape \(1000000000000, 5\) of float64 \(40000000000000 bytes\), but the file holds 80 bytes"),
    ".npy whose header declares 10^18 x 10^6": ("big.npy", npy_header((10**18, 10**6)) + bytes(80), ["--inputs", "0,1,2", "--outputs", "3,4"], r"big.npy: array declares the shape \(1000000000000000000, 1000000\)"),
    ".npy declaring a million columns": ("wide.npy", npy_header((1, 10**6), "|i1") + bytes(10**6), ["--inputs", "0,1,2", "--outputs", "999999,5"], r"only 1 usable row"),
    ".npy cut short": ("cut.npy", npy_of(np.ones((100, 5)))[:-8], ["--inputs", "0,1,2", "--outputs", "3,4"], r"cut.npy: array declares the shape \(100, 5\) of float64 \(4000 bytes\), but the file holds 3992 bytes"),
    ".npy with bytes after the array": ("long.npy", npy_of(np.ones((100, 5))) + b"trailing", ["--inputs", "0,1,2", "--outputs", "3,4"], r"but the file holds 4008 bytes"),
    ".npy whose header is cut": ("cut.npy", b"\x93NUMPY\x01\x00\x40\x00{'descr': '<f8', 'fortran_order': False, 'shape': (3," + b" " * 18 + b"\n", ["--inputs", "0,1,2", "--outputs", "3,4"], r"cut.npy: not a valid NumPy array"),
    ".npy with a negative shape": ("neg.npy", npy_header((-5, 5)) + bytes(80), ["--inputs", "0,1,2", "--outputs", "3,4"], r"neg.npy: array declares the shape \(-5, 5\)"),
    ".npy row of 1e200 (rows counted from 1)": ("far.npy", npy_of(np.vstack([np.ones((3, 5)), [[1, 2, 3, 1e200, 5]], np.ones((9, 5))])), ["--inputs", "0,1,2", "--outputs", "3,4"], r"far.npy, row 4, column '3': 1e\+200 is beyond"),
    ".npz member declaring more rows than it holds": ("cols.npz", npz_with({n: npy_header((10**9,)) + bytes(80) for n in ("b1", "b2", "b3", "Fx", "Fz")}), [], r"cols.npz: array 'b1' declares the shape \(1000000000,\) of float64 \(8000000000 bytes\), but its member holds 80 bytes"),
    ".npz member damaged": ("bad.npz", corrupt_member(), ["--inputs", "0,1,2", "--outputs", "3,4"], r"bad.npz: (not a valid \.npz archive|not a valid NumPy array|cannot read array)"),
    ".npz that is no zip": ("junk.npz", b"PK\x03\x04" + bytes(200), [], r"junk.npz: not a valid \.npz archive"),
    "--folds 10^12": ("log.csv", edited({}), ["--folds", str(10**12)], r"folds: must be 0 \(no cross-validation\) or a whole number from 2 to 10000, got 1000000000000"),
    "more folds than rows": ("log.csv", edited({}), ["--folds", "61"], r"folds: 61 folds need at least as many usable rows; the data have 60"),
    "--folds -3": ("log.csv", edited({}), ["--folds", "-3"], r"folds: must be 0 \(no cross-validation\) or a whole number from 2 to 10000, got -3"),
}


def run_limited(*args, cwd) -> subprocess.CompletedProcess:
    """The real CLI in a child process, with the memory limit and timeout above."""

    def limit():
        resource.setrlimit(resource.RLIMIT_AS, (MEMORY_LIMIT, MEMORY_LIMIT))

    return subprocess.run(
        [sys.executable, "-m", "affix", *map(str, args)],
        capture_output=True, text=True, cwd=cwd, preexec_fn=limit, timeout=TIMEOUT,
    )


def assert_refused(result, expected, out):
    assert result.returncode == 2, result.stderr
    assert result.stdout == ""
    lines = result.stderr.splitlines()
    assert len(lines) == 1 and lines[0].startswith("affix: error: "), result.stderr
    assert re.search(expected, lines[0]), lines[0]
    left = sorted(p.name for p in out.parent.iterdir() if p.name in (out.name, f".{out.name}") or p.name.startswith(f".{out.name}."))
    assert left == [], left  # neither the output nor a temporary file of it


@pytest.mark.parametrize("case", [pytest.param(name, marks=pytest.mark.bad_input("fit")) for name in FIT_CASES])
def test_fit_refuses_bad_data_in_one_line(tmp_path, case):
    name, content, extra, expected = FIT_CASES[case]
    if content is not None:
        (tmp_path / name).write_bytes(content)
    options = {"--inputs": "b1,b2,b3", "--outputs": "Fx,Fz", **dict(zip(extra[::2], extra[1::2]))}
    flags = [a for a in extra if a.startswith("--") and a not in options]
    arguments = [a for kv in options.items() for a in kv] + flags
    result = run_limited("fit", name, *arguments, "--out", "model.json", cwd=tmp_path)
    assert_refused(result, expected, tmp_path / "model.json")


def test_a_fold_count_above_127_is_used_as_given(tmp_path):
    # Fold labels were int8 and wrapped above 127; leave-one-out on 200 rows
    # must give scikit-learn's leave-one-out score (LeaveOneOut + LinearRegression).
    from sklearn.linear_model import LinearRegression
    from sklearn.model_selection import LeaveOneOut, cross_val_predict

    rows = good_rows(200)
    (tmp_path / "log.csv").write_bytes(csv_bytes([HEADER] + rows))
    result = run_limited("fit", "log.csv", "--inputs", "b1,b2,b3", "--outputs", "Fx,Fz", "--folds", "200",
                         "--out", "model.json", cwd=tmp_path)
    assert result.returncode == 0 and result.stderr == "", result.stderr
    values = np.array([[float(v) for v in row.split(",")] for row in rows])
    predicted = cross_val_predict(LinearRegression(), values[:, :3], values[:, 3:], cv=LeaveOneOut())
    reference = np.sqrt(((values[:, 3:] - predicted) ** 2).mean(axis=0))
    np.testing.assert_allclose(Model.load(tmp_path / "model.json").cv_rms, reference, rtol=1e-9)


@pytest.fixture
def model_file(tmp_path):
    (tmp_path / "log.csv").write_bytes(csv_bytes([HEADER] + good_rows()))
    result = run_limited("fit", "log.csv", "--inputs", "b1,b2,b3", "--outputs", "Fx,Fz", "--out", "model.json", cwd=tmp_path)
    assert result.returncode == 0, result.stderr
    return tmp_path / "model.json"


# name: (data file name and content or None, extra arguments, what the one line must say)
QUANTIZE_CASES = {
    "--input-lsb 1e-300": (None, ["--input-lsb", "1e-300"], r"--input-lsb: input lsb of 'b1' \(1e-300\) makes the model's calibration inputs \(RMS [\d.]+\) more than 4294967295 counts"),
    "--input-lsb 5e-324": (None, ["--input-lsb", "5e-324"], r"--input-lsb: input lsb of 'b1' \(4.94066e-324\) is too fine: its gains per count underflow"),
    "--lsb 5e-324": (None, ["--lsb", "5e-324"], r"--lsb: lsb of 'Fx' \(4.94066e-324\) is too fine: the output reaches [\d.]+ over the box, which in counts of this lsb is beyond int32_t"),
    "--lsb 1e-300 for one output": (None, ["--lsb", "Fz=1e-300"], r"--lsb: lsb of 'Fz' \(1e-300\) is too fine"),
    "header-only --data": (("cal.csv", csv_bytes([HEADER])), [], r"cal.csv: the calibration data hold no usable rows to measure on"),
    "--data whose rows are all dropped": (("cal.csv", csv_bytes([HEADER] + ["1,,3,4,5"] * 5)), ["--drop-invalid"], r"cal.csv: the calibration data hold no usable rows"),
    "--data with a short first row": (("cal.csv", edited({2: "1,2"})), [], r"cal.csv, line 2: 1 row\(s\) hold NaN, infinite or empty values, the first in column 'b3'"),
    "--data with NUL bytes": (("cal.csv", (HEADER + "\n").encode() + bytes(100)), [], r"cal.csv, line 2: holds NUL bytes"),
    "--data near 1e160": (("cal.csv", edited({5: "1,-2e160,3,4,5"})), [], r"cal.csv, line 5, column 'b2': -2e\+160 is beyond ±1e\+150"),
    "--data .npy declaring 10^12 rows": (("cal.npy", npy_header((10**12, 3)) + bytes(48)), [], r"cal.npy: array declares the shape \(1000000000000, 3\)"),
    "--input-type that cannot hold the box": (None, ["--input-type", "uint16_t"], r"--input-type: uint16_t does not hold the input box \(--range\)"),
    "--acc-bits 64 on micropython": (None, ["--target", "micropython", "--acc-bits", "64"], r"--acc-bits: target micropython takes a 32-bit accumulator, not 64"),
}


@pytest.mark.parametrize("case", [pytest.param(name, marks=pytest.mark.bad_input("quantize")) for name in QUANTIZE_CASES])
def test_quantize_refuses_bad_data_and_extreme_numbers_in_one_line(model_file, case):
    data, extra, expected = QUANTIZE_CASES[case]
    folder = model_file.parent
    if data:
        name, content = data
        (folder / name).write_bytes(content)
        if name.endswith(".npy"):  # an array's columns are named by index: a model to match
            model = Model.load(model_file)
            Model(inputs=["0", "1", "2"], outputs=list(model.outputs), gain=model.gain, offset=model.offset).save(model_file)
        extra = ["--data", name, *extra]
    result = run_limited("quantize", model_file.name, "--range", "-2048:2047", *extra, "--out", "plan.json", cwd=folder)
    assert_refused(result, expected, folder / "plan.json")


def test_calibration_rows_all_outside_the_box_are_measured_as_none_not_nan(model_file):
    folder = model_file.parent
    (folder / "cal.csv").write_bytes(csv_bytes([HEADER] + [f"{9000 + i},9000,9000,1,2" for i in range(20)]))
    result = run_limited("quantize", model_file.name, "--range", "-2048:2047", "--data", "cal.csv", "--out", "plan.json", cwd=folder)
    assert result.returncode == 0 and result.stderr == "", result.stderr
    def no_constant(name):
        raise AssertionError(f"{name} in the plan: not JSON (RFC 8259)")

    measured = json.loads((folder / "plan.json").read_text(), parse_constant=no_constant)["measured"]["calibration"]
    assert measured == {"rows": 0, "rms_deviation": None, "max_deviation": None, "rows_outside_box": 20}
    assert "0 rows in the box (20 outside, left out)" in result.stdout
