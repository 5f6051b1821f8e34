"""Reading calibration files in chunks, checked against numpy's and hashlib's readers."""
from __future__ import annotations

import hashlib
import os

import numpy as np
import pytest

import affix
from affix.errors import DataError
from affix.intake import Part, column_names, read_chunks


def table(rng, rows=1000):
    values = rng.normal(size=(rows, 4)) * [1.0, 100.0, 1e-3, 1e5]
    values[:, 0] = np.rint(values[:, 0] * 1000)  # an integer column, as ADC counts are
    return values


def write_csv(path, names, values):
    # repr() round-trips a double exactly
    path.write_text(",".join(names) + "\n" + "\n".join(",".join(repr(float(v)) for v in row) for row in values) + "\n")


def whole(stream):
    return np.vstack(list(stream))


def test_csv_columns_by_name_in_the_order_asked(tmp_path):
    values = table(np.random.default_rng(1))
    path = tmp_path / "log.csv"
    write_csv(path, ["a", "b", "c", "d"], values)
    assert column_names(path) == ["a", "b", "c", "d"]
    reference = np.loadtxt(path, delimiter=",", skiprows=1)  # numpy's own CSV reader
    for chunk_rows in (7, 1000, 5000):
        got = whole(read_chunks(path, ["d", "a", "c"], chunk_rows=chunk_rows))
        np.testing.assert_array_equal(got, reference[:, [3, 0, 2]])


def test_npy_columns_are_named_by_index(tmp_path):
    values = table(np.random.default_rng(2))
    path = tmp_path / "log.npy"
    np.save(path, values)
    assert list(column_names(path)) == ["0", "1", "2", "3"]
    np.testing.assert_array_equal(whole(read_chunks(path, ["3", "1"], chunk_rows=33)), values[:, [3, 1]])
    np.save(path, values.astype(np.int16))
    np.testing.assert_array_equal(whole(read_chunks(path, ["0"], chunk_rows=33))[:, 0], values[:, 0].astype(np.int16))
    np.save(path, values.astype(">f8"))  # big-endian, as written on another machine
    np.testing.assert_array_equal(whole(read_chunks(path, ["0", "1", "2", "3"], chunk_rows=33)), values)


def test_npz_of_named_columns_or_of_one_array(tmp_path):
    values = table(np.random.default_rng(3))
    named = tmp_path / "named.npz"
    np.savez_compressed(named, Fx=values[:, 0], b1=values[:, 1].astype(np.float32), b2=values[:, 2])
    assert column_names(named) == ["Fx", "b1", "b2"]
    got = whole(read_chunks(named, ["b2", "Fx", "b1"], chunk_rows=64))
    np.testing.assert_array_equal(got, np.column_stack([values[:, 2], values[:, 0], values[:, 1].astype(np.float32)]))
    single = tmp_path / "single.npz"
    np.savez(single, values)
    np.testing.assert_array_equal(whole(read_chunks(single, ["2", "0"], chunk_rows=100)), values[:, [2, 0]])


def write_table(path):
    """The same table as a CSV, a .npy or a .npz of columns a, b, c, d."""
    values = table(np.random.default_rng(4))
    if path.suffix == ".csv":
        write_csv(path, ["a", "b", "c", "d"], values)
    elif path.suffix == ".npz":
        np.savez(path, **dict(zip("abcd", values.T)))
    else:
        np.save(path, values)
    return path, (["a", "b"] if path.suffix != ".npy" else ["0", "1"])


@pytest.mark.parametrize("name", ["log.csv", "log.npy", "log.npz"])
def test_sha256_of_the_whole_file_after_a_pass(tmp_path, name):
    # A .npy is read once, by the thread that hashes it, in many small reads here.
    path, columns = write_table(tmp_path / name)
    stream = read_chunks(path, columns[1:], chunk_rows=50)
    whole(stream)
    assert stream.sha256 == hashlib.sha256(path.read_bytes()).hexdigest()  # hashlib over the whole file
    assert stream.rows_read == 1000 and stream.rows_dropped == 0


@pytest.mark.parametrize("size_in_blocks", [0, 1, 3, 3.5])
def test_sha256_over_many_read_blocks(tmp_path, monkeypatch, size_in_blocks):
    from affix.intake import digest

    # A small block, so a small file spans several; the reference is hashlib
    # over the whole file's bytes (Python standard library).
    monkeypatch.setattr(digest, "_BLOCK", 4096)
    path = tmp_path / "data.bin"
    path.write_bytes(np.random.default_rng(5).bytes(int(size_in_blocks * 4096)))
    assert digest.FileDigest(path).hexdigest() == hashlib.sha256(path.read_bytes()).hexdigest()


