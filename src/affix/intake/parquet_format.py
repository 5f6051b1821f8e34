"""Parquet files, read with pyarrow: columns by name, streamed batch by batch.

Only the chosen columns are read, a row group at a time, so memory stays
bounded by the row groups' size.  Integer, floating-point and decimal
columns are read as numbers; a text column is parsed like a CSV cell (so a
log converted from CSV without types reads as before); a null, and in text
an empty cell or "nan", is a missing value like an empty CSV cell.  Any other
type (booleans, timestamps, nested values) is an error naming the column.
Parquet files have no lines, so messages name a row by its number in the
file, counted from 1.  A file splits into parts at row-group boundaries.
"""
from __future__ import annotations

import numpy as np

from affix.errors import DataError, ToolError
from affix.intake.csv_format import MISSING, quoted
from affix.intake.parts import Part, even_cuts

SUFFIXES = (".parquet", ".parq")
CHUNK_ROWS = 1 << 16
INSTALL_HINT = "pip install 'affix[parquet]'"


def column_names(path) -> list[str]:
    return _open(path).schema_arrow.names


def partition(path, parts: int) -> list[Part]:
    """Up to ``parts`` runs of whole row groups, of about equal size on disk."""
    metadata = _open(path).metadata
    groups = [metadata.row_group(i) for i in range(metadata.num_row_groups)]
    if not groups:
        return [Part((0, 0), 0, 0)]
    sizes = [sum(g.column(j).total_compressed_size for j in range(g.num_columns)) for g in groups]
    rows = np.concatenate([[0], np.cumsum([g.num_rows for g in groups])]).tolist()
    cuts = even_cuts(sizes, parts)
    return [Part((a, b), rows[a], sum(sizes[a:b])) for a, b in zip(cuts, cuts[1:] + [len(groups)])]


def raw_chunks(path, columns, chunk_rows, span=None, first_row=0, labels=None):
    """Float64 arrays (k, len(columns)) in file order, NaN for missing values;
    ``span``, row groups [start, end) of a :func:`partition` part, whose first
    row is the file's row ``first_row``.  With ``labels`` (a unit column),
    pairs (values, unit ids): text as written, integers as integers, None where null."""
    import pyarrow as pa

    source = _open(path)
    groups = range(*span) if span is not None else range(source.metadata.num_row_groups)
    fields = {field.name: field.type for field in source.schema_arrow}
    for name in columns:
        _check_type(fields[name], path, name)
    wanted = list(columns) + ([] if labels is None else [labels])
    row = first_row
    batches = source.iter_batches(batch_size=chunk_rows, row_groups=list(groups), columns=wanted, use_threads=False)
    while True:
        try:
            batch = next(batches)
        except StopIteration:
            return
        except (pa.ArrowException, OSError) as exc:
            raise DataError(f"cannot read the Parquet data after row {row} ({_one_line(exc)})", path) from None
        chunk = np.empty((batch.num_rows, len(columns)))
        for j, name in enumerate(columns):
            chunk[:, j] = _numbers(batch.column(batch.schema.get_field_index(name)), path, name, row)
        row += batch.num_rows
        yield chunk if labels is None else (chunk, _labels(batch.column(batch.schema.get_field_index(labels))))


def _labels(array) -> np.ndarray:
    import pyarrow as pa

    if pa.types.is_dictionary(array.type):
        array = array.dictionary_decode()
    return array.to_numpy(zero_copy_only=False)


def _open(path):
    try:
        import pyarrow as pa
        import pyarrow.parquet as pq
    except ImportError:
        raise ToolError(f"reading Parquet needs pyarrow: {INSTALL_HINT}") from None
    try:
        return pq.ParquetFile(path)
    except (pa.ArrowException, OSError) as exc:
        raise DataError(f"not a readable Parquet file ({_one_line(exc)})", path) from None


def _check_type(kind, path, name) -> None:
    import pyarrow as pa

    if pa.types.is_dictionary(kind):
        kind = kind.value_type
    if not (pa.types.is_integer(kind) or pa.types.is_floating(kind) or pa.types.is_decimal(kind)
            or pa.types.is_string(kind) or pa.types.is_large_string(kind)):
        raise DataError(f"holds values of type {kind}, not numbers", path, column=name)


def _numbers(array, path, name, first_row) -> np.ndarray:
    import pyarrow as pa
    import pyarrow.compute as pc

    if pa.types.is_dictionary(array.type):
        array = array.dictionary_decode()
    if pa.types.is_string(array.type) or pa.types.is_large_string(array.type):
        return _parsed(array.to_pandas(), path, name, first_row)
    # Integers beyond 2^53 round, as they do when a CSV cell is parsed.
    return pc.cast(array, pa.float64(), safe=False).to_numpy(zero_copy_only=False)


def _parsed(cells, path, name, first_row) -> np.ndarray:
    """Text cells as numbers, by the CSV rules: empty and "nan" are missing, anything else must parse."""
    import pandas as pd

    missing = cells.isna() | cells.isin(MISSING)
    values = pd.to_numeric(cells.where(~missing), errors="coerce")
    bad = (values.isna() & ~missing).to_numpy()
    if bad.any():
        i = int(np.argmax(bad))
        raise DataError(f"not a number: {quoted(str(cells.iloc[i]))}", path, row=first_row + i + 1, column=name)
    return values.to_numpy(dtype=np.float64, na_value=np.nan)


def _one_line(exc) -> str:
    return " ".join(str(exc).split())
