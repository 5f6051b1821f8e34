"""Many files, glob patterns and Parquet on one machine: which files, in which order,
read how (against pyarrow's and pandas' own readers), and the one data hash."""
from __future__ import annotations

import hashlib
import re
import subprocess

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from conftest import require, run_affix
from scale_data import COLUMNS, INPUTS, OUTPUTS, log_rows, write_csv, write_parquet

import affix
from affix.errors import DataError
from affix.intake import partition, read_chunks
from affix.intake.sources import data_files, data_hash
from affix.model import Model


def whole(stream):
    return np.vstack(list(stream))


def test_entries_expand_in_order_each_file_once(tmp_path):
    for name in ("b.csv", "a.csv", "c.txt"):
        (tmp_path / name).write_text("x\n1\n")
    dataset = tmp_path / "ds"
    for part in ("k=2/p.parquet", "k=10/p.parquet", "_tmp/p.parquet", "k=2/.p.parquet.crc", "k=2/_SUCCESS"):
        (dataset / part).parent.mkdir(parents=True, exist_ok=True)
        (dataset / part).write_text("")
    found = data_files(["c.txt", "*.csv", "a.csv", "ds"], tmp_path)
    # The pattern's matches in name order; a.csv named again is not read twice; the dataset's
    # Parquet files by their paths below it, its _ and . names left out.
    assert [p.relative_to(tmp_path).as_posix() for p in found] == [
        "c.txt", "a.csv", "b.csv", "ds/k=10/p.parquet", "ds/k=2/p.parquet"]
    # A pattern means what it matches, folders starting with _ included (glob's own rules, not a dataset's).
    assert data_files(["**/p.parquet"], dataset) == tuple(dataset / p for p in ("_tmp/p.parquet", "k=10/p.parquet",
                                                                                 "k=2/p.parquet"))


@pytest.mark.bad_input("fit")
@pytest.mark.parametrize("entry, message", [
    ("logs/*.csv", r"^'logs/\*.csv' matches no file in "),
    ("empty", r"^'empty' is a folder holding no Parquet files \(\*.parquet\) in "),
    ("absent.csv", r"^'absent.csv': no such file in "),
])
def test_an_entry_that_names_nothing_is_refused(tmp_path, entry, message):
    (tmp_path / "empty").mkdir()
    with pytest.raises(DataError, match=message):
        data_files([entry], tmp_path)


def test_parquet_columns_by_name_equal_pyarrows_own_reading(tmp_path):
    rows = log_rows(np.random.default_rng(1), 30_000)
    path = tmp_path / "log.parquet"
    write_parquet(path, rows, row_group_size=4_000)
    reference = pd.read_parquet(path, engine="pyarrow")  # pandas through pyarrow, whole
    for chunk_rows in (999, 1 << 16):
        got = whole(read_chunks(path, ["Fz", "b1", "temp"], chunk_rows=chunk_rows))
        np.testing.assert_array_equal(got, reference[["Fz", "b1", "temp"]].to_numpy(np.float64))
    # Parts are runs of whole row groups, each knowing its first row.
    parts = partition(path, 3)
    assert len(parts) == 3 and [p.span[0] for p in parts[1:]] == [p.span[1] for p in parts[:-1]]
    assert parts[0].span[0] == 0 and parts[-1].span[1] == 8  # 30,000 rows in row groups of 4,000
    assert [p.first_row for p in parts] == [4_000 * p.span[0] for p in parts]
    pieces = [whole(read_chunks(path, COLUMNS, part=p)) for p in parts]
    np.testing.assert_array_equal(np.vstack(pieces), reference[COLUMNS].to_numpy(np.float64))