@pytest.mark.bad_input("fit")
@pytest.mark.parametrize("name", ["log.csv", "log.npy"])
def test_a_failure_while_hashing_is_an_error_naming_the_file_not_the_hash_of_what_was_read(tmp_path, monkeypatch, name):
    import errno

    from affix.intake import digest

    path, columns = write_table(tmp_path / name)
    real_open = open

    class FailingRead:
        """The file as a disk with a bad sector shows it: the first read fails with EIO."""

        def __init__(self, *args, **kwargs):
            self._file = real_open(*args, **kwargs)

        def __enter__(self):
            return self

        def __exit__(self, *exc):
            self._file.close()

        def readinto(self, buffer):
            raise OSError(errno.EIO, os.strerror(errno.EIO))

    monkeypatch.setattr(digest, "open", FailingRead, raising=False)
    with pytest.raises(DataError, match=rf"{path}: cannot read the file to compute its SHA-256 \(Input/output error\)"):
        whole(read_chunks(path, columns))


@pytest.mark.bad_input("fit")
@pytest.mark.parametrize("name", ["log.csv", "log.npy", "log.npz"])
def test_a_file_that_changes_during_the_pass_is_refused(tmp_path, name):
    path, columns = write_table(tmp_path / name)
    stream = iter(read_chunks(path, columns, chunk_rows=100))
    next(stream)
    with open(path, "ab") as f:  # a logger still appending to the file
        f.write(b"1,2,3,4\n")
    with pytest.raises(DataError, match=rf"{path}: the file changed while it was read"):
        list(stream)


@pytest.mark.bad_input("fit")
def test_a_pass_that_stops_early_lets_the_reading_thread_go(tmp_path):
    import threading

    path = tmp_path / "log.npy"
    values = np.ones((50_000, 3))
    values[100, 2] = 1e200  # refused in the first chunk, with many chunks still to read
    np.save(path, values)
    before = threading.active_count()
    with pytest.raises(DataError, match=r"log.npy, row 101, column '2': 1e\+200 is beyond"):
        whole(read_chunks(path, ["0", "1", "2"], chunk_rows=64))
    for _ in range(100):  # the thread notices within its 0.1 s hand-over timeout
        if threading.active_count() == before:
            break
        threading.Event().wait(0.02)
    assert threading.active_count() == before


@pytest.mark.bad_input("fit")
def test_invalid_rows_are_counted_and_named_or_dropped(tmp_path):
    path = tmp_path / "log.csv"
    path.write_text("a,b\n1,2\n3,nan\n5,6\n,8\n9,inf\n11,12\n")
    # Line numbers as an editor shows them: the header is line 1.
    with pytest.raises(DataError, match=r"log.csv, line 3: 3 row\(s\) hold NaN, infinite or empty values, the first in column 'b'"):
        whole(read_chunks(path, ["a", "b"], chunk_rows=2))
    stream = read_chunks(path, ["a", "b"], chunk_rows=2, drop_invalid=True)
    np.testing.assert_array_equal(whole(stream), [[1, 2], [5, 6], [11, 12]])
    assert stream.rows_dropped == 3 and stream.first_invalid == ({"line": 3}, "b")
    # The same rows in an array file, which has no lines: rows counted from 1.
    array = tmp_path / "log.npy"
    np.save(array, np.array([[1, 2], [3, np.nan], [5, 6], [np.nan, 8], [9, np.inf], [11, 12]]))
    with pytest.raises(DataError, match=r"log.npy, row 2: 3 row\(s\) hold NaN"):
        whole(read_chunks(array, ["0", "1"], chunk_rows=2))


@pytest.mark.bad_input("fit")
def test_a_non_numeric_cell_is_named_by_file_line_and_column(tmp_path):
    path = tmp_path / "log.csv"
    rows = [f"{i},{i * 2}" for i in range(300)]
    rows[217] = "217,4x2"
    path.write_text("a,b\n" + "\n".join(rows) + "\n")
    with pytest.raises(DataError, match=rf"{path}, line 219, column 'b': not a number: '4x2'"):
        whole(read_chunks(path, ["a", "b"], chunk_rows=100))


@pytest.mark.bad_input("fit")
@pytest.mark.parametrize(
    "make, message",
    [
        (lambda p: np.save(p, np.zeros(5)), "expected a 2-D array"),
        (lambda p: np.save(p, np.asfortranarray(np.zeros((5, 3)))), "Fortran order"),
        (lambda p: np.save(p, np.array([["a", "b"]])), "expected plain numbers"),
        (lambda p: p.write_bytes(b"not numpy"), "not a valid NumPy array"),
    ],
)
def test_unusable_npy_files(tmp_path, make, message):
    path = tmp_path / "bad.npy"
    make(path)
    with pytest.raises(DataError, match=message):
        column_names(path)


@pytest.mark.bad_input("fit")
def test_missing_file_and_column_and_ambiguous_header(tmp_path):
    with pytest.raises(DataError, match="no such file"):
        read_chunks(tmp_path / "absent.csv", ["a"])
    path = tmp_path / "log.csv"
    path.write_text("a,b,a\n1,2,3\n")
    with pytest.raises(DataError, match=r"no column 'z' \(available: a, b, a\)"):
        read_chunks(path, ["z"])
    with pytest.raises(DataError, match="names column 'a' 2 times"):
        read_chunks(path, ["a"])


def test_a_file_larger_than_the_chunk_fits_like_the_same_rows_in_memory(tmp_path):
    rng = np.random.default_rng(5)
    y = rng.normal(loc=2000.0, scale=30.0, size=(5000, 3))
    x = y @ rng.normal(size=(3, 2)) + rng.normal(size=(5000, 2))
    path = tmp_path / "log.csv"
    write_csv(path, ["y1", "y2", "y3", "x1", "x2"], np.hstack([y, x]))
    from_file = affix.fit(path, ["y1", "y2", "y3"], ["x1", "x2"], chunk_rows=333)
    in_memory = affix.fit((y, x))
    for name in ("gain", "error_covariance", "cv_rms", "input_mean", "input_covariance"):
        ours, reference = getattr(from_file, name), getattr(in_memory, name)
        # 1e-12 relative to the largest entry: small off-diagonal terms carry the rounding of large ones.
        np.testing.assert_allclose(ours, reference, rtol=1e-12, atol=1e-12 * np.abs(reference).max(), err_msg=name)
    # b = mean_x - A mean_y cancels: compare it on the scale of the terms it is made of.
    terms = np.abs(in_memory.gain) @ np.abs(in_memory.input_mean)
    np.testing.assert_allclose(from_file.offset, in_memory.offset, rtol=0, atol=1e-12 * terms.max())
    assert from_file.data_sha256 == hashlib.sha256(path.read_bytes()).hexdigest()


def file_moments(path, columns, folds, *, chunk_rows, drop_invalid, workers):
    """(per-fold moments, rows left out, SHA-256) of one file on this machine, in ``workers`` processes."""
    from affix.fit.blocks import Pass
    from affix.fit.passes import LocalEngine

    return LocalEngine(workers).moments([path], Pass(tuple(columns), folds, drop_invalid, chunk_rows))


def test_a_csv_split_across_processes_gives_the_one_pass_result_to_the_last_bit(tmp_path):
    values = table(np.random.default_rng(6), rows=40_000)  # more than two tiles of the statistics
    path = tmp_path / "log.csv"
    write_csv(path, ["a", "b", "c", "d"], values)
    one, _, sha_one = file_moments(path, ["a", "b", "c", "d"], 5, chunk_rows=256, drop_invalid=False, workers=1)
    split, _, sha_split = file_moments(path, ["a", "b", "c", "d"], 5, chunk_rows=999, drop_invalid=False, workers=3)
    assert sha_one == sha_split == hashlib.sha256(path.read_bytes()).hexdigest()
    for a, b in zip(one, split):
        assert a.count == b.count
        for name in ("mean", "scatter", "low", "high"):
            np.testing.assert_array_equal(getattr(a, name), getattr(b, name))


@pytest.mark.bad_input("fit")
def test_a_csv_that_changes_while_split_across_processes_is_refused(tmp_path, monkeypatch):
    from affix.fit import passes

    path = write_lines(tmp_path / "log.csv", [f"{i},{i % 17}" for i in range(3000)])
    cut = passes.partition

    def cut_then_append(p, parts):
        # The digest's process has started on the file; a logger appends before the workers read it.
        pieces = cut(p, parts)
        with open(p, "a") as f:
            f.write("3000,7\n")
        return pieces

    monkeypatch.setattr(passes, "partition", cut_then_append)
    with pytest.raises(DataError, match=rf"^{path}: the file changed while it was read"):
        file_moments(path, ["a", "b"], 5, chunk_rows=100, drop_invalid=False, workers=2)