def test_parquet_nulls_nan_and_text_follow_the_csv_rules(tmp_path):
    path = tmp_path / "log.parquet"
    table = pa.table({
        "y": pa.array([1, 2, None, 4, 5, 6], pa.int16()),
        "x": pa.array([0.5, float("nan"), 1.5, 2.5, 3.5, 4.5]),
        "t": pa.array(["7", "8.25", "9", "", "1e3", "nan"]),
        "d": pa.array([1, 2, 3, 4, 5, 6], pa.int64()).dictionary_encode(),
    })
    pq.write_table(table, path, row_group_size=4)
    stream = read_chunks(path, ["y", "x", "t", "d"], drop_invalid=True)
    np.testing.assert_array_equal(whole(stream), [[1, 0.5, 7, 1], [5, 3.5, 1000, 5]])
    assert stream.rows_dropped == 4
    with pytest.raises(DataError, match=r"log.parquet, row 2: 4 row\(s\) hold NaN, infinite or empty values, "
                                        r"the first in column 'x'"):
        whole(read_chunks(path, ["y", "x", "t"]))


def parquet_bytes(tmp_path, table) -> bytes:
    path = tmp_path / "made.parquet"
    pq.write_table(table, path, row_group_size=3)
    return path.read_bytes()


@pytest.mark.bad_input("fit")
@pytest.mark.parametrize("case", ["text", "boolean", "timestamp", "junk", "truncated"])
def test_bad_parquet_is_one_line_naming_file_row_and_column(tmp_path, case):
    good = {name: pa.array(np.arange(8.0) * (j + 1) + (j == 1) * np.arange(8.0) ** 2) for j, name in
            enumerate(["b1", "b2", "Fx"])}
    tables = {
        "text": {**good, "b2": pa.array(["1", "2", "3", "4", "5", "6 N", "7", "8"])},
        "boolean": {**good, "b2": pa.array([True, False] * 4)},
        "timestamp": {**good, "b2": pa.array(pd.date_range("2026-01-01", periods=8))},
    }
    expected = {
        "text": r"log.parquet, row 6, column 'b2': not a number: '6 N'$",
        "boolean": r"log.parquet, column 'b2': holds values of type bool, not numbers$",
        "timestamp": r"log.parquet, column 'b2': holds values of type timestamp\[\w+\], not numbers$",
        "junk": r"log.parquet: not a readable Parquet file \(Parquet magic bytes not found",
        "truncated": r"log.parquet: not a readable Parquet file \(",
    }
    content = parquet_bytes(tmp_path, pa.table(tables.get(case, good)))
    content = {"junk": b"PAR1" + bytes(100), "truncated": content[: len(content) // 2]}.get(case, content)
    (tmp_path / "log.parquet").write_bytes(content)
    result = run_affix("fit", "log.parquet", "--inputs", "b1,b2", "--outputs", "Fx", "--out", "m.json", cwd=tmp_path)
    assert result.returncode == 2 and result.stdout == ""
    lines = result.stderr.splitlines()
    assert len(lines) == 1 and lines[0].startswith("affix: error: "), result.stderr
    assert re.search(expected[case], lines[0]), lines[0]


def test_the_same_rows_as_csv_files_a_glob_or_a_parquet_dataset_fit_alike(tmp_path):
    rng = np.random.default_rng(2)
    parts = [log_rows(rng, n) for n in (9_000, 20_000, 7)]
    (tmp_path / "csv").mkdir()
    (tmp_path / "ds" / "week=1").mkdir(parents=True)
    for k, rows in enumerate(parts):
        write_csv(tmp_path / "csv" / f"log{k}.csv", rows)
        write_parquet(tmp_path / "ds" / "week=1" / f"log{k}.parquet", rows, row_group_size=3_000)
    listed = affix.fit([tmp_path / "csv" / f"log{k}.csv" for k in range(3)], INPUTS, OUTPUTS)
    globbed = affix.fit(str(tmp_path / "csv" / "log*.csv"), INPUTS, OUTPUTS)
    dataset = affix.fit(tmp_path / "ds", INPUTS, OUTPUTS)
    in_memory = affix.fit((np.vstack(parts)[:, :4], np.vstack(parts)[:, 4:]), INPUTS, OUTPUTS, folds=0)
    for name in ("gain", "offset", "error_covariance", "cv_rms"):
        np.testing.assert_array_equal(getattr(globbed, name), getattr(listed, name), err_msg=name)
        # Parquet holds the doubles the CSV text stands for: the same within rounding of the text.
        np.testing.assert_allclose(getattr(dataset, name), getattr(listed, name), rtol=1e-9, err_msg=name)
    np.testing.assert_allclose(listed.gain, in_memory.gain, rtol=1e-9)
    assert globbed.data_sha256 == listed.data_sha256 != dataset.data_sha256


def test_the_data_hash_is_of_names_and_digests_as_sha256sum_prints_them(tmp_path):
    names = ["log b.csv", "log-a.csv", "naïve.csv"]  # spaces and non-ASCII names as they are
    for k, name in enumerate(names):
        write_csv(tmp_path / name, log_rows(np.random.default_rng(k), 50))
    digests = [(name, hashlib.sha256((tmp_path / name).read_bytes()).hexdigest()) for name in names]
    # GNU coreutils: `sha256sum FILES | sha256sum`, run in the files' folder.
    listing = subprocess.run([require("sha256sum"), *names], cwd=tmp_path, capture_output=True, check=True).stdout
    expected = subprocess.run([require("sha256sum")], input=listing, capture_output=True, check=True).stdout
    assert data_hash(digests) == expected.split()[0].decode()
    # Folders do not enter it, so the same files hash alike wherever they are mounted ...
    assert data_hash([(f"/mnt/cluster/{n}", d) for n, d in digests]) == data_hash(digests)
    # ... but the order does, as it does the folds; one file is its own SHA-256.
    assert data_hash(digests[::-1]) != data_hash(digests)
    assert data_hash(digests[:1]) == digests[0][1]
    model = affix.fit([tmp_path / n for n in names], INPUTS, OUTPUTS, folds=0)
    assert model.data_sha256 == data_hash(digests)


def test_the_cli_expands_a_quoted_glob_and_protects_what_it_matches(tmp_path):
    rng = np.random.default_rng(3)
    (tmp_path / "logs").mkdir()
    for k in range(3):
        write_csv(tmp_path / "logs" / f"run{k}.csv", log_rows(rng, 400))
    arguments = ["fit", "logs/*.csv", "--inputs", ",".join(INPUTS), "--outputs", ",".join(OUTPUTS)]
    result = run_affix(*arguments, "--out", "m.json", cwd=tmp_path)  # no shell: affix expands the pattern
    assert result.returncode == 0, result.stderr
    assert Model.load(tmp_path / "m.json").n_samples == 1200
    before = (tmp_path / "logs" / "run1.csv").read_bytes()
    refused = run_affix(*arguments, "--out", "logs/run1.csv", cwd=tmp_path)
    assert refused.returncode == 2 and "is an input of this command" in refused.stderr
    assert (tmp_path / "logs" / "run1.csv").read_bytes() == before


@pytest.mark.bad_input("fit")
def test_without_the_extras_csv_fits_and_parquet_says_what_to_install(tmp_path):
    # A Python in which neither pyarrow nor dask.distributed imports, as in a base install.
    import sys

    write_csv(tmp_path / "log.csv", log_rows(np.random.default_rng(5), 300))
    write_parquet(tmp_path / "log.parquet", log_rows(np.random.default_rng(6), 300), row_group_size=100)
    code = ("import sys; sys.modules['pyarrow'] = sys.modules['distributed'] = sys.modules['dask'] = None\n"
            "from affix.workflow.cli import main; sys.exit(main())")

    def fit(data):
        return subprocess.run([sys.executable, "-c", code, "fit", data, "--inputs", ",".join(INPUTS), "--outputs",
                               ",".join(OUTPUTS), "--out", "m.json"], cwd=tmp_path, capture_output=True, text=True)

    plain = fit("log.csv")
    assert plain.returncode == 0 and plain.stderr == "", plain.stderr
    assert Model.load(tmp_path / "m.json").n_samples == 300
    (tmp_path / "m.json").unlink()
    parquet = fit("log.parquet")
    assert parquet.returncode == 4
    assert parquet.stderr == "affix: error: reading Parquet needs pyarrow: pip install 'affix[parquet]'\n"
    assert not (tmp_path / "m.json").exists()