@pytest.mark.bad_input("fit")
def test_a_read_failure_while_counting_a_parts_lines_is_one_error_naming_the_file(tmp_path, monkeypatch):
    import errno

    from affix.fit import blocks

    def failing_count(path, part):  # the part's lines are counted in a forked process, which inherits this
        raise OSError(errno.EIO, os.strerror(errno.EIO))

    path = write_lines(tmp_path / "log.csv", [f"{i},{i % 17}" for i in range(3000)])
    monkeypatch.setattr(blocks, "count_rows", failing_count)
    with pytest.raises(DataError, match=rf"^{path}: cannot read the file \(Input/output error\)$"):
        file_moments(path, ["a", "b"], 5, chunk_rows=100, drop_invalid=False, workers=2)


@pytest.mark.bad_input("fit")
def test_rows_are_numbered_across_the_whole_file_when_split(tmp_path):
    lines = [f"{i},{i % 17}" for i in range(3000)]
    lines[2500] = "2500,nan"
    lines[2700] = "2700,inf"
    path = write_lines(tmp_path / "log.csv", lines)
    with pytest.raises(DataError, match=r"line 2502: 2 row\(s\) hold NaN"):
        file_moments(path, ["a", "b"], 5, chunk_rows=100, drop_invalid=False, workers=2)
    parts, dropped, _ = file_moments(path, ["a", "b"], 5, chunk_rows=100, drop_invalid=True, workers=2)
    assert dropped == 2 and sum(p.count for p in parts) == 2998
    lines[2800] = "2800,seven"
    path = write_lines(tmp_path / "log.csv", lines)
    with pytest.raises(DataError, match=r"line 2802, column 'b': not a number: 'seven'"):
        file_moments(path, ["a", "b"], 5, chunk_rows=100, drop_invalid=True, workers=2)


def write_lines(path, lines):
    path.write_text("a,b\n" + "\n".join(lines) + "\n")
    return path


def line_start(path, line) -> int:
    """Byte offset where an editor's line ``line`` (from 1) begins."""
    with open(path, "rb") as f:
        return sum(len(f.readline()) for _ in range(line - 1))


# name: (the data lines after the header, the line to cut the file at for two workers, the one message)
CSV_EDGES = {
    "short first data row": ({0: "7"}, 1500, r"line 2: 1 row\(s\) hold NaN, infinite or empty values, the first in column 'b'"),
    "blank line after the header": ({0: ""}, 1500, r"line 2: 1 row\(s\) hold NaN, infinite or empty values, the first in column 'a'"),
    "short row at the split point": ({1498: "1498"}, 1500, r"line 1500: 1 row\(s\) hold NaN, .* column 'b'"),
    "blank line at the split point": ({1498: ""}, 1500, r"line 1500: 1 row\(s\) hold NaN, .* column 'a'"),
    "NUL bytes at the split point": ({1498: "\0\0\0\0"}, 1500, r"line 1500, column 'a': holds NUL bytes"),
    "not UTF-8 at the split point": ({1498: "\udcff9,1"}, 1500, r"line 1500: not a text CSV file"),
    "header followed by NUL bytes": (None, None, r"line 2: holds NUL bytes"),
}


@pytest.mark.bad_input("fit")
@pytest.mark.parametrize("workers", [1, 2])
@pytest.mark.parametrize("case", sorted(CSV_EDGES))
def test_csv_edge_cases_give_one_message_whatever_the_worker_count(tmp_path, monkeypatch, case, workers):
    from affix.fit import passes

    edits, cut, message = CSV_EDGES[case]
    path = tmp_path / "log.csv"
    if edits is None:
        path.write_bytes(b"a,b\n" + bytes(1 << 16))
    else:
        lines = [f"{i},{i % 17}" for i in range(3000)]
        for index, text in edits.items():
            lines[index] = text
        path.write_bytes(("a,b\n" + "\n".join(lines) + "\n").encode("utf-8", "surrogateescape"))
    if workers > 1 and cut is not None:  # cut the file for the two workers exactly at that line
        offset = line_start(path, cut)
        spans = lambda p: [(line_start(p, 2), offset), (offset, p.stat().st_size)]  # noqa: E731
        monkeypatch.setattr(passes, "partition", lambda p, parts: [Part(span, None, 0) for span in spans(p)])
    with pytest.raises(DataError, match=rf"^{path}, {message}"):
        file_moments(path, ["a", "b"], 5, chunk_rows=256, drop_invalid=False, workers=workers)
